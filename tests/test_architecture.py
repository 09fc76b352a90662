"""The house rules: stage packages import only the stages above them, and no module
imports itself back through others (DEVELOPERS.md, "The house").

Imports are read from the source with `ast` (also those inside functions), so an
upward import cannot hide in a function body.
"""

from __future__ import annotations

import ast
import functools
import re
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "validate"

# The order data flows in; a stage may import only the stages before it (and itself).
STAGES = ("inputs", "metrology", "model", "propagation", "validation", "equilibrium", "advisor",
          "record", "report", "workflow", "cli")


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imports_of(path: Path) -> set[str]:
    """Every `validate...` module a file imports, at any depth of the file."""
    here = module_name(path)
    package = here if path.name == "__init__.py" else here.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.split(".")[0] == "validate")
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                name = ".".join(base + ([node.module] if node.module else []))
            else:
                name = node.module or ""
            if name.split(".")[0] != "validate":
                continue
            found.add(name)
            # `from validate.x import y` may name a submodule y
            found.update(f"{name}.{a.name}" for a in node.names
                         if (PACKAGE.parent / f"{name}.{a.name}".replace(".", "/")).with_suffix(".py").exists()
                         or (PACKAGE.parent / f"{name}.{a.name}".replace(".", "/") / "__init__.py").exists())
    return found


def stage_of(module: str) -> int | None:
    """Index of a module's stage in STAGES; None for the package root (its version)."""
    parts = module.split(".")
    if len(parts) == 1:
        return None
    return STAGES.index(parts[1])


@functools.cache
def _read_modules() -> tuple[tuple[str, frozenset[str]], ...]:
    # read once per test session (about 0.7 s of parsing); the sources do not change meanwhile
    return tuple((module_name(p), frozenset(imports_of(p))) for p in sorted(PACKAGE.rglob("*.py")))


def modules() -> dict[str, set[str]]:
    """Every module of the package and the `validate` modules it imports (a new dict each call)."""
    return {module: set(deps) for module, deps in _read_modules()}


def test_every_module_belongs_to_a_stage():
    for module in modules():
        parts = module.split(".")
        assert len(parts) == 1 or parts[1] in STAGES, f"{module} is in no stage of {STAGES}"


def upward_imports(graph: dict[str, set[str]]) -> list[str]:
    bad = []
    for module, deps in graph.items():
        mine = stage_of(module)
        for dep in deps:
            theirs = stage_of(dep)
            if mine is not None and theirs is not None and theirs > mine:
                bad.append(f"{module} imports {dep} (stage {STAGES[theirs]} comes after {STAGES[mine]})")
            if mine is None and theirs is not None:
                bad.append(f"the package root imports {dep}")
    return bad


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Import circles between modules (depth-first search for a back edge)."""
    found, state = [], {}

    def visit(node, trail):
        state[node] = "open"
        for dep in sorted(d for d in graph.get(node, ()) if d in graph and d != node):
            if state.get(dep) == "open":
                found.append(trail[trail.index(dep):] + [dep])
            elif dep not in state:
                visit(dep, trail + [dep])
        state[node] = "done"

    for node in graph:
        if node not in state:
            visit(node, [node])
    return found


def test_stages_import_only_the_stages_before_them():
    assert upward_imports(modules()) == []


def test_no_import_circles():
    # a package's __init__ importing its own modules is no circle of behaviour; none do today
    assert cycles(modules()) == []


@pytest.mark.parametrize("module, dep", [
    ("validate.inputs.schema", "validate.model.assay"),
    ("validate.model.assay", "validate.report.pdf"),
    ("validate.record.files", "validate.workflow.pipeline"),
])
def test_the_contract_catches_an_upward_import(module, dep):
    graph = modules()
    graph[module] = graph[module] | {dep}
    assert any(line.startswith(f"{module} imports {dep}") for line in upward_imports(graph))


def test_the_contract_catches_a_circle():
    graph = {"validate.model.a": {"validate.model.b"}, "validate.model.b": {"validate.model.a"}}
    assert cycles(graph)


def test_the_developers_guide_shows_the_stages_in_this_order():
    text = (PACKAGE.parent / "DEVELOPERS.md").read_text(encoding="utf-8")
    block = text[text.index("The house"):]
    shown = re.search(r"```\n(.*?)\n```", block, flags=re.S)
    assert shown, "DEVELOPERS.md, The house: the order of the stages is missing"
    names = [n.removesuffix("/").removesuffix(".py") for n in re.findall(r"[a-z_.]+", shown.group(1))]
    assert tuple(names) == STAGES
