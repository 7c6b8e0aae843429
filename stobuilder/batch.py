"""Batch runs over many structure files: a process pool or a Dask cluster, a manifest, resume.

The flow of one batch::

    inputs (files, folders, @lists) ──discover──▶ BatchItem(path, name) per structure file
        ──plan── against the manifest: up to date → a "skipped" record; the rest → Task
        ──executor.submit(run_item, task)──▶ ItemOutcome (texts, checks, error), in a worker
        ──the client writes the files atomically and appends one record to the manifest

Workers only read: they parse the structure, build (or take from their cache) the basis and make
the texts; the process that runs the batch writes every file and every manifest record, so a
worker that dies leaves nothing on disk, and a record is appended (flushed and fsynced) only after
its files are in place. Any ``concurrent.futures.Executor`` runs the tasks: a local process pool
by default, or ``distributed.Client(address).get_executor()`` on a Dask cluster (Rocklin, "Dask:
parallel computation with blocked algorithms and task scheduling", Proc. SciPy 2015); cluster
workers need to see the input paths (a shared file system), nothing else. The engine (executors,
manifest, progress) is ``stobuilder.jobs``; this module brings what is the batch's: its items, the
worker ``run_item``, the record layout ``BATCH_RECORD`` and the manifest name.

Output names mirror the input layout: every item is named by its path relative to the common
folder of the inputs (a folder argument counts as itself, a file as its parent folder), without
its extension; ``DIR/<name><code extension>`` is its file for each code. Two items that would
still share a name (``a.xyz`` and ``a.cif`` side by side) are a usage error.
"""

from __future__ import annotations

import concurrent.futures as cf
import fnmatch
import os
import socket
import stat
import time
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import lru_cache

from stobuilder.core.errors import InputError
from stobuilder.jobs import manifest as _jobs_manifest
from stobuilder.jobs.executors import run_tasks
from stobuilder.jobs.manifest import (
    STATUSES, Manifest, is_count, is_seconds, is_sha256, is_text, is_whole, layout_problem, list_of, one_of,
    optional, prepare_out_dir, remove_stale_temporaries, sha256_file, utc_now,
)
from stobuilder.jobs.progress import NoProgress
from stobuilder.pipeline.naming import COMPRESSIONS as _COMPRESSIONS, structure_name
from stobuilder.pipeline.options import BuildOptions

MANIFEST_NAME = "stobuilder-batch.jsonl"
# Extensions ASE reads that, in a folder of structures, are almost always something else:
# Markdown (ASE: CASTEP .md trajectories). Name such files explicitly to read them.
SKIPPED_EXTENSIONS = frozenset({"md"})
# ASE format names that are not file extensions (servers, folder formats).
_NOT_EXTENSIONS = frozenset({"mysql", "postgresql", "bundletrajectory"})


# ---------------------------------------------------------------------------- data


@dataclass(frozen=True)
class BatchItem:
    """One structure file of a batch.

    path  absolute path of the structure file
    name  output name relative to the output folder, without extension, "/"-separated ("sub/x")
    """

    path: str
    name: str

    def output_files(self, codes: Iterable[str]) -> dict[str, str]:
        """code → output path relative to the output folder (``naming.output_file``)."""
        from stobuilder.pipeline.naming import output_file

        return {code: output_file(self.name, code) for code in codes}


@dataclass(frozen=True)
class Task:
    """What a worker gets: one item, the options, and the OpenMP threads for its SCF checks."""

    item: BatchItem
    options: BuildOptions
    threads: int = 1


@dataclass(frozen=True)
class ItemOutcome:
    """What a worker returns for one item. ``error`` is None when the item is done.

    texts     (code, path relative to the output folder, file text) per code
    checks    Check.to_json() per checked frame
    timings   seconds per stage: read_s, basis_s, check_s, total_s
    """

    item: BatchItem
    input_sha256: str | None
    texts: tuple[tuple[str, str, str], ...] = ()
    elements: tuple[str, ...] = ()
    formula: str | None = None
    frames: int = 0
    charge: int | None = None
    spin: int | None = None
    checks: tuple[dict, ...] = ()
    notes: tuple[str, ...] = ()
    error: str | None = None
    timings: Mapping[str, float] = field(default_factory=dict)
    worker: str = ""


@dataclass(frozen=True)
class BatchSummary:
    """The outcome of ``run_batch``: counts by final status, the failures, the wall time (s)."""

    out_dir: str
    manifest: str
    total: int
    done: int
    skipped: int
    failed: int
    failures: tuple[tuple[str, str], ...]  # (input path, error message)
    seconds: float
    notes: tuple[str, ...] = ()  # manifest lines skipped, the backup of a --force run

    @property
    def exit_status(self) -> int:
        """0 when every item is done or skipped, 1 when any failed."""
        return 1 if self.failed else 0

    def to_json(self) -> dict:
        return {
            "out_dir": self.out_dir,
            "manifest": self.manifest,
            "total": self.total,
            "done": self.done,
            "skipped": self.skipped,
            "failed": self.failed,
            "failures": [{"input": p, "error": e} for p, e in self.failures],
            "seconds": round(self.seconds, 3),
            "notes": list(self.notes),
        }


# ---------------------------------------------------------------------------- inputs


@lru_cache(maxsize=1)
def structure_extensions() -> frozenset[str]:
    """File extensions (lower case, no dot) that ASE reads: every readable format's extensions and
    the readable format names themselves (ASE takes an unknown extension as a format name), less
    SKIPPED_EXTENSIONS."""
    from ase.io.formats import ioformats

    exts = set()
    for name, fmt in ioformats.items():
        if not fmt.can_read:
            continue
        exts.update(e.lower() for e in fmt.extensions)
        if name.isalnum() and name not in _NOT_EXTENSIONS:
            exts.add(name.lower())
    return frozenset(exts - SKIPPED_EXTENSIONS)


@lru_cache(maxsize=1)
def _structure_globs() -> tuple[str, ...]:
    from ase.io.formats import ioformats

    return tuple(sorted({g for fmt in ioformats.values() if fmt.can_read for g in fmt.globs}))


def own_output_name(filename: str) -> bool:
    """True for a name stobuilder itself writes: a file with the extension of a registered basis
    format (``water.qcschema.json``, which ASE would read as JSON), a merge backup of one
    (``lib.nw.bak2``), or a batch manifest and its backups."""
    from stobuilder.formats import formats

    base = os.path.basename(filename)
    if base == MANIFEST_NAME or base.startswith(MANIFEST_NAME + "."):
        return True
    stem = base
    root, ext = os.path.splitext(stem)
    if ext.startswith(".bak") and ext[4:].isdigit() or ext == ".bak":
        stem = root
    return any(stem.endswith(f.extension) for f in formats().values())


def is_structure_name(filename: str) -> bool:
    """True when ASE would recognise the file by its name: a readable extension (optionally
    compressed: .gz, .bz2, .xz) or one of ASE's file-name patterns (POSCAR, CONTCAR, ...), and
    it is not one of stobuilder's own outputs (``own_output_name``)."""
    base = os.path.basename(filename)
    if base.startswith(".") or own_output_name(base):
        return False
    root, ext = os.path.splitext(base)
    if ext[1:].lower() in _COMPRESSIONS:
        base = root
        root, ext = os.path.splitext(base)
    if ext and ext[1:].lower() in structure_extensions():
        return True
    return any(fnmatch.fnmatchcase(base, g) for g in _structure_globs())


def read_list(path: str) -> list[str]:
    """The paths in a list file: one per line; blank lines and lines starting with # are skipped;
    relative paths are relative to the list file's folder."""
    try:
        with open(path, encoding="utf-8") as handle:
            lines = handle.read().splitlines()
    except OSError as exc:
        raise InputError(f"{path}: cannot read the list file ({exc.strerror})") from None
    except UnicodeDecodeError:
        raise InputError(f"{path}: the list file is not UTF-8 text") from None
    base = os.path.dirname(os.path.abspath(path))
    out = []
    for line in lines:
        entry = line.strip()
        if entry and not entry.startswith("#"):
            out.append(os.path.normpath(os.path.join(base, os.path.expanduser(entry))))
    return out


def _file_kind(path: str) -> str | None:
    """None for a regular file (after symbolic links), else what it is: "a FIFO", "a device",
    "a socket", "a dangling symbolic link", ... (os.stat never opens, so a FIFO cannot block)."""
    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        return "a dangling symbolic link" if os.path.islink(path) else "missing"
    except OSError as exc:
        return f"unreadable ({exc.strerror})"
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISDIR(mode):
        return "a folder"
    return "not a regular file"


def _walk(folder: str, exclude: str | None, notes: list[str] | None = None) -> list[str]:
    found = []
    for root, dirs, files in os.walk(folder):
        dirs[:] = sorted(
            d for d in dirs if not d.startswith(".") and os.path.join(root, d) != exclude
        )
        for f in files:
            if not is_structure_name(f):
                continue
            path = os.path.join(root, f)
            kind = _file_kind(path)
            if kind is None:
                found.append(path)
            elif notes is not None:
                notes.append(f"skipped {path}: {kind}, not a regular file")
    return sorted(found, key=lambda p: os.path.relpath(p, folder).split(os.sep))


def discover(inputs: Sequence[str], exclude: str | None = None, notes: list[str] | None = None) -> tuple[BatchItem, ...]:
    """The structure files named by ``inputs``, each with its output name.

    Parameters
    ----------
    inputs : structure files (read whatever their name), folders (searched recursively for the
        names ``is_structure_name`` accepts; hidden files and folders skipped) and ``@FILE`` list
        files (see ``read_list``; entries may be files or folders).
    exclude : a folder not to search (the output folder).
    notes : a list that gets one line per file skipped in a folder (a FIFO, a device, a dangling
        link: only regular files are inputs, so nothing can block on opening one).

    Names are the paths relative to the common folder of all inputs, without the extension;
    a file given twice is one item. Raises InputError for a missing input, an input named
    explicitly that is not a regular file, no structure files at all, or two items with the same
    name.
    """
    if not inputs:
        raise InputError("no inputs given")
    exclude = os.path.abspath(exclude) if exclude else None
    files: list[str] = []
    anchors: list[str] = []

    def add(path: str, origin: str) -> None:
        path = os.path.abspath(path)
        if os.path.isdir(path):
            anchors.append(path)
            files.extend(_walk(path, exclude, notes))
            return
        kind = _file_kind(path)
        if kind == "missing":
            raise InputError(f"{origin}: no such file or folder")
        if kind is not None:
            raise InputError(f"{origin}: {kind}, not a regular file; only regular files are structure inputs")
        anchors.append(os.path.dirname(path))
        files.append(path)

    for arg in inputs:
        if arg.startswith("@"):
            listed = read_list(arg[1:])
            for entry in listed:
                add(entry, f"{entry} (listed in {arg[1:]})")
        else:
            add(arg, arg)
    unique = list(dict.fromkeys(files))
    if not unique:
        raise InputError(f"no structure files found in {', '.join(inputs)}")
    root = os.path.commonpath(anchors)
    items, seen = [], {}
    for path in unique:
        name = structure_name(os.path.relpath(path, root))
        if name in seen:
            raise InputError(f"{path} and {seen[name]} would both be named {name!r} in the output folder; rename one")
        seen[name] = path
        items.append(BatchItem(path, name))
    return tuple(items)



# ---------------------------------------------------------------------------- the worker


_PREPARE_CACHE: dict = {}  # one text per content key and worker process (pipeline.prepare; the basis: builder.basis_of)


def _named(path: str, message: str) -> str:
    message = " ".join(message.split())
    return message if message.startswith(path) else f"{path}: {message}"


def run_item(task: Task) -> ItemOutcome:
    """Read one structure file, make its basis texts and (with ``check``) run its SCF checks.

    The worker function of every batch: top level and picklable, it reads but never writes, and
    reports every problem of the item (unreadable file, element beyond the rule, SCF not
    converged) in ``ItemOutcome.error`` instead of raising. It walks the path of ``build``
    (``pipeline.prepare`` and ``pipeline.run_checks``); an item with an error carries no texts,
    so nothing is written for it.
    """
    from stobuilder.pipeline.path import prepare, run_checks
    from stobuilder.model.structures import elements_of

    item, options = task.item, task.options
    start = time.perf_counter()
    timings: dict[str, float] = {}
    worker = f"{socket.gethostname()}:{os.getpid()}"
    sha = None
    try:
        sha = sha256_file(item.path)
    except OSError as exc:
        return ItemOutcome(item, None, error=f"{item.path}: cannot read ({exc.strerror})", worker=worker,
                           timings={"total_s": time.perf_counter() - start})
    partial: dict = {}
    try:
        prepared = prepare(item.path, options, name=item.name, cache=_PREPARE_CACHE)
        frames = prepared.frames
        first = frames[0]
        partial = dict(
            elements=elements_of(frames),
            formula=first.formula,
            frames=len(frames),
            charge=first.charge,
            spin=first.spin,
        )
        timings["basis_s"] = time.perf_counter() - start
        texts = prepared.texts
        checks: tuple[dict, ...] = ()
        error = None
        if options.checks.run:
            t = time.perf_counter()
            prepared = run_checks(prepared, options, threads=task.threads)
            checks = tuple(c.to_json() for c in prepared.checks)
            timings["check_s"] = time.perf_counter() - t
            bad = [f.frame for f, c in zip(prepared.checked, prepared.checks) if not c.converged]
            if bad:
                which = "" if len(frames) == 1 else f" (frame {', '.join(map(str, bad))})"
                error = f"{item.path}: SCF not converged{which}; no files written"
                texts = ()
        timings["total_s"] = time.perf_counter() - start
        return ItemOutcome(item, sha, texts=texts, checks=checks, notes=prepared.notes, error=error,
                           timings=timings, worker=worker, **partial)
    except InputError as exc:
        message = _named(item.path, str(exc))
    except Exception as exc:  # an engine failure of one item must not stop the batch
        message = _named(item.path, f"{type(exc).__name__}: {exc}")
    timings["total_s"] = time.perf_counter() - start
    return ItemOutcome(item, sha, error=message, timings=timings, worker=worker, **partial)


# ---------------------------------------------------------------------------- the manifest


def manifest_path(out_dir: str) -> str:
    return os.path.join(out_dir, MANIFEST_NAME)


# The batch's record layout (``jobs.manifest.layout_problem``'s form; the bench has its own).


def _is_files(v) -> bool:
    return isinstance(v, dict) and all(
        isinstance(code, str) and isinstance(e, dict) and set(e) == {"path", "sha256"}
        and isinstance(e["path"], str) and is_sha256(e["sha256"]) for code, e in v.items())


def _is_timings(v) -> bool:
    return isinstance(v, dict) and all(
        (is_text(x) if k == "finished_utc" else is_seconds(x)) for k, x in v.items())


BATCH_RECORD = {
    "input": (is_text, "a path", True),
    "name": (is_text, "a text", True),
    "input_sha256": (optional(is_sha256), "a SHA-256 (64 hex digits) or null", True),
    "options": (lambda v: isinstance(v, dict), "an object", True),
    "status": (one_of(*STATUSES), "one of " + ", ".join(STATUSES), True),
    "files": (_is_files, "a table of {path, sha256}", True),
    "elements": (list_of(is_text), "a list of element symbols", True),
    "formula": (optional(is_text), "a text or null", True),
    "frames": (is_count, "a whole number >= 0", True),
    "charge": (optional(is_whole), "a whole number or null", True),
    "spin": (optional(is_count), "a whole number >= 0 or null", True),
    "checks": (list_of(lambda c: isinstance(c, dict)), "a list of objects", True),
    "notes": (list_of(is_text), "a list of texts", True),
    "error": (optional(is_text), "a text or null", True),
    "timings": (_is_timings, "a table of seconds (finite, >= 0)", True),
    "worker": (is_text, "a text", True),
}


def _record_problem(record) -> str | None:
    """Why a decoded manifest line is not a batch record this version can use, or None."""
    problem = layout_problem(record, BATCH_RECORD)
    if problem:
        return problem
    if (record["status"] == "failed") != bool(record["error"]):
        return f"status {record['status']} does not match its error"
    return None


def read_manifest(path: str, notes: list[str] | None = None) -> dict[str, dict]:
    """The last usable batch record of every input path in the batch manifest ``path``
    (``jobs.manifest.read_manifest`` with the batch record layout, ``_record_problem``)."""
    return _jobs_manifest.read_manifest(path, notes, key="input", problem=_record_problem)


def same_options(recorded, options: BuildOptions) -> bool:
    """True when a manifest's ``options`` record is ``options`` of this stobuilder version. A
    record of an earlier layout (``exponents`` for the sharing mode) is compared by its value."""
    current = options.to_json()
    if recorded == current:
        return True
    if not isinstance(recorded, Mapping) or recorded.get("stobuilder") != current["stobuilder"]:
        return False
    try:
        return BuildOptions.from_json(recorded) == options
    except (InputError, TypeError):
        return False


def is_up_to_date(record: Mapping | None, input_sha256: str | None, options: BuildOptions,
                  item: BatchItem, out_dir: str) -> bool:
    """True when ``record`` (the item's last) says done (or skipped after done) for the same input
    bytes and options, and every file it names still exists with the recorded hash."""
    if not record or record.get("status") not in ("done", "skipped") or input_sha256 is None:
        return False
    if record.get("input_sha256") != input_sha256 or not same_options(record.get("options"), options):
        return False
    files = record.get("files") or {}
    if files.keys() != item.output_files(options.output.codes).keys():
        return False
    for code, entry in files.items():
        if entry.get("path") != item.output_files([code])[code]:
            return False
        target = os.path.join(out_dir, entry["path"])
        try:
            if sha256_file(target) != entry.get("sha256"):
                return False
        except OSError:
            return False
    return True


def outcome_record(outcome: ItemOutcome, options: BuildOptions, files: Mapping[str, Mapping[str, str]]) -> dict:
    """The manifest record of a finished item (status done or failed)."""
    return {
        "input": outcome.item.path,
        "name": outcome.item.name,
        "input_sha256": outcome.input_sha256,
        "options": options.to_json(),
        "status": "failed" if outcome.error else "done",
        "files": {code: dict(entry) for code, entry in files.items()},
        "elements": list(outcome.elements),
        "formula": outcome.formula,
        "frames": outcome.frames,
        "charge": outcome.charge,
        "spin": outcome.spin,
        "checks": list(outcome.checks),
        "notes": list(outcome.notes),
        "error": outcome.error,
        "timings": {k: round(v, 6) for k, v in outcome.timings.items()} | {"finished_utc": utc_now()},
        "worker": outcome.worker,
    }


def skipped_record(previous: Mapping) -> dict:
    """The record of an item found up to date: its previous record with status skipped."""
    record = dict(previous)
    record["status"] = "skipped"
    record["timings"] = {"finished_utc": utc_now()}
    record["worker"] = ""
    return record



# ---------------------------------------------------------------------------- running a batch


def write_outcome(outcome: ItemOutcome, out_dir: str) -> dict[str, dict[str, str]]:
    """Write an item's texts, all or none (``files.write_all``); return code → {"path", "sha256"}
    (paths relative). InputError (naming the target) when a file cannot be written."""
    from stobuilder.core.files import sha256_text, write_all

    files, contents = {}, {}
    for code, rel, text in outcome.texts:
        target = os.path.join(out_dir, *rel.split("/"))
        try:
            os.makedirs(os.path.dirname(target), exist_ok=True)
        except OSError as exc:
            raise InputError(f"{os.path.dirname(target)}: cannot create the folder ({exc.strerror})") from None
        contents[target] = text
        files[code] = {"path": rel, "sha256": sha256_text(text)}
    write_all(contents)
    return files


def check_zeta(items: Sequence[BatchItem], options: BuildOptions) -> None:
    """Before any work: the options' ζ against the elements of the batch's items, the rule of
    every door (``pipeline.check_zeta_elements``: each element ``zeta`` names is in some item,
    and a zeta file names an element of some item; OptionError otherwise). Only with ζ in the
    options are the items read here, in this process; an item that cannot be read is left to its
    worker, which records why (and when none can be read there is nothing to check against)."""
    from stobuilder.pipeline.path import check_zeta_elements
    from stobuilder.model.structures import read_structures

    if not (options.basis.zeta or options.library or options.zeta_file):
        return
    frames = []
    for item in items:
        try:
            frames.extend(read_structures(item.path))
        except Exception:  # unreadable, empty, an unknown element ...: the item's own failure
            continue
    if frames:
        check_zeta_elements(options, frames)


def run_batch(
    items: Sequence[BatchItem],
    options: BuildOptions,
    out_dir: str,
    executor: cf.Executor | None = None,
    workers: int | None = None,
    force: bool = False,
    progress=None,
    threads: int = 1,
) -> BatchSummary:
    """Run a batch: skip the items the manifest shows up to date, compute the rest, record all.

    Parameters
    ----------
    items : from ``discover``.
    options : the build options (validated here).
    out_dir : output folder; holds the files and the manifest ``MANIFEST_NAME``.
    executor : any concurrent.futures Executor, e.g. ``distributed.Client(addr).get_executor()``;
        None runs a local process pool of ``workers`` processes (default: the usable cores),
        rebuilt (at most ``jobs.executors.MAX_POOL_RESTARTS`` times) if one of its processes dies.
    force : recompute every item, whatever the manifest says.
    progress : an object with update(status) and close(), e.g. ``jobs.make_progress(len(items))``.
    threads : OpenMP threads per item for the SCF checks.

    Every finished item gets one record, appended and fsynced after its files are written; an
    item's problem becomes a failed record and never stops the batch. ζ options that apply to no
    item are refused first (``check_zeta``), before the output folder is touched.
    """
    start = time.perf_counter()
    if not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    check_zeta(items, options)
    prepare_out_dir(out_dir, force, MANIFEST_NAME, "batch")
    path = manifest_path(out_dir)
    manifest = Manifest(path, fresh=force)
    notes = manifest.notes
    progress = progress or NoProgress()
    final: dict[str, dict] = {}
    try:
        remove_stale_temporaries(out_dir)
        previous = {} if force else read_manifest(path, notes)
        todo, skipped = [], []
        for item in items:
            try:
                sha = sha256_file(item.path)
            except OSError:
                sha = None  # the worker records why
            record = previous.get(item.path)
            if is_up_to_date(record, sha, options, item, out_dir):
                skipped.append(skipped_record(record))
            else:
                todo.append(Task(item, options, threads))
        manifest.append(skipped)
        for record in skipped:
            final[record["input"]] = record
            progress.update("skipped")

        def finish(outcome: ItemOutcome) -> None:
            try:
                files = write_outcome(outcome, out_dir)
            except InputError as exc:
                outcome = replace(outcome, texts=(), error=f"{outcome.item.path}: {exc}; no files written")
                files = {}
            record = outcome_record(outcome, options, files)
            manifest.append([record])
            final[record["input"]] = record
            progress.update(record["status"])

        run_tasks(todo, run_item, finish, _worker_failure, executor=executor, workers=workers)
    finally:
        manifest.close()
        progress.close()
    failures = tuple((p, r["error"]) for p, r in final.items() if r["status"] == "failed")
    counts = {s: sum(1 for r in final.values() if r["status"] == s) for s in STATUSES}
    return BatchSummary(out_dir, path, len(final), counts["done"], counts["skipped"], counts["failed"],
                        failures, time.perf_counter() - start, tuple(notes))


def _worker_failure(task: Task, exc: BaseException) -> ItemOutcome:
    reason = " ".join(str(exc).split()) or type(exc).__name__
    return ItemOutcome(task.item, None, error=f"{task.item.path}: the worker failed ({type(exc).__name__}: {reason})")


__all__ = [
    "BatchItem",
    "BuildOptions",
    "BatchSummary",
    "ItemOutcome",
    "MANIFEST_NAME",
    "Task",
    "discover",
    "is_structure_name",
    "is_up_to_date",
    "read_list",
    "read_manifest",
    "run_batch",
    "run_item",
    "structure_extensions",
]
