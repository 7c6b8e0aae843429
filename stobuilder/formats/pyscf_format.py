"""A Python file for PySCF: ``basis = {symbol: [[l, [exponent, coefficient], ...], ...]}``.

Load it with ``mol.basis = runpy.run_path(path)["basis"]``. Floats are written with repr(), so
they read back bit for bit.
"""

from __future__ import annotations

from ..basis import Basis
from .common import provenance_lines

NAME = "pyscf"
EXTENSION = ".py"
DESCRIPTION = 'Python file defining basis = {...} in PySCF\'s internal format (mol.basis)'


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"# {line}" for line in provenance_lines(basis)]
    lines.append('# load with: mol.basis = runpy.run_path("this file")["basis"]')
    lines.append("basis = {")
    for symbol, shells in basis.to_pyscf().items():
        lines.append(f"    {symbol!r}: [")
        for shell in shells:
            prims = ", ".join(f"[{a!r}, {c!r}]" for a, c in shell[1:])
            lines.append(f"        [{shell[0]}, {prims}],")
        lines.append("    ],")
    lines.append("}")
    return "\n".join(lines) + "\n"
