"""CP2K basis-set file: per element a name line, the number of sets, and one block per set.

Layout relied on (CP2K manual, the BASIS_SET_FILE_NAME format of the distributed basis files):
``#`` starts a comment; an element's entry opens with ``Symbol  NAME`` (further names are aliases);
the next line is the number of sets; each set is a line ``n  lmin  lmax  nexp  nc(lmin) …
nc(lmax)`` (n the principal quantum number, nc(l) the contractions of each l) followed by nexp
rows ``exponent  c(lmin,1) … c(lmax,nc)``. A set with lmin = 0, lmax = 1 and one contraction of
each is CP2K's sp shell. CP2K always works with spherical functions, so nothing is marked. An
entry has no terminator: it ends with its last set.

Every entry opens with the comment line ``common.separator_line`` (``# BASIS SET for ...``): CP2K
skips it as a comment, and PySCF's file loader (``gto.M(basis=path)``,
``gto.basis.load(path, symbol)``, ``parse_cp2k.load``) needs it to find each element of a
multi-element file. CP2K defines no file extension; ours is ``.cp2k.basis``.
"""

from __future__ import annotations

import re

from stobuilder.model.basis import Basis, ElementBasis
from stobuilder.model.elements import parse_subshell_label
from stobuilder.formats.common import Lines, ParsedElement, file_basis, make_shell, merge_lines, no_repeats, number, provenance_lines, read_float, read_int, read_symbol, separator_line, separator_start, shell_blocks

NAME = "cp2k"
EXTENSION = ".cp2k.basis"
DESCRIPTION = "CP2K basis-set file (BASIS_SET_FILE_NAME), one entry per element"


def basis_name(basis: Basis) -> str:
    """The entry name: the basis name with anything but letters, digits, '-' and '_' as '-', and
    the words END and GTH (whose lines PySCF's CP2K loader drops or ends a block at,
    pyscf/gto/basis/parse_cp2k.py, PySCF 2.14) as End and Gth: a rule's name may come from an input."""
    name = re.sub(r"[^A-Za-z0-9_-]+", "-", basis.name).strip("-")
    return re.sub(r"END|GTH", lambda m: m.group().capitalize(), name)


def _n(shell) -> int:
    return parse_subshell_label(shell.label)[0] if shell.label else shell.l + 1


def element_lines(element: ElementBasis, name: str, sp_shells: bool = False, rule: str = "file") -> list[str]:
    """One element's entry, after its separator comment line."""
    blocks = shell_blocks(element, sp_shells)
    lines = [separator_line(element, rule), f"{element.symbol}  {name}", f"  {len(blocks)}"]
    for _, shells in blocks:
        lmin, lmax = shells[0].l, shells[-1].l
        counts = " ".join("1" for _ in shells)
        lines.append(f"  {_n(shells[0])}  {lmin}  {lmax}  {len(shells[0].exponents)}  {counts}")
        for k, a in enumerate(shells[0].exponents):
            lines.append("  " + "  ".join(number(x) for x in (a, *(s.coefficients[k] for s in shells))))
    return lines


def write(basis: Basis, sp_shells: bool = False) -> str:
    lines = [f"# {line}" for line in provenance_lines(basis)]
    for element in basis.elements:
        lines.extend(element_lines(element, basis_name(basis), sp_shells, basis.rule))
    return "\n".join(lines) + "\n"


def parse(text: str) -> tuple[list[tuple], Lines]:
    """Every entry of the text: (symbol, name, shells, 0-based line span, first line)."""
    lines = Lines(text, NAME, comment="#")
    raw = text.splitlines()
    records = []
    while lines.peek() is not None:
        n0, line = lines.next("an element line 'Symbol NAME'")
        tokens = line.split()
        if len(tokens) < 2:
            raise lines.error(n0, f"element line 'Symbol NAME' expected, found {line!r}")
        symbol = read_symbol(tokens[0], n0, lines)
        n, line = lines.next(f"the number of sets of {symbol}")
        if len(line.split()) != 1:
            raise lines.error(n, f"the number of sets of {symbol} expected alone on the line, found {line!r}")
        nsets = read_int(line, n, lines, "number of sets", minimum=1)
        shells = []
        last = n
        for _ in range(nsets):
            n, line = lines.next(f"a set line 'n lmin lmax nexp nc...' of {symbol}")
            ints = [read_int(v, n, lines, "set field") for v in line.split()]
            if len(ints) < 5:
                raise lines.error(n, f"set line 'n lmin lmax nexp nc...' expected, found {line!r}")
            _, lmin, lmax, nexp = ints[:4]
            counts = ints[4:]
            if lmax < lmin or len(counts) != lmax - lmin + 1 or nexp < 1:
                raise lines.error(n, f"set line {line!r}: needs lmin <= lmax, nexp >= 1 and one count per l")
            rows = []
            for _ in range(nexp):
                m, row = lines.next(f"a primitive of the set on line {n}")
                values = [read_float(v, m, lines) for v in row.split()]
                if len(values) != 1 + sum(counts):
                    raise lines.error(m, f"{1 + sum(counts)} numbers expected (exponent, coefficients), found {len(values)}")
                rows.append(values)
                last = m
            exps = [r[0] for r in rows]
            col = 1
            for l, count in zip(range(lmin, lmax + 1), counts):
                for _ in range(count):
                    shells.append(make_shell(l, exps, [r[col] for r in rows], n, lines))
                    col += 1
        records.append((symbol, tokens[1], shells, (separator_start(raw, n0 - 1), last), n0))
    return records, lines


def read(text: str) -> Basis:
    """The basis of a CP2K basis-set text with one entry per element (strict: every problem
    names its line)."""
    records, lines = parse(text)
    no_repeats([(s, sh, span, n) for s, _, sh, span, n in records], lines)
    return file_basis([ParsedElement(s, tuple(sh), (span,)) for s, _, sh, span, _ in records], lines)


def entries(text: str) -> dict[tuple[str, str], tuple]:
    """Every entry's shells by (symbol, upper-case name): CP2K files hold several sets per element."""
    records, lines = parse(text)
    out = {}
    for symbol, name, shells, _, n in records:
        if (symbol, name.upper()) in out:
            raise lines.error(n, f"entry {symbol} {name} appears a second time")
        out[(symbol, name.upper())] = tuple(shells)
    return out


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """``text`` with our entries added (at the end) or put in place of the entries of the same
    element and name; a file's other entries, including other names for our elements, stay."""
    records, lines = parse(text)
    name = basis_name(basis)
    ours = [
        ParsedElement(s, (), (span,)) for s, entry, _, span, _ in records if entry.upper() == name.upper() and s in basis
    ]
    return merge_lines(text, ours, lines.last_line, basis, lambda e: element_lines(e, name, sp_shells, basis.rule))
