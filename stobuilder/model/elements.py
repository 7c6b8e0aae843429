"""Element symbols, atomic numbers and electron configurations.

Ground-state configurations of the neutral atoms H–Rn follow the Madelung (n + l, then n) order
with the measured exceptions listed in ``_EXCEPTIONS``; source: NIST Atomic Spectra Database,
ground levels of the neutral atoms (values from memory, checked against the common textbook
tables). Cations lose electrons from the highest n first (within one n, the highest l first), so
that Fe²⁺ is [Ar] 3d6; anions gain electrons in Madelung order.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ase.data import atomic_numbers, chemical_symbols

from stobuilder.core import arguments
from stobuilder.core.errors import InputError

L_LETTERS = "spdfghi"
MAX_Z = 86  # Rn: the configurations, Slater's rules and the checks cover H–Rn.

# Madelung order of the subshells up to 7p, as (n, l).
MADELUNG = tuple(
    sorted(((n, l) for n in range(1, 8) for l in range(0, min(n, 4))), key=lambda nl: (sum(nl), nl[0]))
)

NOBLE_GASES = {"He": 2, "Ne": 10, "Ar": 18, "Kr": 36, "Xe": 54, "Rn": 86}

# Measured ground states that differ from Madelung filling (NIST ASD; value from memory).
_EXCEPTIONS = {
    "Cr": "[Ar] 3d5 4s1",
    "Cu": "[Ar] 3d10 4s1",
    "Nb": "[Kr] 4d4 5s1",
    "Mo": "[Kr] 4d5 5s1",
    "Ru": "[Kr] 4d7 5s1",
    "Rh": "[Kr] 4d8 5s1",
    "Pd": "[Kr] 4d10",
    "Ag": "[Kr] 4d10 5s1",
    "La": "[Xe] 5d1 6s2",
    "Ce": "[Xe] 4f1 5d1 6s2",
    "Gd": "[Xe] 4f7 5d1 6s2",
    "Pt": "[Xe] 4f14 5d9 6s1",
    "Au": "[Xe] 4f14 5d10 6s1",
}


# The order in which the open-shell electrons of a subshell take the real spherical harmonics
# (PySCF's m convention, p: x, y, z = m 1, −1, 0): m = 1, −1, 2, −2, …, 0. Every SCF of a free atom
# (exact STO and Gaussian alike) uses it, so both compute the same high-spin determinant.
M_FILL_ORDER = {l: tuple([x for m in range(1, l + 1) for x in (m, -m)] + [0]) for l in range(4)}


def capacity(l: int) -> int:
    """Number of electrons a subshell of angular momentum ``l`` holds: 2(2l + 1)."""
    return 2 * (2 * l + 1)


def subshell_label(n: int, l: int) -> str:
    """The trade's label of a subshell, e.g. (3, 2) → "3d"."""
    return f"{n}{L_LETTERS[l]}"


def parse_subshell_label(label: str) -> tuple[int, int]:
    """ "3d" → (3, 2); raises InputError for anything that is not a subshell label."""
    m = re.fullmatch(r"([1-9])([spdfg])", label.strip())
    if not m:
        raise InputError(f"{label!r} is not a subshell label such as 1s, 2p or 3d")
    n, l = int(m.group(1)), L_LETTERS.index(m.group(2))
    if l >= n:
        raise InputError(f"subshell {label!r} does not exist: l must be smaller than n")
    return n, l


def normalise_symbol(symbol: str) -> str:
    """Return the element symbol with standard capitalisation, or raise InputError."""
    text = symbol.strip()
    if not text:
        raise InputError("empty element symbol")
    canon = text[0].upper() + text[1:].lower()
    if canon not in atomic_numbers or canon == "X":
        raise InputError(f"unknown element symbol {symbol!r}")
    return canon


def atomic_number(symbol: str) -> int:
    """Atomic number Z of an element symbol (case-insensitive)."""
    return atomic_numbers[normalise_symbol(symbol)]


def element_symbol(z: int) -> str:
    """Element symbol of atomic number ``z`` (1–118)."""
    if not 1 <= z < len(chemical_symbols):
        raise InputError(f"no element has atomic number {z}")
    return chemical_symbols[z]


@dataclass(frozen=True, order=True)
class Subshell:
    """One occupied (or, in a basis, virtual) subshell n l with its electron count."""

    n: int
    l: int
    occupation: int

    @property
    def label(self) -> str:
        return subshell_label(self.n, self.l)


@dataclass(frozen=True)
class Configuration:
    """The electron configuration of one atom or atomic ion.

    ``subshells`` is sorted by (n, l) and holds only occupied subshells.
    """

    symbol: str
    z: int
    subshells: tuple[Subshell, ...]

    @property
    def electrons(self) -> int:
        return sum(s.occupation for s in self.subshells)

    @property
    def charge(self) -> int:
        return self.z - self.electrons

    @property
    def unpaired(self) -> int:
        """Unpaired electrons of the high-spin (Hund) state: Σ min(q, capacity − q)."""
        return sum(min(s.occupation, capacity(s.l) - s.occupation) for s in self.subshells)

    def occupation(self, n: int, l: int) -> int:
        for s in self.subshells:
            if (s.n, s.l) == (n, l):
                return s.occupation
        return 0

    @property
    def label(self) -> str:
        """Configuration text with the largest noble-gas core abbreviated, e.g. "[Ar] 3d6 4s2"."""
        parts = []
        remaining = list(self.subshells)
        for gas in ("Rn", "Xe", "Kr", "Ar", "Ne", "He"):
            core = _madelung_fill(NOBLE_GASES[gas])
            if len(core) < len(remaining) and all(self.occupation(n, l) == q for (n, l), q in core.items()):
                parts.append(f"[{gas}]")
                remaining = [s for s in remaining if (s.n, s.l) not in core]
                break
        parts += [f"{s.label}{s.occupation}" for s in remaining]
        return " ".join(parts)

    def __str__(self) -> str:
        return self.label


def _madelung_fill(electrons: int) -> dict[tuple[int, int], int]:
    occ: dict[tuple[int, int], int] = {}
    left = electrons
    for n, l in MADELUNG:
        if left <= 0:
            break
        q = min(left, capacity(l))
        occ[(n, l)] = q
        left -= q
    return occ


def _make(symbol: str, z: int, occ: dict[tuple[int, int], int]) -> Configuration:
    subshells = tuple(sorted(Subshell(n, l, q) for (n, l), q in occ.items() if q > 0))
    return Configuration(symbol=symbol, z=z, subshells=subshells)


def _neutral_occupations(symbol: str, z: int) -> dict[tuple[int, int], int]:
    if symbol in _EXCEPTIONS:
        return {(s.n, s.l): s.occupation for s in parse_configuration(_EXCEPTIONS[symbol], symbol).subshells}
    return _madelung_fill(z)


def ground_state(element: str, charge: int = 0) -> Configuration:
    """Ground-state configuration of a neutral atom or of an ion of charge ``charge``.

    Raises InputError for elements beyond Rn, fractional charges or charges that leave no
    electrons; TypeError for an element that is not a str or a charge that is not a number.
    """
    symbol = normalise_symbol(arguments.text(element, "element"))
    charge = arguments.whole_number(charge, "charge")
    z = atomic_numbers[symbol]
    if z > MAX_Z:
        raise InputError(f"element {symbol} (Z = {z}) is beyond Rn; configurations cover H–Rn")
    electrons = z - int(charge)
    if electrons < 1:
        raise InputError(f"{symbol} with charge {charge:+d} has no electrons left")
    if electrons > z + 8:
        raise InputError(f"{symbol} with charge {charge:+d} is not a plausible atomic anion")
    occ = dict(_neutral_occupations(symbol, z))
    for _ in range(z - electrons):  # cations: highest n first, then highest l
        n, l = max((nl for nl, q in occ.items() if q > 0))
        occ[(n, l)] -= 1
    for _ in range(electrons - z):  # anions: Madelung order
        n, l = next(nl for nl in MADELUNG if occ.get(nl, 0) < capacity(nl[1]))
        occ[(n, l)] = occ.get((n, l), 0) + 1
    return _make(symbol, z, occ)


_TOKEN = re.compile(r"\[([A-Z][a-z]?)\]|([1-9])([spdfg])(\d+)")


def parse_configuration(text: str, element: str | None = None) -> Configuration:
    """Parse a configuration such as "[Ar] 3d7 4s1", "1s2 2s2 2p3" or "Fe: [Ar] 3d7".

    The element is ``element`` if given, else the symbol before a colon, else the neutral atom
    with as many electrons as the configuration holds.
    """
    raw = arguments.text(text, "configuration").strip()
    if element is not None:
        arguments.text(element, "element")
    if ":" in raw:
        head, raw = raw.split(":", 1)
        element = element or head
    body = raw.replace(",", " ")
    occ: dict[tuple[int, int], int] = {}
    pos = 0
    for m in _TOKEN.finditer(body):
        if body[pos:m.start()].strip():
            raise InputError(f"configuration {text!r}: cannot read {body[pos:m.start()].strip()!r}")
        pos = m.end()
        if m.group(1):
            gas = m.group(1)
            if gas not in NOBLE_GASES:
                raise InputError(f"configuration {text!r}: [{gas}] is not a noble-gas core")
            for nl, q in _madelung_fill(NOBLE_GASES[gas]).items():
                occ[nl] = occ.get(nl, 0) + q
            continue
        n, l, q = int(m.group(2)), L_LETTERS.index(m.group(3)), int(m.group(4))
        label = subshell_label(n, l)
        if l >= n:
            raise InputError(f"configuration {text!r}: subshell {label} does not exist")
        if l > 3:
            raise InputError(f"configuration {text!r}: {label}: only s, p, d and f subshells are supported")
        occ[(n, l)] = occ.get((n, l), 0) + q
    if body[pos:].strip():
        raise InputError(f"configuration {text!r}: cannot read {body[pos:].strip()!r}")
    if not occ or sum(occ.values()) == 0:
        raise InputError(f"configuration {text!r} holds no electrons")
    for (n, l), q in occ.items():
        if q > capacity(l):
            raise InputError(
                f"configuration {text!r}: {subshell_label(n, l)}{q} exceeds the {capacity(l)} electrons it holds"
            )
    if element is None:
        z = sum(occ.values())
        if z > MAX_Z:
            raise InputError(f"configuration {text!r}: {z} electrons, beyond Rn; name the element as 'Sym: ...'")
        symbol = element_symbol(z)
    else:
        symbol = normalise_symbol(element)
        z = atomic_numbers[symbol]
        if z > MAX_Z:
            raise InputError(f"element {symbol} (Z = {z}) is beyond Rn; configurations cover H–Rn")
    return _make(symbol, z, occ)


def looks_like_configuration(text: str) -> bool:
    """True where ``text`` is a configuration string rather than a bare element symbol."""
    return bool(re.search(r"\[|\d[spdfg]\d", text))


def resolve(element: str, charge: int = 0, configuration: str | Configuration | None = None) -> Configuration:
    """The configuration meant by an element symbol, a configuration string, or both."""
    charge = arguments.whole_number(charge, "charge")
    if isinstance(configuration, Configuration):
        return configuration
    if configuration is not None:
        conf = parse_configuration(configuration, element)
    elif looks_like_configuration(arguments.text(element, "element")):
        conf = parse_configuration(element)
    else:
        return ground_state(element, charge)
    if charge and conf.charge != charge:
        raise InputError(
            f"configuration {conf.label!r} of {conf.symbol} has charge {conf.charge:+d}, not {charge:+d}"
        )
    if conf.electrons > conf.z + 8:
        raise InputError(f"configuration {conf.label!r} of {conf.symbol} is not a plausible atomic anion")
    return conf
