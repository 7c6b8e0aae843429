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
        if os.path.exists(path) and not force:
            raise InputError(f"{path} exists; use --force to overwrite it")
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
