"""The package's modules import each other without a cycle, and every arrow points down the
layers of scripts/import_graph.py's ``MAY_IMPORT`` table (type-only imports included).

scripts/import_graph.py reads every import statement (module level and inside functions) and
the registries' module lists, and finds strongly connected components (Tarjan, SIAM J. Comput.
1, 146, 1972). Common practice, no source, for the rule itself.
"""

import importlib.util
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _script():
    spec = importlib.util.spec_from_file_location("import_graph", ROOT / "scripts" / "import_graph.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_no_import_cycles():
    graph = _script()
    edges = graph.graph(ROOT)
    assert graph.cycles(edges) == []
    # the plumbing has one owner each, below the modules that use it
    assert "stobuilder.checks.structure" not in edges["stobuilder.exact.atoms"] | edges["stobuilder.exact.solver"]
    assert "stobuilder.exact.atoms" not in edges["stobuilder.screening.optimized"]
    assert edges["stobuilder.core.files"] <= {"stobuilder.core.errors", "stobuilder.core.arguments"}


def test_the_script_finds_a_cycle(tmp_path):
    # two modules importing each other, lazily: the script must report them
    pkg = tmp_path / "stobuilder"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "a.py").write_text("def f():\n    from .b import g\n")
    (pkg / "b.py").write_text("from . import a\n")
    graph = _script()
    assert graph.cycles(graph.graph(tmp_path)) == [["stobuilder.a", "stobuilder.b"]]


def test_every_edge_follows_the_layering_table():
    graph = _script()
    assert graph.table_problems() == []
    wrong = graph.upward_edges(graph.graph(ROOT, type_only=True))
    assert not wrong, "imports the layering (MAY_IMPORT) does not allow:\n" + "\n".join(wrong)
    # the runtime never imports the maintainer regenerators
    assert not any(graph.layer(t) == "maintainer" for m, ts in graph.graph(ROOT, type_only=True).items()
                   if graph.layer(m) != "maintainer" for t in ts)


def test_the_script_finds_an_upward_edge_even_a_type_only_one(tmp_path):
    pkg = tmp_path / "stobuilder"
    (pkg / "core").mkdir(parents=True)
    (pkg / "model").mkdir()
    for folder in (pkg, pkg / "core", pkg / "model"):
        (folder / "__init__.py").write_text("")
    (pkg / "model" / "basis.py").write_text("from stobuilder.core import errors\n")  # downward: allowed
    (pkg / "core" / "errors.py").write_text(
        "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from stobuilder.model.basis import Basis\n")
    graph = _script()
    assert graph.cycles(graph.graph(tmp_path)) == []  # a type-only import is no cycle
    assert graph.upward_edges(graph.graph(tmp_path)) == []  # nor, without type-only imports, an edge
    assert graph.upward_edges(graph.graph(tmp_path, type_only=True)) == [
        "stobuilder.core.errors -> stobuilder.model.basis (core may not import model)"]
    (pkg / "extra.py").write_text("")
    assert "stobuilder.extra: package extra is not in MAY_IMPORT" in graph.upward_edges(graph.graph(tmp_path))


def test_a_table_that_lets_two_packages_import_each_other_is_refused():
    graph = _script()
    assert graph.table_problems({"a": {"b"}, "b": {"a"}}) != []
    assert graph.table_problems({"a": {"b"}, "b": set()}) == []
    assert graph.table_problems({"a": {"c"}}) == ["a may import c, which the table does not list"]
