"""OpenMolcas inline basis sets: ``Basis set`` … ``End of basis`` blocks for the &SEWARD input.

Layout relied on (OpenMolcas manual, SEWARD, "Basis set" keyword with the ``/ inline`` source):
``*`` at the start of a line makes a comment; a block opens with the line ``Basis set``, then the
label ``Symbol..... / inline``; the inline data start with ``charge  lmax`` (the nuclear charge as
a real number and the highest l); then for l = 0 … lmax a line ``nprim  ncontr``, the nprim
exponents (free format, we write one a line), and the contraction matrix, one row of ncontr
coefficients per primitive (a general contraction, 0 where a contracted function lacks the
primitive; coefficients of normalised primitives); then the centres (``label x y z``), and
``End of basis``. The file holds the basis part only: add the centre lines of each element
before its ``End of basis`` and put the blocks into &SEWARD. The reader takes centre lines and
skips them. Spherical functions are SEWARD's default and are not marked in the data; there are
no sp shells (``sp_shells`` is ignored); only all-electron data (charge = Z) are read.
OpenMolcas defines no file extension for such blocks; ours is ``.openmolcas.basis``.
"""

from __future__ import annotations

from stobuilder.model.basis import Basis, ElementBasis
from stobuilder.model.elements import atomic_number
from stobuilder.formats.common import Lines, ParsedElement, file_basis, general_contractions, merge_lines, number, parsed_elements, provenance_lines, read_float, read_int, read_symbol, split_general

NAME = "openmolcas"
EXTENSION = ".openmolcas.basis"
DESCRIPTION = "OpenMolcas inline basis blocks for &SEWARD (Basis set ... / inline ... End of basis)"
OPEN, END = "basis set", "end of basis"


def _data_lines(element: ElementBasis) -> list[str]:
    blocks = general_contractions(element)
    lines = ["Basis set", f"{element.symbol}..... / inline", f"  {atomic_number(element.symbol)}.0   {len(blocks) - 1}"]
    for _, exps, rows in blocks:
        lines.append(f"  {len(exps)}   {len(rows[0]) if rows else 0}")
        lines.extend("  " + number(a) for a in exps)
        lines.extend("  " + "  ".join(number(c) for c in row) for row in rows)
    return lines


def element_lines(element: ElementBasis, sp_shells: bool = False) -> list[str]:
    return [*_data_lines(element), "End of basis"]


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"* {line}" for line in provenance_lines(basis)]
    lines.append("* add each element's centre lines (label x y z) before its End of basis")
    for element in basis.elements:
        lines.extend(element_lines(element))
    return "\n".join(lines) + "\n"


def _numbers(lines: Lines, count: int, what: str) -> tuple[list[float], int]:
    values: list[float] = []
    m = 0
    while len(values) < count:
        m, row = lines.next(what)
        values += [read_float(v, m, lines) for v in row.split()]
    if len(values) != count:
        raise lines.error(m, f"{count} numbers expected for {what}, found {len(values)}")
    return values, m


def parse(text: str) -> tuple[list[ParsedElement], Lines]:
    lines = Lines(text, NAME, whole="*")
    records = []
    while lines.peek() is not None:
        n0, line = lines.next("'Basis set'")
        if line.lower() != OPEN:
            raise lines.error(n0, f"'Basis set' expected, found {line!r}")
        n, label = lines.next("the basis label 'Symbol..... / inline'")
        if "/" not in label or label.split("/", 1)[1].strip().lower() != "inline":
            raise lines.error(n, f"an inline basis label 'Symbol..... / inline' expected, found {label!r}")
        symbol = read_symbol(label.split(".", 1)[0].split("/", 1)[0].strip(), n, lines)
        n, line = lines.next(f"the line 'charge lmax' of {symbol}")
        tokens = line.split()
        if len(tokens) != 2:
            raise lines.error(n, f"line 'charge lmax' expected, found {line!r}")
        charge = read_float(tokens[0], n, lines, "nuclear charge")
        lmax = read_int(tokens[1], n, lines, "highest l")
        if charge != atomic_number(symbol):
            raise lines.error(n, f"charge {tokens[0]} is not the nuclear charge of {symbol} (ECP data are not read)")
        shells = []
        for l in range(lmax + 1):
            n, line = lines.next(f"the line 'nprim ncontr' of l = {l} of {symbol}")
            ints = [read_int(v, n, lines, "block field") for v in line.split()]
            if len(ints) != 2:
                raise lines.error(n, f"line 'nprim ncontr' expected, found {line!r}")
            nprim, ncontr = ints
            if (nprim == 0) != (ncontr == 0):
                raise lines.error(n, f"block line {line!r}: primitives without contractions or the reverse")
            exps, _ = _numbers(lines, nprim, f"the {nprim} exponents of the block on line {n}")
            rows = []
            for _ in range(nprim):
                m, row = lines.next(f"a coefficient row of the block on line {n}")
                values = [read_float(v, m, lines) for v in row.split()]
                if len(values) != ncontr:
                    raise lines.error(m, f"{ncontr} coefficients expected, found {len(values)}")
                rows.append(values)
            shells.extend(split_general(l, exps, rows, n, lines))
        while True:
            m, line = lines.next(f"a centre line or 'End of basis' closing the block on line {n0}")
            if line.lower() == END:
                break
            tokens = line.split()
            if len(tokens) < 4 or line.lower() == OPEN:
                raise lines.error(m, f"centre line 'label x y z' or 'End of basis' expected, found {line!r}")
            for v in tokens[1:4]:
                read_float(v, m, lines, "coordinate")
        records.append((symbol, shells, (n0 - 1, m), n0))
    return parsed_elements(records, lines), lines


def read(text: str) -> Basis:
    """The basis of OpenMolcas inline basis blocks (strict: every problem names its line)."""
    elements, lines = parse(text)
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """``text`` with our elements' blocks added (at the end) or with our basis data in place of the
    text's own; the centre lines and ``End of basis`` of a replaced block stay."""
    elements, lines = parse(text)
    kept = []
    for e in elements:
        start, stop = e.spans[0]
        if e.symbol in basis:
            # keep the centre lines: replace only from 'Basis set' to the last coefficient row
            data = _data_stop(text, start)
            kept.append(ParsedElement(e.symbol, e.shells, ((start, data),)))
        else:
            kept.append(e)
    return merge_lines(text, kept, lines.last_line, basis, element_lines, _data_lines)


def _data_stop(text: str, start: int) -> int:
    """The 0-based line after the basis data of the block that starts at line ``start``."""
    block_lines = text.splitlines()
    sub = "\n".join(block_lines[start:])
    lines = Lines(sub, NAME, whole="*")
    lines.next("Basis set")
    lines.next("label")
    _, head = lines.next("charge lmax")
    last = 0
    for _ in range(int(head.split()[1]) + 1):
        n, line = lines.next("nprim ncontr")
        last = n
        nprim = int(line.split()[0])
        if nprim:
            _, last = _numbers(lines, nprim, "exponents")
            for _ in range(nprim):
                last, _ = lines.next("row")
    return start + last
