"""The shipped fit library (data/fits_l2.json) and look-ups with fitting on demand.

File layout (our own): {"provenance": {...}, "norm": "l2", "fits": {family: {N: entry}}} where
family is the comma-joined (n, l)-sorted labels ("3s,3p,3d"), N the number of primitives as a
string, and entry = {"exponents": [...], "coefficients": {label: [...]}, "error": {label: ε}}.
Floats are written with repr() precision, keys in a fixed order, so a regeneration on the same
software stack is byte-identical (``python -m stobuilder.expansion.regenerate --check``).
"""

from __future__ import annotations

import json
from functools import lru_cache
from importlib import resources
from typing import Iterable

from .. import __version__
from .fit import MIN_RATIO, NORMS, Fit, _check_inputs, fit_sto, normalise_subshells

LIBRARY_MAX_GAUSSIANS = 6
REGENERATE_COMMAND = "python -m stobuilder.expansion.regenerate"


def library_families() -> list[tuple[str, ...]]:
    """Every subshell family the basis builder needs, in a fixed order.

    For n = 1 … 6: "ns" (n = 1), [ns, np] (n ≥ 2), [ns, np, nd] (n ≥ 3), [ns, np, nd, nf] (n ≥ 4),
    then the single subshells (n, l) with l ≤ 3.
    """
    letters = "spdf"
    out = []
    for n in range(1, 7):
        for top in range(min(n, 4)):
            out.append(tuple(f"{n}{letters[l]}" for l in range(top + 1)))
    for n in range(1, 7):
        for l in range(min(n, 4)):
            fam = (f"{n}{letters[l]}",)
            if fam not in out:
                out.append(fam)
    return out


def family_key(labels: Iterable[str]) -> str:
    return ",".join(labels)


def fit_to_entry(fit: Fit) -> dict:
    extra = {"constrained_min_ratio": MIN_RATIO} if fit.constrained else {}
    return {**extra,
        "exponents": list(fit.exponents),
        "coefficients": {label: list(fit.coefficients[label]) for label in fit.subshells},
        "error": {label: fit.error[label] for label in fit.subshells},
    }


def entry_to_fit(labels: tuple[str, ...], gaussians: int, norm: str, entry: dict) -> Fit:
    return Fit(
        subshells=labels,
        gaussians=gaussians,
        norm=norm,
        exponents=tuple(float(a) for a in entry["exponents"]),
        coefficients={label: tuple(float(c) for c in entry["coefficients"][label]) for label in labels},
        error={label: float(entry["error"][label]) for label in labels},
        constrained="constrained_min_ratio" in entry,
    )


def provenance() -> dict:
    return {
        "method": (
            "least-squares expansion of normalised STOs at zeta = 1 in N normalised Gaussians sharing "
            "exponents within a family (objective: sum of the squared-residual norms); variable projection "
            "over ln(alpha) with analytic overlaps and gradients, deterministic multi-start, BFGS + Newton"
        ),
        "sources": [
            "W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969)",
            "R. F. Stewart, J. Chem. Phys. 52, 431 (1970)",
        ],
        "units": "exponents in bohr^-2 at zeta = 1 bohr^-1 (scale by zeta^2); coefficients for normalised "
        "primitives, contraction normalised to 1; error = least-squares residual norm squared",
        "command": REGENERATE_COMMAND,
        "version": __version__,
    }


def render_library(fits: dict[tuple[str, ...], dict[int, Fit]], norm: str = "l2") -> str:
    """The library file text for the given fits (deterministic)."""
    body = {
        "provenance": provenance(),
        "norm": norm,
        "fits": {
            family_key(labels): {str(n): fit_to_entry(fits[labels][n]) for n in sorted(fits[labels])}
            for labels in fits
        },
    }
    return json.dumps(body, indent=1, ensure_ascii=True) + "\n"


def library_path(norm: str = "l2"):
    return resources.files(__package__).joinpath("data", f"fits_{norm}.json")


@lru_cache(maxsize=None)
def _library(norm: str) -> dict:
    path = library_path(norm)
    if not path.is_file():
        return {}
    return json.loads(path.read_text())["fits"]


@lru_cache(maxsize=None)
def _fit_cached(labels: tuple[str, ...], gaussians: int, norm: str) -> Fit:
    return fit_sto(list(labels), gaussians, norm)


def lookup(subshells: str | Iterable[str], gaussians: int, norm: str = "l2") -> Fit:
    """The fit of ``subshells`` with ``gaussians`` primitives: from the library, else fitted.

    Parameters are those of :func:`stobuilder.expansion.fit_sto`. Fits missing from the shipped
    library are computed and memoised in this process (never written to the package directory).
    """
    _check_inputs(gaussians, norm)
    labels = normalise_subshells(subshells)
    entry = _library(norm).get(family_key(labels), {}).get(str(int(gaussians)))
    if entry is not None:
        return entry_to_fit(labels, int(gaussians), norm, entry)
    return _fit_cached(labels, int(gaussians), norm)


__all__ = ["LIBRARY_MAX_GAUSSIANS", "NORMS", "library_families", "lookup", "render_library"]
