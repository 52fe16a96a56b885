"""The benchmark scripts are not collected as tests, so a renamed module would break
them unnoticed (it did once: after the move of the spec module, every benchmark
failed at its first import). Here every ``from bayes_rr... import name`` in them is
resolved, and each script's help text is printed without error."""

from __future__ import annotations

import ast
import importlib
import subprocess
import sys
from pathlib import Path

import pytest

BENCHMARKS = sorted((Path(__file__).parent / "benchmarks").glob("*.py"))


def _package_imports(path: Path) -> list[tuple[str, str]]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    return [
        (node.module, alias.name)
        for node in ast.walk(tree)
        if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("bayes_rr")
        for alias in node.names
    ]


def test_there_are_benchmark_scripts_to_check():
    assert len(BENCHMARKS) >= 5, [p.name for p in BENCHMARKS]


def _missing_names(path: Path) -> list[str]:
    missing = []
    for module_name, name in _package_imports(path):
        try:
            module = importlib.import_module(module_name)
        except ImportError:
            missing.append(module_name)
            continue
        if hasattr(module, name):
            continue
        try:
            importlib.import_module(f"{module_name}.{name}")
        except ImportError:
            missing.append(f"{module_name}.{name}")
    return missing


@pytest.mark.parametrize("path", BENCHMARKS, ids=lambda p: p.name)
def test_every_package_name_a_benchmark_imports_exists(path):
    missing = _missing_names(path)
    assert not missing, f"{path.name} imports names that do not exist: {missing}"


def test_the_missing_name_check_finds_an_old_module_path_and_a_removed_name(tmp_path):
    script = tmp_path / "bench_old.py"
    script.write_text(
        "def run():\n"
        "    from bayes_rr.core.distributions.spec import load_spec\n"
        "    from bayes_rr.priors.spec import no_such_function\n"
        "    from bayes_rr.priors.spec import load_spec\n"
    )
    assert _missing_names(script) == [
        "bayes_rr.core.distributions.spec",
        "bayes_rr.priors.spec.no_such_function",
    ]


@pytest.mark.parametrize(
    "name",
    [
        "bench_sampling.py",
        "bench_plan.py",
        "bench_fit.py",
        "bench_describe.py",
        "try_grand_mean.py",
    ],
)
def test_benchmark_help_runs(name):
    path = Path(__file__).parent / "benchmarks" / name
    out = subprocess.run(
        [sys.executable, str(path), "--help"], capture_output=True, text=True, timeout=120
    )
    assert out.returncode == 0, out.stderr[-2000:]
    assert "usage" in out.stdout.lower()
