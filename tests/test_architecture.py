"""The house rules of the package layout, read from the source with ``ast``.

Each sub-package of ``bayes_rr`` is a room of one step of the data flow; a room may
import only the rooms below it (the table below), no two modules import each other
(directly or round a longer circle), and no file outgrows what a reader can hold in
mind. Imports under ``if TYPE_CHECKING:`` are annotations only and do not count;
imports inside functions do (a lazy import is still a dependency).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "bayes_rr"
MAX_LINES = 600
"""The size line: no module of the package over this many lines."""

BELOW = {
    "core": set(),
    "study": {"core"},
    "families": {"core", "study"},
    "priors": {"core", "study", "families"},
    "inference": {"core", "study", "families", "priors"},
    "results": {"core", "study", "families", "priors"},
    "checks": {"core", "study", "families", "priors", "results"},
    "report": {"core", "study", "families", "priors", "results", "checks"},
}
BELOW["io"] = BELOW["report"] | {"report", "inference"}
BELOW["workflow"] = BELOW["io"] | {"io"}
BELOW["simulation"] = BELOW["workflow"] | {"workflow"}
BELOW["api"] = BELOW["simulation"] | {"simulation"}
BELOW["cli"] = BELOW["api"] | {"api"}
BELOW["demo"] = set()
"""The rooms each room may import (the data flow: nothing reaches back up)."""


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _is_type_checking(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _imports(name: str, path: Path) -> set[str]:
    """The modules of the package that ``name`` imports at run time."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found: set[str] = set()

    def visit(node: ast.AST) -> None:
        if isinstance(node, ast.If) and _is_type_checking(node):
            for child in node.orelse:
                visit(child)
            return
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join([*parts, base] if base else parts)
            for alias in node.names:
                if base == "bayes_rr" and alias.name == "__version__":
                    continue  # a constant the root defines before it imports anything
                # ``from pkg import module`` depends on the module, not on pkg's __init__
                sub = f"{base}.{alias.name}"
                found.add(sub if sub in MODULES else base)
        for child in ast.iter_child_nodes(node):
            visit(child)

    visit(tree)
    return {m for m in found if m in MODULES and m != name}


GRAPH = {name: _imports(name, path) for name, path in MODULES.items()}


def _room(name: str) -> str | None:
    parts = name.split(".")
    return parts[1] if len(parts) > 1 else None


def test_the_table_names_every_room():
    rooms = {_room(name) for name in MODULES} - {None}
    assert rooms == set(BELOW), f"rooms without a row in BELOW: {rooms ^ set(BELOW)}"


def test_no_room_imports_a_room_above_it():
    wrong = []
    for name, targets in GRAPH.items():
        room = _room(name)
        for target in targets:
            other = _room(target)
            if room is None or other is None or other == room:
                continue  # the package root only gives the version; same room is fine
            if other not in BELOW[room]:
                wrong.append(f"{name} -> {target}")
    assert not wrong, "imports against the flow:\n" + "\n".join(sorted(wrong))


def test_nothing_but_the_face_imports_the_package_root_beyond_its_version():
    for name, path in MODULES.items():
        if name == "bayes_rr":
            continue  # the root loads the face (``api``) on first use
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.module == "bayes_rr" and not node.level:
                names = {alias.name for alias in node.names}
                assert names <= {"__version__"}, f"{name} imports {names} from the root"


def _cycle() -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for target in sorted(GRAPH[node]):
            if state.get(target) == 1:
                return [*stack[stack.index(target) :], target]
            if target not in state and (found := visit(target)):
                return found
        stack.pop()
        state[node] = 2
        return None

    for node in sorted(GRAPH):
        if node not in state and (found := visit(node)):
            return found
    return None


def test_no_import_circles():
    cycle = _cycle()
    assert cycle is None, "import circle: " + " -> ".join(cycle or [])


def test_the_circle_finder_finds_a_circle():
    GRAPH["bayes_rr.core.errors"].add("bayes_rr.core.jsonio")
    GRAPH["bayes_rr.core.jsonio"].add("bayes_rr.core.errors")
    try:
        assert _cycle() is not None
    finally:
        GRAPH["bayes_rr.core.errors"].discard("bayes_rr.core.jsonio")
        GRAPH["bayes_rr.core.jsonio"].discard("bayes_rr.core.errors")


@pytest.mark.parametrize("name", sorted(MODULES))
def test_no_file_over_the_size_line(name):
    lines = MODULES[name].read_text(encoding="utf-8").count("\n")
    assert lines <= MAX_LINES, f"{MODULES[name]} has {lines} lines (line: {MAX_LINES})"


def test_few_modules_sit_directly_in_the_package():
    loose = [p.name for p in PACKAGE.glob("*.py")]
    assert loose == ["__init__.py"], f"modules outside the rooms: {loose}"


def test_no_step_after_sampling_branches_on_a_family_name():
    """Steps ask the family (``bayes_rr.families``); only the families' own modules
    name themselves."""
    names = {"logit", "beta_binomial", "reference_logit", "latent_class", "call_curve"}
    wrong = []
    for name, path in MODULES.items():
        if _room(name) == "families":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Compare):
                consts = [
                    c.value
                    for c in ast.walk(node)
                    if isinstance(c, ast.Constant) and isinstance(c.value, str)
                ]
                text = ast.unparse(node)
                if "family" in text and names & set(consts):
                    wrong.append(f"{name}: {text}")
    assert not wrong, "\n".join(wrong)


def test_the_family_table_lists_every_family_module():
    from bayes_rr.families import FAMILIES

    modules = {
        name.rpartition(".")[2]
        for name, path in MODULES.items()
        if _room(name) == "families" and "FAMILY = Family(" in path.read_text(encoding="utf-8")
    }
    assert len(modules) == len(FAMILIES)
