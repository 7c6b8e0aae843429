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
workers need to see the input paths (a shared file system), nothing else.

Output names mirror the input layout: every item is named by its path relative to the common
folder of the inputs (a folder argument counts as itself, a file as its parent folder), without
its extension; ``DIR/<name><code extension>`` is its file for each code. Two items that would
still share a name (``a.xyz`` and ``a.cif`` side by side) are a usage error.
"""

from __future__ import annotations

import concurrent.futures as cf
import fnmatch
import hashlib
import json
import math
import os
import socket
import stat
import sys
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from functools import lru_cache

from stobuilder.core.errors import InputError
from stobuilder.core.files import TEMP_PREFIX
from stobuilder.pipeline.naming import COMPRESSIONS as _COMPRESSIONS, structure_name
from stobuilder.pipeline.options import BuildOptions

MANIFEST_NAME = "stobuilder-batch.jsonl"
STATUSES = ("done", "failed", "skipped")
# Extensions ASE reads that, in a folder of structures, are almost always something else:
# Markdown (ASE: CASTEP .md trajectories). Name such files explicitly to read them.
SKIPPED_EXTENSIONS = frozenset({"md"})
# ASE format names that are not file extensions (servers, folder formats).
_NOT_EXTENSIONS = frozenset({"mysql", "postgresql", "bundletrajectory"})
MAX_POOL_RESTARTS = 2  # a local pool whose worker process died is rebuilt this often


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


def sha256_file(path: str) -> str:
    """SHA-256 of a file's bytes (hex)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


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


# Record layouts: key → (test, what the value must be, required). A record is usable when it is a
# JSON object with every required key, no unknown key, and every value passing its test; a nested
# layout (a dict in place of the test) is checked the same way. One layout per record kind: the
# batch's here (BATCH_RECORD), the bench's in bench.py; ``layout_problem`` checks either.


def is_text(v) -> bool:
    return isinstance(v, str)


def is_whole(v) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def is_count(v) -> bool:
    return is_whole(v) and v >= 0


def is_finite(v) -> bool:
    """A JSON number (not a bool) that is finite."""
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def is_seconds(v) -> bool:
    return is_finite(v) and v >= 0


def is_sha256(v) -> bool:
    return isinstance(v, str) and len(v) == 64 and all(c in "0123456789abcdef" for c in v)


def optional(test: Callable[[object], bool]) -> Callable[[object], bool]:
    return lambda v: v is None or test(v)


def list_of(test: Callable[[object], bool]) -> Callable[[object], bool]:
    return lambda v: isinstance(v, list) and all(test(x) for x in v)


def one_of(*values) -> Callable[[object], bool]:
    return lambda v: isinstance(v, str) and v in values


def layout_problem(doc, layout: Mapping, where: str = "") -> str | None:
    """Why ``doc`` (decoded JSON) does not follow ``layout`` (key → (test or nested layout,
    what, required)), or None. The reason names the key, never the value (it goes on stderr)."""
    if not isinstance(doc, dict):
        return f"{where.rstrip('.') or 'the line'} is not a JSON object"
    for key in doc:
        if key not in layout:
            return f"unknown key {where}{str(key)[:40]!r}"
    for key, (test, what, required) in layout.items():
        if key not in doc:
            if required:
                return f"no {where}{key}"
            continue
        if isinstance(test, Mapping):
            problem = layout_problem(doc[key], test, f"{where}{key}.")
            if problem:
                return problem
        elif not test(doc[key]):
            return f"{where}{key} is not {what}"
    return None


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


def read_manifest(path: str, notes: list[str] | None = None, key: str = "input",
                  problem: Callable[[object], str | None] | None = None) -> dict[str, dict]:
    """The last record of every input in a manifest (``record[key]`` → record; for a batch the
    input path). ``problem`` says why a decoded line is not a usable record (default: the batch
    record layout, ``_record_problem``); the bench passes its own.

    A line that is not a usable record (not UTF-8, not JSON, nested too deeply, not a record of
    this layout) is skipped, and ``notes`` (if given) gets one line naming the line number and the
    problem; a torn last line (the run was killed while appending) is dropped without a note. The
    item of a skipped record is simply computed again. Never raises for the file's contents."""
    last: dict[str, dict] = {}
    if not os.path.exists(path):
        return last
    with open(path, "rb") as handle:
        lines = handle.read().split(b"\n")
    bad: list[tuple[int, str]] = []
    for number, raw in enumerate(lines, 1):
        if not raw.strip():
            continue
        try:
            record = json.loads(raw.decode("utf-8"))
        except UnicodeDecodeError:
            bad.append((number, "not UTF-8 text"))
            continue
        except RecursionError:
            bad.append((number, "JSON nested too deeply"))
            continue
        except ValueError:
            if number == len(lines):  # no newline after it: a torn final append
                continue
            bad.append((number, "not JSON"))
            continue
        why = (problem or _record_problem)(record)
        if why:
            bad.append((number, why))
            continue
        last[record[key]] = record
    if bad and notes is not None:
        shown = "; ".join(f"line {n}: {why}" for n, why in bad[:5]) + (f"; and {len(bad) - 5} more" if len(bad) > 5 else "")
        notes.append(f"{path}: skipped {len(bad)} unusable line(s) ({shown}); their items are computed again "
                     f"(--force starts a fresh manifest, keeping this one as a backup)")
    return last


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


def utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds")


class Manifest:
    """An open manifest (JSON lines): an exclusive lock (one run per folder), appends flushed and
    fsynced. The batch and the bench keep theirs with it."""

    def __init__(self, path: str, fresh: bool = False, what: str = "batch"):
        """Open (creating) and lock the manifest ``path``. With ``fresh`` (``--force``) an existing
        manifest is first copied byte for byte to a new backup (``MANIFEST.bak``, ``.bak2``, …;
        named in ``notes``) and emptied, under the lock. InputError when another batch holds
        the lock or ``path`` is not a regular file (a FIFO would block the open) or is a
        symbolic link (our records would be appended to whatever file it names, outside the
        output folder: never written through, the link is refused)."""
        self.path = path
        self.notes: list[str] = []
        if os.path.islink(path):
            raise InputError(f"{path}: the {what} manifest is a symbolic link; it must be a regular file of the "
                             "output folder (remove the link)")
        if os.path.lexists(path) and not os.path.isfile(path):
            raise InputError(f"{path}: the {what} manifest is not a regular file")
        try:
            # O_NOFOLLOW: a link made after the check above is refused too (ELOOP), never followed
            fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o666)
            self.handle = open(fd, "a", encoding="utf-8", newline="\n")
        except OSError as exc:
            raise InputError(f"{path}: cannot open the {what} manifest ({exc.strerror})") from None
        try:
            import fcntl

            fcntl.flock(self.handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except ImportError:  # no fcntl (Windows): no lock
            pass
        except OSError:
            self.handle.close()
            raise InputError(f"{path}: another {what} is running on this output folder") from None
        if fresh:
            self._start_fresh()
        self._drop_torn_line()

    def _start_fresh(self) -> None:
        from stobuilder.core.files import create_bytes

        with open(self.path, "rb") as old:
            data = old.read()
        if not data:
            return
        k = 1
        while True:
            backup = f"{self.path}.bak" + (str(k) if k > 1 else "")
            if not os.path.lexists(backup) and create_bytes(backup, data, stat.S_IMODE(os.stat(self.path).st_mode)):
                break
            k += 1
        self.handle.truncate(0)
        self.handle.seek(0)
        self.handle.flush()
        os.fsync(self.handle.fileno())
        self.notes.append(f"--force: started a fresh manifest; the former one is kept as {backup}")

    def _drop_torn_line(self) -> None:
        """A run killed while appending leaves a last line without its newline: an unfinished
        record, dropped (we hold the lock, so nobody else is writing)."""
        end = os.path.getsize(self.path)
        with open(self.path, "rb") as check:
            if end == 0 or (check.seek(end - 1), check.read(1))[1] == b"\n":
                return
            keep, position = 0, end
            while position > 0:  # back, block by block, to the last newline
                start = max(0, position - 65536)
                check.seek(start)
                found = check.read(position - start).rfind(b"\n")
                if found >= 0:
                    keep = start + found + 1
                    break
                position = start
        self.handle.truncate(keep)
        self.handle.seek(0, os.SEEK_END)

    def append(self, records: Sequence[dict]) -> None:
        if not records:
            return
        self.handle.write("".join(json.dumps(r, sort_keys=False) + "\n" for r in records))
        self.handle.flush()
        os.fsync(self.handle.fileno())

    def close(self) -> None:
        self.handle.close()


# ---------------------------------------------------------------------------- progress


class LineProgress:
    """Plain progress lines, at most one per ``interval`` seconds and one at the end, for logs."""

    def __init__(self, total: int, stream=None, interval: float = 10.0, clock: Callable[[], float] = time.monotonic,
                 label: str = "stobuilder batch", unit: str = "items"):
        self.total, self.stream, self.interval, self.clock = total, stream or sys.stderr, interval, clock
        self.label, self.unit = label, unit
        self.counts = dict.fromkeys(STATUSES, 0)
        self.start = self.clock()
        self.last = self.start
        self.computed = 0

    def update(self, status: str) -> None:
        self.counts[status] += 1
        if status != "skipped":
            self.computed += 1
        now = self.clock()
        if now - self.last >= self.interval:
            self.last = now
            self._line(now)

    def _line(self, now: float) -> None:
        finished = sum(self.counts.values())
        elapsed = max(now - self.start, 1e-9)
        rate = self.computed / elapsed
        left = self.total - finished
        eta = f", about {left / rate:.0f} s left" if rate > 0 and left else ""
        print(
            f"{self.label}: {finished}/{self.total} (done {self.counts['done']}, skipped "
            f"{self.counts['skipped']}, failed {self.counts['failed']}), {rate:.1f} {self.unit}/s{eta}",
            file=self.stream,
            flush=True,
        )

    def close(self) -> None:
        self._line(self.clock())


class BarProgress:
    """A tqdm progress bar (count, rate, estimate) with the done/skipped/failed counts."""

    def __init__(self, total: int, stream=None, label: str = "stobuilder batch", unit: str = "items"):
        from tqdm import tqdm

        self.counts = dict.fromkeys(STATUSES, 0)
        self.bar = tqdm(total=total, file=stream or sys.stderr, unit=unit.rstrip("s"), desc=label, dynamic_ncols=True)

    def update(self, status: str) -> None:
        self.counts[status] += 1
        self.bar.set_postfix(self.counts, refresh=False)
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()


class NoProgress:
    def update(self, status: str) -> None:
        pass

    def close(self) -> None:
        pass


PROGRESS_MODES = ("auto", "bar", "lines", "off")


def make_progress(total: int, mode: str = "auto", stream=None, interval: float = 10.0,
                  label: str = "stobuilder batch", unit: str = "items"):
    """"bar" (tqdm), "lines" (LineProgress), "off", or "auto": a bar when ``stream`` (stderr) is a
    terminal and tqdm is installed, plain lines otherwise. ``label`` and ``unit`` name the run
    and what it counts ("stobuilder bench", "calculations")."""
    stream = stream or sys.stderr
    if mode == "auto":
        tty = hasattr(stream, "isatty") and stream.isatty()
        try:
            import tqdm  # noqa: F401
        except ImportError:
            tty = False
        mode = "bar" if tty else "lines"
    if mode == "bar":
        try:
            return BarProgress(total, stream, label, unit)
        except ImportError:
            raise InputError("--progress bar needs tqdm: pip install tqdm") from None
    if mode == "lines":
        return LineProgress(total, stream, interval, label=label, unit=unit)
    if mode == "off":
        return NoProgress()
    raise InputError(f"unknown progress mode {mode!r}; choose auto, bar, lines or off")


# ---------------------------------------------------------------------------- running a batch


def prepare_out_dir(out_dir: str, force: bool, manifest_name: str = MANIFEST_NAME, what: str = "batch") -> None:
    """Create the output folder. A folder that holds files but no manifest ``manifest_name`` is
    refused unless ``force`` (the run would overwrite files it does not own)."""
    from stobuilder.core.files import check_folder

    check_folder(out_dir)  # a folder, or one that can be made, that takes new files
    if os.path.isdir(out_dir) and not force and not os.path.exists(os.path.join(out_dir, manifest_name)):
        if any(not e.startswith(".") for e in os.listdir(out_dir)):
            raise InputError(f"{out_dir}: the folder holds files but no {what} manifest; use --force to write into it")
    try:
        os.makedirs(out_dir, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{out_dir}: cannot create the output folder ({exc.strerror})") from None


def _remove_stale_temporaries(out_dir: str) -> None:
    """Temporary files of atomic writes cut short by a killed run (we hold the folder's lock)."""
    for root, _, files in os.walk(out_dir):
        for f in files:
            if f.startswith(TEMP_PREFIX) and f.endswith(".tmp"):
                os.unlink(os.path.join(root, f))


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


def default_workers() -> int:
    """The cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


PARENT_POLL_SECONDS = 0.5  # how often a worker looks whether the batch's main process still lives


def worker_count(requested: int | None) -> tuple[int, str | None]:
    """The local workers for a request: the usable cores when None, else ``requested`` capped
    at the usable cores (more processes than cores only contend for them), with a note saying
    so. InputError for a count below 1."""
    cores = default_workers()
    if requested is None:
        return cores, None
    if isinstance(requested, bool) or not isinstance(requested, int) or requested < 1:
        raise InputError(f"--workers must be a whole number >= 1, got {requested!r}")
    if requested > cores:
        return cores, f"--workers {requested} is more than the {cores} usable core(s); using {cores}"
    return requested, None


def _watch_parent(parent: int) -> None:
    """Pool initializer: a daemon thread that ends this worker as soon as the process that
    started it is gone (its parent id changes: the orphan is adopted by init or a subreaper), so
    that a batch killed with SIGKILL leaves no worker computing for nobody. On Linux the kernel
    is also asked to send SIGKILL on the parent's death (prctl PR_SET_PDEATHSIG; the poll covers
    the other systems and the window before the call)."""
    import threading

    if sys.platform.startswith("linux"):
        try:
            import ctypes
            import signal

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)  # PR_SET_PDEATHSIG = 1 (linux/prctl.h)
        except (OSError, AttributeError):
            pass

    def watch():
        while os.getppid() == parent:
            time.sleep(PARENT_POLL_SECONDS)
        os._exit(1)

    if os.getppid() != parent:
        os._exit(1)
    threading.Thread(target=watch, name="stobuilder-parent-watch", daemon=True).start()


def local_executor(workers: int) -> cf.Executor:
    """A process pool of ``workers`` processes (capped at the usable cores, ``worker_count``),
    started by spawn (no inherited threads or state); every worker exits when the process that
    made the pool dies (``_watch_parent``)."""
    import multiprocessing

    count, _ = worker_count(workers)
    return cf.ProcessPoolExecutor(
        max_workers=count, mp_context=multiprocessing.get_context("spawn"),
        initializer=_watch_parent, initargs=(os.getpid(),),
    )


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
        rebuilt (at most MAX_POOL_RESTARTS times) if one of its processes dies.
    force : recompute every item, whatever the manifest says.
    progress : an object with update(status) and close(), e.g. ``make_progress(len(items))``.
    threads : OpenMP threads per item for the SCF checks.

    Every finished item gets one record, appended and fsynced after its files are written; an
    item's problem becomes a failed record and never stops the batch. ζ options that apply to no
    item are refused first (``check_zeta``), before the output folder is touched.
    """
    start = time.perf_counter()
    if not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    check_zeta(items, options)
    prepare_out_dir(out_dir, force)
    path = manifest_path(out_dir)
    manifest = Manifest(path, fresh=force)
    notes = manifest.notes
    progress = progress or NoProgress()
    final: dict[str, dict] = {}
    try:
        _remove_stale_temporaries(out_dir)
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


def run_tasks(tasks: Sequence, function: Callable, finish: Callable, failure: Callable,
              executor: cf.Executor | None = None, workers: int | None = None) -> None:
    """The engine under ``run_batch`` and the bench: run ``function(task)`` for every task on
    ``executor`` (any concurrent.futures Executor, e.g. a Dask client's) or else on our own
    spawn process pool of ``workers`` processes (default: the usable cores; rebuilt when a worker
    process dies, ``_run_local``), and call ``finish(outcome)`` in this process as each one ends,
    in the order they end. A task that raises becomes ``failure(task, exception)``, which is
    finished like any outcome. ``function`` must be a picklable top-level function."""
    if not tasks:
        return
    if executor is not None:
        _run_on(executor, tasks, finish, function, failure)
    else:
        _run_local(tasks, workers or default_workers(), finish, function, failure)


def _run_on(executor: cf.Executor, tasks: Sequence, finish, function=run_item, failure=_worker_failure) -> None:
    """Run the tasks on a caller's executor; a task that raises (a worker lost for good) is a
    failure."""
    futures = {executor.submit(function, t): t for t in tasks}
    try:
        for future in cf.as_completed(futures):
            try:
                outcome = future.result()
            except Exception as exc:
                outcome = failure(futures[future], exc)
            finish(outcome)
    except BaseException:
        for future in futures:
            future.cancel()
        raise


def _run_local(tasks: Sequence, workers: int, finish, function=run_item, failure=_worker_failure) -> None:
    """Run the tasks on our own process pool; when a worker process dies the pool breaks, and the
    unfinished tasks go to a new pool (MAX_POOL_RESTARTS times, then they fail)."""
    from concurrent.futures.process import BrokenProcessPool

    pending = list(tasks)
    for attempt in range(MAX_POOL_RESTARTS + 1):
        broken: list = []
        pool = local_executor(min(workers, len(pending)))
        completed = False
        try:
            futures = {pool.submit(function, t): t for t in pending}
            for future in cf.as_completed(futures):
                try:
                    outcome = future.result()
                except BrokenProcessPool as exc:
                    if attempt < MAX_POOL_RESTARTS:
                        broken.append(futures[future])
                        continue
                    outcome = failure(futures[future], exc)
                except Exception as exc:
                    outcome = failure(futures[future], exc)
                finish(outcome)
            completed = True
        finally:
            # on Ctrl-C or an error, do not wait for the queued tasks
            pool.shutdown(wait=completed, cancel_futures=not completed)
        if not broken:
            return
        pending = broken


SCHEDULER_PROTOCOLS = ("tcp", "tls", "ucx", "ws", "wss", "inproc")  # distributed's comm back-ends


def check_scheduler_address(address: str) -> str:
    """``address`` when it has the form of a Dask scheduler address, ``PROTOCOL://HOST:PORT``
    (protocols of SCHEDULER_PROTOCOLS; tcp:// may be left out) with a port 1–65535; InputError
    otherwise. Checked before anything starts, and before dask is imported."""
    from urllib.parse import urlsplit

    text = address.strip() if isinstance(address, str) else ""
    problem = None
    if not text or any(c.isspace() for c in text):
        problem = "not an address"
    else:
        parts = urlsplit(text if "://" in text else "tcp://" + text)
        if parts.scheme not in SCHEDULER_PROTOCOLS:
            problem = f"unknown protocol {parts.scheme!r} (use {', '.join(p + '://' for p in SCHEDULER_PROTOCOLS)})"
        elif parts.scheme != "inproc":
            try:
                port = parts.port
            except ValueError:
                port = -1
            if not parts.hostname:
                problem = "no host"
            elif port is None or not 1 <= port <= 65535:
                problem = "no port 1-65535"
            elif parts.path not in ("", "/") or parts.query or parts.fragment:
                problem = "extra text after HOST:PORT"
    if problem:
        raise InputError(f"--scheduler {address!r}: {problem}; expected an address such as tcp://host:8786")
    return text


def dask_executor(address: str):
    """A Client connected to the Dask scheduler at ``address`` and its Executor (pure=False:
    every submission runs). Needs dask.distributed (``pip install stobuilder[cluster]``)."""
    address = check_scheduler_address(address)
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--scheduler needs dask.distributed: pip install 'stobuilder[cluster]'") from None
    try:
        client = Client(address, timeout="10s")
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(f"{address}: cannot reach the Dask scheduler ({reason})") from None
    return client, client.get_executor(pure=False)


__all__ = [
    "BatchItem",
    "BuildOptions",
    "BatchSummary",
    "ItemOutcome",
    "MANIFEST_NAME",
    "Manifest",
    "Task",
    "check_scheduler_address",
    "dask_executor",
    "discover",
    "is_structure_name",
    "is_up_to_date",
    "make_progress",
    "read_list",
    "read_manifest",
    "run_batch",
    "run_item",
    "run_tasks",
    "structure_extensions",
    "worker_count",
]
