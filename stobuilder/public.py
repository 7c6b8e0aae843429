"""The public doors whose bodies live in modules other parts of the package own (formats,
expansion, pipeline): each checks its arguments (``stobuilder.core.arguments``) and calls the body.
The names and signatures are the bodies' own; ``stobuilder/__init__.py`` exports these.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Iterable

from stobuilder.core import arguments
from stobuilder.model.basis import Basis
from stobuilder.expansion import fit_sto as _fit_sto
from stobuilder.formats import merge_basis as _merge_basis
from stobuilder.formats import read_basis as _read_basis
from stobuilder.formats import write_basis as _write_basis
from stobuilder.pipeline.path import build_structures as _build_structures


def _check_basis(value, name: str = "basis"):
    """``value`` when it is a stobuilder Basis; TypeError otherwise."""
    if not isinstance(value, Basis):
        raise TypeError(f"{name} must be a stobuilder Basis (from build_basis or read_basis), got {arguments._kind(value)} {arguments._shown(value)}")
    return value


def _door(body, check):
    """``body`` behind a check that may rewrite its bound arguments (``check(args)``: a dict)."""
    signature = inspect.signature(body)

    @functools.wraps(body)
    def door(*args, **kwargs):
        try:
            bound = signature.bind(*args, **kwargs)
        except TypeError as exc:
            raise TypeError(f"{body.__name__}(): {exc}") from None
        check(bound.arguments)
        return body(*bound.args, **bound.kwargs)

    return door


def _basis_text_code(args):
    if "basis" in args:
        _check_basis(args["basis"])
    if "text" in args:
        arguments.text(args["text"], "text")
    arguments.text(args["code"], "code")
    if "sp_shells" in args:
        arguments.flag(args["sp_shells"], "sp_shells")


write_basis = _door(_write_basis, _basis_text_code)
read_basis = _door(_read_basis, _basis_text_code)
merge_basis = _door(_merge_basis, _basis_text_code)


def _fit(args):
    subshells = args["subshells"]
    if not isinstance(subshells, str):
        if not isinstance(subshells, Iterable):
            raise TypeError(f"subshells must be a label such as '1s' or a list of labels, got {type(subshells).__name__}")
        args["subshells"] = tuple(arguments.text(s, "subshells: item") for s in subshells)
    arguments.whole_number(args["gaussians"], "gaussians", allow_none=False)


fit_sto = _door(_fit_sto, _fit)


def _structures(args):
    args["paths"] = arguments.paths(args["paths"], "paths")
    for name in ("charge", "spin"):
        if name in args:
            args[name] = arguments.whole_number(args[name], name)
    if "codes" in args:
        args["codes"] = arguments.names(args["codes"], "codes")
    if "merge_into" in args and args["merge_into"] is not None:
        args["merge_into"] = arguments.path(args["merge_into"], "merge_into")
    if "out_dir" in args:
        args["out_dir"] = arguments.path(args["out_dir"], "out_dir")
    for name in ("check", "force", "sp_shells", "write", "split_elements"):
        if name in args:
            arguments.flag(args[name], name)
    if "zeta" in args:
        arguments.mapping(args["zeta"], "zeta")


build_structures = _door(_build_structures, _structures)

__all__ = ["build_structures", "fit_sto", "merge_basis", "read_basis", "write_basis"]
