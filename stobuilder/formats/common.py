"""Pieces every writer shares: the provenance header lines and sp-shell pairing."""

from __future__ import annotations

from .. import __version__
from ..basis import Basis, ElementBasis, Shell

NORM_NAMES = {"l2": "least-squares (L2) fit, Hehre, Stewart & Pople 1969", "h1": "Sobolev H1 fit"}


def provenance_lines(basis: Basis) -> list[str]:
    """Plain-text provenance, one fact a line, for a writer to put behind its comment marker."""
    lines = [
        f"{basis.name} basis written by stobuilder {__version__}",
        f"screening rule: {basis.rule}; Gaussians per STO: {basis.gaussians}; "
        f"fit: {NORM_NAMES.get(basis.norm, basis.norm)}",
        "units: bohr; coefficients refer to normalised primitives (normalised contractions)",
    ]
    for element in basis.elements:
        if element.stos:
            zetas = ", ".join(f"{s.label} {s.zeta:.6f}" for s in element.stos)
            lines.append(f"{element.symbol} [{element.configuration}]: zeta/bohr^-1 {zetas}")
    lines.extend(basis.notes)
    return lines


def shell_blocks(element: ElementBasis, sp_shells: bool) -> list[tuple[str, tuple[Shell, ...]]]:
    """The element's shells as blocks to write: ("S", (s,)), or ("SP", (s, p)) where an s shell and
    the p shell after it share their exponents and ``sp_shells`` is set."""
    blocks = []
    shells = list(element.shells)
    i = 0
    while i < len(shells):
        s = shells[i]
        nxt = shells[i + 1] if i + 1 < len(shells) else None
        if sp_shells and nxt is not None and s.l == 0 and nxt.l == 1 and s.exponents == nxt.exponents:
            blocks.append(("SP", (s, nxt)))
            i += 2
        else:
            blocks.append((s.letter, (s,)))
            i += 1
    return blocks


def number(x: float) -> str:
    """A float with 16 significant digits in E notation, fixed width, for the text formats."""
    return f"{x: .15E}"
