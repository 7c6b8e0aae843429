"""Print the import graph of the stobuilder package; exit 1 if it has a cycle or an edge the
layering table ``MAY_IMPORT`` does not allow.

Every ``import`` and ``from ... import`` of a stobuilder module is an edge, wherever it stands
(module level or inside a function: a lazy import is still a dependency). Importing a name from a
package (``from .screening import shell_exponents``) is an edge to the package's ``__init__``;
importing a submodule (``from . import sto``) is an edge to that submodule. A registry that loads
its modules by name (``_MODULES = (...)`` in a package's ``__init__``: screening, formats) has an
edge to each of them, and so has the package's face to every module its lazy table of public
names (``_HOME = {name: module}``) names, so a cycle through a registered module is found too.

The cycle check leaves out imports under ``if TYPE_CHECKING:`` (never executed); the layering
check counts them: a type-only import is still an arrow between layers.

The layers follow the data flow (DEVELOPERS.md, "What each package may import"): a module's
package (``stobuilder.model.basis`` → ``model``; a top-level module such as ``stobuilder.tune`` is
its own; the face ``stobuilder/__init__.py`` is ``stobuilder``) may import the packages
``MAY_IMPORT`` names for it, and its own.

    python scripts/import_graph.py [--quiet]
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

PACKAGE = "stobuilder"

# package → the packages it may import (besides itself), bottom to top. No package may import one
# that may import it (``table_problems``): the table is a layering, not a list of exceptions.
_BASIS = {"core", "model", "exact", "screening", "expansion", "builder"}
_PATH = _BASIS | {"formats", "scf", "checks", "pipeline"}
_RUNTIME = _PATH | {"jobs", "batch", "bench", "tune", "calculator", "relax"}
MAY_IMPORT: dict[str, set[str]] = {
    "core": set(),                                      # errors, arguments, limits, files, defaults, DIIS
    "model": {"core"},                                  # elements, shells, basis, structures, methods
    "exact": {"core", "model"},                         # the exact-STO engine
    "screening": {"core", "model", "exact"},            # the rules (optimized runs the exact engine)
    "expansion": {"core", "model"},                     # Gaussian fits of STOs
    "builder": {"core", "model", "exact", "screening", "expansion"},  # BasisSpec → Basis
    "formats": {"core", "model"},                       # Basis ↔ text
    "scf": {"core", "model"},                           # the PySCF driver
    "checks": _BASIS | {"scf"},                         # SCF checks, the exact atoms beside them
    "pipeline": _PATH - {"pipeline"},                   # options, prepare, run_checks, build_structures
    "jobs": {"core"},                                   # the job engine knows nothing of bases
    "batch": _PATH | {"jobs"},
    "bench": _PATH | {"jobs"},
    "tune": _PATH,
    "calculator": _PATH,
    "relax": _PATH | {"calculator"},
    "stobuilder": _PATH | {"calculator"},               # the face: lazy public names
    "cli": _RUNTIME,
    "__main__": {"cli"},
    "maintainer": _RUNTIME,                             # regenerators of the shipped tables, apart
}


def modules(root: Path) -> dict[str, Path]:
    out = {}
    for path in sorted((root / PACKAGE).rglob("*.py")):
        parts = list(path.relative_to(root).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts.pop()
        out[".".join(parts)] = path
    return out


def _resolve(current: str, is_package: bool, level: int, module: str | None) -> str:
    base = current.split(".")
    if not is_package:
        base = base[:-1]
    if level > 1:
        base = base[: len(base) - (level - 1)]
    return ".".join(base + ([module] if module else []))


def _is_type_checking(test) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING")


def _nodes(tree, type_only: bool):
    """Every node of ``tree``; without ``type_only``, not those under ``if TYPE_CHECKING:``
    (imports for annotations only, never executed)."""
    stack = [tree]
    while stack:
        node = stack.pop()
        yield node
        if not type_only and isinstance(node, ast.If) and _is_type_checking(node.test):
            stack.extend(node.orelse)
            continue
        stack.extend(ast.iter_child_nodes(node))


def _assigned(node, is_package: bool, target: str) -> bool:
    return is_package and isinstance(node, ast.Assign) and any(
        isinstance(t, ast.Name) and t.id == target for t in node.targets)


def graph(root: Path, type_only: bool = False) -> dict[str, set[str]]:
    """module → the stobuilder modules it imports; with ``type_only`` the imports under ``if
    TYPE_CHECKING:`` too."""
    known = modules(root)
    edges: dict[str, set[str]] = {m: set() for m in known}
    for name, path in known.items():
        is_package = path.name == "__init__.py"
        for node in _nodes(ast.parse(path.read_text(encoding="utf-8")), type_only):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = _resolve(name, is_package, node.level, node.module) if node.level else (node.module or "")
                for alias in node.names:
                    sub = f"{base}.{alias.name}"
                    targets.append(sub if sub in known else base)
            if _assigned(node, is_package, "_MODULES"):
                targets = [f"{name}.{e.value}" for e in getattr(node.value, "elts", []) if isinstance(e, ast.Constant)]
            if _assigned(node, is_package, "_HOME") and isinstance(node.value, ast.Dict):
                targets = [v.value for v in node.value.values if isinstance(v, ast.Constant)]
            for target in targets:
                while target and target not in known:
                    target = target.rpartition(".")[0]
                if target and target != name and target.startswith(PACKAGE):
                    edges[name].add(target)
    return edges


def cycles(edges: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components with more than one module (Tarjan, 1972)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: list[list[str]] = []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(edges[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                out.append(sorted(component))

    sys.setrecursionlimit(10000)
    for v in sorted(edges):
        if v not in index:
            visit(v)
    return out


def layer(module: str) -> str:
    """The package of ``module`` in ``MAY_IMPORT``: stobuilder.model.basis → model, stobuilder.tune
    → tune, stobuilder → stobuilder."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else parts[0]


def table_problems(table: dict[str, set[str]] = MAY_IMPORT) -> list[str]:
    """What makes ``table`` no layering: a package it allows that it does not list, or two
    packages that may import each other (through any chain)."""
    out = [f"{p} may import {q}, which the table does not list" for p in sorted(table) for q in sorted(table[p]) if q not in table]
    for p in sorted(table):
        seen, stack = set(), [q for q in table[p] if q != p]
        while stack:
            q = stack.pop()
            if q == p:
                out.append(f"{p} may import itself through the table (a circle of permissions)")
                break
            if q in seen or q not in table:
                continue
            seen.add(q)
            stack.extend(r for r in table[q] if r != q)
    return out


def upward_edges(edges: dict[str, set[str]], table: dict[str, set[str]] = MAY_IMPORT) -> list[str]:
    """Every edge the table does not allow, as "a -> b (pa may not import pb)"; a module whose
    package is not in the table is reported too."""
    out = []
    for name in sorted(edges):
        source = layer(name)
        if source not in table:
            out.append(f"{name}: package {source} is not in MAY_IMPORT")
            continue
        for target in sorted(edges[name]):
            goal = layer(target)
            if goal != source and goal not in table[source]:
                out.append(f"{name} -> {target} ({source} may not import {goal})")
    return out


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    root = Path(__file__).resolve().parent.parent
    edges = graph(root)
    if "--quiet" not in argv:
        for name in sorted(edges):
            print(f"{name} -> {', '.join(sorted(edges[name])) or '(nothing)'}")
    found = cycles(edges)
    for component in found:
        print("cycle: " + " <-> ".join(component), file=sys.stderr)
    wrong = table_problems() + upward_edges(graph(root, type_only=True))
    for line in wrong:
        print("layering: " + line, file=sys.stderr)
    return 1 if found or wrong else 0


if __name__ == "__main__":
    sys.exit(main())
