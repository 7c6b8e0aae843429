"""The package's modules import each other without a cycle: arrows point down the flow.

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
