"""The main job as one function: structure files in, basis files (and checks) out.

The command line's ``build`` is a thin layer over ``build_structures``; pipelines call it directly.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from .basis import Basis
from .build import build_basis
from .checks import Check, check_structure
from .errors import InputError
from .files import check_targets, write_all
from .formats import get_format
from .structures import Structure, elements_of, read_structures

MAX_CHECK_FRAMES = 3


@dataclass(frozen=True)
class StructureReport:
    """What ``build_structures`` did for one structure file."""

    path: str
    frames: tuple[Structure, ...]
    basis: Basis
    files: Mapping[str, str]  # code → path written
    checks: tuple[Check, ...]
    notes: tuple[str, ...]

    @property
    def elements(self) -> tuple[str, ...]:
        return self.basis.symbols

    def to_json(self) -> dict:
        first = self.frames[0]
        out = {
            "path": self.path,
            "elements": list(self.elements),
            "charge": first.charge,
            "spin": first.spin,
            "frames": len(self.frames),
            "files": dict(self.files),
            "check": self.checks[0].to_json() if self.checks else None,
            "notes": list(self.notes),
        }
        if len(self.checks) > 1:
            out["frame_checks"] = [c.to_json() for c in self.checks]
        return out


def basis_for(frames: Sequence[Structure], rule: str, gaussians: int, norm: str = "l2", zeta=None) -> Basis:
    """The basis for the union of the frames' elements. A structure of one atom is an atomic ion:
    its basis follows the ion's configuration; atoms in molecules and solids use neutral atoms."""
    elements = elements_of(tuple(frames))
    charge = None
    if len(elements) == 1 and all(len(f.symbols) == 1 for f in frames) and len({f.charge for f in frames}) == 1:
        charge = frames[0].charge
    return build_basis(elements, rule=rule, gaussians=gaussians, charge=charge, zeta=zeta, norm=norm)


def output_path(path: str, out_dir: str, code: str) -> str:
    stem = os.path.splitext(os.path.basename(path))[0] or "structure"
    return os.path.join(out_dir, stem + get_format(code).extension)


def build_structures(
    paths: Sequence[str],
    rule: str = "slater",
    gaussians: int = 3,
    codes: Sequence[str] = ("nwchem",),
    out_dir: str = "basis",
    check: bool = False,
    force: bool = False,
    charge: int | None = None,
    spin: int | None = None,
    method: str = "auto",
    zeta: Mapping[str, Mapping[str, float]] | None = None,
    norm: str = "l2",
    sp_shells: bool = False,
    max_check_frames: int = MAX_CHECK_FRAMES,
    write: bool = True,
) -> tuple[StructureReport, ...]:
    """Read every structure file, build its basis, write one file per structure and code, and
    (with ``check``) run the SCF checks. All inputs are read and every text is made before the
    first file is written; an existing file is kept unless ``force``."""
    if not paths:
        raise InputError("no structure files given")
    codes = list(dict.fromkeys(codes))
    fmts = [get_format(c) for c in codes]
    prepared = []
    contents: dict[str, str] = {}
    sources: dict[str, str] = {}
    for path in paths:
        frames = read_structures(path, charge=charge, spin=spin)
        basis = basis_for(frames, rule, gaussians, norm, _zeta_for(zeta, frames))
        files = {}
        for fmt in fmts:
            target = output_path(path, out_dir, fmt.name)
            if target in sources:
                raise InputError(f"{path} and {sources[target]} would both write {target}")
            sources[target] = path
            contents[target] = fmt.write(basis, sp_shells=sp_shells)
            files[fmt.name] = target
        prepared.append((path, frames, basis, files))
    if zeta:
        named = {s for s in zeta}
        present = {s for _, frames, _, _ in prepared for f in frames for s in f.symbols}
        if named - present:
            raise InputError(f"--zeta names elements in no structure: {', '.join(sorted(named - present))}")
    if write:
        check_targets(sources, force)
        write_all(contents, out_dir)
    reports = []
    for path, frames, basis, files in prepared:
        notes = tuple(n for f in frames for n in f.notes)
        checks: tuple[Check, ...] = ()
        if check:
            checked = frames[:max_check_frames]
            checks = tuple(check_structure(f, basis, method=method) for f in checked)
            if len(frames) > len(checked):
                notes += (f"checked the first {len(checked)} of {len(frames)} frames",)
        reports.append(StructureReport(path, frames, basis, files, checks, notes))
    return tuple(reports)


def _zeta_for(zeta, frames):
    if not zeta:
        return None
    present = {s for f in frames for s in f.symbols}
    return {s: v for s, v in zeta.items() if s in present} or None
