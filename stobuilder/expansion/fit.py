"""Least-squares STO-nG expansions: one set of Gaussian exponents shared by several subshells.

Method: W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969) and R. F. Stewart,
J. Chem. Phys. 52, 431 (1970). A normalised STO φ_nl = N r^(n−1) e^(−ζr) Y_lm at ζ = 1 bohr⁻¹ is
expanded in normalised Gaussians g_k = N_k r^l e^(−α_k r²) Y_lm by minimising
ε_nl = ∫ (φ_nl − Σ_k c_k g_k)² dτ; subshells fitted jointly share the α_k and the objective is
Σ_nl ε_nl. For fixed α the optimal coefficients are c = G⁻¹ s and ε = 1 − sᵀ G⁻¹ s (G the
overlap matrix of the normalised Gaussians, s their overlaps with φ), so only ln α is optimised
(variable projection: G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10, 413, 1973), with analytic
overlaps and gradients (stobuilder.expansion.integrals).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterable, Mapping

import numpy as np
from scipy.optimize import minimize

from ..elements import parse_subshell_label, subshell_label
from ..errors import InputError
from .integrals import gaussian_overlap, radial_integrals, sto_gaussian_overlap

MAX_GAUSSIANS = 12
NORMS = ("l2",)
MAX_N = 6
MAX_L = 3
# G is declared numerically singular beyond this condition number (reciprocal, via Cholesky).
_MIN_RCOND = 1e-13


@dataclass(frozen=True)
class Fit:
    """An STO-nG expansion at ζ = 1 bohr⁻¹.

    Attributes
    ----------
    subshells : labels sorted by (n, l), e.g. ("3s", "3p", "3d"); they share the exponents.
    gaussians : number of primitives N.
    norm : the fit criterion; "l2" is the least-squares ε above.
    exponents : α_k in bohr⁻² at ζ = 1, descending.
    coefficients : label → c_k for normalised primitives (order of ``exponents``), rescaled so
        that the contraction has norm exactly 1 (the least-squares optimum itself has norm
        √(1 − ε)); the sign makes the contraction overlap the STO positively.
    error : label → ε of the least-squares optimum (dimensionless, ∫ of the squared residual).
    """

    subshells: tuple[str, ...]
    gaussians: int
    norm: str
    exponents: tuple[float, ...]
    coefficients: dict[str, tuple[float, ...]]
    error: dict[str, float]

    @property
    def total_error(self) -> float:
        """Σ of ε over the subshells: the objective that was minimised."""
        return math.fsum(self.error.values())

    def scaled(self, zeta: float) -> tuple[float, ...]:
        """Exponents for an STO of exponent ``zeta`` (bohr⁻¹): α_k ζ² in bohr⁻².

        Exact because the fit is scale-invariant (r → ζr). One ζ applies to all subshells of the
        family; subshells with different ζ need separate fits (separate shells).
        """
        if not zeta > 0:
            raise InputError(f"zeta must be positive, got {zeta!r}")
        return tuple(a * zeta * zeta for a in self.exponents)


def normalise_subshells(subshells: str | Iterable[str]) -> tuple[str, ...]:
    """Validate labels and return them sorted by (n, l), without duplicates allowed."""
    labels = [subshells] if isinstance(subshells, str) else list(subshells)
    if not labels:
        raise InputError("subshells: give at least one subshell label such as 1s")
    nls = []
    for label in labels:
        if not isinstance(label, str):
            raise InputError(f"subshells: {label!r} is not a subshell label such as 1s, 2p or 3d")
        n, l = parse_subshell_label(label)
        if n > MAX_N or l > MAX_L:
            raise InputError(f"subshell {label!r}: fits cover n ≤ {MAX_N} and l ≤ {MAX_L}")
        nls.append((n, l))
    if len(set(nls)) != len(nls):
        raise InputError(f"subshells {labels!r}: a subshell is listed twice")
    return tuple(subshell_label(n, l) for n, l in sorted(nls))


def _check_inputs(gaussians: int, norm: str) -> None:
    if isinstance(gaussians, bool) or not isinstance(gaussians, (int, np.integer)):
        raise InputError(f"gaussians must be an integer 1–{MAX_GAUSSIANS}, got {gaussians!r}")
    if not 1 <= gaussians <= MAX_GAUSSIANS:
        raise InputError(f"gaussians = {gaussians}: supported are 1–{MAX_GAUSSIANS} primitives")
    if norm not in NORMS:
        raise InputError(f"norm {norm!r} is not supported; choose one of {', '.join(NORMS)}")


def _solve(g: np.ndarray, s: np.ndarray) -> np.ndarray | None:
    """c = G⁻¹ s by Cholesky, or None when G is numerically singular."""
    try:
        chol = np.linalg.cholesky(g)
    except np.linalg.LinAlgError:
        return None
    diag = np.diag(chol)
    if diag.min() ** 2 < _MIN_RCOND * diag.max() ** 2:
        return None
    return np.linalg.solve(g, s)


def objective(log_alpha: np.ndarray, nls: tuple[tuple[int, int], ...]) -> tuple[float, np.ndarray]:
    """Σ ε over the subshells and its gradient with respect to ln α_k.

    d(sᵀG⁻¹s)/dx_k = 2 c_k ds_k/dx_k − 2 c_k Σ_j c_j dG_kj/dx_k, with x = ln α and
    dG_kj/dx_k = G_kj (l + 3/2) (½ − α_k/(α_k + α_j)).
    """
    if not np.all(np.abs(log_alpha) < 25.0):  # a wild line-search step: e^±25 bohr⁻² is no fit
        return 1e3, np.zeros_like(log_alpha)
    alpha = np.exp(log_alpha)
    total = 0.0
    grad = np.zeros_like(alpha)
    frac = alpha[:, None] / np.add.outer(alpha, alpha)
    ints = radial_integrals(max(n + l for n, l in nls) + 4, alpha)
    for n, l in nls:
        g = gaussian_overlap(l, alpha)
        s, ds = sto_gaussian_overlap(n, l, alpha, integrals=ints)
        c = _solve(g, s)
        if c is None:
            return 1e3, np.zeros_like(alpha)  # singular G: reject the step
        total += 1.0 - s @ c
        dg = g * (l + 1.5) * (0.5 - frac)
        grad -= 2.0 * c * ds - 2.0 * c * (dg @ c)
    return total, grad


def _coefficients(alpha: np.ndarray, n: int, l: int) -> tuple[np.ndarray, float]:
    g = gaussian_overlap(l, alpha)
    s, _ = sto_gaussian_overlap(n, l, alpha)
    c = _solve(g, s)
    if c is None:
        raise InputError(f"fit of {subshell_label(n, l)} with {len(alpha)} Gaussians is numerically singular")
    return c, 1.0 - float(s @ c)


def _local_fit(x0: np.ndarray, nls) -> tuple[float, np.ndarray]:
    res = minimize(objective, x0, args=(nls,), jac=True, method="BFGS", options={"gtol": 1e-8, "maxiter": 2000})
    x = np.sort(res.x)[::-1]
    return float(objective(x, nls)[0]), x


def _polish(x: np.ndarray, nls) -> np.ndarray:
    """Newton steps with a finite-difference Hessian of the analytic gradient."""
    h = 1e-5
    for _ in range(6):
        f0, g0 = objective(x, nls)
        hess = np.empty((x.size, x.size))
        for k in range(x.size):
            e = np.zeros_like(x)
            e[k] = h
            hess[k] = (objective(x + e, nls)[1] - objective(x - e, nls)[1]) / (2 * h)
        hess = 0.5 * (hess + hess.T)
        try:
            w = np.linalg.eigvalsh(hess)
            if w.min() <= 0:
                break
            step = -np.linalg.solve(hess, g0)
        except np.linalg.LinAlgError:
            break
        trial = x + step
        if objective(trial, nls)[0] > f0 + 1e-15:
            break
        x = trial
        if np.max(np.abs(step)) < 1e-11:
            break
    return np.sort(x)[::-1]


def _even_tempered(n_gauss: int, centre: float, log_ratio: float) -> np.ndarray:
    return centre + log_ratio * (np.arange(n_gauss)[::-1] - (n_gauss - 1) / 2.0)


def _starts(n_gauss: int, nls, previous: np.ndarray | None) -> list[np.ndarray]:
    """Deterministic starting points in ln α: continuation from the N−1 fit and even-tempered sets."""
    starts = []
    if previous is not None:
        ext = np.concatenate([[previous[0] + 1.5], previous, [previous[-1] - 1.5]])
        starts.append(ext[:-1])  # new tight exponent
        starts.append(ext[1:])  # new diffuse exponent
        for k in range(len(previous) - 1):  # new exponent in a gap
            starts.append(np.sort(np.concatenate([previous, [(previous[k] + previous[k + 1]) / 2]]))[::-1])
    # the STO's extent ~ n/ζ sets the centre: α ~ 1/⟨r⟩²
    n_mean = sum(n for n, _ in nls) / len(nls)
    base = -2.0 * math.log(n_mean) - 1.0
    if previous is None or n_gauss <= 2:
        for log_ratio in (0.7, 1.2, 1.8):
            for shift in (-1.0, 0.0, 1.0):
                starts.append(_even_tempered(n_gauss, base + shift, log_ratio * (n_gauss > 1)))
    return starts


@lru_cache(maxsize=None)
def _fit_log_alpha(nls: tuple[tuple[int, int], ...], n_gauss: int) -> tuple[float, ...]:
    previous = None if n_gauss == 1 else np.array(_fit_log_alpha(nls, n_gauss - 1))
    best_f, best_x = math.inf, None
    for x0 in _starts(n_gauss, nls, previous):
        f, x = _local_fit(x0, nls)
        if f < best_f - 1e-15:
            best_f, best_x = f, x
    return tuple(_polish(best_x, nls))


def fit_sto(subshells: str | Iterable[str], gaussians: int, norm: str = "l2") -> Fit:
    """Fit N normalised Gaussians to normalised STOs at ζ = 1, sharing the exponents.

    Parameters
    ----------
    subshells : str or list of str
        One label ("1s") or several sharing the exponents (["3s", "3p", "3d"]); n ≤ 6, l ≤ 3.
        The order is normalised to (n, l).
    gaussians : int
        Number N of primitives, 1 … 12.
    norm : str
        Fit criterion; only "l2" (least squares, Hehre, Stewart & Pople 1969) is supported.

    Returns
    -------
    Fit with exponents in bohr⁻² at ζ = 1 (use ``Fit.scaled(zeta)``).

    Deterministic: multi-start from even-tempered sets and continuation from the N − 1 fit,
    BFGS on ln α followed by Newton polishing.
    """
    _check_inputs(gaussians, norm)
    labels = normalise_subshells(subshells)
    nls = tuple(parse_subshell_label(x) for x in labels)
    alpha = np.exp(np.array(_fit_log_alpha(nls, int(gaussians))))
    coefficients, error = {}, {}
    for label, (n, l) in zip(labels, nls):
        c, eps = _coefficients(alpha, n, l)
        coefficients[label] = tuple(float(v) for v in c / math.sqrt(1.0 - eps))
        error[label] = float(eps)
    return Fit(labels, int(gaussians), norm, tuple(float(a) for a in alpha), coefficients, error)
