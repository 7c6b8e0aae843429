"""Merging into an existing basis file (``build --merge-into``): read the target, merge, prove that
nothing was lost, back the old bytes up and replace the file atomically.

    basis file ──read_merge_target──▶ (real path, bytes, text, permission bits)
        ──merge_text (formats.merge_basis + read-back check)──▶ merged text
        ──merge_file──▶ backup_path (FILE.bak, FILE.bak2, …) written, then the file replaced

``union_basis`` makes the one basis of all structures that a merge writes.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Sequence

from stobuilder.core.errors import InputError
from stobuilder.core.files import create_bytes, replace_bytes
from stobuilder.formats import format_for_path, get_format, merge_basis
from stobuilder.model.basis import Basis

__all__ = ["backup_path", "merge_file", "merge_text", "read_merge_target", "union_basis"]


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
