"""MolSSI QCSchema basis-set JSON (schema_name "qcschema_basis", schema_version 1).

Layout relied on (the QCSchema basis-set model as qcelemental implements it, qcelemental.models.
BasisSet): ``name``, ``description``, ``center_data`` {key: {"electron_shells": [...]}} and
``atom_map`` [keys]; each electron shell has ``angular_momentum`` [l] (a fused sp shell [0, 1]),
``harmonic_type`` ("spherical" or "cartesian"), ``exponents`` [α] and ``coefficients`` [[c], ...]
(one row per contraction, or per l of a fused shell). The schema forbids extra fields, so the
provenance goes into ``description``. We key ``center_data`` by element symbol and list each
element once in ``atom_map``. Floats are written with repr(): they read back bit for bit.
"""

from __future__ import annotations

import json

from stobuilder.model.basis import Basis
from stobuilder.core.errors import InputError
from stobuilder.formats.common import Lines, ParsedElement, file_basis, make_shell, provenance_lines, read_symbol, shell_blocks

NAME = "qcschema"
EXTENSION = ".qcschema.json"
DESCRIPTION = "MolSSI QCSchema basis-set JSON (qcschema_basis), checked with qcelemental"


def _shell_doc(shells) -> dict:
    return {
        "harmonic_type": "spherical",
        "angular_momentum": [s.l for s in shells],
        "exponents": list(shells[0].exponents),
        "coefficients": [list(s.coefficients) for s in shells],
    }


def _dump(doc: dict) -> str:
    return json.dumps(doc, indent=1) + "\n"


def _validated(doc: dict, text: str | None = None) -> dict:
    """The document as qcelemental's BasisSet model has checked it (nbf filled in). With the
    ``text`` it came from, an error names the line of the failing field."""
    from qcelemental.models import BasisSet

    try:
        model = BasisSet(**doc)
    except Exception as exc:  # pydantic's ValidationError: name the first failing field
        where, problem = _first_error(exc)
        at = ""
        if text is not None:
            pos = 0
            for part in where:
                if isinstance(part, str):
                    _, pos = _line_of(text, part, pos)
            at = f", line {text.count(chr(10), 0, pos) + 1}"
        path = ".".join(str(x) for x in where)
        raise InputError(f"{NAME} basis{at}: not a valid qcschema_basis document: {path}: {problem}") from None
    out = dict(doc)
    out["nbf"] = model.nbf
    return out


def _first_error(exc) -> tuple[tuple, str]:
    errors = getattr(exc, "errors", None)
    if callable(errors):
        first = errors()[0]
        return tuple(first["loc"]), first["msg"]
    return (), str(exc).splitlines()[0]


def to_document(basis: Basis, sp_shells: bool = False) -> dict:
    doc = {
        "schema_name": "qcschema_basis",
        "schema_version": 1,
        "name": basis.name,
        "description": "; ".join(provenance_lines(basis)),
        "center_data": {
            e.symbol: {"electron_shells": [_shell_doc(shells) for _, shells in shell_blocks(e, sp_shells)]}
            for e in basis.elements
        },
        "atom_map": list(basis.symbols),
    }
    return _validated(doc)


def write(basis: Basis, sp_shells: bool = False) -> str:
    return _dump(to_document(basis, sp_shells))


def _load(text: str) -> tuple[dict, Lines]:
    lines = Lines(text, NAME)
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise lines.error(exc.lineno, f"not JSON: {exc.msg} (column {exc.colno})") from None
    except RecursionError:  # json's decoder recurses once per nesting level
        raise lines.error(1, "JSON nested too deeply to be a basis-set document") from None
    if not isinstance(doc, dict):
        raise lines.error(1, "a JSON object expected")
    _precheck(text, doc, lines)
    return _validated(doc, text), lines


def _line_of(text: str, key: str, start: int = 0) -> tuple[int, int]:
    """(1-based line, offset) of the JSON string ``key`` at or after ``start``."""
    at = text.find(json.dumps(key), start)
    at = start if at < 0 else at
    return text.count("\n", 0, at) + 1, at


def _precheck(text: str, doc: dict, lines: Lines) -> None:
    """The checks that name a line, before qcelemental's model: centre keys are element symbols,
    exponents and coefficients are numbers."""
    centers = doc.get("center_data")
    if not isinstance(centers, dict):
        return
    for key, center in centers.items():
        line, at = _line_of(text, key)
        read_symbol(key, line, lines)
        shells = center.get("electron_shells") if isinstance(center, dict) else None
        for shell in shells if isinstance(shells, list) else ():
            if not isinstance(shell, dict):
                continue
            values = list(shell.get("exponents") or [])
            for row in shell.get("coefficients") or []:
                values.extend(row if isinstance(row, list) else [row])
            for v in values:
                if isinstance(v, bool) or not isinstance(v, (int, float)):
                    bad_line, _ = _line_of(text, v, at) if isinstance(v, str) else (line, at)
                    raise lines.error(bad_line, f"number expected in a shell of {key}, found {json.dumps(v)}")


def read(text: str) -> Basis:
    """The basis of a QCSchema basis-set document, validated by qcelemental; center keys must be
    element symbols (each shell's harmonic_type is not kept: our Basis holds pure functions)."""
    doc, lines = _load(text)
    elements = []
    for key, center in doc["center_data"].items():
        line, _ = _line_of(text, key)
        symbol = read_symbol(key, line, lines)
        if any(e.symbol == symbol for e in elements):
            raise lines.error(line, f"element {symbol} appears a second time in center_data")
        if center.get("ecp_potentials"):
            raise lines.error(line, f"center {key!r} has ECP potentials, which stobuilder does not read")
        shells = []
        for sh in center["electron_shells"]:
            ls = sh["angular_momentum"]
            rows = sh["coefficients"]
            pairs = zip(ls, rows) if len(ls) > 1 else ((ls[0], row) for row in rows)
            shells.extend(make_shell(l, [float(a) for a in sh["exponents"]], [float(c) for c in row], line, lines) for l, row in pairs)
        elements.append(ParsedElement(symbol, tuple(shells), ((line - 1, line),)))
    return file_basis(elements, lines)


def merge(text: str, basis: Basis, sp_shells: bool = False) -> str:
    """The document with our elements' centres in place of (or added to) its own; its other
    centres, name and description stay; atom_map gains our new elements."""
    doc, lines = _load(text)
    read(text)  # the same checks as read_basis
    ours = to_document(basis, sp_shells)
    centers = dict(doc["center_data"])
    keys = {read_symbol(k, 1, lines): k for k in centers}
    atom_map = list(doc["atom_map"])
    for symbol, center in ours["center_data"].items():
        key = keys.get(symbol, symbol)
        if key not in centers:
            atom_map.append(key)
        centers[key] = center
    out = {k: v for k, v in doc.items() if k != "nbf"}
    out["center_data"] = centers
    out["atom_map"] = atom_map
    return _dump(_validated(out))
