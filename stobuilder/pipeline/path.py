"""One path from a structure file to its basis, texts and checks, and the main job over it.

Every door (``build``, ``batch``'s workers, the Python API) walks the same path:

    structure file ──read_structures──▶ frames (geometry checked: finite, atoms ≥ 0.1 Å apart)
        ──basis_for(frames, options)──▶ Basis (ζ and every Gaussian exponent checked in range)
        ──prepare──▶ Prepared: the basis and every file text, named by stobuilder.pipeline.naming
        ──run_checks──▶ the SCF checks (with ``options.checks.run``)
        ──files.write_all──▶ every file of the job, or none

``build_structures`` prepares and checks every structure before the first file is written: a
bad input or a check that fails (an SCF that raises, a method the structure cannot take) writes
nothing. An SCF that does not converge is reported, not an error (the batch marks such an item
failed, and writes nothing for it either).
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace

from stobuilder.core import arguments
from stobuilder.model.basis import Basis
from stobuilder.builder.construct import basis_of
from stobuilder.builder.spec import ZetaTable
from stobuilder.checks.structure import Check
from stobuilder.core.errors import InputError
from stobuilder.core.files import check_targets, write_all
from stobuilder.core.limits import one_line
from stobuilder.formats import format_for_path, get_format, render_checked
from stobuilder.model.methods import pick_method
from stobuilder.pipeline.merge import merge_file, merge_text, read_merge_target, union_basis
from stobuilder.pipeline.naming import output_file, structure_name
from stobuilder.core.errors import OptionError
from stobuilder.pipeline.options import BuildOptions
from stobuilder.model.structures import Structure, check_geometry, elements_of, read_structures

__all__ = ["Prepared", "StructureReport", "basis_for", "build_structures", "check_electrons", "check_zeta_elements", "claim_target", "output_path",
           "prepare", "run_checks"]


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


@dataclass(frozen=True)
class Prepared:
    """A structure file on the path: its frames, basis and file texts (and, after ``run_checks``,
    its checks).

    texts   (key, file name relative to the output folder, text); key is the code, or
            "code:Symbol" for one file per element
    notes   the frames' notes, then what the checks add
    """

    path: str
    name: str
    frames: tuple[Structure, ...]
    basis: Basis
    texts: tuple[tuple[str, str, str], ...]
    notes: tuple[str, ...] = ()
    checks: tuple[Check, ...] = field(default=())

    @property
    def checked(self) -> tuple[Structure, ...]:
        return self.frames[: len(self.checks)] if self.checks else ()


def _single_atom_charge(frames: Sequence[Structure]) -> int | None:
    """A structure of one atom is an atomic ion: its charge, when every frame agrees; else None."""
    if all(len(f.symbols) == 1 for f in frames) and len({f.charge for f in frames}) == 1 and len(elements_of(tuple(frames))) == 1:
        return frames[0].charge
    return None


def basis_for(frames: Sequence[Structure], options: BuildOptions, zeta: ZetaTable | None = None) -> Basis:
    """The basis for the union of the frames' elements (``builder.basis_of``, memoised), with
    ``zeta`` (tune's trial ζ) on top of the options'. A structure of one atom is an atomic ion:
    its basis follows the ion's configuration; atoms in molecules and solids use neutral atoms."""
    elements = elements_of(tuple(frames))
    spec = options.spec_for(elements)
    if zeta:
        spec = spec.with_zeta(zeta.over(spec.zeta).restricted(elements))
    return basis_of(elements, spec, _single_atom_charge(frames))


def output_path(path: str, out_dir: str, code: str, symbol: str | None = None) -> str:
    """``<out_dir>/<structure name><extension>`` (``naming``), or with ``symbol`` the per-element
    file ``<out_dir>/<structure name>.<Symbol><extension>`` (water.O.nw)."""
    return os.path.join(out_dir, *output_file(structure_name(os.path.basename(path)), code, symbol).split("/"))


CACHE_LIMIT = 4096  # entries of a ``prepare`` cache before it is emptied


def prepare(
    path: str,
    options: BuildOptions,
    name: str | None = None,
    split_elements: bool = False,
    cache: dict | None = None,
) -> Prepared:
    """Read one structure file, check its geometry and electron counts, build its basis and make
    every file text. Writes nothing; raises InputError (naming ``path``) for any bad input.

    name   the output name (``naming``); default the file's own name without extension
    cache  a dict kept between calls (a batch worker's): one text per content key (the basis
           itself comes from ``builder.basis_of``, the one basis cache)
    """
    if not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    frames = read_structures(path, charge=options.checks.charge, spin=options.checks.spin)
    for frame in frames:
        check_geometry(frame)
    elements = elements_of(tuple(frames))
    try:
        basis = basis_for(frames, options)
    except InputError as exc:
        raise InputError(_named(os.fspath(path), str(exc))) from None
    if options.checks.run:
        for frame in frames[: options.checks.max_frames]:
            check_electrons(frame, basis, options.checks.method, checks=True)
    name = name or structure_name(os.path.basename(path))
    key = (elements, options.spec_for(elements), _single_atom_charge(frames))
    if cache is not None and len(cache) >= CACHE_LIMIT:
        cache.clear()
    texts = []
    for code in options.output.codes:
        fmt = get_format(code)
        parts = [(e.symbol, replace(basis, elements=(e,))) for e in basis.elements] if split_elements else [(None, basis)]
        for symbol, part in parts:
            text_key = (key, fmt.name, options.output.sp_shells, symbol)
            text = cache.get(text_key) if cache is not None else None
            if text is None:
                text = render_checked(part, fmt.name, options.output.sp_shells, source=os.fspath(path))
                if cache is not None:
                    cache[text_key] = text
            texts.append((fmt.name + (f":{symbol}" if symbol else ""), output_file(name, fmt.name, symbol), text))
    notes = tuple(n for f in frames for n in f.notes)
    return Prepared(path, name, frames, basis, tuple(texts), notes)


def _where(frame: Structure) -> str:
    return frame.path if frame.frame == 0 else f"{frame.path} (frame {frame.frame})"


def check_electrons(frame: Structure, basis: Basis, method: str, checks: bool = False) -> None:
    """Before any SCF: the method suits the structure, the basis has room for its electrons
    (α ≤ functions, β ≤ functions), and the SCF fits in memory (``scf.check_scf_size``).
    Periodic structures are checked on free atoms instead; so, with ``checks`` (the path of
    ``run_checks``), is a structure of more than ``checks.MAX_BASIS_FUNCTIONS`` functions."""
    from stobuilder.checks.structure import MAX_BASIS_FUNCTIONS
    from stobuilder.model.methods import free_atom_method
    from stobuilder.scf.size import check_scf_size

    def functions_of(symbols) -> int:
        return sum(2 * s.l + 1 for symbol in symbols for s in basis[symbol].shells)

    functions = functions_of(frame.symbols)
    if frame.periodic or (checks and functions > MAX_BASIS_FUNCTIONS):
        for symbol in frame.elements:  # the free atoms the checks compute instead (high spin: ROHF or UHF)
            check_scf_size(functions_of([symbol]), free_atom_method(method, 1)[0], f"{_where(frame)}: free atom {symbol}")
        if frame.periodic:
            return
    try:
        m = pick_method(method, frame.spin)
    except InputError as exc:
        raise InputError(f"{_where(frame)}: {exc}") from None
    alpha = (frame.electrons + frame.spin) // 2
    if alpha > functions:
        raise InputError(
            f"{_where(frame)}: {frame.electrons} electrons (spin {frame.spin}) do not fit in the {functions} "
            f"basis functions of the minimal basis (charge {frame.charge:+d}); no SCF can hold them"
        )
    if not (checks and functions > MAX_BASIS_FUNCTIONS):
        check_scf_size(functions, m, _where(frame))


def run_checks(prepared: Prepared, options: BuildOptions, threads: int | None = None) -> Prepared:
    """The SCF checks of the first ``options.checks.max_frames`` frames (PySCF's OpenMP threads
    limited to ``threads`` when given). An SCF that raises is an InputError naming the file."""
    from stobuilder.checks.structure import check_structure  # looked up at call time (tests replace it)

    frames = prepared.frames
    checked = frames[: options.checks.max_frames]
    try:
        if threads is None:
            checks = tuple(check_structure(f, prepared.basis, method=options.checks.method) for f in checked)
        else:
            from pyscf import lib

            with lib.with_omp_threads(threads):
                checks = tuple(check_structure(f, prepared.basis, method=options.checks.method) for f in checked)
    except InputError as exc:
        raise InputError(_named(prepared.path, str(exc))) from None
    except Exception as exc:  # an SCF that fails numerically (LinAlgError, overflow, ...)
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(f"{prepared.path}: the SCF check failed ({type(exc).__name__}: {reason})") from None
    notes = prepared.notes + tuple(dict.fromkeys(n for c in checks for n in c.notes))
    if len(frames) > len(checked):
        notes += (f"checked the first {len(checked)} of {len(frames)} frames",)
    return replace(prepared, checks=checks, notes=notes)


def _named(path: str, message: str) -> str:
    message = " ".join(message.split())
    return message if message.startswith(path) else f"{path}: {message}"


def claim_target(sources: dict[str, str], target: str, path: str) -> None:
    """Record in ``sources`` (target → structure file) that ``path`` writes ``target``;
    InputError when another structure of the job already does."""
    if target in sources:
        raise InputError(f"{path} and {sources[target]} would both write {target}")
    sources[target] = path


def check_zeta_elements(options: BuildOptions, frames) -> None:
    """Before any SCF: every element the options' ``zeta`` names is in one of ``frames`` (a typo
    guard), and the zeta file's library (``zeta_library``), which is applied where its elements
    occur, names at least one element of them. OptionError of ``zeta`` / ``zeta_file`` otherwise
    (the CLI names ``--zeta`` / ``--zeta-file``)."""
    from stobuilder.model.elements import atomic_number

    present = {s for f in frames for s in f.symbols}
    missing = set(options.basis.zeta.symbols) - present
    if missing:
        raise OptionError("zeta", f" names elements in no structure: {', '.join(sorted(missing, key=atomic_number))}")
    library = list(options.library.symbols)
    if options.zeta_file is not None and not library:
        raise OptionError("zeta_file", f" {one_line(options.zeta_file)}: it gives no ζ (no table with an entry)")
    if library and not present & set(library):
        where = ("zeta_file", f" {one_line(options.zeta_file)}:") if options.zeta_file else ("zeta_library", ":")
        raise OptionError(where[0], f"{where[1]} it names none of the structures' elements (it names "
                                    f"{', '.join(sorted(library, key=atomic_number))}; the structures have "
                                    f"{', '.join(sorted(present, key=atomic_number))})")


def build_structures(
    paths: Sequence[str],
    options: BuildOptions | None = None,
    out_dir: str = "basis",
    force: bool = False,
    write: bool = True,
    split_elements: bool = False,
    merge_into: str | None = None,
    **option_values,
) -> tuple[StructureReport, ...]:
    """Read every structure file, build its basis, run the checks (``options.checks.run``) and write
    one file per structure and code. Every structure is prepared and checked before the first
    file is written, and the files are then written all or none (``files.write_all``); an
    existing file is kept unless ``force``.

    paths           structure files: a list, or one path
    options         a BuildOptions; or give its fields as keywords (rule="molecular", gaussians=6, ...)
    split_elements  one file per structure, code and element: ``<stem>.<Symbol><extension>``
    merge_into      instead of new files, add or replace the elements of all structures in this
                    existing basis file of one format (backed up first, see ``merge_file``); the
                    format is the one its file name tells unless the options name one
    """
    paths = arguments.paths(paths, "paths")
    out_dir = arguments.path(out_dir, "out_dir")
    for name, value in (("force", force), ("write", write), ("split_elements", split_elements)):
        arguments.flag(value, name)
    if merge_into is not None:
        merge_into = arguments.path(merge_into, "merge_into")
    if options is None:
        if merge_into is not None and not option_values.get("codes"):
            option_values["codes"] = (format_for_path(merge_into),)
        options = BuildOptions(**option_values)
    elif not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    elif option_values:
        raise TypeError(f"give either options or option keywords, not both ({', '.join(option_values)})")
    if not paths:
        raise InputError("paths: no structure files given")
    if merge_into is not None:
        if split_elements:
            raise OptionError("merge_into", " and ", other="split_elements", tail=" exclude each other")
        if len(options.output.codes) != 1:
            raise OptionError("merge_into", f" {merge_into}: give exactly one format, not {', '.join(options.output.codes)}")
        if not os.path.isfile(merge_into):
            raise OptionError("merge_into", f" {merge_into}: no such file")
    prepared: list[Prepared] = []
    sources: dict[str, str] = {}
    contents: dict[str, str] = {}
    for path in paths:
        item = prepare(path, options, split_elements=split_elements)
        for _, rel, text in item.texts if merge_into is None else ():
            target = os.path.join(out_dir, *rel.split("/"))
            claim_target(sources, target, path)
            contents[target] = text
        prepared.append(item)
    check_zeta_elements(options, (f for item in prepared for f in item.frames))
    if merge_into is not None:
        merged = union_basis([item.basis for item in prepared])
        code = options.output.codes[0]
        merge_text(read_merge_target(merge_into)[2], merged, code, options.output.sp_shells, source=merge_into)
    elif write:
        check_targets(sources, force)
    if options.checks.run:  # before anything is written: a check that fails writes nothing
        prepared = [run_checks(item, options) for item in prepared]
    files_of = {item.path: {key: os.path.join(out_dir, *rel.split("/")) for key, rel, _ in item.texts} for item in prepared}
    if merge_into is not None:
        if write:
            target, backup = merge_file(merge_into, merged, code, options.output.sp_shells)
        else:
            target, backup = merge_into, None
        files_of = {item.path: {code: target} for item in prepared}
    elif write:
        write_all(contents, out_dir)
    reports = []
    for item in prepared:
        notes = item.notes
        if merge_into is not None and write:
            notes += (f"merged into {target}; its former text is in {backup}",)
        reports.append(StructureReport(item.path, item.frames, item.basis, files_of[item.path], item.checks, notes))
    return tuple(reports)
