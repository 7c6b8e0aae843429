"""Writing output files safely: everything is checked first, then each file is written to a
temporary file in the same folder and renamed into place, so no reader ever sees half a file."""

from __future__ import annotations

import hashlib
import os
import tempfile
from collections.abc import Mapping

from .errors import InputError


def atomic_write(path: str, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file and an atomic rename."""
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=".stobuilder-", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def check_targets(targets: Mapping[str, str], force: bool) -> None:
    """Raise InputError before anything is written if a target exists (without ``force``) or two
    outputs would land on the same path."""
    seen: dict[str, str] = {}
    for path, source in targets.items():
        real = os.path.abspath(path)
        if real in seen:
            raise InputError(f"{source} and {seen[real]} would both write {path}")
        seen[real] = source
        if os.path.lexists(path) and not force:  # a dangling symbolic link is not replaced either
            what = "exists" if os.path.exists(path) else "is a dangling symbolic link"
            raise InputError(f"{path} {what}; use --force to overwrite it")
        if os.path.isdir(path):
            raise InputError(f"{path} is a folder")


def write_all(contents: Mapping[str, str], out_dir: str) -> None:
    """Create ``out_dir`` if needed and write every file atomically."""
    try:
        os.makedirs(out_dir, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{out_dir}: cannot create the output folder ({exc.strerror})") from None
    for path, text in contents.items():
        atomic_write(path, text)


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _stage_bytes(folder: str, data: bytes, mode: int | None) -> str:
    """A fsynced temporary file in ``folder`` holding ``data`` (permission bits ``mode``, if given)."""
    fd, tmp = tempfile.mkstemp(prefix=".stobuilder-", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            if mode is not None:
                os.fchmod(handle.fileno(), mode)
            os.fsync(handle.fileno())
    except BaseException:
        _unlink_quietly(tmp)
        raise
    return tmp


def _unlink_quietly(path: str) -> None:
    try:
        os.unlink(path)
    except FileNotFoundError:
        pass


def replace_bytes(path: str, data: bytes, mode: int | None = None) -> None:
    """Replace the file ``path`` by ``data`` atomically: a temporary file in ``path``'s own folder,
    given the permission bits ``mode`` (None: what mkstemp gives), renamed over ``path``.
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
