"""The main job as one function: structure files in, basis files (and checks) out.

The command line's ``build`` is a thin layer over ``build_structures``; pipelines call it directly.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

from .basis import Basis
from .build import build_basis
from .checks import Check, check_structure
from .errors import InputError
from .files import check_targets, create_bytes, replace_bytes, write_all
from .formats import formats, get_format, merge_basis
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
            "fit": {
                "norm": self.basis.norm,
                "gaussians": self.basis.gaussians,
                "error": {
                    e.symbol: {s.label: s.fit_error for s in e.shells if s.fit_error is not None}
                    for e in self.basis.elements
                },
            },
        }
        if len(self.checks) > 1:
            out["frame_checks"] = [c.to_json() for c in self.checks]
        return out


def basis_for(
    frames: Sequence[Structure], rule: str, gaussians: int, norm: str = "l2", zeta=None,
    exponents: str = "family", radial: str = "integer",
) -> Basis:
    """The basis for the union of the frames' elements. A structure of one atom is an atomic ion:
    its basis follows the ion's configuration; atoms in molecules and solids use neutral atoms."""
    elements = elements_of(tuple(frames))
    charge = None
    if len(elements) == 1 and all(len(f.symbols) == 1 for f in frames) and len({f.charge for f in frames}) == 1:
        charge = frames[0].charge
    return build_basis(
        elements, rule=rule, gaussians=gaussians, charge=charge, zeta=zeta, norm=norm, exponents=exponents, radial=radial
    )


def output_path(path: str, out_dir: str, code: str, symbol: str | None = None) -> str:
    """``<out_dir>/<structure stem><extension>``, or with ``symbol`` the per-element file
    ``<out_dir>/<structure stem>.<Symbol><extension>`` (water.O.nw)."""
    stem = os.path.splitext(os.path.basename(path))[0] or "structure"
    middle = f".{symbol}" if symbol else ""
    return os.path.join(out_dir, stem + middle + get_format(code).extension)


def expand_codes(codes: Sequence[str]) -> list[str]:
    """The format names, with "all" standing for every registered format; duplicates dropped."""
    out: list[str] = []
    for code in codes:
        out.extend(formats() if code == "all" else [get_format(code).name])
    return list(dict.fromkeys(out))


def format_for_path(path: str) -> str:
    """The format whose file extension ends ``path`` (the longest such extension wins)."""
    hits = sorted((f for f in formats().values() if path.endswith(f.extension)), key=lambda f: -len(f.extension))
    if not hits or (len(hits) > 1 and len(hits[0].extension) == len(hits[1].extension)):
        raise InputError(f"{path}: cannot tell the format from the file name; name it with --code")
    return hits[0].name


def union_basis(bases: Sequence[Basis]) -> Basis:
    """One basis with the elements of all ``bases``; an element must have the same shells in each."""
    elements = {}
    for basis in bases:
        for e in basis.elements:
            if e.symbol in elements and elements[e.symbol].shells != e.shells:
                raise InputError(f"the structures give {e.symbol} two different bases (an ion and a neutral atom?)")
            elements.setdefault(e.symbol, e)
    first = bases[0]
    return Basis(
        tuple(elements.values()), rule=first.rule, gaussians=first.gaussians, norm=first.norm, radial=first.radial
    )


def backup_path(path: str) -> str:
    """The first of ``path.bak``, ``path.bak2``, ``path.bak3`` … that does not exist (a dangling
    symbolic link counts as existing)."""
    candidate, k = path + ".bak", 1
    while os.path.lexists(candidate):
        k += 1
        candidate = f"{path}.bak{k}"
    return candidate


def _write_backup(path: str, data: bytes, mode: int) -> str:
    """A new backup file beside ``path`` holding ``data`` (permission bits ``mode``), never
    replacing an existing file, even one another process creates meanwhile."""
    while True:
        backup = backup_path(path)
        if create_bytes(backup, data, mode):
            return backup


def read_merge_target(path: str) -> tuple[str, bytes, str, int]:
    """The basis file that ``--merge-into path`` updates: (real path after symbolic links, its
    bytes, its text with line ends as \\n, its permission bits). InputError for a missing file,
    a folder, a FIFO or device (never opened: it could block), or bytes that are not UTF-8."""
    real = os.path.realpath(path)
    try:
        info = os.stat(real)
    except OSError as exc:
        raise InputError(f"{path}: cannot read the basis file ({exc.strerror})") from None
    if not stat.S_ISREG(info.st_mode):
        raise InputError(f"{path}: not a regular file")
    try:
        with open(real, "rb") as handle:
            data = handle.read()
    except OSError as exc:
        raise InputError(f"{path}: cannot read the basis file ({exc.strerror})") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"{path}: not a UTF-8 text file") from None
    if text.startswith("\ufeff"):
        text = text[1:]
    return real, data, text.replace("\r\n", "\n").replace("\r", "\n"), stat.S_IMODE(info.st_mode)


def merge_text(text: str, basis: Basis, code: str, sp_shells: bool = False, source: str = "text") -> str:
    """``merge_basis`` plus the proof that nothing was lost: the merged text reads back to the
    old text's other elements unchanged and to our elements as written alone."""
    fmt = get_format(code)
    try:
        before = fmt.entries_of(text)
        merged = merge_basis(text, basis, code, sp_shells)
        after = fmt.entries_of(merged)
    except InputError as exc:
        raise InputError(f"{source}: {exc}") from None
    expected = before | fmt.entries_of(fmt.write(basis, sp_shells=sp_shells))
    if after != expected:
        raise InputError(f"{source}: merging would change entries it should keep; nothing written")
    return merged


def merge_file(path: str, basis: Basis, code: str | None = None, sp_shells: bool = False) -> tuple[str, str]:
    """Add or replace the elements of ``basis`` in the basis file ``path`` (format ``code``, or
    told by the file name). Returns (path, backup path).

    The old bytes are first copied, byte for byte and with the file's permission bits, to a new
    backup beside ``path`` (``backup_path``: FILE.bak, FILE.bak2, …; an existing file is never
    replaced); then the merged text replaces the file atomically, through a temporary file in the
    file's own folder, with the file's permission bits and its line ends (CRLF stays CRLF). When
    ``path`` is a symbolic link, the file it points at is updated and the link stays a link. If
    the update fails, the backup is removed again and the file is as it was; errors are
    InputError naming ``path``.
    """
    code = code or format_for_path(path)
    real, data, text, mode = read_merge_target(path)
    merged = merge_text(text, basis, code, sp_shells, source=path)
    crlf = b"\r\n" in data and data.count(b"\n") == data.count(b"\r\n")
    out = (merged.replace("\n", "\r\n") if crlf else merged).encode("utf-8")
    if data.startswith(b"\xef\xbb\xbf"):
        out = b"\xef\xbb\xbf" + out
    try:
        backup = _write_backup(path, data, mode)
    except OSError as exc:
        raise InputError(f"{path}: cannot write the backup ({exc.strerror}); nothing changed") from None
    try:
        replace_bytes(real, out, mode)
    except BaseException as exc:
        try:
            os.unlink(backup)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise InputError(f"{path}: cannot replace the file ({exc.strerror}); nothing changed") from None
        raise
    return path, backup


def build_structures(
    paths: Sequence[str],
    rule: str = "slater",
    gaussians: int = 3,
    codes: Sequence[str] | None = None,
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
    split_elements: bool = False,
    merge_into: str | None = None,
    exponents: str = "family",
    radial: str = "integer",
) -> tuple[StructureReport, ...]:
    """Read every structure file, build its basis, write one file per structure and code, and
    (with ``check``) run the SCF checks. All inputs are read and every text is made before the
    first file is written; an existing file is kept unless ``force``.

    codes           format names (``formats()``), "all" for every one; default nwchem, or with
                    ``merge_into`` the format its file name tells
    split_elements  one file per structure, code and element: ``<stem>.<Symbol><extension>``
    merge_into      instead of new files, add or replace the elements of all structures in this
                    existing basis file of one format (backed up first, see ``merge_file``)
    norm, exponents, radial  expansion options, see ``stobuilder.build_basis``
    """
    if not paths:
        raise InputError("no structure files given")
    if merge_into is not None:
        if split_elements:
            raise InputError("--merge-into and --split-elements exclude each other")
        codes = expand_codes(codes) if codes else [format_for_path(merge_into)]
        if len(codes) != 1:
            raise InputError(f"--merge-into {merge_into}: give exactly one format, not {', '.join(codes)}")
        if not os.path.isfile(merge_into):
            raise InputError(f"--merge-into {merge_into}: no such file")
    codes = expand_codes(codes or ["nwchem"])
    fmts = [get_format(c) for c in codes]
    prepared = []
    contents: dict[str, str] = {}
    sources: dict[str, str] = {}
    for path in paths:
        frames = read_structures(path, charge=charge, spin=spin)
        basis = basis_for(frames, rule, gaussians, norm, _zeta_for(zeta, frames), exponents, radial)
        files = {}
        for fmt in fmts if merge_into is None else ():
            parts = [(e.symbol, replace(basis, elements=(e,))) for e in basis.elements]
            for symbol, part in parts if split_elements else [(None, basis)]:
                target = output_path(path, out_dir, fmt.name, symbol)
                if target in sources:
                    raise InputError(f"{path} and {sources[target]} would both write {target}")
                sources[target] = path
                contents[target] = fmt.write(part, sp_shells=sp_shells)
                files[fmt.name + (f":{symbol}" if symbol else "")] = target
        prepared.append((path, frames, basis, files))
    if zeta:
        named = {s for s in zeta}
        present = {s for _, frames, _, _ in prepared for f in frames for s in f.symbols}
        if named - present:
            raise InputError(f"--zeta names elements in no structure: {', '.join(sorted(named - present))}")
    if merge_into is not None:
        merged = union_basis([basis for _, _, basis, _ in prepared])
        code = codes[0]
        if write:
            target, backup = merge_file(merge_into, merged, code, sp_shells)
        else:
            with open(merge_into, encoding="utf-8") as handle:
                merge_text(handle.read(), merged, code, sp_shells, source=merge_into)
            target, backup = merge_into, None
        for _, _, _, files in prepared:
            files[code] = target
    elif write:
        check_targets(sources, force)
        write_all(contents, out_dir)
    reports = []
    for path, frames, basis, files in prepared:
        notes = tuple(n for f in frames for n in f.notes)
        if merge_into is not None and write:
            notes += (f"merged into {target}; its former text is in {backup}",)
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
