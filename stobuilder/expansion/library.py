"""The shipped fit library (data/fits_l2.json, data/fits_h1.json), the user's fit cache, look-ups.

File layout (our own): {"provenance": {...}, "norm": "l2", "fits": {family: {N: entry}}} where
family is the comma-joined (n, l)-sorted labels ("3s,3p,3d"), N the number of primitives as a
string, and entry = {"exponents": [...], "coefficients": {label: [...]}, "error": {label: ε}}.
Floats are written with repr() precision, keys in a fixed order, so a regeneration on the same
software stack is byte-identical (``python -m stobuilder.maintainer.fits --check``).

Fits the library lacks (other subshell combinations, non-integer n*, unequal ζ ratios) are fitted
on demand and cached, one small JSON file per fit, in the user's cache folder:
``$STOBUILDER_CACHE_DIR`` if set, else ``platformdirs.user_cache_dir("stobuilder")``, sub-folder
``fits``. Files are written atomically with a SHA-256 of their entry; a damaged, foreign, edited or
inconsistent file (``_consistent``) is ignored, refitted and rewritten. The
package directory is never written to.
"""

from __future__ import annotations

from stobuilder.core.defaults import DEFAULTS

import hashlib
import json
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Iterable, Mapping

from stobuilder.core.files import CACHE_ENV, cache_folder
from stobuilder.core.version import __version__
from stobuilder.expansion.fit import ALGORITHM, MIN_RATIO, NORMS, Fit, check_inputs, positive_map, fit_sto, normalise_subshells

LIBRARY_MAX_GAUSSIANS = 12
REGENERATE_COMMAND = "python -m stobuilder.maintainer.fits"


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
    if fit.n_eff:
        extra["n_eff"] = dict(fit.n_eff)
    if fit.zeta_ratio:
        extra["zeta_ratio"] = dict(fit.zeta_ratio)
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
        n_eff={k: float(v) for k, v in entry.get("n_eff", {}).items()},
        zeta_ratio={k: float(v) for k, v in entry.get("zeta_ratio", {}).items()},
    )


_METHODS = {
    "l2": "expansion of normalised STOs at zeta = 1 in N normalised Gaussians sharing exponents within a family, "
    "minimising the sum over the family of the squared L2 distances |phi - chi|^2 with the contraction chi "
    "normalised, = 2(1 - sqrt(q)), q the squared cosine between the STO and the Gaussian span (the published "
    "objective)",
    "h1": "expansion of normalised STOs at zeta = 1 in N normalised Gaussians sharing exponents within a family, "
    "minimising the sum over the family of the squared Sobolev H1 distances (|f|^2 + |grad f|^2, gradient in units "
    "of 1/zeta) between the STO and the contraction, both normalised in H1, = 2(1 - sqrt(q)), q the squared H1 "
    "cosine between the STO and the Gaussian span; coefficients then rescaled to an L2-normalised contraction",
}


def provenance(norm: str = DEFAULTS["norm"]) -> dict:
    return {
        "method": _METHODS[norm] + "; variable projection over ln(alpha) with closed-form integrals (no quadrature "
        "grid): trust-region Newton on the exact Hessian from deterministic starts (continuation from N-1 and "
        "even-tempered sets) in double precision, finished in 113-bit ball arithmetic",
        "sources": [
            "W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969)",
            "R. F. Stewart, J. Chem. Phys. 52, 431 (1970)",
            "G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10, 413 (1973)",
        ],
        "units": "exponents in bohr^-2 at zeta = 1 bohr^-1 (scale by zeta^2); coefficients for normalised "
        "primitives, contraction normalised to 1; error = per subshell the squared distance 2(1 - sqrt(q)) between "
        "the STO and the contraction, both normalised in the fitted norm",
        "algorithm": ALGORITHM,
        "command": REGENERATE_COMMAND,
        "version": __version__,
    }


def render_library(fits: dict[tuple[str, ...], dict[int, Fit]], norm: str = DEFAULTS["norm"]) -> str:
    """The library file text for the given fits (deterministic)."""
    body = {
        "provenance": provenance(norm),
        "norm": norm,
        "fits": {
            family_key(labels): {str(n): fit_to_entry(fits[labels][n]) for n in sorted(fits[labels])}
            for labels in fits
        },
    }
    return json.dumps(body, indent=1, ensure_ascii=True) + "\n"


def library_path(norm: str = DEFAULTS["norm"]):
    return resources.files(__package__).joinpath("data", f"fits_{norm}.json")


@lru_cache(maxsize=None)
def _library(norm: str) -> dict:
    path = library_path(norm)
    if not path.is_file():
        return {}
    return json.loads(path.read_text())["fits"]


def cache_dir() -> Path:
    """The folder of fits computed on demand (``files.cache_folder("fits")``)."""
    return cache_folder("fits")


def _cache_key(labels, gaussians, norm, n_eff, zeta_ratio) -> str:
    parts = [ALGORITHM, norm, family_key(labels), str(gaussians)]
    parts += [f"n*{k}={v!r}" for k, v in n_eff.items()] + [f"ratio{k}={v!r}" for k, v in zeta_ratio.items()]
    return ";".join(parts)


def _write_atomic(path: Path, text: str) -> None:
    from stobuilder.core.files import atomic_write

    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write(path, text)


def _entry_digest(key: str, entry: dict) -> str:
    """SHA-256 of the cache key and the entry as written (sorted keys, repr floats): stored beside
    the entry, so any change of its numbers (a damaged disk, an edit) is detected."""
    return hashlib.sha256((key + "\n" + json.dumps(entry, sort_keys=True)).encode()).hexdigest()


# How far a cached entry's numbers may be from what they claim (common practice, no source: the
# double-precision re-evaluation of a ball-arithmetic fit, measured over the whole library, N ≤ 12,
# both norms: the norm² of a contraction within 2e-15 of 1, the squared L2 distance of a
# contraction from the normalised optimum at its exponents ≤ 1.5e-25, its error within 6e-15 of
# the objective recomputed there).
CACHE_NORM_TOL = 1e-12
CACHE_DISTANCE_TOL = 1e-20
CACHE_ERROR_TOL = 1e-13


def _consistent(fit: Fit) -> bool:
    """Whether a fit read from the cache is what it claims, re-evaluated in double precision at
    its exponents: N positive, finite, descending exponents; per subshell N finite coefficients
    whose contraction has L2 norm 1 and equals the L2-normalised optimum at those exponents; an
    error equal to the objective 2(1 − √q) there (tolerances CACHE_*_TOL)."""
    import math

    import numpy as np

    from stobuilder.expansion.analytic import Problem, gaussian_overlap
    from stobuilder.expansion.fit import targets_for

    alpha = np.array(fit.exponents, dtype=float)
    if alpha.shape != (fit.gaussians,) or not np.all(np.isfinite(alpha)) or not np.all(alpha > 0):
        return False
    if fit.gaussians > 1 and not np.all(alpha[:-1] > alpha[1:]):
        return False
    problem = Problem(targets_for(fit.subshells, fit.n_eff, fit.zeta_ratio), fit.norm)
    out = problem.evaluate(np.log(alpha), order=0)
    if out is None:
        return False
    optimum, _, _, best = out
    for t, label, f_best, c_best in zip(problem.targets, fit.subshells, optimum, best):
        c = np.array(fit.coefficients[label], dtype=float)
        error = fit.error[label]
        if c.shape != alpha.shape or not np.all(np.isfinite(c)) or not math.isfinite(error):
            return False
        if abs(float(c @ gaussian_overlap(t.l, alpha) @ c) - 1.0) > CACHE_NORM_TOL:
            return False
        # the stored contraction is the optimum at the stored exponents, L2-normalised as fit_sto does
        c_best = np.asarray(c_best, dtype=float)
        c_best = c_best / math.sqrt(float(c_best @ gaussian_overlap(t.l, alpha) @ c_best))
        d = c - c_best
        if float(d @ gaussian_overlap(t.l, alpha) @ d) > CACHE_DISTANCE_TOL:
            return False
        if abs(error - f_best) > CACHE_ERROR_TOL + 1e-9 * f_best:
            return False
    return True


def _read_cached(path: Path, key: str, labels, gaussians, norm) -> Fit | None:
    """The fit in the cache file, or None when it is missing, damaged, foreign or inconsistent."""
    try:
        doc = json.loads(path.read_text(encoding="ascii"))
        if doc.get("key") != key or doc.get("sha256") != _entry_digest(key, doc["fit"]):
            return None
        fit = entry_to_fit(labels, gaussians, norm, doc["fit"])
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return None
    return fit if _consistent(fit) else None


def _cached_fit(labels, gaussians, norm, n_eff, zeta_ratio) -> Fit:
    """Read the fit from the user cache, or fit it and store it there (best effort: an unwritable
    cache folder only costs the refit next time). A file is used only when its checksum matches
    and its numbers are consistent (``_consistent``); anything else is refitted and rewritten."""
    key = _cache_key(labels, gaussians, norm, n_eff, zeta_ratio)
    path = cache_dir() / (hashlib.sha256(key.encode()).hexdigest()[:24] + ".json")
    fit = _read_cached(path, key, labels, gaussians, norm)
    if fit is not None:
        return fit
    fit = fit_sto(list(labels), gaussians, norm, n_eff=n_eff or None, zeta_ratio=zeta_ratio or None)
    entry = fit_to_entry(fit)
    text = json.dumps({"key": key, "version": __version__, "sha256": _entry_digest(key, entry), "fit": entry},
                      indent=1) + "\n"
    try:
        _write_atomic(path, text)
    except OSError:
        pass
    return fit


@lru_cache(maxsize=None)
def _fit_cached(labels: tuple[str, ...], gaussians: int, norm: str, n_eff: tuple = (), zeta_ratio: tuple = ()) -> Fit:
    return _cached_fit(labels, gaussians, norm, dict(n_eff), dict(zeta_ratio))


def lookup(
    subshells: str | Iterable[str],
    gaussians: int,
    norm: str = DEFAULTS["norm"],
    n_eff: Mapping[str, float] | None = None,
    zeta_ratio: Mapping[str, float] | None = None,
) -> Fit:
    """The fit of ``subshells`` with ``gaussians`` primitives: from the library, else the cache, else fitted.

    Parameters are those of :func:`stobuilder.expansion.fit_sto`. Reading the shipped library
    costs microseconds; fits it lacks are computed once, stored in the user cache (see
    ``cache_dir``) and memoised in this process.
    """
    gaussians = check_inputs(gaussians, norm)
    labels = normalise_subshells(subshells)
    from stobuilder.model.elements import parse_subshell_label

    n_map = {k: v for k, v in positive_map("n_eff", n_eff, labels, 1.0, 8.0).items() if v != parse_subshell_label(k)[0]}
    r_map = {k: v for k, v in positive_map("zeta_ratio", zeta_ratio, labels, 0.2, 5.0).items() if v != 1.0}
    if not n_map and not r_map:
        fit = _from_library(labels, int(gaussians), norm)
        if fit is not None:
            return fit
    return _fit_cached(labels, int(gaussians), norm, tuple(n_map.items()), tuple(r_map.items()))


@lru_cache(maxsize=4096)
def _from_library(labels: tuple[str, ...], gaussians: int, norm: str) -> Fit | None:
    entry = _library(norm).get(family_key(labels), {}).get(str(gaussians))
    return None if entry is None else entry_to_fit(labels, gaussians, norm, entry)


__all__ = ["CACHE_ENV", "LIBRARY_MAX_GAUSSIANS", "NORMS", "cache_dir", "library_families", "lookup", "render_library"]
