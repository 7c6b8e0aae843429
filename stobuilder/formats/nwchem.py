"""NWChem basis input: a ``BASIS ... END`` block, one ``Symbol L`` header per shell.

Layout relied on (NWChem user manual, BASIS directive): ``#`` starts a comment; ``BASIS "ao basis"
SPHERICAL`` opens the block and marks spherical functions (CARTESIAN the other choice); each shell
is ``Symbol S|P|D|F|G|H|I|SP`` followed by rows ``exponent coefficient(s)`` (several coefficient
columns make a general contraction, one shell each; SP rows carry the s and the p coefficient);
``END`` closes the block. The reader takes one BASIS block and nothing after its END.

Every element opens with the comment line ``common.separator_line`` (``# BASIS SET for ...``):
NWChem skips it as a comment, and PySCF's file loader (``gto.M(basis=path)``,
``gto.basis.load(path, symbol)``) needs it to find each element of a multi-element file. A merge
replaces an element together with the separator lines right before it.
"""

from __future__ import annotations

from stobuilder.model.basis import Basis, ElementBasis
from stobuilder.formats.common import Lines, ParsedElement, collect, file_basis, make_shell, merge_lines, number, provenance_lines, separator_line, separator_start, read_float, read_letter, read_symbol, shell_blocks

NAME = "nwchem"
EXTENSION = ".nw"
DESCRIPTION = "NWChem BASIS block (also read by PySCF's parse_nwchem)"


def element_lines(element: ElementBasis, sp_shells: bool = False, rule: str = "file") -> list[str]:
    """One element's shells, after its separator comment line."""
    lines = [separator_line(element, rule)]
    for letter, shells in shell_blocks(element, sp_shells):
        lines.append(f"{element.symbol} {letter}")
        for k, a in enumerate(shells[0].exponents):
            lines.append("  " + "  ".join(number(x) for x in (a, *(s.coefficients[k] for s in shells))))
    return lines


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"# {line}" for line in provenance_lines(basis)]
    lines.append('BASIS "ao basis" SPHERICAL')
    for element in basis.elements:
        lines.extend(element_lines(element, sp_shells, basis.rule))
    lines.append("END")
    return "\n".join(lines) + "\n"


def parse(text: str) -> tuple[list[ParsedElement], int, Lines]:
    """The elements of the text's BASIS block with the line spans of their shells, and the 0-based
    line of its END."""
    lines = Lines(text, NAME, comment="#")
    n, line = lines.next("the BASIS line that opens the block")
    if line.split()[0].upper() != "BASIS":
        raise lines.error(n, f"a BASIS line expected first, found {line!r}")
    records = []
    raw = text.splitlines()
    seen = set()
    while True:
        n, line = lines.next("a shell header or the END that closes the BASIS block")
        tokens = line.split()
        if tokens[0].upper() == "END" and len(tokens) == 1:
            end = n - 1
            break
        if len(tokens) != 2:
            raise lines.error(n, f"shell header 'Symbol L' expected, found {line!r}")
        symbol = read_symbol(tokens[0], n, lines)
        ls = read_letter(tokens[1], n, lines)
        rows = []
        last = n
        while (item := lines.peek()) is not None and not item[1][0].isalpha():
            m, row = lines.next("a primitive")
            rows.append((m, [read_float(v, m, lines) for v in row.split()]))
            last = m
        if not rows:
            raise lines.error(n, f"shell {tokens[1]} of {symbol} has no primitives")
        width = len(rows[0][1])
        for m, values in rows:
            if len(values) != width or width < 2 or (ls == (0, 1) and width != 3):
                raise lines.error(m, f"row of {width if width >= 2 else 'exponent and'} numbers expected, found {len(values)}")
        exps = [v[0] for _, v in rows]
        columns = [[v[j] for _, v in rows] for j in range(1, width)]
        if ls == (0, 1):
            shells = [make_shell(l, exps, c, n, lines) for l, c in zip(ls, columns)]
        else:
            shells = [make_shell(ls[0], exps, c, n, lines) for c in columns]
        start = n - 1 if symbol in seen else separator_start(raw, n - 1)
        seen.add(symbol)
        records.append((symbol, shells, (start, last), n))
    if (item := lines.peek()) is not None:
        raise lines.error(item[0], f"text after the END of the BASIS block: {item[1]!r}")
    return collect(records), end, lines


def read(text: str) -> Basis:
    """The basis of an NWChem BASIS block (strict: every problem names its line)."""
    elements, _, lines = parse(text)
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """``text`` with the shells of our elements in place of the text's own (other elements, comments
    and the BASIS line untouched); new elements go before END."""
    elements, end, _ = parse(text)
    return merge_lines(text, elements, end, basis, lambda e: element_lines(e, sp_shells, basis.rule))
