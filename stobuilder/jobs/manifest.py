"""The manifest of a job run: one JSON record per finished task, appended to a locked file.

A run opens its output folder's manifest (``prepare_out_dir`` first, then ``Manifest``: an
exclusive lock, appends flushed and fsynced), reads what an earlier run recorded
(``read_manifest``: the last usable record per key, unusable lines noted and skipped) and appends
a record as each task finishes. What a record must hold is its kind's layout (key → (test, what,
required)), checked by ``layout_problem`` with the small tests here (``is_text``, ``is_count``,
``is_sha256``, ``optional`` ...); the batch and the bench each bring their own layout and key.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import stat
from collections.abc import Callable, Mapping, Sequence
from datetime import datetime, timezone

from stobuilder.core.errors import InputError
from stobuilder.core.files import TEMP_PREFIX

STATUSES = ("done", "failed", "skipped")  # what a finished task is, in every manifest and progress count


def sha256_file(path: str) -> str:
    """SHA-256 of a file's bytes (hex)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


# Record layouts: key → (test, what the value must be, required). A record is usable when it is a
# JSON object with every required key, no unknown key, and every value passing its test; a nested
# layout (a dict in place of the test) is checked the same way. One layout per record kind: the
# batch's in stobuilder/batch.py (BATCH_RECORD), the bench's in bench/run.py; ``layout_problem``
# checks either.


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


def read_manifest(path: str, notes: list[str] | None = None, *, key: str,
                  problem: Callable[[object], str | None]) -> dict[str, dict]:
    """The last record of every input in a manifest (``record[key]`` → record; for a batch the
    input path). ``problem`` says why a decoded line is not a usable record, or None: each kind
    of record passes its own (the batch's ``batch.read_manifest``, the bench's ``run_bench``).

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
        why = problem(record)
        if why:
            bad.append((number, why))
            continue
        last[record[key]] = record
    if bad and notes is not None:
        shown = "; ".join(f"line {n}: {why}" for n, why in bad[:5]) + (f"; and {len(bad) - 5} more" if len(bad) > 5 else "")
        notes.append(f"{path}: skipped {len(bad)} unusable line(s) ({shown}); their items are computed again "
                     f"(--force starts a fresh manifest, keeping this one as a backup)")
    return last


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


def prepare_out_dir(out_dir: str, force: bool, manifest_name: str, what: str) -> None:
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


def remove_stale_temporaries(out_dir: str) -> None:
    """Temporary files of atomic writes cut short by a killed run (we hold the folder's lock)."""
    for root, _, files in os.walk(out_dir):
        for f in files:
            if f.startswith(TEMP_PREFIX) and f.endswith(".tmp"):
                os.unlink(os.path.join(root, f))


__all__ = [
    "Manifest",
    "STATUSES",
    "is_count",
    "is_finite",
    "is_seconds",
    "is_sha256",
    "is_text",
    "is_whole",
    "layout_problem",
    "list_of",
    "one_of",
    "optional",
    "prepare_out_dir",
    "read_manifest",
    "remove_stale_temporaries",
    "sha256_file",
    "utc_now",
]
