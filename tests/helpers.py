"""Small helpers shared by test modules."""

from pathlib import Path


def write(tmp_path: Path, name: str, text: str) -> Path:
    """Write ``text`` as UTF-8 to ``tmp_path / name`` and return the path."""
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path
