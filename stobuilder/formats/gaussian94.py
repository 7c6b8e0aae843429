"""Gaussian-94 basis format: elements separated by ``****``.

Layout relied on (Gaussian's General basis input, also read by PySCF's parse_gaussian, Psi4 and
others): ``!`` starts a comment; each element opens with ``Symbol 0`` and closes with ``****``;
each shell is ``L  nprim  1.00`` (scale factor) followed by rows ``exponent  coefficient(s)``.
"""

from __future__ import annotations

from ..basis import Basis
from .common import number, provenance_lines, shell_blocks

NAME = "gaussian94"
EXTENSION = ".gbs"
DESCRIPTION = "Gaussian 94 general-basis format, elements separated by ****"


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"! {line}" for line in provenance_lines(basis)]
    lines.append("****")
    for element in basis.elements:
        lines.append(f"{element.symbol}     0")
        for letter, shells in shell_blocks(element, sp_shells):
            lines.append(f"{letter:<2} {len(shells[0].exponents):3d}   1.00")
            for k, a in enumerate(shells[0].exponents):
                lines.append("  " + "  ".join(number(x) for x in (a, *(s.coefficients[k] for s in shells))))
        lines.append("****")
    return "\n".join(lines) + "\n"
