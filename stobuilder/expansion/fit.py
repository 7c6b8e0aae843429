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
from .integrals import gaussian_overlap, radial_integrals, radial_integrals_mp, sto_gaussian_overlap

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
    constrained : True when no interior minimum exists and the fit is the best one with every
        neighbouring exponent ratio ≥ MIN_RATIO (only [6s, 6p] with N = 3 in the library).
    """

    subshells: tuple[str, ...]
    gaussians: int
    norm: str
    exponents: tuple[float, ...]
    coefficients: dict[str, tuple[float, ...]]
    error: dict[str, float]
    constrained: bool = False

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
    """Least-squares coefficients (double precision) and ε (extended precision: 1 − sᵀc cancels)."""
    g = gaussian_overlap(l, alpha)
    s, _ = sto_gaussian_overlap(n, l, alpha)
    c = _solve(g, s)
    if c is None:
        raise InputError(f"fit of {subshell_label(n, l)} with {len(alpha)} Gaussians is numerically singular")
    eps, _ = _gradient_mp(np.log(alpha), ((n, l),))
    return c, eps


def _local_fit(x0: np.ndarray, nls) -> tuple[float, np.ndarray]:
    res = minimize(objective, x0, args=(nls,), jac=True, method="BFGS", options={"gtol": 1e-8, "maxiter": 2000})
    x = np.sort(res.x)[::-1]
    return float(objective(x, nls)[0]), x


_MP_DIGITS = 34  # precision of the polishing gradient (ε ~ 1e-9 must be resolved to ~1e-20)


def _gradient_mp(log_alpha: np.ndarray, nls) -> tuple[float, np.ndarray]:
    """Σ ε and its ln α gradient evaluated in mpmath precision (same formulas as ``objective``)."""
    import mpmath as mp

    with mp.workdps(_MP_DIGITS):
        alpha = [mp.exp(mp.mpf(float(x))) for x in log_alpha]
        size = len(alpha)
        nu_max = max(n + l for n, l in nls) + 4
        ints = [radial_integrals_mp(nu_max, a) for a in alpha]
        total = mp.mpf(0)
        grad = [mp.mpf(0)] * size
        for n, l in nls:
            p = l + mp.mpf(3) / 2
            nsto = mp.mpf(2) ** (n + mp.mpf(1) / 2) / mp.sqrt(mp.factorial(2 * n))
            pref = [nsto * mp.sqrt(2 * (2 * a) ** p / mp.gamma(p)) for a in alpha]
            nu = n + l + 2
            s = [pref[k] * ints[k][nu - 1] for k in range(size)]
            ds = [p / 2 * s[k] - alpha[k] * pref[k] * ints[k][nu + 1] for k in range(size)]
            g = mp.matrix(size, size)
            for i in range(size):
                for j in range(size):
                    g[i, j] = (2 * mp.sqrt(alpha[i] * alpha[j]) / (alpha[i] + alpha[j])) ** p
            c = mp.lu_solve(g, mp.matrix(s))
            total += 1 - mp.fsum(s[k] * c[k] for k in range(size))
            for k in range(size):
                dgc = mp.fsum(g[k, j] * p * (mp.mpf(1) / 2 - alpha[k] / (alpha[k] + alpha[j])) * c[j] for j in range(size))
                grad[k] -= 2 * c[k] * ds[k] - 2 * c[k] * dgc
        return float(total), np.array([float(v) for v in grad])


def _hessian(x: np.ndarray, nls, h: float = 1e-4) -> np.ndarray:
    """Central finite differences of the extended-precision gradient."""
    hess = np.empty((x.size, x.size))
    for k in range(x.size):
        e = np.zeros_like(x)
        e[k] = h
        hess[k] = (_gradient_mp(x + e, nls)[1] - _gradient_mp(x - e, nls)[1]) / (2 * h)
    return 0.5 * (hess + hess.T)


def _polish(x: np.ndarray, nls) -> np.ndarray:
    """Safeguarded Newton steps on ln α with gradient and Hessian in extended precision.

    In double precision ε = 1 − sᵀG⁻¹s and its gradient carry absolute errors ~1e-15, which in
    the flattest direction of a 6-Gaussian fit moves the exponents by ~1e-5 (we found this
    against Stewart's 1970 STO-6G 3d exponents); the mpmath evaluation removes that floor.
    The Hessian is formed once at the start; a step is taken only while it lowers the gradient
    norm; steps are capped at 0.1 in ln α.
    """
    _, grad = _gradient_mp(x, nls)
    norm = float(np.linalg.norm(grad))
    w, v = np.linalg.eigh(_hessian(x, nls))  # one Hessian: the start is close, steps converge linearly
    for _ in range(10):
        if norm == 0.0 or w.min() <= 0:
            break
        step = -(v @ ((v.T @ grad) / w))
        biggest = float(np.max(np.abs(step)))
        if biggest > 0.1:
            step *= 0.1 / biggest
        trial = x + step
        _, trial_grad = _gradient_mp(trial, nls)
        trial_norm = float(np.linalg.norm(trial_grad))
        if not trial_norm < norm:
            break
        x, grad, norm = trial, trial_grad, trial_norm
        if biggest < 1e-10:
            break
    return np.sort(x)[::-1]


def _even_tempered(n_gauss: int, centre: float, log_ratio: float) -> np.ndarray:
    return centre + log_ratio * (np.arange(n_gauss)[::-1] - (n_gauss - 1) / 2.0)


def _starts(n_gauss: int, nls, previous: np.ndarray | None) -> list[np.ndarray]:
    """Deterministic starting points in ln α: continuation from the N−1 fit (N + 1 starts) and a
    3 × 3 grid of even-tempered sets (fewer starts miss the best minimum of 5s, 5p, 6d at N = 6)."""
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
    for log_ratio in (0.7, 1.2, 1.8):
        for shift in (-1.0, 0.0, 1.0):
            starts.append(_even_tempered(n_gauss, base + shift, log_ratio * (n_gauss > 1)))
    return starts


# Smallest ratio of neighbouring exponents accepted (common practice, no source): closer
# exponents make G nearly singular and describe no more than one r^(l+2) Gaussian.
MIN_RATIO = 1.1


def _constrained_fit(x0: np.ndarray, nls) -> tuple[float, np.ndarray]:
    """Minimise ε over ln α with every neighbouring ratio ≥ MIN_RATIO (L-BFGS-B on the gaps)."""
    x0 = np.sort(x0)[::-1]
    gaps = np.maximum(-np.diff(x0), math.log(MIN_RATIO))
    z0 = np.concatenate([[x0[0]], gaps])

    def to_x(z):
        return z[0] - np.concatenate([[0.0], np.cumsum(z[1:])])

    def fun(z):
        f, g = objective(to_x(z), nls)
        gz = np.empty_like(z)
        gz[0] = g.sum()
        gz[1:] = -np.cumsum(g[::-1])[::-1][1:]
        return f, gz

    bounds = [(None, None)] + [(math.log(MIN_RATIO), None)] * (len(z0) - 1)
    res = minimize(fun, z0, jac=True, method="L-BFGS-B", bounds=bounds, options={"ftol": 1e-16, "gtol": 1e-12, "maxiter": 5000})
    x = to_x(res.x)
    return float(objective(x, nls)[0]), x


@lru_cache(maxsize=None)
def _fit_log_alpha(nls: tuple[tuple[int, int], ...], n_gauss: int) -> tuple[tuple[float, ...], bool]:
    """Best ln α (descending) over the deterministic starts, and whether MIN_RATIO was binding."""
    previous = None if n_gauss == 1 else np.array(_fit_log_alpha(nls, n_gauss - 1)[0])
    best_f, best_x = math.inf, None
    starts = _starts(n_gauss, nls, previous)
    for x0 in starts:
        f, x = _local_fit(x0, nls)
        # Two exponents running together mimic an r^(l+2) Gaussian: ε can keep falling towards
        # that limit (seen for 6s6p with N = 3); such solutions are discarded here.
        if n_gauss > 1 and np.min(-np.diff(x)) < math.log(MIN_RATIO):
            continue
        if f < best_f - 1e-15:
            best_f, best_x = f, x
    if best_x is not None:
        return tuple(best_x), False
    for x0 in starts:
        f, x = _constrained_fit(x0, nls)
        if f < best_f - 1e-15:
            best_f, best_x = f, x
    return tuple(best_x), True


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
    BFGS on ln α (double precision), then Newton polishing in extended precision.
    """
    _check_inputs(gaussians, norm)
    labels = normalise_subshells(subshells)
    nls = tuple(parse_subshell_label(x) for x in labels)
    log_alpha, constrained = _fit_log_alpha(nls, int(gaussians))
    alpha = np.exp(np.array(log_alpha) if constrained else _polish(np.array(log_alpha), nls))
    coefficients, error = {}, {}
    for label, (n, l) in zip(labels, nls):
        c, eps = _coefficients(alpha, n, l)
        coefficients[label] = tuple(float(v) for v in c / math.sqrt(1.0 - eps))
        error[label] = float(eps)
    return Fit(labels, int(gaussians), norm, tuple(float(a) for a in alpha), coefficients, error, constrained)
