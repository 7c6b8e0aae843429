"""STO-nG expansions: one set of Gaussian exponents shared by several subshells, L² or H¹ norm.

Method: W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969) and R. F. Stewart,
J. Chem. Phys. 52, 431 (1970). A normalised STO φ = N r^(n−1) e^(−ζr) Y_lm (ζ = 1 bohr⁻¹ for the
first subshell of a fit) is expanded in normalised Gaussians g_k = N_k r^l e^(−α_k r²) Y_lm by
minimising ε = ‖φ − Σ_k c_k g_k‖² in the chosen norm; subshells fitted jointly share the α_k and
the objective is Σ ε. For fixed α the optimal c solve a linear least-squares problem, so only
x = ln α is optimised (variable projection: G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10,
413, 1973) by Levenberg–Marquardt (MINPACK through scipy.optimize.least_squares) on the sampled
residual of stobuilder.expansion.residual, which keeps ε free of the cancellation of
1 − sᵀG⁻¹s, followed by Newton steps on its gradient. Starts are deterministic: continuation
from the N − 1 fit (a new tight, a new diffuse or a new middle exponent) and even-tempered sets
(K. Ruedenberg, R. C. Raffenetti, R. D. Bardo, in Energy, Structure and Reactivity, Wiley 1973:
α_k = α₀ β^k); every start is screened with a few iterations and the best few are converged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Iterable, Mapping

import numpy as np
from scipy.optimize import least_squares

from ..elements import parse_subshell_label, subshell_label
from ..errors import InputError
from .integrals import gaussian_overlap
from .residual import STEP, Problem, Target

MAX_GAUSSIANS = 12
NORMS = ("l2", "h1")
MAX_N = 6
MAX_L = 3
# Version of the fitting algorithm: part of every cache key (a change invalidates cached fits).
ALGORITHM = "vp-lm-newton-1"


@dataclass(frozen=True)
class Fit:
    """An STO-nG expansion at ζ = 1 bohr⁻¹ (of the first subshell).

    Attributes
    ----------
    subshells : labels sorted by (n, l), e.g. ("3s", "3p", "3d"); they share the exponents.
    gaussians : number of primitives N.
    norm : the fit criterion: "l2" least squares, "h1" the Sobolev norm ‖·‖² + ‖∇·‖² (gradient
        measured in units of the first subshell's 1/ζ, see stobuilder.expansion.residual).
    exponents : α_k in bohr⁻² at ζ = 1, descending.
    coefficients : label → c_k for normalised primitives (order of ``exponents``), rescaled so
        that the contraction has L² norm exactly 1 (the optimum of either norm is not normalised:
        the L² optimum has norm √(1 − ε)); the sign makes the contraction overlap the STO positively.
    error : label → ε of the optimum in the norm that was minimised (dimensionless at ζ = 1).
    constrained : True when no interior minimum exists and the fit is the best one with every
        neighbouring exponent ratio ≥ MIN_RATIO (e.g. [6s, 6p] with N = 3).
    n_eff : label → non-integer effective n* of the STO r^(n*−1) e^(−ζr); empty: n* = n.
    zeta_ratio : label → ζ / ζ_first of a joint fit with unequal ζ; empty: all ζ equal.
    """

    subshells: tuple[str, ...]
    gaussians: int
    norm: str
    exponents: tuple[float, ...]
    coefficients: dict[str, tuple[float, ...]]
    error: dict[str, float]
    constrained: bool = False
    n_eff: dict[str, float] = field(default_factory=dict)
    zeta_ratio: dict[str, float] = field(default_factory=dict)

    @property
    def total_error(self) -> float:
        """Σ of ε over the subshells: the objective that was minimised."""
        return math.fsum(self.error.values())

    def scaled(self, zeta: float) -> tuple[float, ...]:
        """Exponents for STOs whose first subshell has exponent ``zeta`` (bohr⁻¹): α_k ζ² in bohr⁻².

        Exact because the fit is scale-invariant (r → ζr); the other subshells of a
        ``zeta_ratio`` fit then have ζ × their ratio.
        """
        if isinstance(zeta, bool) or not isinstance(zeta, (int, float)) or not zeta > 0 or not math.isfinite(zeta):
            raise InputError(f"zeta must be a positive number, got {zeta!r}")
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


def _positive_map(name: str, values, labels: tuple[str, ...], low: float, high: float) -> dict[str, float]:
    """Validate an optional {label: float} option; values equal to the default are kept (explicit)."""
    if values is None:
        return {}
    if not isinstance(values, Mapping):
        raise InputError(f"{name} must be a mapping label → number, got {values!r}")
    out = {}
    for label, value in values.items():
        if label not in labels:
            raise InputError(f"{name}: {label!r} is not one of the fitted subshells {', '.join(labels)}")
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) or not math.isfinite(value):
            raise InputError(f"{name} for {label} must be a number, got {value!r}")
        if not low <= float(value) <= high:
            raise InputError(f"{name} for {label} = {value}: must lie in [{low}, {high}]")
        out[label] = float(value)
    return {label: out[label] for label in labels if label in out}


def targets_for(labels: tuple[str, ...], n_eff: Mapping[str, float], zeta_ratio: Mapping[str, float]) -> tuple[Target, ...]:
    """The STOs of a fit at ζ_first = 1: effective n and ζ of each subshell."""
    out = []
    for label in labels:
        n, l = parse_subshell_label(label)
        out.append(Target(float(n_eff.get(label, n)), l, float(zeta_ratio.get(label, 1.0))))
    return tuple(out)


@lru_cache(maxsize=64)
def _problem(targets: tuple[Target, ...], norm: str, step: float = STEP) -> Problem:
    return Problem(targets, norm, step)


def objective(log_alpha: np.ndarray, nls, norm: str = "l2") -> tuple[float, np.ndarray]:
    """Σ ε over the subshells (n, l) at ζ = 1 and its gradient with respect to ln α_k (2 Jᵀr)."""
    targets = tuple(Target(float(n), l, 1.0) for n, l in nls)
    out = _problem(targets, norm).solve(np.asarray(log_alpha, dtype=float))
    if out is None:
        return 1e3, np.zeros_like(log_alpha)
    res, jac, _, _ = out
    return float(res @ res), 2.0 * (jac.T @ res)


def _least_squares(problem: Problem, x0: np.ndarray, tol: float, max_nfev: int, transform=None):
    """Levenberg–Marquardt (MINPACK) on the sampled residual; residual and Jacobian share one solve.

    ``transform(z) → (x, ∂x/∂z)`` maps other variables z to ln α (the constrained fit).
    A numerically singular G gives a residual worse than no fit, which the method steps back from.
    """
    size = sum(b.size for b in problem.b)
    fallback = (np.concatenate(problem.b) * 10.0, None)
    memo: dict[bytes, tuple] = {}

    def both(z):
        key = z.tobytes()
        if key not in memo:
            memo.clear()
            x, dxdz = (z, None) if transform is None else transform(z)
            out = problem.solve(x)
            memo[key] = fallback if out is None else (out[0], out[1] if dxdz is None else out[1] @ dxdz)
        return memo[key]

    def jac(z):
        j = both(z)[1]
        return np.zeros((size, z.size)) if j is None else j

    res = least_squares(lambda z: both(z)[0], x0, jac=jac, method="lm", xtol=tol, ftol=tol, gtol=tol, max_nfev=max_nfev)
    return res.x


def _evaluate(problem: Problem, x: np.ndarray) -> float:
    lo, hi = problem.bounds
    if not (np.all(x > lo) and np.all(x < hi)):
        return math.inf  # outside the range the quadrature grid is made for
    out = problem.solve(x, jacobian=False)
    return math.inf if out is None else math.fsum(out[3])


def _gradient(problem: Problem, x: np.ndarray) -> np.ndarray | None:
    out = problem.solve(x)
    return None if out is None else out[1].T @ out[0]  # ∇(½ Σε) = Jᵀr (Golub–Pereyra Jacobian)


def _polish(problem: Problem, x: np.ndarray, steps: int = 6, h: float = 1e-5) -> np.ndarray:
    """Newton steps on ∇(½ Σε) = Jᵀr with a Hessian from central differences of that gradient.

    Levenberg–Marquardt stops on the relative decrease of ε, which in the flattest direction of
    a fit leaves ln α off by ~1e-8, and Gauss–Newton converges only linearly here (the residual
    is not small against the smallest singular value of J); Newton converges on the gradient,
    which the sampled residual resolves to ~1e-19. Steps are taken while |∇| shrinks.
    """
    grad = _gradient(problem, x)
    if grad is None:
        return x
    hess = np.empty((x.size, x.size))
    for k in range(x.size):
        e = np.zeros_like(x)
        e[k] = h
        up, down = _gradient(problem, x + e), _gradient(problem, x - e)
        if up is None or down is None:
            return x
        hess[k] = (up - down) / (2 * h)
    w, v = np.linalg.eigh(0.5 * (hess + hess.T))
    if w.min() <= 0:
        return x  # not a minimum's neighbourhood: keep the LM result
    norm = float(np.linalg.norm(grad))
    for _ in range(steps):
        step = v @ ((v.T @ grad) / w)
        if not np.max(np.abs(step)) < 0.01:
            break
        trial = x - step
        trial_grad = _gradient(problem, trial)
        if trial_grad is None:
            break
        trial_norm = float(np.linalg.norm(trial_grad))
        if not trial_norm < norm:
            break
        x, grad, norm = trial, trial_grad, trial_norm
    return x


def _local_fit(problem: Problem, x0: np.ndarray, tol: float = 1e-8, max_nfev: int = 400) -> tuple[float, np.ndarray]:
    """Levenberg–Marquardt in ln α from one start; ε and the sorted ln α."""
    x = np.sort(_least_squares(problem, np.asarray(x0, dtype=float), tol, max_nfev))[::-1]
    return _evaluate(problem, x), x


def _even_tempered(n_gauss: int, centre: float, log_ratio: float) -> np.ndarray:
    return centre + log_ratio * (np.arange(n_gauss)[::-1] - (n_gauss - 1) / 2.0)


def _starts(n_gauss: int, targets: tuple[Target, ...], previous: np.ndarray | None) -> list[np.ndarray]:
    """Deterministic starting points in ln α: continuation from the N−1 fit (a new tight, a new
    diffuse exponent, a new exponent in each gap up to N = 6, in the GAPS widest gaps beyond)
    and even-tempered sets (their centre from the STO's extent, α ~ 1/⟨r⟩²): all of ET_STARTS for
    N = 1, the first 3 up to N = 6, the first beyond (fewer change no library fit; measured)."""
    starts = []
    if previous is not None:
        ext = np.concatenate([[previous[0] + 1.5], previous, [previous[-1] - 1.5]])
        starts.append(ext[:-1])  # new tight exponent
        starts.append(ext[1:])  # new diffuse exponent
        gaps = list(range(len(previous) - 1))
        if n_gauss > 6:
            widths = -np.diff(previous)
            gaps = sorted(sorted(gaps, key=lambda k: (-widths[k], k))[:GAPS])
        for k in gaps:
            starts.append(np.sort(np.concatenate([previous, [(previous[k] + previous[k + 1]) / 2]]))[::-1])
    n_mean = sum(t.n_eff / t.zeta for t in targets) / len(targets)
    base = -2.0 * math.log(n_mean) - 1.0
    for log_ratio, shift in ET_STARTS if n_gauss == 1 else ET_STARTS[:3] if n_gauss <= 6 else ET_STARTS[:1]:
        starts.append(_even_tempered(n_gauss, base + shift, log_ratio * (n_gauss > 1)))
    return starts


GAPS = 3  # gap insertions tried beyond N = 6
# (ln of the exponent ratio, shift of the centre in ln α) of the even-tempered starts
ET_STARTS = ((0.7, 0.0), (1.2, 0.0), (1.8, 0.0), (0.7, -1.0), (0.7, 1.0))  # N = 1: all, else the first 3


# Smallest ratio of neighbouring exponents accepted (common practice, no source): closer
# exponents make G nearly singular and describe no more than one r^(l+2) Gaussian.
MIN_RATIO = 1.1


def _constrained_fit(problem: Problem, x0: np.ndarray) -> tuple[float, np.ndarray]:
    """Minimise ε over ln α with every neighbouring ratio ≥ MIN_RATIO: the gaps between
    neighbouring ln α are written ln MIN_RATIO + u_k², an unconstrained problem in (x₀, u)."""
    x0 = np.sort(np.asarray(x0, dtype=float))[::-1]
    floor = math.log(MIN_RATIO)
    u0 = np.sqrt(np.maximum(-np.diff(x0) - floor, 1e-4))
    z0 = np.concatenate([[x0[0]], u0])
    size = len(z0)

    def to_x(z):
        return z[0] - np.concatenate([[0.0], np.cumsum(floor + z[1:] ** 2)])

    lower = np.tril(np.ones((size, size)))

    def transform(z):  # ∂x_i/∂x₀ = 1, ∂x_i/∂u_j = −2 u_j for 1 ≤ j ≤ i
        m = -lower * (2.0 * z)[None, :]
        m[:, 0] = 1.0
        return to_x(z), m

    z = _least_squares(problem, z0, 1e-15, 2000, transform=transform)
    x = to_x(z)
    return _evaluate(problem, x), x


@lru_cache(maxsize=None)
def _fit_log_alpha(targets: tuple[Target, ...], norm: str, n_gauss: int) -> tuple[tuple[float, ...], bool]:
    """Best ln α (descending) over the deterministic starts, and whether MIN_RATIO was binding."""
    problem = _problem(targets, norm)
    coarse = _problem(targets, norm, SCREEN_STEP)  # the screening needs ε to ~1e-9 relative only
    previous = None if n_gauss == 1 else np.array(_fit_log_alpha(targets, norm, n_gauss - 1)[0])
    starts = _starts(n_gauss, targets, previous)
    # Screening: every start is taken a short way (loose tolerance); the best SCREEN_KEEP distinct
    # candidates are then converged fully.
    screened = []
    for x0 in starts:
        f, x = _local_fit(coarse, x0, tol=SCREEN_TOL, max_nfev=SCREEN_NFEV)
        # Two exponents running together mimic an r^(l+2) Gaussian: ε can keep falling towards
        # that limit (seen for 6s6p with N = 3); such solutions are set aside (constrained fit).
        if math.isfinite(f):
            screened.append((f, x))
    screened.sort(key=lambda item: item[0])
    best_f, best_x, tried = math.inf, None, []
    for _, x0 in screened:
        if any(np.max(np.abs(x0 - y)) < 1e-2 for y in tried):
            continue  # the same minimum as a candidate already converged
        tried.append(x0)
        f, x = _local_fit(problem, x0)
        if n_gauss > 1 and np.min(-np.diff(x)) < math.log(MIN_RATIO):
            continue
        if f < best_f * (1 - 1e-12):
            best_f, best_x = f, x
        if (best_x is not None and len(tried) >= SCREEN_KEEP) or len(tried) >= 3 * SCREEN_KEEP:
            break
    if best_x is not None:
        x = np.sort(_polish(problem, best_x))[::-1]
        return tuple(x if _evaluate(problem, x) <= best_f * (1 + 1e-12) else best_x), False
    for x0 in [x for _, x in screened[: SCREEN_KEEP + 1]] or starts[: SCREEN_KEEP + 1]:
        f, x = _constrained_fit(problem, x0)
        if f < best_f * (1 - 1e-12):
            best_f, best_x = f, x
    return tuple(best_x), True


SCREEN_TOL = 1e-7  # relative tolerance of the screening runs
SCREEN_NFEV = 12  # their evaluation budget
SCREEN_KEEP = 3  # candidates converged fully
SCREEN_STEP = 0.12  # quadrature step of the screening grid (ranking needs ε to ~1e-9 relative only)


def fit_sto(
    subshells: str | Iterable[str],
    gaussians: int,
    norm: str = "l2",
    n_eff: Mapping[str, float] | None = None,
    zeta_ratio: Mapping[str, float] | None = None,
) -> Fit:
    """Fit N normalised Gaussians to normalised STOs, sharing the exponents.

    Parameters
    ----------
    subshells : str or list of str
        One label ("1s") or several sharing the exponents (["3s", "3p", "3d"]); n ≤ 6, l ≤ 3.
        The order is normalised to (n, l).
    gaussians : int
        Number N of primitives, 1 … 12.
    norm : str
        "l2": least squares (Hehre, Stewart & Pople 1969); "h1": Sobolev norm with the gradient
        term, ∫|φ−χ|² + ζ₁⁻² ∫|∇φ−∇χ|² (see stobuilder.expansion.residual).
    n_eff : dict label → float, optional
        Effective principal quantum number n* (1 ≤ n* ≤ 8) of the radial form r^(n*−1) e^(−ζr),
        e.g. Slater's 3.7, 4.0, 4.2 (J. C. Slater, Phys. Rev. 36, 57, 1930); default n.
    zeta_ratio : dict label → float, optional
        ζ of a subshell relative to the first subshell's (0.2 … 5), for joint fits with
        unequal ζ; default 1. The first subshell is fitted at ζ = 1 bohr⁻¹.

    Returns
    -------
    Fit with exponents in bohr⁻² at ζ_first = 1 (use ``Fit.scaled(zeta_first)``).

    Deterministic: the same input gives bit-identical output on the same software stack.
    """
    _check_inputs(gaussians, norm)
    labels = normalise_subshells(subshells)
    n_map = _positive_map("n_eff", n_eff, labels, 1.0, 8.0)
    n_map = {k: v for k, v in n_map.items() if v != parse_subshell_label(k)[0]}  # integer n*: the plain STO
    r_map = _positive_map("zeta_ratio", zeta_ratio, labels, 0.2, 5.0)
    if r_map.get(labels[0], 1.0) != 1.0:
        raise InputError(f"zeta_ratio of the first subshell {labels[0]} must be 1 (the others are relative to it)")
    r_map = {k: v for k, v in r_map.items() if v != 1.0}
    targets = targets_for(labels, n_map, r_map)
    log_alpha, constrained = _fit_log_alpha(targets, norm, int(gaussians))
    x = np.array(log_alpha)
    alpha = np.exp(x)
    _, _, coefs, eps = _problem(targets, norm).solve(x, jacobian=False)
    coefficients, error = {}, {}
    for label, t, c, e in zip(labels, targets, coefs, eps):
        norm2 = float(c @ gaussian_overlap(t.l, alpha) @ c)
        coefficients[label] = tuple(float(v) for v in c / math.sqrt(norm2))
        error[label] = float(e)
    return Fit(labels, int(gaussians), norm, tuple(float(a) for a in alpha), coefficients, error, constrained,
               n_map, r_map)
