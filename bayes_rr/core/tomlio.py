"""TOML written through a serializer (tomli_w), never by string formatting.

User strings (a folder path, a model name from a statements file) can hold quotes,
backslashes, line breaks or ``#``; ``tomli_w`` escapes them, so they stay data.
Comments are written by :func:`comment`, which keeps a user string on its one line.
"""

from __future__ import annotations

from typing import Any

import tomli_w


def dumps(table: dict[str, Any]) -> str:
    """TOML text of ``table`` (nested dicts become tables, lists of dicts arrays of
    tables)."""
    return tomli_w.dumps(_plain(table))


def comment(text: str) -> str:
    """One TOML comment line; control characters in ``text`` become spaces so a user
    string can never end the comment and start TOML."""
    return "# " + "".join(" " if ord(ch) < 32 or ord(ch) == 127 else ch for ch in text)


def _plain(value: Any) -> Any:
    # numpy scalars and tuples are not TOML types to tomli_w
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items() if v is not None}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        return value.item()
    return value
