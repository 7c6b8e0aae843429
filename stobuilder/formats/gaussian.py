"""Gaussian's general basis input (``.gbs``): element blocks separated by ``****``.

Layout relied on (Gaussian's General basis input, also read by PySCF's parse_gaussian, Psi4 and
others): fields are free-spaced; ``!`` starts a comment; each element opens with ``Symbol 0`` and
closes with ``****``; each shell is ``L nprim scale`` (letters S, P, D, F, G, H, I or SP; the
scale factor multiplies the exponents by its square) followed by nprim rows
``exponent coefficient(s)``, two coefficients (s, then p) for SP. Pure or Cartesian functions are
chosen in Gaussian's route section, not in the basis text, so this file does not mark them.

What we write, for the readers users have: single spaces between fields (``C 0``, ``S 3 1.0``),
the element line right after the ``****`` above it (PySCF's ``parse_gaussian.load`` looks for the
symbol on the line after a ``****``, up to its first space), and the scale factor with a decimal
point (gbasis' ``parse_gbs`` finds shell lines by ``word word word.word``).
"""

from __future__ import annotations

from stobuilder.model.basis import Basis, ElementBasis
from stobuilder.formats.common import Lines, ParsedElement, file_basis, make_shell, merge_lines, number, parsed_elements, provenance_lines, read_float, read_int, read_letter, read_symbol, shell_blocks

NAME = "gaussian"
EXTENSION = ".gbs"
DESCRIPTION = "Gaussian general basis input (.gbs): element blocks closed by ****"
SEPARATOR = "****"


def element_lines(element: ElementBasis, sp_shells: bool = False) -> list[str]:
    """One element's block, from ``Symbol 0`` to the closing ``****``."""
    lines = [f"{element.symbol} 0"]
    for letter, shells in shell_blocks(element, sp_shells):
        lines.append(f"{letter} {len(shells[0].exponents)} 1.0")
        for k, a in enumerate(shells[0].exponents):
            lines.append("  " + "  ".join(number(x) for x in (a, *(s.coefficients[k] for s in shells))))
    lines.append(SEPARATOR)
    return lines


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"! {line}" for line in provenance_lines(basis)]
    lines.append(SEPARATOR)
    for element in basis.elements:
        lines.extend(element_lines(element, sp_shells))
    return "\n".join(lines) + "\n"


def parse(text: str, code: str = NAME, header: tuple[str, ...] = ()) -> tuple[list[ParsedElement], Lines]:
    """The elements of a Gaussian .gbs text with their line spans. With ``header`` (Psi4), the first
    line that is not a comment must be one of those words."""
    lines = Lines(text, code, comment="!")
    if header:
        n, line = lines.next(f"the {' or '.join(header)} line")
        if line.lower() not in header:
            raise lines.error(n, f"the first line must be {' or '.join(header)}, found {line!r}")
    item = lines.peek()
    if item is not None and item[1] == SEPARATOR:
        lines.next(SEPARATOR)
    records = []
    while lines.peek() is not None:
        n0, line = lines.next("an element line")
        tokens = line.split()
        if len(tokens) != 2 or tokens[1] != "0":
            raise lines.error(n0, f"element line 'Symbol 0' expected, found {line!r}")
        symbol = read_symbol(tokens[0].lstrip("-"), n0, lines)
        shells = []
        while True:
            n, line = lines.next(f"a shell or the {SEPARATOR} that closes {symbol} (line {n0})")
            if line == SEPARATOR:
                break
            tokens = line.split()
            if len(tokens) != 3:
                raise lines.error(n, f"shell line 'L nprim scale' expected, found {line!r}")
            ls = read_letter(tokens[0], n, lines)
            nprim = read_int(tokens[1], n, lines, "number of primitives", minimum=1)
            scale = read_float(tokens[2], n, lines, "scale factor")
            if not scale > 0:
                raise lines.error(n, f"scale factor must be positive, found {tokens[2]!r}")
            exps, coefs = [], [[] for _ in ls]
            for _ in range(nprim):
                m, row = lines.next(f"a primitive of the {tokens[0]} shell on line {n}")
                values = row.split()
                if len(values) != 1 + len(ls):
                    raise lines.error(m, f"{1 + len(ls)} numbers (exponent, coefficient) expected, found {len(values)}")
                nums = [read_float(v, m, lines) for v in values]
                exps.append(nums[0] * scale**2)
                for j in range(len(ls)):
                    coefs[j].append(nums[1 + j])
            shells.extend(make_shell(l, exps, c, n, lines) for l, c in zip(ls, coefs))
        records.append((symbol, shells, (n0 - 1, n), n0))
    return parsed_elements(records, lines), lines


def read(text: str) -> Basis:
    """The basis of a Gaussian .gbs text (strict: every problem names its line)."""
    elements, lines = parse(text)
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """``text`` with the elements of ``basis`` added (at the end) or put in place of the text's own."""
    elements, lines = parse(text)
    return merge_lines(text, elements, lines.last_line, basis, lambda e: element_lines(e, sp_shells))
