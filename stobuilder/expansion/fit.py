"""STO-nG expansions: one set of Gaussian exponents shared by several subshells, L² or H¹ norm.

Method: W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969) and R. F. Stewart,
J. Chem. Phys. 52, 431 (1970). A normalised STO φᵢ = N r^(n−1) e^(−ζr) Y_lm (ζ = 1 bohr⁻¹ for the
first subshell of a fit) is expanded in normalised Gaussians g_k = N_k r^l e^(−α_k r²) Y_lm, the
contraction χᵢ = Σ_k c_ik g_k normalised, and subshells fitted jointly share the α_k. The
objective is the published one, Σᵢ ‖φᵢ − χᵢ‖² with ‖φᵢ‖ = ‖χᵢ‖ = 1 (for the L² norm Σᵢ ∫(φᵢ − χᵢ)²
with ∫χᵢ² = 1, as in those papers; for H¹ both normalised in H¹, the distance of unit vectors):
for fixed α the best χᵢ is the normalised projection of φᵢ on the Gaussian span, and the
objective is Σᵢ 2(1 − √qᵢ), qᵢ = sᵢᵀG⁻¹sᵢ/‖φᵢ‖² the squared cosine between φᵢ and the span
(sᵢ = ⟨φᵢ|g_k⟩, G the Gram matrix, both in the norm). A single subshell has the optimum of qᵢ
alone, as with the unnormalised least-squares error 1 − qᵢ; joint fits differ from that one. Only
x = ln α is optimised (variable projection: G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10,
413, 1973). Everything is in closed form (stobuilder.expansion.analytic and assembly: the
objective, its gradient and its exact Hessian from analytic STO–Gaussian integrals; no
quadrature grid). The search is a trust-region
Newton method on the absolute-value Hessian (stobuilder.expansion.newton), run in double
precision for all deterministic starts at once (one batched evaluation per iteration). Starts: continuation from
the N − 1 fit (a new tight, a new diffuse or a new middle exponent) and even-tempered sets
(K. Ruedenberg, R. C. Raffenetti, R. D. Bardo, in Energy, Structure and Reactivity, Wiley 1973:
α_k = α₀ β^k). Double precision places an optimum only to the rounding level of the Gram form
(ε ± ~5e-16; below, ε stands for the objective), so every fit is finished by the same Newton
method with ε and its gradient in 113-bit ball arithmetic (python-flint), and its ε and
coefficients are evaluated there; where ε itself is below EXT_ALL_BELOW, double precision cannot
even rank the runs, and all of them are finished that way. A finishing run that would merge two exponents below MIN_RATIO stops there
and is finished on that bound.
"""

from __future__ import annotations

from stobuilder.core.defaults import DEFAULTS

import math
from dataclasses import dataclass, field
from functools import lru_cache
from numbers import Real
from typing import Iterable, Mapping

import numpy as np

from stobuilder.core import arguments
from stobuilder.model.elements import parse_subshell_label, subshell_label
from stobuilder.core.errors import InputError
from stobuilder.expansion.analytic import Problem, Target, gaussian_overlap
from stobuilder.expansion.newton import CONSTRAINED_SEARCH, FINISH, SEARCH, newton

MAX_GAUSSIANS = 12
NORMS = ("l2", "h1")
MAX_N = 6
MAX_L = 3
# Version of the fitting algorithm: part of every cache key (a change invalidates cached fits).
ALGORITHM = "vp-closed-form-newton-4-normalised"

# The settings of the search around the Newton runs (the thresholds of the runs themselves are
# newton.SearchSettings); tuned on the whole library, which they leave unchanged.
# Smallest ratio of neighbouring exponents accepted (common practice, no source): closer
# exponents make G nearly singular and describe no more than one r^(l+2) Gaussian.
MIN_RATIO = 1.1
# (ln of the exponent ratio, shift of the centre in ln α) of the even-tempered starts: a spread
# of ratios around the STO's extent; N = 1: all, N = 2: the first 3, beyond: the first
ET_STARTS = ((0.7, 0.0), (1.2, 0.0), (1.8, 0.0), (0.7, -1.0), (0.7, 1.0))
NEW_END = 1.5  # ln α of a continuation's new tight (diffuse) exponent beyond the N − 1 fit's end
GAPS = 3  # gap insertions tried beyond N = 6: the widest gaps (one start per gap costs N − 1 runs)
CONSTRAINED_STARTS = 3  # the best runs with merging exponents that start the bounded fit
# below EXT_ALL_BELOW × the number of subshells (each term of the objective is relative) double precision cannot rank the runs (ε differences ~ 100 × the
# rounding level SearchSettings.noise): every distinct run is finished in ball arithmetic
EXT_ALL_BELOW = 1e-13
# below this × the number of subshells the continuation starts from the finished N − 1 fit (double precision
# places that one poorly)
PREVIOUS_FINISHED_BELOW = 1e-10
NEAR_BOUND = 0.5  # ln of the ratio above MIN_RATIO below which the bounded finish is tried too
TIE = 1e-12  # a later run replaces the best only when lower by this, relative (the start order breaks ties)
DISTINCT = 1e-2  # runs within this in every ln α are one candidate for the finish
GAP_START = 1e-4  # smallest u² of a bounded start: gaps ln MIN_RATIO + u² are stationary in u at u = 0
ON_BOUND = 1e-8  # a finished fit with a gap within this of ln MIN_RATIO is flagged constrained


@dataclass(frozen=True)
class Fit:
    """An STO-nG expansion at ζ = 1 bohr⁻¹ (of the first subshell).

    Attributes
    ----------
    subshells : labels sorted by (n, l), e.g. ("3s", "3p", "3d"); they share the exponents.
    gaussians : number of primitives N.
    norm : the fit criterion: "l2" least squares, "h1" the Sobolev norm ‖·‖² + ‖∇·‖² (gradient
        measured in units of the first subshell's 1/ζ, see stobuilder.expansion.analytic).
    exponents : α_k in bohr⁻² at ζ = 1, descending.
    coefficients : label → c_k for normalised primitives (order of ``exponents``): the best
        contraction in the fitted norm, scaled to L² norm exactly 1 (the contraction as a basis
        file writes it); the sign makes it overlap the STO positively.
    error : label → the subshell's term of the objective, ‖φ − χ‖² = 2(1 − √q) with φ and χ
        normalised in the fitted norm (dimensionless, scale-invariant); ``total_error`` is the
        objective that was minimised.
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
        """Σ over the subshells of ‖φ − χ‖² = 2(1 − √q): the objective that was minimised."""
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
    """Validate labels and return them sorted by (n, l), without duplicates allowed. One string
    is one label; TypeError for another type or an item that is no string, InputError for a
    label that is not one or a list that is empty or repeats one."""
    if isinstance(subshells, str):
        labels = [subshells]
    elif isinstance(subshells, (bytes, Mapping)) or not isinstance(subshells, Iterable):
        raise TypeError(f"subshells must be a label such as '1s' or a list of labels, got {arguments.kind(subshells)}")
    else:
        labels = [arguments.text(label, "subshells: item") for label in subshells]
    if not labels:
        raise InputError("subshells: give at least one subshell label such as 1s")
    nls = []
    for label in labels:
        try:
            n, l = parse_subshell_label(label)
        except InputError as err:
            raise InputError(f"subshells: {err}") from None
        if n > MAX_N or l > MAX_L:
            raise InputError(f"subshell {label!r}: fits cover n ≤ {MAX_N} and l ≤ {MAX_L}")
        nls.append((n, l))
    if len(set(nls)) != len(nls):
        raise InputError(f"subshells {labels!r}: a subshell is listed twice")
    return tuple(subshell_label(n, l) for n, l in sorted(nls))


def check_inputs(gaussians: int, norm: str) -> int:
    """``gaussians`` as an int in 1 … MAX_GAUSSIANS and ``norm`` one of NORMS (``fit_sto``'s and
    ``library.lookup``'s check): TypeError for a wrong type, InputError for a wrong value."""
    gaussians = arguments.whole_number(gaussians, "gaussians", 1, MAX_GAUSSIANS)
    if arguments.text(norm, "norm") not in NORMS:
        raise InputError(f"norm {norm!r} is not supported; choose one of {', '.join(NORMS)}")
    return gaussians


def positive_map(name: str, values, labels: tuple[str, ...], low: float, high: float) -> dict[str, float]:
    """Validate an optional {label: number} option (``n_eff``, ``zeta_ratio``) of the subshells
    ``labels``: None is none; TypeError for a value that is no mapping or a number that is none,
    InputError for a label not fitted or a number not finite or outside [low, high]. Values
    equal to the default are kept (explicit)."""
    if values is None:
        return {}
    if not isinstance(values, Mapping):
        raise TypeError(f"{name} must be a mapping label → number, got {arguments.kind(values)} {arguments.shown(values)}")
    out = {}
    for label, value in values.items():
        if label not in labels:
            raise InputError(f"{name}: {label!r} is not one of the fitted subshells {', '.join(labels)}")
        if isinstance(value, bool) or not isinstance(value, Real):
            raise TypeError(f"{name} for {label} must be a number, got {arguments.kind(value)} {arguments.shown(value)}")
        if not math.isfinite(value):
            raise InputError(f"{name} for {label} must be a finite number, got {value!r}")
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
def _problem(targets: tuple[Target, ...], norm: str) -> Problem:
    return Problem(targets, norm)


def _even_tempered(n_gauss: int, centre: float, log_ratio: float) -> np.ndarray:
    return centre + log_ratio * (np.arange(n_gauss)[::-1] - (n_gauss - 1) / 2.0)


def _starts(n_gauss: int, targets: tuple[Target, ...], previous: np.ndarray | None) -> list[np.ndarray]:
    """Deterministic starting points in ln α: continuation from the N−1 fit (a new tight, a new
    diffuse exponent, a new exponent in each gap up to N = 6, in the GAPS widest gaps beyond)
    and even-tempered sets (their centre from the STO's extent, α ~ 1/⟨r⟩²): all of ET_STARTS for
    N = 1, the first 3 for N = 2, the first beyond."""
    starts = []
    if previous is not None:
        ext = np.concatenate([[previous[0] + NEW_END], previous, [previous[-1] - NEW_END]])
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
    for log_ratio, shift in ET_STARTS if n_gauss == 1 else ET_STARTS[:3] if n_gauss <= 2 else ET_STARTS[:1]:
        starts.append(_even_tempered(n_gauss, base + shift, log_ratio * (n_gauss > 1)))
    return starts


def _constrained_fit(problem: Problem, starts: list[np.ndarray], extended: bool = False) -> tuple[float, np.ndarray]:
    """Minimise ε over ln α with every neighbouring ratio ≥ MIN_RATIO: the gaps between
    neighbouring ln α are written ln MIN_RATIO + u_k², an unconstrained problem in (x₀, u)."""
    floor = math.log(MIN_RATIO)
    z0 = []
    for x0 in starts:
        x0 = np.sort(np.asarray(x0, dtype=float))[::-1]
        z0.append(np.concatenate([[x0[0]], np.sqrt(np.maximum(-np.diff(x0) - floor, GAP_START))]))
    z0 = np.array(z0)
    size = z0.shape[1]
    lower = np.tril(np.ones((size, size)))

    def transform(z):  # x_i = z₀ − Σ_(1≤j≤i) (floor + z_j²)
        x = z[:, :1] - np.concatenate([np.zeros((len(z), 1)), np.cumsum(floor + z[:, 1:] ** 2, axis=1)], axis=1)
        jac = -lower[None, :, :] * (2.0 * z)[:, None, :]
        jac[:, :, 0] = 1.0

        def second(g):  # ∂²x_i/∂z_j² = −2 for 1 ≤ j ≤ i
            out = -2.0 * np.cumsum(g[:, ::-1], axis=1)[:, ::-1]
            out[:, 0] = 0.0
            return out

        return x, jac, second

    f, z = newton(problem, z0, FINISH if extended else CONSTRAINED_SEARCH, transform, extended)
    best = int(np.argmin(f))
    return float(f[best]), transform(z[best : best + 1])[0][0]


@lru_cache(maxsize=None)
def _search(targets: tuple[Target, ...], norm: str, n_gauss: int):
    """Best ln α (descending, double precision) over the deterministic starts, whether MIN_RATIO
    was binding, and the distinct runs that respect MIN_RATIO, the best first (for the
    extended-precision finish)."""
    problem = _problem(targets, norm)
    previous = None
    if n_gauss > 1:
        # continuation from the N − 1 search; where its ε is below PREVIOUS_FINISHED_BELOW
        # (double precision places it poorly), from the N − 1 fit finished in ball arithmetic
        prev_x, _, prev_f = _search(targets, norm, n_gauss - 1)[:3]
        tiny = prev_f < PREVIOUS_FINISHED_BELOW * len(problem.targets)
        previous = np.array(_fit_log_alpha(targets, norm, n_gauss - 1)[0] if tiny else prev_x)
    starts = _starts(n_gauss, targets, previous)
    f, x = newton(problem, np.array(starts))
    x = -np.sort(-x, axis=1)
    best_f, best_x, merged = math.inf, None, []
    for fk, xk in zip(f, x):
        if not math.isfinite(fk):
            continue
        if n_gauss > 1 and np.min(-np.diff(xk)) < math.log(MIN_RATIO):
            merged.append((fk, xk))  # two exponents running together mimic an r^(l+2) Gaussian
            continue
        if best_x is None or fk < best_f - TIE * abs(best_f):
            best_f, best_x = float(fk), xk
    if merged and min(fk for fk, _ in merged) < best_f:
        # ε falls further as two exponents merge (6s6p N = 3; h1 6s N = 8): the best fit with
        # every ratio ≥ MIN_RATIO, started from those runs, competes with the interior minima
        fc, xc = _constrained_fit(problem, [xk for _, xk in sorted(merged, key=lambda item: item[0])][:CONSTRAINED_STARTS])
        if best_x is None or fc < best_f - TIE * abs(best_f):
            return tuple(float(v) for v in xc), True, fc, ()
    if best_x is not None:
        keep = [best_x] + [xk for fk, xk in sorted(zip(f, x), key=lambda item: item[0]) if math.isfinite(fk)]
        distinct = []
        for xk in keep:
            if (n_gauss == 1 or np.min(-np.diff(xk)) >= math.log(MIN_RATIO)) and not any(np.max(np.abs(xk - y)) < DISTINCT for y in distinct):
                distinct.append(xk)
        return tuple(float(v) for v in best_x), False, best_f, tuple(tuple(float(v) for v in xk) for xk in distinct)
    fc, xc = _constrained_fit(problem, starts)
    return tuple(float(v) for v in xc), True, fc, ()


@lru_cache(maxsize=None)
def _fit_log_alpha(targets: tuple[Target, ...], norm: str, n_gauss: int):
    """(ln α descending, constrained, ε per target, optimal coefficients per target) of the fit."""
    problem = _problem(targets, norm)
    x, constrained, search_f, candidates = _search(targets, norm, n_gauss)
    x = np.array(x)
    # double precision places the optimum only to its rounding level (ε ± ~5e-16): every fit
    # is finished with ε and its gradient in ball arithmetic, from the best run, or (ε <
    # EXT_ALL_BELOW, where double precision cannot rank the runs) from every distinct run and
    # from the starts of the finished N − 1 fit
    rows = [tuple(x)]
    if search_f < EXT_ALL_BELOW * len(problem.targets):
        previous = None if n_gauss == 1 else np.array(_fit_log_alpha(targets, norm, n_gauss - 1)[0])
        fs, zs = newton(problem, np.array(_starts(n_gauss, targets, previous)))
        for zk in list(candidates) + [tuple(v) for fk, v in zip(fs, -np.sort(-zs, axis=1)) if math.isfinite(fk)]:
            if not any(np.max(np.abs(np.array(zk) - np.array(y))) < SEARCH.same for y in rows):
                rows.append(tuple(zk))
    f, z = newton(problem, np.array(rows), FINISH, extended=True, floor=math.log(MIN_RATIO) if n_gauss > 1 else None)
    z = -np.sort(-z, axis=1)
    fine = [k for k in range(len(z)) if math.isfinite(f[k]) and (n_gauss == 1 or np.min(-np.diff(z[k])) >= math.log(MIN_RATIO))]
    fx, xx = (f[min(fine, key=lambda k: (f[k], k))], z[min(fine, key=lambda k: (f[k], k))]) if fine else (math.inf, x)
    if n_gauss > 1 and (not fine or np.min(-np.diff(xx)) < math.log(MIN_RATIO) + NEAR_BOUND):
        # the same from there with every ratio ≥ MIN_RATIO: a run creeping towards two merging
        # exponents ends on that bound instead of wherever the iterations stop
        fc, xc = _constrained_fit(problem, [xx if fine else x], extended=True)
        if fc < fx:
            fx, xx = fc, xc
    out = problem.evaluate_ball(xx, order=0, with_total=True) if math.isfinite(fx) else None
    here = problem.evaluate_ball(x, order=0, with_total=True)
    # compared as (high, low) pairs: the finish may lower ε by less than an ulp of its double
    if out is not None and (here is None or (out[4][0] - here[4][0]) + (out[4][1] - here[4][1]) <= 0):
        x, eps, coefs = np.array(xx), out[0], out[3]
        constrained = n_gauss > 1 and float(np.min(-np.diff(x))) - math.log(MIN_RATIO) < ON_BOUND
    elif here is not None:
        eps, coefs = here[0], here[3]  # the search's point, evaluated in ball arithmetic too
    else:
        raise RuntimeError(f"fit of {targets} with N = {n_gauss}: no exponent set with a regular Gram matrix")
    return tuple(float(v) for v in x), constrained, tuple(float(e) for e in eps), tuple(tuple(c) for c in coefs)


def clear_caches() -> None:
    """Forget every fit computed in this process (benchmarks and reproducibility tests). The
    tables of I_ν (radial_tables.radial_table, radial_tables.ball_table) stay: they are exact
    functions of (n*, l, ζ) shared by every fit, and no fit depends on which pieces were built
    before."""
    _fit_log_alpha.cache_clear()
    _search.cache_clear()
    _problem.cache_clear()


def fit_sto(
    subshells: str | Iterable[str],
    gaussians: int,
    norm: str = DEFAULTS["norm"],
    n_eff: Mapping[str, float] | None = None,
    zeta_ratio: Mapping[str, float] | None = None,
) -> Fit:
    """Fit N normalised Gaussians to normalised STOs, sharing the exponents: minimise
    Σ ‖φ − χ‖² over the subshells, φ and each contraction χ normalised in the norm (Hehre,
    Stewart & Pople 1969; Stewart 1970), = Σ 2(1 − √q) (module docstring).

    Parameters
    ----------
    subshells : str or list of str
        One label ("1s") or several sharing the exponents (["3s", "3p", "3d"]); n ≤ 6, l ≤ 3.
        The order is normalised to (n, l).
    gaussians : int
        Number N of primitives, 1 … 12.
    norm : str
        "l2": ∫|φ−χ|² (Hehre, Stewart & Pople 1969); "h1": Sobolev norm with the gradient term,
        ∫|φ−χ|² + ζ₁⁻² ∫|∇φ−∇χ|² (see stobuilder.expansion.analytic); φ and χ normalised in it.
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
    gaussians = check_inputs(gaussians, norm)
    labels = normalise_subshells(subshells)
    n_map = positive_map("n_eff", n_eff, labels, 1.0, 8.0)
    n_map = {k: v for k, v in n_map.items() if v != parse_subshell_label(k)[0]}  # integer n*: the plain STO
    r_map = positive_map("zeta_ratio", zeta_ratio, labels, 0.2, 5.0)
    if r_map.get(labels[0], 1.0) != 1.0:
        raise InputError(f"zeta_ratio of the first subshell {labels[0]} must be 1 (the others are relative to it)")
    r_map = {k: v for k, v in r_map.items() if v != 1.0}
    targets = targets_for(labels, n_map, r_map)
    log_alpha, constrained, eps, coefs = _fit_log_alpha(targets, norm, int(gaussians))
    alpha = np.exp(np.array(log_alpha))
    coefficients, error = {}, {}
    for label, t, c, e in zip(labels, targets, coefs, eps):
        c = np.array(c)
        norm2 = float(c @ gaussian_overlap(t.l, alpha) @ c)
        coefficients[label] = tuple(float(v) for v in c / math.sqrt(norm2))
        error[label] = float(e)
    return Fit(labels, int(gaussians), norm, tuple(float(a) for a in alpha), coefficients, error, constrained,
               n_map, r_map)
