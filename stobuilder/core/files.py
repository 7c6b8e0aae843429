"""Writing files safely, the one owner of it in stobuilder.

Every file we write goes through a temporary file in the target's own folder (flushed and
fsynced, its mode set from the umask, or kept from the file it replaces) and an atomic rename,
so no reader ever sees half a file. ``write_all`` stages every file of a job first and renames
them only when all are staged: a job writes all of its files or none. Errors name the target,
never the temporary file.
"""

from __future__ import annotations

import hashlib
import os
import stat
import tempfile
from collections.abc import Callable, Mapping

from stobuilder.core.errors import InputError

TEMP_PREFIX = ".stobuilder-"
TEMP_SUFFIX = ".tmp"


def default_mode() -> int:
    """The mode a new file gets: 0o666 less the process umask (what ``open(path, "w")`` gives)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _mode_for(path: str, keep_mode: bool) -> int:
    if keep_mode:
        try:
            return stat.S_IMODE(os.stat(path).st_mode)
        except OSError:
            pass
    return default_mode()


def _cannot(path: str, exc: OSError) -> InputError:
    return InputError(f"{path}: cannot write it ({exc.strerror or exc})")


def _write_temp(folder: str, data: str | bytes | Callable[[str], None], mode: int) -> str:
    """The one low-level writer: a fsynced temporary file in ``folder`` holding ``data`` (text,
    written UTF-8 with "\\n" line ends; bytes; or a function that writes the file it is given),
    with permission bits ``mode``. Returns its name; raises OSError (nothing left behind)."""
    fd, tmp = tempfile.mkstemp(prefix=TEMP_PREFIX, suffix=TEMP_SUFFIX, dir=folder)
    try:
        os.fchmod(fd, mode)
        if callable(data):
            os.close(fd)
            fd = -1
            data(tmp)
            with open(tmp, "rb+") as handle:
                os.fsync(handle.fileno())
        else:
            raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
            with os.fdopen(fd, "wb") as handle:
                fd = -1
                handle.write(raw)
                handle.flush()
                os.fsync(handle.fileno())
    except BaseException:
        if fd >= 0:
            os.close(fd)
        _unlink(tmp)
        raise
    return tmp


def stage(path: str, data: str | bytes | Callable[[str], None], keep_mode: bool = False) -> str:
    """Write a temporary file beside ``path`` with ``data`` (see ``_write_temp``) and return its
    name. The mode is the umask's, or with ``keep_mode`` that of the existing ``path``.
    InputError names ``path``."""
    folder = os.path.dirname(os.path.abspath(path))
    try:
        return _write_temp(folder, data, _mode_for(path, keep_mode))
    except OSError as exc:
        raise _cannot(path, exc) from None


def _unlink(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


def atomic_write(path: str | os.PathLike, data: str | bytes | Callable[[str], None], keep_mode: bool = False) -> None:
    """Write ``data`` to ``path`` through a temporary file and an atomic rename (see ``stage``)."""
    write_all({os.fspath(path): data}, keep_mode=keep_mode)


def write_all(contents: Mapping[str, str | bytes], out_dir: str | None = None, keep_mode: bool = False) -> None:
    """Write every file of ``contents`` (path → data) or none: create ``out_dir`` if needed, stage
    every file, then rename them into place. If staging fails, nothing is renamed; if a rename
    fails, the files already renamed are put back as they were (a replaced file from its hard-link
    backup) as far as the file system allows."""
    if out_dir is not None:
        try:
            os.makedirs(out_dir, exist_ok=True)
        except OSError as exc:
            raise InputError(f"{out_dir}: cannot create the output folder ({exc.strerror})") from None
    staged: list[tuple[str, str]] = []
    try:
        for path, data in contents.items():
            staged.append((path, stage(path, data, keep_mode)))
    except BaseException:
        for _, tmp in staged:
            _unlink(tmp)
        raise
    done: list[tuple[str, str | None]] = []  # (target, backup of the file it replaced)
    try:
        for path, tmp in staged:
            backup = None
            if os.path.lexists(path) and not os.path.islink(path):
                backup = tmp[: -len(TEMP_SUFFIX)] + "-old" + TEMP_SUFFIX
                try:
                    os.link(path, backup)
                except OSError:
                    backup = None
            try:
                os.replace(tmp, path)
            except OSError as exc:
                if backup:
                    _unlink(backup)
                raise _cannot(path, exc) from None
            done.append((path, backup))
    except BaseException:
        for path, backup in reversed(done):
            if backup:
                try:
                    os.replace(backup, path)
                except OSError:
                    pass
            else:
                _unlink(path)
        for _, tmp in staged:
            _unlink(tmp)
        raise
    for _, backup in done:
        if backup:
            _unlink(backup)


class OverwriteError(InputError):
    """A target exists and ``force`` was not given. The message says how to allow it in the
    words of the door: ``force=True`` from Python, ``render({"force": "--force"})`` on the
    command line (``cli`` prints every InputError that has ``render`` that way)."""

    def __init__(self, text: str):
        self.text = text
        super().__init__(self.render({}))

    def render(self, names: Mapping[str, str]) -> str:
        return f"{self.text}; use {names.get('force', 'force=True')} to overwrite it"


def _probe(folder: str) -> OSError | None:
    """Create a temporary file in ``folder`` and remove it at once: None when that worked, else
    the OSError. Permission bits alone do not answer this (root ignores them; a read-only file
    system or /sys refuses root too)."""
    try:
        fd, name = tempfile.mkstemp(prefix=TEMP_PREFIX, suffix=TEMP_SUFFIX, dir=folder)
    except OSError as exc:
        return exc
    os.close(fd)
    _unlink(name)
    return None


def _folder_problem(folder: str, make: bool, subject: str | None, probed: dict[str, OSError | None]) -> str | None:
    """What stops files being written in ``folder``, as a message, or None. ``make``: a missing
    folder may be made (its nearest existing ancestor must then be a folder we can write into).
    The message begins with ``subject`` (None: the folder itself). ``probed`` keeps the probe of
    each existing folder already tried."""
    head = f"{folder}:" if subject is None else f"{subject}: its folder {folder}"
    nearest = os.path.abspath(folder)
    while not os.path.lexists(nearest):
        nearest = os.path.dirname(nearest)
    missing = nearest != os.path.abspath(folder)
    if missing and not make:
        return f"{head} does not exist"
    if not os.path.isdir(nearest):
        return f"{head} cannot be made, {nearest} is not a folder" if missing else f"{head} exists and is not a folder"
    if nearest not in probed:
        probed[nearest] = _probe(nearest)
    exc = probed[nearest]
    if exc is None:
        return None
    reason = exc.strerror or str(exc)
    return f"{head} cannot be made in {nearest} ({reason})" if missing else f"{subject or folder}: cannot write there ({reason})"


def check_folder(folder: str, make: bool = True) -> None:
    """Before any work: files can be written in ``folder``. It exists as a folder, or (``make``)
    can be made, its nearest existing ancestor being a folder; and a temporary file can be
    created (and is removed at once) in the nearest existing one, which is what catches
    read-only file systems whoever we are. InputError naming ``folder`` (and what is in the way)
    otherwise. Nothing stays on disk."""
    problem = _folder_problem(os.fspath(folder), make, None, {})
    if problem:
        raise InputError(problem)


def check_targets(targets: Mapping[str, str], force: bool, inputs=(), make_folders: bool = True,
                  name: str = "") -> None:
    """Before any work, raise InputError unless every file of ``targets`` (path → the input file
    that writes it, or "" for none) can be written: no two targets on one path; a target is not a folder, not one of
    the inputs (the values of ``targets`` and ``inputs``; even with ``force``), and not an
    existing file or dangling symbolic link unless ``force`` (OverwriteError); its folder exists
    or (``make_folders``) can be made, and a file can be created there (see ``check_folder``).
    ``name`` (e.g. a flag, "--out") is put before each target in the messages."""
    seen: dict[str, str] = {}
    given = [p for p in dict.fromkeys((*targets.values(), *inputs)) if os.path.exists(p)]
    probed: dict[str, OSError | None] = {}
    for path, source in targets.items():
        label = f"{name} {path}" if name else path
        real = os.path.abspath(path)
        if real in seen:
            raise InputError(f"{source} and {seen[real]} would both write {path}")
        seen[real] = source
        if os.path.isdir(path):
            raise InputError(f"{label} is a folder")
        if os.path.exists(path):
            for other in given:
                if os.path.samefile(path, other):
                    raise InputError(f"{label} is the input {other}; the output needs a name of its own")
        if os.path.lexists(path) and not force:  # a dangling symbolic link is not replaced either
            raise OverwriteError(f"{label} {'exists' if os.path.exists(path) else 'is a dangling symbolic link'}")
        problem = _folder_problem(os.path.dirname(path) or os.curdir, make_folders, label if name else None, probed)
        if problem:
            raise InputError(problem)


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _stage_bytes(folder: str, data: bytes, mode: int | None) -> str:
    """A fsynced temporary file in ``folder`` holding ``data`` (permission bits ``mode``, else the
    umask's); OSError as it comes, for callers that word their own message."""
    return _write_temp(folder, data, default_mode() if mode is None else mode)


def _unlink_quietly(path: str) -> None:
    try:
        os.unlink(path)
    except FileNotFoundError:
        pass


def replace_bytes(path: str, data: bytes, mode: int | None = None) -> None:
    """Replace the file ``path`` by ``data`` atomically: a temporary file in ``path``'s own folder,
    given the permission bits ``mode`` (None: the umask's), renamed over ``path``.
    ``path`` should be the real file (os.path.realpath), so that a symbolic link keeps pointing
    at it and the rename stays within one file system."""
    tmp = _stage_bytes(os.path.dirname(os.path.abspath(path)), data, mode)
    try:
        os.replace(tmp, path)
    except BaseException:
        _unlink_quietly(tmp)
        raise


def create_bytes(path: str, data: bytes, mode: int | None = None) -> bool:
    """Create the new file ``path`` holding ``data`` atomically, never replacing an existing file
    (a hard link of a finished temporary file, which fails if ``path`` exists). Returns False,
    writing nothing, when ``path`` already exists."""
    tmp = _stage_bytes(os.path.dirname(os.path.abspath(path)), data, mode)
    try:
        os.link(tmp, path)
    except FileExistsError:
        return False
    except OSError:  # a file system without hard links: exclusive creation, then the bytes
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666 if mode is None else mode)
        except FileExistsError:
            return False
        try:
            with os.fdopen(fd, "wb") as handle:
                handle.write(data)
                handle.flush()
                os.fsync(handle.fileno())
        except BaseException:
            _unlink_quietly(path)
            raise
    finally:
        _unlink_quietly(tmp)
    return True


CACHE_ENV = "STOBUILDER_CACHE_DIR"


def cache_folder(kind: str):
    """The one place cache folders come from: ``$STOBUILDER_CACHE_DIR/<kind>`` if the variable is
    set, else ``platformdirs.user_cache_dir("stobuilder")/<kind>`` (never the package folder).
    ``kind`` is "fits" (fits computed on demand) or "optimized" (optimised ζ beyond the table)."""
    from pathlib import Path

    env = os.environ.get(CACHE_ENV)
    if env:
        return Path(env) / kind
    import platformdirs

    return Path(platformdirs.user_cache_dir("stobuilder")) / kind


def read_toml(path, what: str) -> tuple[dict, str]:
    """(document, "WHAT 'path'") of a TOML file; InputError naming ``what`` and the path for a
    file that cannot be read or is not TOML. The one TOML reader (zeta files, tune's weights)."""
    import sys

    from stobuilder.core import arguments

    path = arguments.path(path, "path")
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # pragma: no cover - Python 3.10
        import tomli as tomllib
    where = f"{what} {str(path)!r}"
    try:
        with open(path, "rb") as fh:
            data = fh.read()
        if data.startswith(b"\xef\xbb\xbf"):  # a UTF-8 byte-order mark, as some editors write
            data = data[3:]
        return tomllib.loads(data.decode("utf-8")), where
    except OSError as err:
        raise InputError(f"{where}: cannot read it ({err.strerror})") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputError(f"{where}: not valid TOML ({' '.join(str(err).split())})") from None
