"""Print the import graph of the stobuilder package and exit 1 if it has a cycle.

Every ``import`` and ``from ... import`` of a stobuilder module is an edge, wherever it stands
(module level or inside a function: a lazy import is still a dependency). Importing a name from a
package (``from .screening import shell_exponents``) is an edge to the package's ``__init__``;
importing a submodule (``from . import sto``) is an edge to that submodule. A registry that loads
its modules by name (``_MODULES = (...)`` in a package's ``__init__``: screening, formats) has an
edge to each of them, so a cycle through a registered module is found too.

    python scripts/import_graph.py [--quiet]
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

PACKAGE = "stobuilder"


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


def _runtime_nodes(tree):
    """Every node of ``tree`` except those under ``if TYPE_CHECKING:`` (imports for annotations
    only, never executed)."""
    stack = [tree]
    while stack:
        node = stack.pop()
        yield node
        if isinstance(node, ast.If) and isinstance(node.test, ast.Name) and node.test.id == "TYPE_CHECKING":
            stack.extend(node.orelse)
            continue
        stack.extend(ast.iter_child_nodes(node))


def graph(root: Path) -> dict[str, set[str]]:
    known = modules(root)
    edges: dict[str, set[str]] = {m: set() for m in known}
    for name, path in known.items():
        is_package = path.name == "__init__.py"
        for node in _runtime_nodes(ast.parse(path.read_text(encoding="utf-8"))):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = _resolve(name, is_package, node.level, node.module) if node.level else (node.module or "")
                for alias in node.names:
                    sub = f"{base}.{alias.name}"
                    targets.append(sub if sub in known else base)
            if is_package and isinstance(node, ast.Assign) and any(
                isinstance(t, ast.Name) and t.id == "_MODULES" for t in node.targets
            ):
                targets = [f"{name}.{e.value}" for e in getattr(node.value, "elts", []) if isinstance(e, ast.Constant)]
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
    return 1 if found else 0


if __name__ == "__main__":
    sys.exit(main())
