"""The package's house rules, read off its source: the stages import down the pipeline only.

Every import counts, at module level or inside a function: a lazy import is
still a dependency.  The rules are the project's own (DEVELOPERS.md, "Where
each stage lives"); no outside source.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import quantize

ROOT = Path(quantize.__file__).parent

#: Each package, and the packages (or top-level modules) it may import.  The
#: order is the pipeline's: a stage may import what comes before it, never
#: what comes after.
LAYERS = [
    {"errors"},
    {"colour", "core"},
    {"io", "kernels"},
    {"quality"},
    {"palette"},
    {"fit"},
    {"render"},
    {"report", "separation"},
    {"batch"},
    {"cli"},
]
RANK = {name: i for i, group in enumerate(LAYERS) for name in group}
#: Imports a layer may make across its own level (not up): the colour
#: sample of core is kept in the perceptual spaces of colour.
SAME_LEVEL = {("core", "colour")}
#: The one upward import, a public convenience method: ``Palette.apply``
#: maps an image with the render stage (``quantize.render.mapping``).
ALLOWED_UP = {("palette", "render")}


def _modules():
    for path in sorted(ROOT.rglob("*.py")):
        parts = path.relative_to(ROOT).with_suffix("").parts
        if parts[-1] == "__init__":
            parts = parts[:-1]
        yield ".".join(("quantize",) + parts), path


def _imports(name, path):
    """Every quantize module ``name`` imports, resolved to dotted names."""
    is_pkg = path.name == "__init__.py"
    package = name if is_pkg else name.rsplit(".", 1)[0]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.startswith("quantize"):
                yield target, [a.name for a in node.names]
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("quantize"):
                    yield a.name, []


def _stage(dotted):
    parts = dotted.split(".")
    return parts[1] if len(parts) > 1 else None


MODULES = dict(_modules())
GRAPH = {}
for _name, _path in MODULES.items():
    edges = set()
    for target, names in _imports(_name, _path):
        for t in [target] + [f"{target}.{n}" for n in names]:
            if t in MODULES and t != _name and not t.startswith(_name + "."):
                edges.add(t)
    GRAPH[_name] = edges


def test_every_stage_has_a_place_in_the_pipeline():
    stages = {_stage(m) for m in MODULES if _stage(m)} - {"__main__"}
    assert stages <= set(RANK), sorted(stages - set(RANK))


def test_no_import_cycles():
    # Depth-first search for a back edge; the top-level package's lazy
    # public names (quantize/__init__.py) import nothing at import time and
    # are the only module allowed to name every stage.
    graph = {m: {t for t in e if t != "quantize"} for m, e in GRAPH.items() if m != "quantize"}
    state, cycles = {}, []

    def visit(m, trail):
        state[m] = "open"
        for t in sorted(graph.get(m, ())):
            if state.get(t) == "open":
                cycles.append(trail[trail.index(t):] + [t] if t in trail else [m, t])
            elif t not in state:
                visit(t, trail + [t])
        state[m] = "done"

    for m in sorted(graph):
        if m not in state:
            visit(m, [m])
    assert cycles == []


@pytest.mark.parametrize("name", sorted(m for m in MODULES if _stage(m) in RANK))
def test_stages_import_down_the_pipeline_only(name):
    mine = _stage(name)
    for target in GRAPH[name]:
        theirs = _stage(target)
        if theirs is None or theirs == mine or theirs == "__main__":
            continue
        if (mine, theirs) in ALLOWED_UP:
            continue
        if RANK[theirs] == RANK[mine]:
            assert (mine, theirs) in SAME_LEVEL, f"{name} imports {target}, a stage beside it"
        else:
            assert RANK[theirs] < RANK[mine], f"{name} imports {target}, a later stage"


@pytest.mark.parametrize("name", sorted(MODULES))
def test_no_private_names_cross_a_package(name):
    package = name.rsplit(".", 1)[0] if MODULES[name].name != "__init__.py" else name
    for target, names in _imports(name, MODULES[name]):
        tpkg = target if target in MODULES and MODULES[target].name == "__init__.py" else target.rsplit(".", 1)[0]
        if tpkg == package or target == "quantize":
            continue
        private = [n for n in names if n.startswith("_") and not n.startswith("__")]
        private += [p for p in target.split(".")[1:] if p.startswith("_") and not p.startswith("__")]
        assert not private, f"{name} imports {private} from {target}"


@pytest.mark.parametrize("name", sorted(MODULES))
def test_no_private_attributes_of_another_package_are_read(name):
    # ``from quantize.colour import spaces as cs`` then ``cs._matrix``: a private name all the same.
    package = name.rsplit(".", 1)[0] if MODULES[name].name != "__init__.py" else name
    tree = ast.parse(MODULES[name].read_text(encoding="utf-8"))
    aliases = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("quantize") and not node.level:
            for a in node.names:
                full = f"{node.module}.{a.name}"
                if full in MODULES and full.rsplit(".", 1)[0] != package:
                    aliases[a.asname or a.name] = full
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id in aliases:
            assert not (node.attr.startswith("_") and not node.attr.startswith("__")), \
                f"{name} reads {aliases[node.value.id]}.{node.attr}"


#: Lines of code a function's body may hold, its docstring not counted: a
#: longer one does several things and gets split (the project's own rule,
#: DEVELOPERS.md; no outside source).
MAX_BODY_LINES = 80


def _long_functions(path):
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            body = node.body
            has_doc = (len(body) > 1 and isinstance(body[0], ast.Expr)
                       and isinstance(body[0].value, ast.Constant) and isinstance(body[0].value.value, str))
            first = body[1] if has_doc else body[0]
            lines = node.end_lineno - first.lineno + 1
            if lines > MAX_BODY_LINES:
                yield node.name, lines


def test_the_length_check_finds_a_long_function(tmp_path):
    long_one = tmp_path / "m.py"
    long_one.write_text("def f():\n    '''doc'''\n" + "    x = 1\n" * (MAX_BODY_LINES + 1)
                        + "def g():\n" + "    y = 2\n" * MAX_BODY_LINES)
    assert list(_long_functions(long_one)) == [("f", MAX_BODY_LINES + 1)]


@pytest.mark.parametrize("name", sorted(MODULES))
def test_no_function_is_longer_than_the_limit(name):
    assert not list(_long_functions(MODULES[name])), f"split: {list(_long_functions(MODULES[name]))}"
