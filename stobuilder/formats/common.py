"""Pieces the writers and readers share: the provenance header, sp-shell pairing, numbered lines
for the strict readers, general contractions (one block per l), and line-preserving merges."""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass

from stobuilder.core.version import __version__
from stobuilder.model.basis import L_LETTERS, Basis, ElementBasis, Shell
from stobuilder.model.elements import element_symbol, normalise_symbol
from stobuilder.core.errors import InputError
from stobuilder.core.limits import one_line

NORM_NAMES = {"l2": "least-squares (L2) fit, Hehre, Stewart & Pople 1969", "h1": "Sobolev H1 fit"}


# Words that PySCF's file loaders (pyscf/gto/basis/parse_nwchem.py, parse_gaussian.py,
# parse_cp2k.py, read for PySCF 2.14) take as a delimiter wherever they stand in a line, comments
# included: "END" before a line end and "# BASIS SET" (NWChem, CP2K), "****" (Gaussian, Psi4).
_LOADER_WORDS = re.compile(r"END|BASIS SET|\*\*\*\*")


def comment_text(text) -> str:
    """``text`` (which may come from an input) made safe inside a comment line of any of our
    formats: one line (``limits.one_line``), and the first character of every loader delimiter
    word (``_LOADER_WORDS``) written as its \\uNNNN escape, so that no reader finds a line end, a
    terminator or an element separator in it."""
    return _LOADER_WORDS.sub(lambda m: f"\\u{ord(m.group()[0]):04x}{m.group()[1:]}", one_line(text))


def provenance_lines(basis: Basis) -> list[str]:
    """Plain-text provenance, one fact a line, for a writer to put behind its comment marker.
    Text that may come from an input (the rule's name, a configuration, a note) cannot end the
    comment or read as a delimiter: every line goes through ``comment_text``."""
    lines = [
        f"{basis.name} basis written by stobuilder {__version__}",
        f"screening rule: {basis.rule}; Gaussians per STO: {basis.gaussians}; "
        f"fit: {NORM_NAMES.get(basis.norm, basis.norm)}",
        "units: bohr; coefficients refer to normalised primitives (normalised contractions)",
    ]
    for element in basis.elements:
        if element.stos:
            zetas = ", ".join(f"{s.label} {s.zeta:.6f}" for s in element.stos)
            lines.append(f"{element.symbol} [{element.configuration_label}]: zeta/bohr^-1 {zetas}")
    lines.extend(basis.notes)
    return [comment_text(line) for line in lines]


# PySCF's NWChem and CP2K file loaders (pyscf/gto/basis/parse_nwchem.py and parse_cp2k.py, read
# for PySCF 2.14) find one element of a multi-element file only after a comment line that begins
# "# BASIS SET" (their regular expression '# *BASIS SET.*\n'); without one they read the whole
# file as the element's shells, silently. Our NWChem and CP2K writers therefore open every element
# with such a line; the words after the prefix are ours.
SEPARATOR_PREFIX = "# BASIS SET"
_SEPARATOR = re.compile(r"\s*# *BASIS SET")


def separator_line(element: ElementBasis, rule: str) -> str:
    """The comment line in front of an element's block in the NWChem and CP2K files: the prefix
    PySCF's loaders split at, then the element, its configuration and the screening rule."""
    facts = [f"configuration {element.configuration_label}"] if element.configuration else []
    facts.append("shells as read from a file" if rule == "file" else f"screening rule {rule}")
    return f"{SEPARATOR_PREFIX} for {element.symbol}: {comment_text(', '.join(facts))}"


def separator_start(text_lines: list[str], start: int) -> int:
    """The 0-based line where an element's block begins once the separator comment lines right
    before its first line ``start`` are counted in (a merge replaces them with the block)."""
    while start > 0 and _SEPARATOR.match(text_lines[start - 1]):
        start -= 1
    return start


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


# ---------------------------------------------------------------------------- reading


class Lines:
    """The numbered non-empty lines of a basis text with comments removed, for the strict readers.

    ``comment`` is the set of markers that start a comment (to the end of the line); ``whole``
    the markers that make a comment only at the start of a line. Every error names the 1-based
    line number of the original text.
    """

    def __init__(self, text: str, code: str, comment: str = "", whole: str = ""):
        self.code = code
        self.text = text
        self.items: list[tuple[int, str]] = []
        for i, raw in enumerate(text.splitlines()):
            line = raw
            for marker in comment:
                line = line.split(marker, 1)[0]
            line = line.strip()
            if line and whole and line[0] in whole:
                continue
            if line:
                self.items.append((i + 1, line))
        self.pos = 0
        self.last_line = len(text.splitlines())

    def peek(self) -> tuple[int, str] | None:
        return self.items[self.pos] if self.pos < len(self.items) else None

    def next(self, what: str) -> tuple[int, str]:
        """The next line, or an InputError naming ``what`` was expected where the text ends."""
        item = self.peek()
        if item is None:
            raise self.error(self.last_line + 1, f"the text ends where {what} was expected (truncated file?)")
        self.pos += 1
        return item

    def error(self, line: int, problem: str) -> InputError:
        return InputError(f"{self.code} basis, line {line}: {problem}")


def read_float(token: str, line: int, lines: Lines, what: str = "number") -> float:
    """A finite float; Fortran's D exponent marker is accepted."""
    try:
        value = float(token.replace("D", "E").replace("d", "e"))
    except ValueError:
        raise lines.error(line, f"{what} expected, found {token!r}") from None
    if not math.isfinite(value):
        raise lines.error(line, f"{what} must be finite, found {token!r}")
    return value


def read_int(token: str, line: int, lines: Lines, what: str = "whole number", minimum: int = 0) -> int:
    try:
        value = int(token)
    except ValueError:
        raise lines.error(line, f"{what} expected, found {token!r}") from None
    if value < minimum:
        raise lines.error(line, f"{what} must be at least {minimum}, found {value}")
    return value


def read_symbol(token: str, line: int, lines: Lines) -> str:
    try:
        return normalise_symbol(token)
    except InputError:
        raise lines.error(line, f"unknown element symbol {token!r}") from None


def read_z(token: str, line: int, lines: Lines) -> str:
    """The element symbol of an atomic number given as text (an integer or a real such as 8.0)."""
    value = read_float(token, line, lines, "atomic number")
    if value != int(value) or not 1 <= value <= 118:
        raise lines.error(line, f"{token!r} is not the atomic number of an element")
    return element_symbol(int(value))


def read_letter(token: str, line: int, lines: Lines, sp: bool = True) -> tuple[int, ...]:
    """Angular momenta of a shell letter: S → (0,), SP → (0, 1)."""
    key = token.upper()
    if sp and key == "SP":
        return (0, 1)
    if len(key) == 1 and key in L_LETTERS:
        return (L_LETTERS.index(key),)
    raise lines.error(line, f"shell type (one of {', '.join(L_LETTERS)}{', SP' if sp else ''}) expected, found {token!r}")


def make_shell(l: int, exponents, coefficients, line: int, lines: Lines) -> Shell:
    if any(not a > 0 for a in exponents):
        raise lines.error(line, "exponents must be positive")
    return Shell(l, tuple(exponents), tuple(coefficients))


@dataclass(frozen=True)
class ParsedElement:
    """One element as read: its shells and the 0-based line ranges [start, stop) of its text."""

    symbol: str
    shells: tuple[Shell, ...]
    spans: tuple[tuple[int, int], ...]


def collect(records: list[tuple[str, list[Shell], tuple[int, int], int]]) -> list[ParsedElement]:
    """Group (symbol, shells, span, first line) records by element, in order of first appearance
    (NWChem gives every shell its own header; the other formats call ``no_repeats`` first)."""
    order: dict[str, list] = {}
    for symbol, shells, span, _ in records:
        entry = order.setdefault(symbol, [[], []])
        entry[0].extend(shells)
        entry[1].append(span)
    return [ParsedElement(s, tuple(v[0]), tuple(v[1])) for s, v in order.items()]


def no_repeats(records, lines: Lines) -> None:
    seen = {}
    for symbol, _, _, line in records:
        if symbol in seen:
            raise lines.error(line, f"element {symbol} appears a second time (first on line {seen[symbol]})")
        seen[symbol] = line


def parsed_elements(records, lines: Lines) -> list[ParsedElement]:
    """One ParsedElement per record (symbol, shells, (first, last) line span, line of the
    symbol), after ``no_repeats``: the common end of the line-based parsers."""
    no_repeats(records, lines)
    return [ParsedElement(s, tuple(sh), (span,)) for s, sh, span, _ in records]


def file_basis(elements: list[ParsedElement], lines: Lines) -> Basis:
    """A Basis with rule "file" from elements read from a text."""
    if not elements:
        raise lines.error(lines.last_line, "no element found in the text")
    out = []
    for e in elements:
        if not e.shells:
            raise lines.error(e.spans[0][0] + 1, f"element {e.symbol} has no shells")
        out.append(ElementBasis(e.symbol, e.shells))
    sizes = {len(s.exponents) for e in out for s in e.shells}
    return Basis(tuple(out), rule="file", gaussians=sizes.pop() if len(sizes) == 1 else 0, norm="file")


# ---------------------------------------------------------------------------- general contractions


def general_contractions(element: ElementBasis) -> list[tuple[int, tuple[float, ...], tuple[tuple[float, ...], ...]]]:
    """The shells of one element as one general contraction per l = 0 … lmax, for the codes that
    read a block per angular momentum (Dalton, OpenMolcas): (l, exponents, rows) where the
    exponents are the union of the shells' exponents, in descending order, and rows[k][j] is the
    coefficient of primitive k in the j-th shell of that l (0 where the shell lacks it). An l with
    no shell gives an empty block."""
    lmax = max(s.l for s in element.shells)
    out = []
    for l in range(lmax + 1):
        shells = [s for s in element.shells if s.l == l]
        exps = sorted({a for s in shells for a in s.exponents}, reverse=True)
        index = {a: k for k, a in enumerate(exps)}
        rows = [[0.0] * len(shells) for _ in exps]
        for j, s in enumerate(shells):
            for a, c in zip(s.exponents, s.coefficients):
                rows[index[a]][j] += c
        out.append((l, tuple(exps), tuple(tuple(r) for r in rows)))
    return out


def split_general(l: int, exps, rows, line: int, lines: Lines) -> list[Shell]:
    """Shells from one general contraction: each column, keeping the primitives whose coefficient
    is not zero."""
    ncontr = len(rows[0]) if rows else 0
    shells = []
    for j in range(ncontr):
        prims = [(a, r[j]) for a, r in zip(exps, rows) if r[j] != 0.0]
        if not prims:
            raise lines.error(line, f"contraction {j + 1} of l = {l} has no non-zero coefficient")
        shells.append(make_shell(l, [a for a, _ in prims], [c for _, c in prims], line, lines))
    return shells


# ---------------------------------------------------------------------------- merging


def merge_lines(
    text: str,
    elements: list[ParsedElement],
    insert_at: int,
    basis: Basis,
    block: Callable[[ElementBasis], list[str]],
    replace_block: Callable[[ElementBasis], list[str]] | None = None,
) -> str:
    """``text`` with the elements of ``basis`` added or replaced, every other line kept as it was.

    ``elements`` and ``insert_at`` come from the format's reader: each element's line spans, and
    the 0-based line before which new elements go. An element of ours already in the text takes
    the place of its first span (``replace_block``, default ``block``); its other spans go."""
    replace_block = replace_block or block
    old = text.splitlines()
    found = {e.symbol: e for e in elements}
    at: dict[int, list[str]] = {}
    drop: set[int] = set()
    for ours in basis.elements:
        e = found.get(ours.symbol)
        if e is None:
            at.setdefault(insert_at, []).extend(block(ours))
            continue
        for k, (start, stop) in enumerate(e.spans):
            drop.update(range(start, stop))
            if k == 0:
                at.setdefault(start, []).extend(replace_block(ours))
    out = []
    for i in range(len(old) + 1):
        out.extend(at.get(i, []))
        if i < len(old) and i not in drop:
            out.append(old[i])
    return "\n".join(out) + "\n"
