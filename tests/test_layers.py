"""The wing rule: every module imports only from its own wing and the wings below it.

The package is laid out in wings, bottom to top (DEVELOPERS.md, "Layout"; the project's
own rule): the foundation modules (``errors``, ``units``, ``fields``, ``notices`` and
``spurplan.__version__``), ``model``, then ``io`` and ``engine`` side by side (each
depends on the model only), ``analyses``, ``output``, and ``cli`` on top.  The test
reads every module's source with :mod:`ast` (nothing is imported), so it sees each
import statement where it stands: at module level (run when the module is imported,
class bodies and ``try`` blocks included), under ``if TYPE_CHECKING:`` (annotations
only), or inside a function (run when the function is called).  Python runs a
module's top-level statements when it is first imported, and a function's body only
when it is called (Python Language Reference, "The import system" and "Execution
model"; from memory): only module-level imports can make a cycle at import time.
"""

from __future__ import annotations

import ast
from dataclasses import dataclass
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "spurplan"

FOUNDATION = {"spurplan.errors", "spurplan.units", "spurplan.fields", "spurplan.notices"}
WINGS = ("model", "io", "engine", "analyses", "output")
# What each wing may import (a wing always may import itself); "top" (the command line
# and the package's own __init__, the public API) may import anything.
MAY_IMPORT = {
    "foundation": {"foundation"},
    "model": {"foundation", "model"},
    "io": {"foundation", "model", "io"},
    "engine": {"foundation", "model", "engine"},
    "analyses": {"foundation", "model", "io", "engine", "analyses"},
    "output": {"foundation", "model", "io", "engine", "analyses", "output"},
}

# The upward doors, each a method on an object users hold, importing on use
# (DEVELOPERS.md, "Layout").  Presentation: a result's .plot() imports the figures, and
# the notebook views (README, "From Python": "in Jupyter it shows as the verdict and an
# HTML table") import their HTML.  Computing: Lineup.run() calls the engine.
# (module, function, imported module) -> the comment the door carries.
PRESENTATION = "the one upward door: presentation, imported on use"
COMPUTING = "the other upward door: computing, imported on use"
DOOR = {
    ("spurplan.model.lineup", "Lineup.run", "spurplan.engine.run"): COMPUTING,
    ("spurplan.engine.result", "Result.plot", "spurplan.output.plots"): PRESENTATION,
    ("spurplan.engine.result", "Result._repr_html_", "spurplan.output.documents"): PRESENTATION,
    ("spurplan.analyses.sweep", "DriveSweep._repr_html_", "spurplan.output.documents"): PRESENTATION,
    ("spurplan.analyses.sweep", "TuneSweep._repr_html_", "spurplan.output.documents"): PRESENTATION,
    ("spurplan.analyses.check", "CheckResult.plot", "spurplan.output.plots"): PRESENTATION,
    ("spurplan.analyses.check", "CheckResult._repr_html_", "spurplan.output.documents"): PRESENTATION,
    ("spurplan.analyses.sweep", "DriveSweep.plot", "spurplan.output.plots"): PRESENTATION,
    ("spurplan.analyses.sweep", "TuneSweep.plot", "spurplan.output.plots"): PRESENTATION,
    ("spurplan.analyses.montecarlo", "YieldResult.plot", "spurplan.output.plots"): PRESENTATION,
    ("spurplan.analyses.spur_chart", "SpurChart.plot", "spurplan.output.plots"): PRESENTATION,
    ("spurplan.analyses.filter_view", "FilterView.plot", "spurplan.output.plots"): PRESENTATION,
}


@dataclass(frozen=True)
class Import:
    """One imported module of one import statement."""

    module: str  # the importing module
    function: str | None  # qualified name of the enclosing function, None at module level
    type_only: bool  # under ``if TYPE_CHECKING:``
    target: str  # the imported module (the deepest one that exists)
    names: tuple[str, ...]  # the names taken from it (``from X import a, b``)
    line: int


def module_name(path: Path, root: Path) -> str:
    parts = path.relative_to(root.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def modules(root: Path = PACKAGE) -> dict[str, str]:
    """Module name -> source text, for every module of the package."""
    return {module_name(p, root): p.read_text(encoding="utf-8") for p in sorted(root.rglob("*.py"))}


def _is_type_checking(test: ast.expr) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def imports(name: str, source: str, known: set[str]) -> list[Import]:
    """Every import of a ``spurplan`` module in ``source`` (the module ``name``)."""
    package = name if source_is_package(name, known) else name.rpartition(".")[0]
    found: list[Import] = []

    def resolve(base: str, alias: str | None) -> str:
        # "from spurplan.output import escaping" imports the module spurplan.output.escaping.
        if alias is not None and f"{base}.{alias}" in known:
            return f"{base}.{alias}"
        while base not in known and "." in base:
            base = base.rpartition(".")[0]
        return base

    def record(stmt: ast.Import | ast.ImportFrom, function: str | None, type_only: bool) -> None:
        if isinstance(stmt, ast.Import):
            for alias in stmt.names:
                if alias.name.split(".")[0] == "spurplan":
                    target = resolve(alias.name, None)
                    found.append(Import(name, function, type_only, target, (), stmt.lineno))
            return
        base = stmt.module or ""
        if stmt.level:
            up = package.split(".")
            up = up[: len(up) - (stmt.level - 1)]
            base = ".".join([*up, base] if base else up)
        if base.split(".")[0] != "spurplan":
            return
        by_target: dict[str, list[str]] = {}
        for alias in stmt.names:
            by_target.setdefault(resolve(base, alias.name), []).append(alias.name)
        for target, names in by_target.items():
            found.append(Import(name, function, type_only, target, tuple(names), stmt.lineno))

    def visit(nodes, scope: list[str], function: str | None, type_only: bool) -> None:
        for node in nodes:
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                record(node, function, type_only)
            elif isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                inner = [*scope, node.name]
                visit(ast.iter_child_nodes(node), inner, function or ".".join(inner), type_only)
            elif isinstance(node, ast.ClassDef):
                visit(ast.iter_child_nodes(node), [*scope, node.name], function, type_only)
            elif isinstance(node, ast.If) and _is_type_checking(node.test):
                visit(node.body, scope, function, True)
                visit(node.orelse, scope, function, type_only)
            else:
                visit(ast.iter_child_nodes(node), scope, function, type_only)

    visit(ast.parse(source).body, [], None, False)
    return found


def source_is_package(name: str, known: set[str]) -> bool:
    return any(other.startswith(name + ".") for other in known)


def wing(name: str, names: tuple[str, ...] = ()) -> str:
    """The wing of a module; ``names``: what an import takes from it (for the package root)."""
    if name == "spurplan":
        # The package root is the public API (top), except for its version string.
        return "foundation" if names and set(names) <= {"__version__"} else "top"
    if name in FOUNDATION:
        return "foundation"
    part = name.split(".")[1]
    return part if part in WINGS else "top"


def upward(imp: Import) -> bool:
    """Whether ``imp`` reaches a wing its module may not import."""
    own = wing(imp.module)
    if own == "top":
        return False
    return wing(imp.target, imp.names) not in MAY_IMPORT[own] | {own}


def all_imports(sources: dict[str, str]) -> list[Import]:
    known = set(sources)
    return [imp for name, src in sources.items() for imp in imports(name, src, known)]


def describe(imp: Import) -> str:
    where = "module level" if imp.function is None else f"in {imp.function}()"
    kind = " (TYPE_CHECKING)" if imp.type_only else ""
    return (
        f"{imp.module}:{imp.line} {where}{kind} imports {imp.target} "
        f"({wing(imp.module)} -> {wing(imp.target, imp.names)})"
    )


def module_level_violations(found: list[Import]) -> list[str]:
    return [describe(i) for i in found if i.function is None and upward(i)]


def function_level_violations(found: list[Import]) -> list[str]:
    return [
        describe(i)
        for i in found
        if i.function is not None and upward(i) and (i.module, i.function, i.target) not in DOOR
    ]


def cycles(found: list[Import]) -> list[list[str]]:
    """Import cycles through module-level imports (TYPE_CHECKING blocks do not run)."""
    graph: dict[str, set[str]] = {}
    for i in found:
        if i.function is None and not i.type_only and i.target != i.module:
            graph.setdefault(i.module, set()).add(i.target)
    # Tarjan's strongly connected components (Tarjan 1972; from memory): a component of
    # more than one module is a cycle.
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out: list[list[str]] = []

    def strongconnect(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                strongconnect(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                out.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            strongconnect(v)
    return out


@pytest.fixture(scope="module")
def found() -> list[Import]:
    return all_imports(modules())


def test_every_module_is_in_a_wing():
    # A new top-level module must be placed deliberately: only the foundation, the
    # package root and the command line live beside the wings.
    stray = [
        m
        for m in modules()
        if wing(m) == "top" and m not in ("spurplan", "spurplan.cli", "spurplan.__main__")
    ]
    assert stray == []


def test_module_level_imports_obey_the_wings(found):
    assert module_level_violations(found) == []


def test_function_level_upward_imports_only_through_the_door(found):
    assert function_level_violations(found) == []


def test_allowlists_are_current(found):
    # Every door still exists and still opens upward: a removed or renamed door is taken off.
    doors = {(i.module, i.function, i.target) for i in found if upward(i)}
    assert doors >= set(DOOR), sorted(set(DOOR) - doors)


def test_the_door_is_documented_where_it_opens():
    # Each door carries the comment that names the rule.
    sources = modules()
    for (module, function, _target), phrase in sorted(DOOR.items()):
        tree = ast.parse(sources[module])
        cls, _, meth = function.rpartition(".")
        node = next(
            n
            for c in ast.walk(tree)
            if isinstance(c, ast.ClassDef) and c.name == cls
            for n in c.body
            if isinstance(n, ast.FunctionDef) and n.name == meth
        )
        text = ast.get_source_segment(sources[module], node) or ""
        assert phrase in text, (module, function)


def test_no_import_cycle_at_module_level(found):
    assert cycles(found) == []


def test_checker_catches_what_it_is_for():
    # The checker itself, on invented modules: an upward import at module level, one in
    # a function outside the door, a relative import, a TYPE_CHECKING import that does
    # not make a cycle, and a real cycle.
    sources = {
        "spurplan": "from spurplan.errors import SpurplanError\n",
        "spurplan.errors": "",
        "spurplan.notices": "from spurplan import __version__\n",
        "spurplan.model": "",
        "spurplan.model.a": "from spurplan.output.b import x\n",
        "spurplan.engine": "",
        "spurplan.engine.c": (
            "from typing import TYPE_CHECKING\n"
            "from . import d\n"
            "if TYPE_CHECKING:\n    from spurplan.engine.e import E\n"
            "class R:\n    def show(self):\n        from spurplan.analyses.f import g\n"
        ),
        "spurplan.engine.d": "import spurplan.engine.c\n",
        "spurplan.engine.e": "from spurplan.engine import c\n",
        "spurplan.analyses": "",
        "spurplan.analyses.f": "",
        "spurplan.output": "",
        "spurplan.output.b": "from spurplan import load\n",
    }
    got = all_imports(sources)
    assert module_level_violations(got) == [
        "spurplan.model.a:1 module level imports spurplan.output.b (model -> output)",
        "spurplan.output.b:1 module level imports spurplan (output -> top)",
    ]
    assert function_level_violations(got) == [
        "spurplan.engine.c:7 in R.show() imports spurplan.analyses.f (engine -> analyses)"
    ]
    # The version string is foundation; any other name of the root is the public API.
    assert [upward(i) for i in got if i.target == "spurplan"] == [False, True]
    assert cycles(got) == [["spurplan.engine.c", "spurplan.engine.d"]]
