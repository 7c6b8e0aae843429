"""Psi4 basis file (.gbs): Gaussian's layout under a ``spherical`` or ``cartesian`` line.

Layout relied on (Psi4 manual, "Basis sets", user-defined basis files): the file's first line is
``spherical`` or ``cartesian`` and chooses pure or Cartesian functions for every shell; ``!``
starts a comment; ``****`` separates elements; each element is ``Symbol 0``, then shells
``L nprim scale`` with rows ``exponent coefficient(s)`` (SP rows carry the s and the p
coefficient), closed by ``****``. We write ``spherical``: the STO-nG functions are pure. The
element blocks are ``gaussian.element_lines`` (the spacing that module describes).
"""

from __future__ import annotations

from stobuilder.model.basis import Basis
from stobuilder.formats import gaussian
from stobuilder.formats.common import file_basis, merge_lines, provenance_lines

NAME = "psi4"
EXTENSION = ".psi4.gbs"
DESCRIPTION = "Psi4 .gbs basis file: a spherical/cartesian line, then Gaussian element blocks"
HEADER = ("spherical", "cartesian")


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = ["spherical"]
    lines.extend(f"! {line}" for line in provenance_lines(basis))
    lines.append("")
    lines.append(gaussian.SEPARATOR)
    for element in basis.elements:
        lines.extend(gaussian.element_lines(element, sp_shells))
    return "\n".join(lines) + "\n"


def read(text: str) -> Basis:
    """The basis of a Psi4 .gbs text (strict: every problem names its line)."""
    elements, lines = gaussian.parse(text, NAME, HEADER)
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """``text`` with the elements of ``basis`` added (at the end) or put in place of the text's own;
    the file's spherical/cartesian line is kept."""
    elements, lines = gaussian.parse(text, NAME, HEADER)
    return merge_lines(text, elements, lines.last_line, basis, lambda e: gaussian.element_lines(e, sp_shells))
