"""A Python file for PySCF: ``basis = {symbol: [[l, [exponent, coefficient], ...], ...]}``.

Load it with ``mol.basis = runpy.run_path(path)["basis"]``. Floats are written with repr(), so
they read back bit for bit. Layout relied on: PySCF's internal basis format (``mol.basis``; a
shell is [l, [α, c1, c2, ...], ...], several coefficients making a general contraction), which
PySCF treats as spherical unless ``mol.cart`` is set. The reader never runs the file: it takes
the literal assigned to ``basis`` with Python's ast module.
"""

from __future__ import annotations

import ast

from stobuilder.model.basis import Basis
from stobuilder.formats.common import Lines, ParsedElement, file_basis, make_shell, merge_lines, provenance_lines, read_symbol

NAME = "pyscf"
EXTENSION = ".py"
DESCRIPTION = "Python file defining basis = {...} in PySCF's internal format (mol.basis)"


def _entry(symbol: str, shells: list) -> list[str]:
    lines = [f"    {symbol!r}: ["]
    for shell in shells:
        prims = ", ".join(f"[{a!r}, {c!r}]" for a, c in shell[1:])
        lines.append(f"        [{shell[0]}, {prims}],")
    lines.append("    ],")
    return lines


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"# {line}" for line in provenance_lines(basis)]
    lines.append('# load with: mol.basis = runpy.run_path("this file")["basis"]')
    lines.append("basis = {")
    for symbol, shells in basis.to_pyscf().items():
        lines.extend(_entry(symbol, shells))
    lines.append("}")
    return "\n".join(lines) + "\n"


def _find(text: str) -> tuple[ast.Dict, Lines]:
    lines = Lines(text, NAME, comment="#")
    try:
        tree = ast.parse(text)
    except SyntaxError as exc:
        raise lines.error(exc.lineno or 1, f"not valid Python: {exc.msg}") from None
    found = [
        node.value
        for node in tree.body
        if isinstance(node, ast.Assign) and any(isinstance(t, ast.Name) and t.id == "basis" for t in node.targets)
    ]
    if not found:
        raise lines.error(lines.last_line, "no assignment 'basis = {...}' found")
    if not isinstance(found[-1], ast.Dict):
        raise lines.error(found[-1].lineno, "'basis' must be assigned a dict literal")
    return found[-1], lines


def _number(node, lines: Lines) -> float:
    try:
        value = ast.literal_eval(node)
    except ValueError:
        value = None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise lines.error(node.lineno, f"number expected, found {ast.get_source_segment(lines.text, node)!r}")
    return float(value)


def _parse(text: str) -> tuple[ast.Dict, list[ParsedElement], Lines]:
    node, lines = _find(text)
    elements = []
    for key, value in zip(node.keys, node.values):
        if not (isinstance(key, ast.Constant) and isinstance(key.value, str)):
            raise lines.error((key or value).lineno, "element keys of 'basis' must be strings")
        symbol = read_symbol(key.value, key.lineno, lines)
        if any(e.symbol == symbol for e in elements):
            raise lines.error(key.lineno, f"element {symbol} appears a second time")
        if not isinstance(value, ast.List):
            raise lines.error(value.lineno, f"the shells of {symbol} must be a list")
        shells = []
        for sh in value.elts:
            if not isinstance(sh, ast.List) or len(sh.elts) < 2:
                raise lines.error(sh.lineno, f"a shell [l, [exponent, coefficient], ...] of {symbol} expected")
            l = _number(sh.elts[0], lines)
            if l != int(l) or not 0 <= l < 7:
                raise lines.error(sh.lineno, f"angular momentum 0..6 expected, found {l}")
            rows = []
            for prim in sh.elts[1:]:
                if not isinstance(prim, ast.List) or len(prim.elts) < 2:
                    raise lines.error(prim.lineno, "a primitive [exponent, coefficient, ...] expected")
                rows.append([_number(x, lines) for x in prim.elts])
            if len({len(r) for r in rows}) != 1:
                raise lines.error(sh.lineno, f"the primitives of a shell of {symbol} differ in length")
            for j in range(1, len(rows[0])):
                shells.append(make_shell(int(l), [r[0] for r in rows], [r[j] for r in rows], sh.lineno, lines))
        elements.append(ParsedElement(symbol, tuple(shells), ((key.lineno - 1, value.end_lineno),)))
    return node, elements, lines


def read(text: str) -> Basis:
    """The basis of a Python file assigning ``basis = {...}`` (read without running it)."""
    _, elements, lines = _parse(text)
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """The file with our elements' entries of ``basis = {...}`` replaced or added (before the
    closing brace); every other line stays. Each entry must start and end on lines of its own."""
    node, elements, lines = _parse(text)
    old = text.splitlines()
    previous_stop = node.lineno  # the line of 'basis = {'
    for e in elements:
        start, stop = e.spans[0]
        own = start >= previous_stop and old[start].lstrip()[:1] in "'\"" and old[stop - 1].rstrip().endswith(",")
        if not own:
            raise lines.error(start + 1, f"cannot merge: the entry of {e.symbol} must have lines of its own, ending in ','")
        previous_stop = stop
    close = node.end_lineno - 1
    if old[close].strip() != "}":
        raise lines.error(close + 1, "cannot merge: the closing brace of 'basis' must be alone on its line")
    ours = basis.to_pyscf()
    return merge_lines(text, elements, close, basis, lambda e: _entry(e.symbol, ours[e.symbol]))
