"""The package's layering: no import cycle among ``cavity.*`` modules, and the one-way rules.

The import graph is built from the source with :mod:`ast` (every ``import`` statement, including the
lazy ones inside functions, since a lazy import still ties the two modules together); an edge goes to
the module named (``from cavity.x import name`` -> ``cavity.x``; ``from cavity import x`` ->
``cavity.x`` when that is a module). A package's ``__init__`` re-exporting its own modules is an edge
like any other. Cycles are found with Tarjan's strongly connected components (Tarjan 1972, SIAM J.
Comput. 1(2), 146-160).
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def module_names(package: str) -> dict[str, Path]:
    """Every module of a package under the repository root, by dotted name."""
    out = {}
    for path in sorted((ROOT / package).rglob("*.py")):
        parts = list(path.relative_to(ROOT).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def import_graph(package: str) -> dict[str, set[str]]:
    """Edges module -> modules of the same package it imports (anywhere in its body)."""
    modules = module_names(package)
    graph: dict[str, set[str]] = {name: set() for name in modules}
    for name, path in modules.items():
        is_package = path.name == "__init__.py"
        for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
            targets: list[str] = []
            if isinstance(node, ast.Import):
                targets = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:  # relative import: resolve against this module's package
                    base = name.split(".") if is_package else name.split(".")[:-1]
                    base = base[: len(base) - (node.level - 1)]
                    stem = ".".join(base + ([node.module] if node.module else []))
                else:
                    stem = node.module or ""
                targets = [f"{stem}.{a.name}" if f"{stem}.{a.name}" in modules else stem for a in node.names]
            for target in targets:
                while target and target not in modules:  # "cavity.x.y" names a module "cavity.x" or an attribute
                    target = target.rpartition(".")[0]
                if target and target != name:
                    graph[name].add(target)
    return graph


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (each is an import cycle)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
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
                found.append(sorted(component))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def test_cycle_finder_finds_a_known_cycle():
    # a -> b -> c -> a is one cycle; d hangs off it; e and f are acyclic
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a", "d"}, "d": set(), "e": {"f"}, "f": set()}
    assert cycles(graph) == [["a", "b", "c"]]
    assert cycles({"x": {"y"}, "y": set()}) == []


def test_graph_sees_lazy_and_from_imports():
    graph = import_graph("cavity")
    assert "cavity.fdtd.engine" in graph["cavity.solve"]  # module level
    assert "cavity.paths" in graph["cavity.solve"]  # inside simulate()
    assert "cavity.sferic" in graph["cavity.solve"]  # the excitation
    assert "cavity.medium" in graph["cavity.paths"] and "cavity.medium" in graph["cavity.solve"]


def test_no_import_cycle_in_cavity():
    found = cycles(import_graph("cavity"))
    assert not found, "import cycles: " + "; ".join(" <-> ".join(c) for c in found)


def test_one_way_rules():
    graph = import_graph("cavity")
    # the compiled kernels import nothing of the project
    assert not graph["cavity.fdtd.kernels"]
    # the solver core never reaches up into reports, checks, sweeps or the CLI
    upper = ("cavity.reports", "cavity.checks", "cavity.sweeps", "cavity.cli")
    for low in (
        "cavity.solve",
        "cavity.sferic",
        "cavity.paths",
        "cavity.scenario",
        "cavity.ionosphere_forms",
        "cavity.tomltable",
        "cavity.medium",
        "cavity.results",
        "cavity.fdtd.engine",
        "cavity.fdtd.media",
        "cavity.fdtd.grid",
    ):
        assert not [t for t in graph[low] if t.startswith(upper)], low
    # the altitude profiles stand alone
    for path in (ROOT / "profiles").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom | ast.Import):
                names = [node.module or ""] if isinstance(node, ast.ImportFrom) else [a.name for a in node.names]
                assert not any(n == "cavity" or n.startswith("cavity.") for n in names), path


def form_comparisons(tree: ast.AST) -> list[int]:
    """Lines where a ``.form`` attribute is compared (``x.form == "utc"``, ``x.form in (...)``)."""
    lines = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Compare):
            if any(isinstance(x, ast.Attribute) and x.attr == "form" for x in (node.left, *node.comparators)):
                lines.append(node.lineno)
    return lines


def test_form_check_sees_a_comparison():
    # the check below can fail: both spellings of a comparison by name are found, a call is not
    source = 'if s.ionosphere.form == "utc":\n    pass\nok = "file" in ion.form\nform_of(ion).instant(ion)\n'
    assert form_comparisons(ast.parse(source)) == [1, 3]


def test_ionosphere_forms_are_asked_not_named():
    """One home per ionosphere form: outside cavity/ionosphere_forms.py no module compares a form's name;
    they dispatch through ``ionosphere_forms.form_of``."""
    offenders = []
    for name, path in module_names("cavity").items():
        if name != "cavity.ionosphere_forms":
            tree = ast.parse(path.read_text(), filename=str(path))
            offenders += [f"{path.relative_to(ROOT)}:{line}" for line in form_comparisons(tree)]
    assert not offenders, "ionosphere form compared by name: " + ", ".join(offenders)
