"""Output file names, in one place: ``build``, ``batch`` and the Snakemake workflow all call these.

A structure file's name is its path (relative to the folder the outputs mirror) without the
compression suffix (.gz, .bz2, .xz) and without its extension, "/"-separated: ``sub/water.xyz.gz``
→ ``sub/water``. Its basis file for a code is ``<name><extension>``, and with ``symbol`` (one file
per element) ``<name>.<Symbol><extension>``: ``sub/water.nw``, ``sub/water.O.nw``.
"""

from __future__ import annotations

import os

COMPRESSIONS = ("gz", "bz2", "xz")


def structure_name(path: str) -> str:
    """The output name of the structure file ``path`` (relative or bare; see the module docstring)."""
    stem = os.path.normpath(path)
    if os.path.splitext(stem)[1][1:].lower() in COMPRESSIONS:
        stem = os.path.splitext(stem)[0]
    base = os.path.basename(stem)
    root = os.path.splitext(base)[0] if not base.startswith(".") else base
    stem = os.path.join(os.path.dirname(stem), root or base or "structure")
    return stem.replace(os.sep, "/")


def output_file(name: str, code: str, symbol: str | None = None) -> str:
    """The file name (relative, "/"-separated) of structure ``name``'s basis for ``code``."""
    from stobuilder.formats import get_format

    middle = f".{symbol}" if symbol else ""
    return name + middle + get_format(code).extension


__all__ = ["COMPRESSIONS", "output_file", "structure_name"]
