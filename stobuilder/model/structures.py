"""Reading structure files through ASE: symbols, positions, periodicity, charge and spin.

Charge and spin come from the file where it carries them (extxyz comment-line keys ``charge`` and
``spin`` = 2S = number of unpaired electrons, or ``multiplicity`` = 2S + 1), and the caller's
values override them. Ghost/dummy atoms (ASE's symbol X) are skipped with a note.
"""

from __future__ import annotations

import decimal
import math
import numbers
import os
import re
import warnings
from dataclasses import dataclass

import numpy as np

from stobuilder.model.elements import MAX_Z, atomic_number
from stobuilder.core.errors import InputError

ANGSTROM_TO_BOHR = 1.0 / 0.52917721092  # CODATA 2010 bohr radius, as PySCF uses (pyscf.data.nist)


@dataclass(frozen=True)
class Structure:
    """One frame of a structure file.

    positions  Cartesian coordinates in ångström (as ASE gives them)
    charge     total charge in e
    spin       2S, the number of unpaired electrons (PySCF's ``mol.spin``)
    periodic   True where any cell direction is periodic
    """

    path: str
    frame: int
    symbols: tuple[str, ...]
    positions: tuple[tuple[float, float, float], ...]
    charge: int
    spin: int
    periodic: bool
    notes: tuple[str, ...] = ()

    @property
    def elements(self) -> tuple[str, ...]:
        """The distinct elements, sorted by atomic number."""
        return tuple(sorted(set(self.symbols), key=atomic_number))

    @property
    def electrons(self) -> int:
        return sum(atomic_number(s) for s in self.symbols) - self.charge

    @property
    def formula(self) -> str:
        counts: dict[str, int] = {}
        for s in self.symbols:
            counts[s] = counts.get(s, 0) + 1
        return "".join(f"{s}{counts[s] if counts[s] > 1 else ''}" for s in sorted(counts, key=_hill_key))


def _hill_key(symbol: str):
    return (0 if symbol == "C" else 1 if symbol == "H" else 2, symbol)


def _shown(value) -> str:
    """A value as the file gave it, for a message: strings quoted, numbers as numbers."""
    text = str(value)
    return " ".join(text.split())[:60]


INFO_KEYS = ("charge", "spin", "multiplicity")
_DELIMITERS = {'"': '"', "'": "'", "{": "}", "[": "]"}
_RAW_VALUE = re.compile(r"""(?:^|\s)(charge|spin|multiplicity)\s*=\s*("[^"]*"|'[^']*'|\{[^}]*\}|\[[^\]]*\]|[^\s"'{\[]\S*)""")


def _extxyz_properties(string: str, sep=None) -> dict:
    """ASE's extxyz comment-line parser, with the text of our keys kept as written: ASE turns
    ``charge=1e-400`` into 0.0 and ``2.0000000000000001`` into 2.0, so the exact check needs the
    text."""
    from ase.io.extxyz import key_val_str_to_dict

    info = key_val_str_to_dict(string, sep=sep)
    if sep is None:
        for match in _RAW_VALUE.finditer(string):
            if match.group(1) in info:
                info[match.group(1)] = match.group(2)
    return info


def _number_text(text: str, shown: str, where: str) -> int:
    """The whole number a text denotes exactly (decimal arithmetic: no rounding to a double)."""
    inner = text.strip()
    if len(inner) >= 2 and _DELIMITERS.get(inner[0]) == inner[-1]:
        inner = inner[1:-1].strip()
    try:
        value = decimal.Decimal(inner)
    except decimal.InvalidOperation:
        raise InputError(f"{where}: {shown} is not a number; a whole number is expected") from None
    if not value.is_finite():
        raise InputError(f"{where}: {shown} is not a finite number; a whole number is expected")
    if value.adjusted() > 30:  # far out of any range; int() of 1e999999999 would take a billion digits
        raise InputError(f"{where}: {shown} is out of range")
    if value != value.to_integral_value():
        raise InputError(f"{where}: {shown} is not a whole number")
    return int(value)


def _info_int(info: dict, key: str, where: str, low: int, high: int) -> int | None:
    """The whole number in the comment-line key ``key`` (extxyz ``charge``, ``spin``,
    ``multiplicity``), or None when the file has no such key. InputError naming the file and the
    key for a value that is not one finite whole number (nan, inf, 1e400, 1.5, 1e-400, T, a
    string, an array) or lies outside ``low`` … ``high``."""
    if key not in info:
        return None
    value = info[key]
    shown = f"{key}={_shown(value)}"
    if isinstance(value, (bool, np.bool_)):
        raise InputError(f"{where}: {shown} is not a number; a whole number is expected")
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, str):
        number = _number_text(value, shown, where)
    elif isinstance(value, numbers.Integral):
        number = int(value)
    elif isinstance(value, numbers.Real):
        x = float(value)
        if not math.isfinite(x):
            raise InputError(f"{where}: {shown} is not a finite number; a whole number is expected")
        if not x.is_integer():
            raise InputError(f"{where}: {shown} is not a whole number")
        number = int(x)
    else:
        raise InputError(f"{where}: {shown} is not a single number; a whole number is expected")
    if not low <= number <= high:
        raise InputError(f"{where}: {shown} is out of range; this structure allows {low} to {high}")
    return number


def default_spin(electrons: int) -> int:
    """The lowest spin an electron count allows: 0 for even, 1 for odd."""
    return electrons % 2


def atom_spin(symbol: str, charge: int, electrons: int) -> int:
    """The default 2S of a free atom or ion: its ground state's unpaired electrons (Hund's rule,
    the state ``stobuilder atom`` computes), or the lowest spin where no ground state is known."""
    from stobuilder.model.elements import ground_state

    try:
        return ground_state(symbol, charge).unpaired
    except InputError:
        return default_spin(electrons)


def validate_charge_spin(where: str, electrons: int, charge: int, spin: int) -> None:
    """Raise InputError unless ``electrons`` electrons can have 2S = ``spin``."""
    if electrons < 1:
        raise InputError(f"{where}: charge {charge:+d} leaves {electrons} electrons")
    if spin < 0:
        raise InputError(f"{where}: spin {spin} is negative (spin is 2S, the number of unpaired electrons)")
    if spin > electrons:
        raise InputError(f"{where}: spin {spin} exceeds the {electrons} electrons")
    if (electrons - spin) % 2:
        raise InputError(
            f"{where}: {electrons} electrons cannot have spin {spin} (2S must be {'odd' if electrons % 2 else 'even'})"
        )


def _reader_options(path: str, format: str | None) -> dict:
    """Extra keywords for ASE's reader: extxyz gets the parser that keeps our keys' text."""
    from ase.io.formats import filetype

    try:
        kind = format or filetype(path, read=True)
    except Exception:  # ASE's own read reports an unreadable file
        return {}
    return {"properties_parser": _extxyz_properties} if kind == "extxyz" else {}


def read_structures(
    path: str | os.PathLike,
    charge: int | None = None,
    spin: int | None = None,
    format: str | None = None,
) -> tuple[Structure, ...]:
    """Read every frame of a structure file that ASE reads.

    Raises InputError (naming the file) for a missing, empty or unreadable file, an unknown
    element, an element beyond Rn, or an impossible charge/spin combination.
    """
    import ase.io

    from stobuilder.core import arguments

    where = arguments.path(path, "path")
    charge = arguments.whole_number(charge, "charge", allow_none=True)
    spin = arguments.whole_number(spin, "spin", allow_none=True)
    if not os.path.exists(where):
        raise InputError(f"{where}: no such file")
    if os.path.isdir(where):
        raise InputError(f"{where}: is a folder, not a structure file")
    if not os.path.isfile(where):  # a FIFO or device: reading could block or never end
        raise InputError(f"{where}: not a regular file (a FIFO or a device?), not a structure file")
    if os.path.getsize(where) == 0:
        raise InputError(f"{where}: the file is empty")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            frames = ase.io.read(where, index=":", format=format, do_not_split_by_at_sign=True,  # a name with "@" is a name
                                   **_reader_options(where, format))
    except Exception as exc:  # ASE raises many types for unreadable input
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"{where}: not a structure file ASE can read ({reason})") from None
    if not isinstance(frames, list):
        frames = [frames]
    if not frames:
        raise InputError(f"{where}: the file holds no structure")
    out = []
    for index, atoms in enumerate(frames):
        label = where if len(frames) == 1 else f"{where} (frame {index})"
        out.append(structure_from_atoms(atoms, label, charge, spin, path=where, frame=index))
    return tuple(out)


def structure_from_atoms(
    atoms,
    label: str,
    charge: int | None = None,
    spin: int | None = None,
    path: str | None = None,
    frame: int = 0,
) -> Structure:
    """One ASE ``Atoms`` as a Structure: its symbols and positions (ghost atoms X skipped with a
    note), periodicity, and charge and 2S from ``charge``/``spin`` or else the Atoms' info keys
    ``charge``, ``spin``, ``multiplicity`` (a single atom's default spin by Hund's rule, else the
    lowest). InputError naming ``label`` for an unknown element, one beyond Rn, no atoms, or an
    impossible charge/spin. ``path`` (default ``label``) and ``frame`` are recorded as given."""
    symbols, positions, notes = [], [], []
    ghosts = 0
    for symbol, position in zip(atoms.get_chemical_symbols(), atoms.get_positions()):
        if symbol == "X":
            ghosts += 1
            continue
        try:
            z = atomic_number(symbol)
        except InputError:
            raise InputError(f"{label}: unknown element symbol {symbol!r}") from None
        if z > MAX_Z:
            raise InputError(f"{label}: element {symbol} (Z = {z}) is beyond Rn, which stobuilder covers")
        symbols.append(symbol)
        positions.append(tuple(float(x) for x in position))
    if ghosts:
        notes.append(f"skipped {ghosts} ghost/dummy atom(s) (symbol X)")
    if not symbols:
        raise InputError(f"{label}: no atoms (after skipping ghost atoms)")
    info = dict(atoms.info)
    nuclear = sum(atomic_number(x) for x in symbols)
    # a file's charge leaves 1 … 2Z electrons (no bound system holds more than twice its
    # nuclear charge in electrons: common practice, no source)
    q = charge if charge is not None else _info_int(info, "charge", label, -nuclear, nuclear - 1)
    q = int(q or 0)
    if nuclear - q < 1:
        validate_charge_spin(label, nuclear - q, q, 0)  # names the charge
    s, origin = spin, ""
    if s is None:
        s = _info_int(info, "spin", label, 0, max(nuclear - q, 0))
        mult = _info_int(info, "multiplicity", label, 1, max(nuclear - q, 0) + 1)
        if s is not None and mult is not None and mult != s + 1:
            raise InputError(
                f"{label}: spin={s} and multiplicity={mult} contradict each other (multiplicity is 2S + 1 = "
                f"spin + 1); give one of them"
            )
        if s is not None:
            origin = f" (the file's spin={s})"
        elif mult is not None:
            s, origin = mult - 1, f" (the file's multiplicity={mult})"
    electrons = nuclear - q
    s = (atom_spin(symbols[0], q, electrons) if len(symbols) == 1 else default_spin(electrons)) if s is None else int(s)
    try:
        validate_charge_spin(label, electrons, q, s)
    except InputError as exc:
        raise InputError(f"{exc}{origin}") from None
    return Structure(
        path=label if path is None else path,
        frame=frame,
        symbols=tuple(symbols),
        positions=tuple(positions),
        charge=q,
        spin=s,
        periodic=bool(any(atoms.get_pbc())),
        notes=tuple(notes),
    )


def elements_of(structures: tuple[Structure, ...]) -> tuple[str, ...]:
    """The union of the elements of several frames, sorted by atomic number."""
    return tuple(sorted({s for st in structures for s in st.symbols}, key=atomic_number))


def check_geometry(structure: Structure, min_distance: float | None = None) -> None:
    """Raise InputError (naming the file and frame) unless every coordinate is finite and no two
    atoms are closer than ``min_distance`` ångström (default ``limits.MIN_DISTANCE_ANGSTROM``).
    Distances are those between the positions given (periodic images are not searched)."""
    import numpy as np
    from scipy.spatial import cKDTree

    from stobuilder.core.limits import MIN_DISTANCE_ANGSTROM

    limit = MIN_DISTANCE_ANGSTROM if min_distance is None else min_distance
    where = structure.path if structure.frame == 0 else f"{structure.path} (frame {structure.frame})"
    xyz = np.array(structure.positions, dtype=float).reshape(-1, 3)
    bad = np.flatnonzero(~np.isfinite(xyz).all(axis=1))
    if bad.size:
        i = int(bad[0])
        raise InputError(f"{where}: atom {i + 1} ({structure.symbols[i]}) has a coordinate that is not a finite number")
    if np.abs(xyz).max(initial=0.0) > 1e6:
        raise InputError(f"{where}: coordinates beyond 1e6 Å; check the file's units")
    if len(xyz) > 1:
        pairs = cKDTree(xyz).query_pairs(limit, output_type="ndarray")
        if len(pairs):
            i, j = sorted(int(k) for k in pairs[np.lexsort(pairs.T[::-1])][0])
            d = float(np.linalg.norm(xyz[i] - xyz[j]))
            raise InputError(
                f"{where}: atoms {i + 1} ({structure.symbols[i]}) and {j + 1} ({structure.symbols[j]}) are "
                f"{d:.3g} Å apart, closer than the {limit:g} Å stobuilder accepts"
            )
