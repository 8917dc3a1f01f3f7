"""The package layout reads as the pipeline: a stage imports only from itself and the stages below it,
and no modules import each other in a circle. Read from the import statements (ast), including the
imports inside functions, so a lazy import cannot hide a layering break.

Stages, lowest first (DEVELOPERS.md, Architecture): base modules every stage may use, models, sim,
campaigns, analysis, views, commands, and the `grasp-harness` entry point. The package's own
`__init__` is the public facade (`load_spec`, `load_run`, `run_trial`): it may reach any stage and
offers only `__version__` to the modules below it.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import harness

PACKAGE = Path(harness.__file__).parent
BASE = {"errors", "constants", "seeds", "table", "safety"}
STAGES = ["models", "sim", "campaigns", "analysis", "views", "commands"]


def module_name(path):
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def stage(module):
    """0 for harness itself and the base modules, 1.. for the stage subpackages, last for the cli."""
    parts = module.split(".")
    if len(parts) == 1 or parts[1] in BASE:
        return 0
    if parts[1] == "cli":
        return len(STAGES) + 1
    assert parts[1] in STAGES, f"{module} belongs to no stage: add it to a stage subpackage or to BASE"
    return STAGES.index(parts[1]) + 1


def imports(path):
    """Every harness module that `path` imports (resolving relative imports and `from pkg import module`)."""
    here = module_name(path)
    package = here if path.name == "__init__.py" else here.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                target = ".".join([*base, *([node.module] if node.module else [])])
            else:
                target = node.module or ""
            if target.split(".")[0] != "harness":
                continue
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                found.add(sub if (PACKAGE.parent / (sub.replace(".", "/") + ".py")).exists()
                          or (PACKAGE.parent / sub.replace(".", "/")).is_dir() else target)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.split(".")[0] == "harness")
    return found


MODULES = {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}
GRAPH = {m: imports(p) for m, p in MODULES.items()}


def test_every_module_belongs_to_a_stage():
    for module in MODULES:
        stage(module)


@pytest.mark.parametrize("module", sorted(m for m in MODULES if m != "harness"))
def test_no_module_imports_from_a_higher_stage(module):
    higher = sorted(t for t in GRAPH[module] if t != "harness" and stage(t) > stage(module))
    assert not higher, f"{module} (stage {stage(module)}) imports from higher stages: {higher}"


def find_circle(graph):
    """One import circle of `graph` ({module: imported modules}) as a list, or None (depth-first search)."""
    state, path = {}, []

    def visit(m):
        state[m] = "open"
        path.append(m)
        for t in sorted(graph[m]):
            if state.get(t) == "open":
                return path[path.index(t):] + [t]
            if t not in state and (circle := visit(t)):
                return circle
        path.pop()
        state[m] = "done"
        return None

    return next((c for m in sorted(graph) if m not in state and (c := visit(m))), None)


def test_no_import_circles():
    graph = {m: {t for t in targets if t in GRAPH and t != "harness"} for m, targets in GRAPH.items() if m != "harness"}
    circle = find_circle(graph)
    assert circle is None, "import circle: " + " -> ".join(circle or [])


def test_the_checks_see_a_violation():
    # the checkers themselves: a view counts as higher than a sim module, and a planted circle is found
    assert stage("harness.views.report") > stage("harness.sim.trial")
    assert "harness.sim.trial" in GRAPH["harness.sim.routines"]
    assert find_circle({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": set()}) == ["a", "b", "c", "a"]
