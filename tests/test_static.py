"""Static checks of the code itself: types (mypy), lint (ruff) and complexity (radon).

The settings live in pyproject.toml ([tool.mypy], [tool.ruff]); the tools come with the test
extras (`pip install -e ".[test]"`). Each check fails with the tool's own findings in the
message. Each checker is also run on a small clean file and on a small faulty one, so a check
that could not fail (a wrong path, a tool that checks nothing) shows up as a failure here.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from conftest import ROOT

PACKAGE = ROOT / "validate"
CONFIG = ROOT / "pyproject.toml"
# Beyond about 10 to 15 independent paths a function is hard to test and to review
# (McCabe, IEEE Trans. Softw. Eng. SE-2 (1976) 308, from memory); 15 is this project's limit.
MAX_COMPLEXITY = 15

CLEAN = '''"""A small clean module."""


def mean(values: list[float]) -> float:
    """The arithmetic mean of a non-empty list."""
    if not values:
        raise ValueError("no values")
    return sum(values) / len(values)
'''


def run_tool(*args: str, cwd: Path = ROOT) -> tuple[int, str]:
    """Run `python -m TOOL ARGS` with this interpreter; (exit code, stdout and stderr)."""
    try:
        proc = subprocess.run([sys.executable, "-m", *args], capture_output=True, text=True, cwd=cwd,
                              timeout=600)
    except subprocess.TimeoutExpired:
        pytest.fail(f"`{' '.join(args)}` did not finish within 10 minutes")
    output = (proc.stdout + proc.stderr).strip()
    if "No module named" in output and args[0] in output:
        pytest.fail(f"{args[0]} is not installed: install the test extras with pip install -e \".[test]\"")
    return proc.returncode, output


def mypy_findings(*targets: Path | str, cache: Path | None = None) -> tuple[int, str]:
    extra = ["--cache-dir", str(cache)] if cache else []
    return run_tool("mypy", "--config-file", str(CONFIG), *extra, *map(str, targets))


def ruff_findings(*targets: Path | str) -> tuple[int, str]:
    return run_tool("ruff", "check", "--no-cache", "--config", str(CONFIG), *map(str, targets))


def shown(path: Path) -> str:
    """A path as the developer knows it: relative to the repository where it lies inside it."""
    return str(path.relative_to(ROOT)) if path.is_relative_to(ROOT) else str(path)


def complex_functions(files: list[Path], limit: int = MAX_COMPLEXITY) -> list[str]:
    """Every function, method and nested function above `limit` by radon's cyclomatic complexity."""
    try:
        from radon.visitors import ComplexityVisitor
    except ImportError:
        pytest.fail('radon is not installed: install the test extras with pip install -e ".[test]"')
    found = []
    for path in files:
        visitor = ComplexityVisitor.from_code(path.read_text(encoding="utf-8"))
        pending = [*visitor.functions, *visitor.classes]
        while pending:
            block = pending.pop()
            if hasattr(block, "methods"):  # a class: measure its methods and the classes inside it
                pending.extend([*block.methods, *block.inner_classes])
                continue
            pending.extend(block.closures)  # nested functions are measured on their own
            if block.complexity > limit:
                name = f"{block.classname}.{block.name}" if block.classname else block.name
                found.append(f"{shown(path)}:{block.lineno} {name} has complexity {block.complexity}")
    return sorted(found)


# ---- the package ----

def test_mypy_finds_no_type_errors():
    code, output = mypy_findings("validate")
    if code != 0:
        pytest.fail(f"mypy validate (settings in pyproject.toml [tool.mypy]):\n{output}", pytrace=False)


def test_ruff_finds_nothing():
    code, output = ruff_findings("validate", "tests", "benchmarks")
    if code != 0:
        pytest.fail(f"ruff check validate tests benchmarks (settings in pyproject.toml [tool.ruff]):\n{output}",
                    pytrace=False)


def test_no_function_is_too_complex():
    files = sorted(PACKAGE.rglob("*.py"))
    assert files, f"no Python files under {PACKAGE.name}/"
    found = complex_functions(files)
    if found:
        pytest.fail(f"{len(found)} functions above cyclomatic complexity {MAX_COMPLEXITY} (radon); "
                    "split them into smaller functions:\n" + "\n".join(found), pytrace=False)


# ---- the checkers can fail, and pass clean code ----

@pytest.fixture
def clean_file(tmp_path):
    path = tmp_path / "clean.py"
    path.write_text(CLEAN, encoding="utf-8")
    return path


def test_mypy_passes_a_clean_file_and_catches_a_type_error(clean_file, tmp_path):
    code, output = mypy_findings(clean_file, cache=tmp_path / "cache")
    assert code == 0, output
    bad = tmp_path / "bad.py"
    bad.write_text('def half(x: float) -> float:\n    return x / 2\n\n\nhalf("one")\n', encoding="utf-8")
    code, output = mypy_findings(bad, cache=tmp_path / "cache")
    assert code == 1 and "arg-type" in output, output


def test_ruff_passes_a_clean_file_and_catches_a_zip_without_strict(clean_file, tmp_path):
    assert ruff_findings(clean_file)[0] == 0
    bad = tmp_path / "bad.py"
    bad.write_text("pairs = list(zip([1, 2], [3]))\n", encoding="utf-8")
    code, output = ruff_findings(bad)
    assert code == 1 and "B905" in output, output


def test_the_complexity_check_passes_a_clean_file_and_catches_a_branchy_function(clean_file, tmp_path):
    assert complex_functions([clean_file]) == []
    # a method with MAX_COMPLEXITY `if`s has MAX_COMPLEXITY + 1 paths
    branches = "".join(f"        if x == {i}:\n            return {i}\n" for i in range(MAX_COMPLEXITY))
    bad = tmp_path / "bad.py"
    bad.write_text(f"class Picker:\n    def pick(self, x):\n{branches}        return -1\n", encoding="utf-8")
    found = complex_functions([bad])
    assert len(found) == 1 and f"Picker.pick has complexity {MAX_COMPLEXITY + 1}" in found[0], found
    assert complex_functions([bad], limit=MAX_COMPLEXITY + 1) == []
    # the same method inside a nested class and as a closure is found too
    nested = tmp_path / "nested.py"
    body = branches.replace("\n        ", "\n            ").replace("        if x == 0", "            if x == 0", 1)
    nested.write_text(f"class Outer:\n    class Inner:\n        def pick(self, x):\n{body}            return -1\n\n\n"
                      f"def outer(x):\n    def pick(x):\n{body}            return -1\n    return pick(x)\n",
                      encoding="utf-8")
    names = sorted(line.split()[1] for line in complex_functions([nested]))
    assert names == ["Inner.pick", "pick"], names
