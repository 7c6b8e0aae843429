"""Output formats by name: each module describes itself once (NAME, EXTENSION, DESCRIPTION) and
provides ``write(basis, sp_shells=False) -> str``. Adding a format is a new module and one line in
``_MODULES`` (DEVELOPERS.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import import_module
from typing import Callable

from ..basis import Basis
from ..errors import InputError

_MODULES = ("nwchem", "gaussian94", "pyscf_format")


@dataclass(frozen=True)
class Format:
    name: str
    extension: str
    description: str
    write: Callable[..., str]


def formats() -> dict[str, Format]:
    """All registered output formats, by name, in registry order."""
    out = {}
    for mod_name in _MODULES:
        mod = import_module(f"{__name__}.{mod_name}")
        out[mod.NAME] = Format(mod.NAME, mod.EXTENSION, mod.DESCRIPTION, mod.write)
    return out


def get_format(name: str) -> Format:
    table = formats()
    if name not in table:
        raise InputError(f"unknown output format {name!r}; choose one of {', '.join(table)}")
    return table[name]


def write_basis(basis: Basis, code: str, sp_shells: bool = False) -> str:
    """The text of ``basis`` in the format of ``code`` (see ``formats()``)."""
    return get_format(code).write(basis, sp_shells=sp_shells)


__all__ = ["Format", "formats", "get_format", "write_basis"]
