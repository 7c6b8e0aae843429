"""NWChem basis input: a ``BASIS ... END`` block, one ``Symbol  L`` header per shell.

Layout relied on (NWChem user manual, BASIS directive): ``#`` starts a comment; ``BASIS "ao basis"
SPHERICAL`` opens the block and marks spherical functions; each shell is ``Symbol  S|P|D|F|SP``
followed by rows ``exponent  coefficient(s)``; ``END`` closes it.
"""

from __future__ import annotations

from ..basis import Basis
from .common import number, provenance_lines, shell_blocks

NAME = "nwchem"
EXTENSION = ".nw"
DESCRIPTION = "NWChem BASIS block (also read by PySCF's parse_nwchem)"


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"# {line}" for line in provenance_lines(basis)]
    lines.append('BASIS "ao basis" SPHERICAL PRINT')
    for element in basis.elements:
        for letter, shells in shell_blocks(element, sp_shells):
            lines.append(f"{element.symbol:<4} {letter}")
            for k, a in enumerate(shells[0].exponents):
                lines.append("  " + "  ".join(number(x) for x in (a, *(s.coefficients[k] for s in shells))))
    lines.append("END")
    return "\n".join(lines) + "\n"
