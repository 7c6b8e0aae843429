"""Basis-file formats by name: each module describes itself once (NAME, EXTENSION, DESCRIPTION)
and provides ``write(basis, sp_shells=False) -> str``, a strict ``read(text) -> Basis`` and
``merge(text, basis, sp_shells=False) -> str``. Adding a format is a new module and one line in
``_MODULES`` (DEVELOPERS.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import import_module
from typing import TYPE_CHECKING, Callable

from stobuilder.core import arguments
from stobuilder.core.errors import InputError

if TYPE_CHECKING:  # the format modules import the model; this face does not, so it stays light
    from stobuilder.model.basis import Basis

_MODULES = ("nwchem", "gaussian", "pyscf_format", "psi4", "cp2k", "qcschema", "dalton", "openmolcas")


@dataclass(frozen=True)
class Format:
    """One basis-file format.

    write  (basis, sp_shells=False) -> text
    read   (text) -> Basis with rule "file"; bad text raises InputError naming the line
    merge  (text, basis, sp_shells=False) -> the text with the basis's elements added or replaced
    """

    name: str
    extension: str
    description: str
    write: Callable[..., str]
    read: Callable[[str], Basis] | None = None
    merge: Callable[..., str] | None = None
    entries: Callable[[str], dict] | None = None

    def entries_of(self, text: str) -> dict:
        """The text's entries: {symbol: shells}, or the format's own keys where a file may hold
        several bases per element (CP2K: (symbol, NAME))."""
        if self.entries is not None:
            return self.entries(text)
        return {e.symbol: e.shells for e in self.read(text).elements}


@lru_cache(maxsize=1)
def _registry() -> tuple[Format, ...]:
    out = []
    for mod_name in _MODULES:
        mod = import_module(f"{__name__}.{mod_name}")
        out.append(
            Format(
                mod.NAME, mod.EXTENSION, mod.DESCRIPTION, mod.write, getattr(mod, "read", None),
                getattr(mod, "merge", None), getattr(mod, "entries", None),
            )
        )
    return tuple(out)


def formats() -> dict[str, Format]:
    """All registered formats, by name, in registry order (the modules are read once)."""
    return {f.name: f for f in _registry()}


def get_format(name: str, argument: str = "code") -> Format:
    """The format called ``name``; TypeError for a name that is no string, InputError for an
    unknown one (both messages name ``argument``, the caller's parameter)."""
    table = formats()
    arguments.text(name, argument)
    if name not in table:
        raise InputError(f"{argument}: unknown basis format {name!r}; choose one of {', '.join(table)}")
    return table[name]


def check_basis(value, name: str = "basis") -> Basis:
    """``value`` when it is a stobuilder Basis; TypeError naming ``name`` otherwise."""
    from stobuilder.model.basis import Basis

    if not isinstance(value, Basis):
        raise TypeError(f"{name} must be a stobuilder Basis (from build_basis or read_basis), "
                        f"got {arguments.kind(value)} {arguments.shown(value)}")
    return value


def write_basis(basis: Basis, code: str, sp_shells: bool = False) -> str:
    """The text of ``basis`` in the format of ``code`` (see ``formats()``). TypeError for a
    basis that is no Basis, a code that is no string or an sp_shells that is no bool; InputError
    for an unknown code."""
    check_basis(basis)
    fmt = get_format(code)
    return fmt.write(basis, sp_shells=arguments.flag(sp_shells, "sp_shells"))


# The text formats write 16 significant digits: a number reads back within 5e-16 of itself,
# relative, plus the rounding of the parse; JSON and Python files use repr() and read back exactly.
READBACK_RTOL = 1e-15


def readback_problem(basis: Basis, text: str, code: str) -> str | None:
    """What is wrong when ``text`` (written for ``basis`` in the format of ``code``) is read back
    with our own reader, or None when it gives every element of ``basis`` with the same shells:
    the same l in the same order, the same number of primitives, exponents and coefficients within
    ``READBACK_RTOL`` relative."""
    try:
        back = read_basis(text, code)
    except InputError as exc:
        return str(exc)
    if back.symbols != basis.symbols:
        return f"it holds the elements {', '.join(back.symbols) or 'none'}, not {', '.join(basis.symbols)}"
    for ours in basis.elements:
        theirs = back[ours.symbol].to_pyscf()
        mine = ours.to_pyscf()
        if [s[0] for s in theirs] != [s[0] for s in mine]:
            return f"{ours.symbol} reads back with the shells l = {[s[0] for s in theirs]}, not {[s[0] for s in mine]}"
        for k, (a, b) in enumerate(zip(theirs, mine)):
            if len(a) != len(b):
                return f"{ours.symbol} shell {k + 1} reads back with {len(a) - 1} primitives, not {len(b) - 1}"
            for x, y in zip((v for p in a[1:] for v in p), (v for p in b[1:] for v in p)):
                if not abs(x - y) <= READBACK_RTOL * abs(y):
                    return f"{ours.symbol} shell {k + 1} reads back as {x!r} where the basis has {y!r}"
    return None


def render_checked(basis: Basis, code: str, sp_shells: bool = False, source: str = "") -> str:
    """The text of ``basis`` in the format of ``code``, after the self-check: the text is read back
    with our own reader of the format and must give ``basis`` again (``readback_problem``).
    A failed self-check raises InputError naming ``source`` (the structure the text is for), so
    nothing is written. Every door that writes basis files (``build``, ``batch``) makes its texts
    here."""
    text = write_basis(basis, code, sp_shells=sp_shells)
    problem = readback_problem(basis, text, code)
    if problem is not None:
        where = f"{source}: " if source else ""
        problem = " ".join(problem.split())
        raise InputError(f"{where}the {code} file made for it does not read back as written ({problem}); nothing written")
    return text


def read_basis(text: str, code: str) -> Basis:
    """The basis in ``text``, a file in the format of ``code``: a Basis with rule "file" and the
    shells as written (contraction coefficients of normalised primitives, exponents in bohr⁻²).
    Strict: a truncated text, an unknown element, a non-numeric field or a missing terminator
    raises InputError with a one-line message naming the line. TypeError for a text or a code
    that is no string."""
    arguments.text(text, "text")
    fmt = get_format(code)
    if fmt.read is None:
        raise InputError(f"format {code!r} cannot be read")
    return fmt.read(text)


def merge_basis(text: str, basis: Basis, code: str, sp_shells: bool = False) -> str:
    """``text`` (a file in the format of ``code``) with the elements of ``basis`` added, or put in
    place of the text's own; the text's other elements and lines stay as they were. TypeError
    for a text or code that is no string, a basis that is no Basis or an sp_shells that is no
    bool."""
    arguments.text(text, "text")
    check_basis(basis)
    arguments.flag(sp_shells, "sp_shells")
    fmt = get_format(code)
    if fmt.merge is None:
        raise InputError(f"format {code!r} cannot be merged into")
    return fmt.merge(text, basis, sp_shells=sp_shells)


__all__ = [
    "Format", "check_basis", "format_for_path", "formats", "get_format", "merge_basis", "read_basis", "readback_problem", "render_checked", "write_basis",
]


def format_for_path(path: str) -> str:
    """The format whose file extension ends ``path`` (the longest such extension wins)."""
    hits = sorted((f for f in formats().values() if path.endswith(f.extension)), key=lambda f: -len(f.extension))
    if not hits or (len(hits) > 1 and len(hits[0].extension) == len(hits[1].extension)):
        raise InputError(f"{path}: cannot tell the format from the file name; name it with --code")
    return hits[0].name
