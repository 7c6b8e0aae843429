"""Dalton basis-set library file: per element ``a Z``, then one general-contraction block per l.

Layout relied on (Dalton manual, the basis-set library files read for ``BASIS`` in the .mol
file): lines starting with ``$`` are comments (we also skip ``!`` lines when reading); ``a Z``
opens the entry of the element of atomic number Z; then for l = 0, 1, … up to the highest l, a
line ``nprim  ncontr  0`` followed by nprim rows ``exponent  c1 … c_ncontr`` (a general
contraction: every contracted function of that l has a coefficient, 0 where it lacks the
primitive). Coefficients refer to normalised primitives. We write each row on one line (the
reader also takes a row continued on the following lines) and "0 0 0" for an l without
functions below the highest l. Not relied on: the meaning of the third integer (we write 0 and
read only 0) and any fixed column widths. Dalton has no sp shells (``sp_shells`` is ignored) and
chooses spherical or Cartesian functions in the .mol file, so nothing is marked here. Dalton
defines no file extension (it finds a library file by its name); ours is ``.dalton.basis``.
"""

from __future__ import annotations

from stobuilder.model.basis import L_LETTERS, Basis, ElementBasis
from stobuilder.model.elements import atomic_number
from stobuilder.formats.common import Lines, ParsedElement, file_basis, general_contractions, merge_lines, number, parsed_elements, provenance_lines, read_float, read_int, read_z, split_general

NAME = "dalton"
EXTENSION = ".dalton.basis"
DESCRIPTION = "Dalton basis-set library file: 'a Z' entries, one general contraction per l"


def block_comment(l: int, primitives: int, contractions: int) -> str:
    """The comment line above a block: its l and what it holds, e.g. "$ l=1 (p): 3 primitives,
    2 contractions" ("none" for the empty block of an l below the highest)."""
    letter = L_LETTERS[l].lower()
    if not primitives:
        return f"$ l={l} ({letter}): none"
    return (f"$ l={l} ({letter}): {primitives} primitive{'' if primitives == 1 else 's'}, "
            f"{contractions} contraction{'' if contractions == 1 else 's'}")


def element_lines(element: ElementBasis, sp_shells: bool = False) -> list[str]:
    lines = [f"a {atomic_number(element.symbol)}", f"$ {element.symbol}"]
    for l, exps, rows in general_contractions(element):
        lines.append(block_comment(l, len(exps), len(rows[0]) if rows else 0))
        lines.append(f"{len(exps):5d}{len(rows[0]) if rows else 0:5d}    0")
        for a, row in zip(exps, rows):
            lines.append("  " + "  ".join(number(x) for x in (a, *row)))
    return lines


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"$ {line}" for line in provenance_lines(basis)]
    for element in basis.elements:
        lines.extend(element_lines(element))
    return "\n".join(lines) + "\n"


def _is_entry(line: str) -> bool:
    return line.split()[0] in ("a", "A")


def parse(text: str) -> tuple[list[ParsedElement], Lines]:
    lines = Lines(text, NAME, whole="$!")
    records = []
    while lines.peek() is not None:
        n0, line = lines.next("an entry line 'a Z'")
        tokens = line.split()
        if not _is_entry(line) or len(tokens) != 2:
            raise lines.error(n0, f"entry line 'a Z' expected, found {line!r}")
        symbol = read_z(tokens[1], n0, lines)
        shells = []
        last = n0
        l = 0
        while (item := lines.peek()) is not None and not _is_entry(item[1]):
            n, line = lines.next("a block line 'nprim ncontr 0'")
            ints = [read_int(v, n, lines, "block field") for v in line.split()]
            if len(ints) not in (2, 3) or (len(ints) == 3 and ints[2] != 0):
                raise lines.error(n, f"block line 'nprim ncontr 0' expected, found {line!r}")
            nprim, ncontr = ints[:2]
            if (nprim == 0) != (ncontr == 0):
                raise lines.error(n, f"block line {line!r}: primitives without contractions or the reverse")
            exps, rows = [], []
            for _ in range(nprim):
                m, row = lines.next(f"a primitive of the l = {l} block on line {n}")
                values = [read_float(v, m, lines) for v in row.split()]
                while len(values) < 1 + ncontr:
                    m, row = lines.next(f"the rest of the primitive row of the l = {l} block on line {n}")
                    values += [read_float(v, m, lines) for v in row.split()]
                if len(values) != 1 + ncontr:
                    raise lines.error(m, f"{1 + ncontr} numbers expected (exponent, coefficients), found {len(values)}")
                exps.append(values[0])
                rows.append(values[1:])
                last = m
            shells.extend(split_general(l, exps, rows, n, lines))
            last = max(last, n)
            l += 1
        if l == 0:
            raise lines.error(n0, f"entry of {symbol} has no blocks")
        records.append((symbol, shells, (n0 - 1, last), n0))
    return parsed_elements(records, lines), lines


def read(text: str) -> Basis:
    """The basis of a Dalton basis-set library text (strict: every problem names its line)."""
    elements, lines = parse(text)
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """``text`` with our elements' entries added (at the end) or put in place of the text's own."""
    elements, lines = parse(text)
    return merge_lines(text, elements, lines.last_line, basis, element_lines)
