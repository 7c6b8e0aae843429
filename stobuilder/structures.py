"""Reading structure files through ASE: symbols, positions, periodicity, charge and spin.

Charge and spin come from the file where it carries them (extxyz comment-line keys ``charge`` and
``spin`` = 2S = number of unpaired electrons, or ``multiplicity`` = 2S + 1), and the caller's
values override them. Ghost/dummy atoms (ASE's symbol X) are skipped with a note.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass

from .elements import MAX_Z, atomic_number
from .errors import InputError

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


def _info_int(info: dict, key: str, where: str) -> int | None:
    if key not in info:
        return None
    value = info[key]
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{where}: {key}={value!r} is not a number") from None
    if number != int(number):
        raise InputError(f"{where}: {key}={value!r} is not a whole number")
    return int(number)


def default_spin(electrons: int) -> int:
    """The lowest spin an electron count allows: 0 for even, 1 for odd."""
    return electrons % 2


def atom_spin(symbol: str, charge: int, electrons: int) -> int:
    """The default 2S of a free atom or ion: its ground state's unpaired electrons (Hund's rule,
    the state ``stobuilder atom`` computes), or the lowest spin where no ground state is known."""
    from .elements import ground_state

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

    where = os.fspath(path)
    if not os.path.exists(where):
        raise InputError(f"{where}: no such file")
    if os.path.isdir(where):
        raise InputError(f"{where}: is a folder, not a structure file")
    if os.path.getsize(where) == 0:
        raise InputError(f"{where}: the file is empty")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            frames = ase.io.read(where, index=":", format=format)
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
        q = charge if charge is not None else _info_int(info, "charge", label)
        q = int(q or 0)
        s = spin
        if s is None:
            s = _info_int(info, "spin", label)
        if s is None:
            mult = _info_int(info, "multiplicity", label)
            s = None if mult is None else mult - 1
        electrons = sum(atomic_number(x) for x in symbols) - q
        s = (atom_spin(symbols[0], q, electrons) if len(symbols) == 1 else default_spin(electrons)) if s is None else int(s)
        validate_charge_spin(label, electrons, q, s)
        out.append(
            Structure(
                path=where,
                frame=index,
                symbols=tuple(symbols),
                positions=tuple(positions),
                charge=q,
                spin=s,
                periodic=bool(any(atoms.get_pbc())),
                notes=tuple(notes),
            )
        )
    return tuple(out)


def elements_of(structures: tuple[Structure, ...]) -> tuple[str, ...]:
    """The union of the elements of several frames, sorted by atomic number."""
    return tuple(sorted({s for st in structures for s in st.symbols}, key=atomic_number))


def check_geometry(structure: Structure, min_distance: float | None = None) -> None:
    """Raise InputError (naming the file and frame) unless every coordinate is finite and no two
    atoms are closer than ``min_distance`` ångström (default ``limits.MIN_DISTANCE_ANGSTROM``).
    Distances are those between the positions given (periodic images are not searched)."""
    import numpy as np
    from scipy.spatial import cKDTree

    from .limits import MIN_DISTANCE_ANGSTROM

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
