"""Trust-region Newton minimisation of the fit objective Σε from many starts at once (``newton``).

The model is gᵀs + ½ sᵀ|H|s with |H| = V|Λ|Vᵀ (the absolute eigenvalues of the exact Hessian,
so that saddle points repel), minimised within the trust radius (``trust_step``); the radius
shrinks when ε rose or fell by less than a quarter of the predicted decrease and grows when it
fell as predicted (J. Nocedal, S. J. Wright, Numerical Optimization, 2nd ed., Springer 2006,
ch. 4); a step whose ε fell by less than that is first corrected along the valley's curvature
(``_correct``). Each iteration: the stopping rules (``_stop``), the model and its step
(``_model``, ``trust_step``), the convergence test (``_converged``), the trial evaluation, its
acceptance (``_assess``), the correction, the MIN_RATIO floor, the radius update and the move
(``_move``). Every threshold is a field of ``SearchSettings`` with the reason for its value;
they were tuned on the whole library, which they leave unchanged.

The runs are the rows of z, evaluated together (one batched evaluation per step in double
precision). ``extended``: ε and its gradient in ball arithmetic (``Problem.evaluate_ball``,
113 bits), the double-precision Hessian as the model.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from stobuilder.expansion.analytic import Problem


@dataclass(frozen=True)
class SearchSettings:
    """The thresholds of ``newton`` (dimensionless; lengths are 2-norms of changes of ln α), each
    with its reason. The trust-region rules are the textbook ones (J. Nocedal, S. J. Wright,
    Numerical Optimization, 2nd ed., 2006, Algorithm 4.1); the rules that stop runs early and the
    correction were tuned on the whole library, which they leave unchanged."""

    # a cap on the iterations of a run: the library's search runs take at most 64 (median 9;
    # measured over every family at N ≤ 12, both norms)
    max_iter: int = 80
    # converged when the predicted decrease is below rtol ε (plus noise): double precision cannot
    # place the optimum much better (ε to ~5e-16 absolute), the ball-arithmetic finish refines it
    rtol: float = 1e-13
    # or when the largest change of ln α in a step is below this: far below the 1e-5 relative to
    # which exponents are compared with published tables
    xtol: float = 1e-10
    # absolute rounding level of ε in double precision, × the number of subshells (each term
    # 2(1 − √q) is relative to its ‖φ‖²) (measured ≤ 5e-16 against the
    # ball evaluation with G, s and the prefactors accurate to a few ulp)
    noise: float = 1e-15
    # first radius: a factor 1.65 in α, below the spacing of neighbouring ln α in the
    # even-tempered starts (0.7–1.8)
    radius_start: float = 0.5
    # largest radius: one step may move the exponents by about one spacing of the starts
    max_step: float = 2.0
    # ρ = actual / predicted decrease below which a step is poor: the radius shrinks (textbook
    # 1/4) and the step is first corrected (``_correct``)
    poor_ratio: float = 0.25
    # ρ above which a step is good and the radius may grow (textbook 3/4)
    good_ratio: float = 0.75
    # ... if the step reached the edge: the textbook ‖s‖ = radius, loosened because trust_step
    # solves ‖s‖ = radius only to secular_rtol (tuned on the library)
    edge_fraction: float = 0.8
    # a shrunk radius is this fraction of the step length (textbook 1/4, of the radius there)
    shrink_to: float = 0.25
    # a grown radius is this multiple of the radius (textbook 2)
    grow_by: float = 2.0
    # |eigenvalues| of H floored at this × the largest: |H| stays invertible; the double Hessian
    # carries ~1e-14 relative, so only numerically zero eigenvalues are affected
    eigenvalue_floor: float = 1e-24
    # and at this absolute value (a Hessian that is zero altogether)
    tiny_eigenvalue: float = 1e-300
    # the rules that stop unpromising runs wait this many iterations: every start settles first
    keep_after: int = 5
    # a run whose ε exceeds the best run's by more than this factor is in a worse minimum: it stops
    drop_factor: float = 1.5
    # a run above a converged one stops when at its last predicted decrease it would need more
    # than this many steps to come down to it (it is creeping along a valley)
    crawl: int = 20
    # runs whose sorted ln α agree within this (5 % in α) run into the same minimum: the worse stops
    same: float = 0.05
    # ... from this iteration on (tuned on the library)
    same_after: int = 2
    # the curvilinear correction c is tried when ‖c‖ ≤ this × ‖s‖ (a larger one means the
    # third-order estimate is outside its range; tuned on the library, ε unchanged to 2e-16)
    correction_limit: float = 0.75
    # ... along the stiff directions only, |λ| ≥ this × |λ|max: back to the valley floor, not along it
    stiff: float = 1e-2
    # the corrected step is taken when it lowers ε by this fraction of the first step's
    # prediction (the poor_ratio a step must reach anyway)
    correction_gain: float = 0.25
    # trust_step: Newton iterations on 1/‖s(μ)‖ = 1/radius (nearly linear in μ, so a few suffice:
    # J. J. Moré, D. C. Sorensen, SIAM J. Sci. Stat. Comput. 4, 553, 1983) and the relative
    # tolerance on ‖s‖: the step need only lie near the radius
    secular_iterations: int = 30
    secular_rtol: float = 1e-3
    # trust_step: μ falls by at most this factor per iteration (a safeguard, μ stays ≥ 0)
    mu_backoff: float = 0.5
    # trust_step: a step longer than radius × this (the iteration stopped early) is scaled back
    radius_slack: float = 1.001


SEARCH = SearchSettings()  # the double-precision search from the deterministic starts
# the bounded fit (fit._constrained_fit) in double precision: a wider cap (the library's three
# such runs take at most 15 iterations, measured as for max_iter)
CONSTRAINED_SEARCH = replace(SEARCH, max_iter=400)
# the finish in ball arithmetic: ε is resolved to ~1e-30 there, so a tighter rtol means
# something; a wider cap (the library's finishing runs take at most 85 iterations, median 2)
FINISH = replace(SEARCH, max_iter=400, rtol=1e-15)


class _Evaluator:
    """ε, gradient and Hessian at the rows of z, through ``transform(z) → (x, ∂x/∂z, second)``
    when the variables are not x = ln α themselves (second(g) is the diagonal of
    Σ_i g_i ∂²x_i/∂z_j²). Returns (ε, gradient, Hessian or None, the part of ε below its double:
    zero in double precision). ``extended``: ε and gradient in ball arithmetic; the Hessian (the
    model only) is ``model_hessian``'s, asked for where a step was taken."""

    def __init__(self, problem: Problem, transform, extended: bool):
        self.problem, self.transform, self.extended = problem, transform, extended

    def _in_z(self, z, mapped, x_parts, with_hessian):
        """ε, gradient and (if asked) Hessian with respect to z from those with respect to x
        (``mapped``: transform(z), or None without a transform)."""
        f, g, h, lo = x_parts
        if mapped is None:
            return f, g, h, lo
        _, jac, second = mapped
        gz = np.einsum("sij,si->sj", jac, g)
        hz = None
        if with_hessian:
            hz = np.einsum("sij,sik,skl->sjl", jac, h, jac)
            hz[:, np.arange(z.shape[1]), np.arange(z.shape[1])] += second(g)
        return f, gz, hz, lo

    def __call__(self, z, with_hessian=True):
        mapped = None if self.transform is None else self.transform(z)
        x = z if mapped is None else mapped[0]
        if not self.extended:
            return self._in_z(z, mapped, (*self.problem.evaluate_batch(x, 2)[1:4], np.zeros(len(x))), True)
        fs, gs, lows = [], [], []
        for row in x:
            out = self.problem.evaluate_ball(row, order=1, with_total=True)
            if out is None:
                fs.append(math.inf), gs.append(np.zeros(row.size)), lows.append(0.0)
            else:
                fs.append(out[4][0]), gs.append(out[1]), lows.append(out[4][1])
        f, g, _, lo = self._in_z(z, mapped, (np.array(fs), np.array(gs), None, np.array(lows)), False)
        return f, g, self.model_hessian(z, mapped) if with_hessian else None, lo

    def model_hessian(self, z, mapped=None):
        """The Hessian in double precision for all rows at once (~1e-14 absolute: the steps
        barely change, and a ball evaluation costs half as much without it)."""
        if mapped is None and self.transform is not None:
            mapped = self.transform(z)
        _, _, gd, hd, _ = self.problem.evaluate_batch(z if mapped is None else mapped[0], 2)
        return self._in_z(z, mapped, (None, gd, hd, None), True)[2]


@dataclass
class _Runs:
    """The state of every run (row): variables z, ε (and its part below the double, ``low``),
    gradient, model Hessian, trust radius, whether it still runs, whether it converged, and the
    decrease its last step predicted."""

    z: np.ndarray
    f: np.ndarray
    g: np.ndarray
    h: np.ndarray
    low: np.ndarray
    radius: np.ndarray
    active: np.ndarray
    converged: np.ndarray
    last_pred: np.ndarray


@dataclass
class _Trial:
    """The step of the active runs and what it gave: ε, its low part, gradient, Hessian (None in
    ball arithmetic), the actual decrease, whether it is taken, and ρ = actual / predicted."""

    step: np.ndarray
    f: np.ndarray
    g: np.ndarray
    h: np.ndarray | None
    low: np.ndarray
    actual: np.ndarray | None = None
    better: np.ndarray | None = None
    rho: np.ndarray | None = None


def newton(problem: Problem, z0: np.ndarray, settings: SearchSettings = SEARCH, transform=None,
           extended: bool = False, floor: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Minimise Σε from every row of z0 (S, N) at once; returns (ε (S,), z).

    A row stops when the predicted decrease is below ``settings.rtol`` ε, when its step or trust
    radius falls below ``xtol``, when it has run into a better row's minimum (``same``), or
    (after ``keep_after`` iterations) when its ε is more than ``drop_factor`` above the best
    row's or it creeps towards a converged row's ε too slowly (``crawl``). ``transform``: see
    ``_Evaluator``. ``extended``: ε and its gradient in ball arithmetic. ``floor``: a row whose
    step would bring two exponents closer than this in ln α stops where it is (its finish is
    then the bounded one, ``fit._constrained_fit``).
    """
    evaluate = _Evaluator(problem, transform, extended)
    # absolute rounding level of ε = ‖φ‖² − sᵀc in double precision (none in ball arithmetic)
    noise = 0.0 if extended else settings.noise * len(problem.targets)
    z = np.array(z0, dtype=float)
    f, g, h, low = evaluate(z)
    runs = _Runs(z, f, g, h, low, np.full(len(z), settings.radius_start), np.isfinite(f),
                 np.zeros(len(z), dtype=bool), np.full(len(z), np.inf))
    for iteration in range(settings.max_iter):
        _stop(runs, iteration, noise, transform is None, settings)
        idx = np.flatnonzero(runs.active)
        if idx.size == 0:
            break
        v, wabs, g_eig = _model(runs.h[idx], runs.g[idx], settings)
        step_eig, mu = trust_step(g_eig, wabs, runs.radius[idx], settings)
        step = np.einsum("kij,kj->ki", v, step_eig)
        pred = -(np.einsum("ki,ki->k", g_eig, step_eig) + 0.5 * np.einsum("ki,ki->k", wabs * step_eig, step_eig))
        tiny = _converged(runs, idx, step, pred, noise, settings)
        bad_step = ~np.isfinite(step).all(axis=1)
        step[bad_step] = 0.0
        pred[bad_step] = 0.0
        trial = _Trial(step, *evaluate(runs.z[idx] + step, with_hessian=not extended))
        trial.f[bad_step] = np.inf  # a failed model step counts as a rejected one
        _assess(runs, idx, trial, pred, tiny, noise)
        fix = np.flatnonzero(np.isfinite(trial.f) & ~tiny & (trial.rho < settings.poor_ratio) & ~bad_step)
        if fix.size:
            _correct(runs, idx, fix, trial, pred, v, wabs, mu, evaluate, settings)
        if floor is not None:  # on the step as taken, corrected or not
            crossing = trial.better & (np.min(np.abs(np.diff(-np.sort(-(runs.z[idx] + trial.step), axis=1), axis=1)),
                                              axis=1) < floor)
            trial.better &= ~crossing
            runs.active[idx[crossing]] = False
        _update_radius(runs, idx, trial, np.linalg.norm(step_eig, axis=1), settings)
        _move(runs, idx, trial, evaluate)
        runs.active[idx[runs.radius[idx] < settings.xtol]] = False
    return runs.f, runs.z


def _stop(runs: _Runs, iteration: int, noise: float, plain: bool, settings: SearchSettings) -> None:
    """The stopping rules for unpromising runs: far above the best, crawling towards a converged
    one, or (``plain``: variables ln α themselves) run into a better row's minimum."""
    f, active = runs.f, runs.active
    if iteration >= settings.keep_after and active.any():
        # (differences, not ratios: in double precision ε near a tiny optimum can come out
        # slightly negative)
        f_min = f[np.isfinite(f)].min()
        active &= f - f_min <= (settings.drop_factor - 1.0) * max(abs(f_min), noise)
        if runs.converged.any():
            # a row above a converged one that, at its present rate, would need more than
            # ``crawl`` steps even to come down to it (it is creeping along a valley)
            f_best = f[runs.converged].min()
            active &= ~((f > f_best) & (runs.last_pred * settings.crawl < f - f_best))
    if iteration >= settings.same_after and plain and len(runs.z) > 1:
        # a row that has run into a better row's minimum (sorted ln α within ``same``) stops
        srt = -np.sort(-runs.z, axis=1)
        near = np.abs(srt[:, None, :] - srt[None, :, :]).max(axis=2) < settings.same
        rank = np.argsort(np.argsort(f, kind="stable"), kind="stable")
        active &= ~(near & (rank[None, :] < rank[:, None])).any(axis=1)


def _model(h: np.ndarray, g: np.ndarray, settings: SearchSettings):
    """The model gᵀs + ½ sᵀ|H|s in the eigenbasis of H: (V, |Λ| floored, Vᵀg)."""
    w, v = np.linalg.eigh(h)
    wabs = np.abs(w)
    wabs = np.maximum(wabs, np.maximum(settings.eigenvalue_floor * wabs.max(axis=1, keepdims=True),
                                       settings.tiny_eigenvalue))
    return v, wabs, np.einsum("kji,kj->ki", v, g)


def _converged(runs: _Runs, idx: np.ndarray, step: np.ndarray, pred: np.ndarray, noise: float,
               settings: SearchSettings) -> np.ndarray:
    """Marks the runs converged whose step is below ``xtol`` or whose predicted decrease is below
    rtol ε (or the rounding level); returns the latter (``tiny``): that last (Newton) step is
    still taken if ε does not rise beyond rounding (its decrease may be below it)."""
    tiny = ~(pred > np.maximum(settings.rtol * runs.f[idx], noise))
    done = tiny | (np.abs(step).max(axis=1) < settings.xtol)
    runs.active[idx[done]] = False
    runs.converged[idx[done]] = True
    runs.last_pred[idx] = pred
    return tiny


def _assess(runs: _Runs, idx: np.ndarray, trial: _Trial, pred: np.ndarray, tiny: np.ndarray, noise: float) -> None:
    """The actual decrease of the trial step, whether it is taken, and ρ = actual / predicted."""
    actual = runs.f[idx] - trial.f
    # the exact difference (ball arithmetic): a converging step may lower ε by less than an ulp
    trial.actual = np.where(np.isfinite(trial.f), actual + (runs.low[idx] - trial.low), actual)
    trial.better = (trial.actual > 0) | (tiny & (trial.f <= runs.f[idx] + noise))
    trial.rho = np.where(pred > 0, trial.actual / np.where(pred > 0, pred, 1.0), 0.0)


def _correct(runs: _Runs, idx, fix, trial: _Trial, pred, v, wabs, mu, evaluate: _Evaluator,
             settings: SearchSettings) -> None:
    """Curvilinear correction of the poor steps ``fix`` (positions in ``idx``) that ran out of a
    curved valley onto its wall (geodesic acceleration: M. K. Transtrum, J. P. Sethna,
    arXiv:1201.5885, 2012): the third-order term T(s, s) ≈ 2 (g(z + s) − g(z) − H s) from the
    trial gradient, c = −½ (|H| + μ)⁻¹ T(s, s) in the stiff directions only, tried when it is
    small against s; the pair is taken when it lowers ε by ``correction_gain`` of the first
    step's predicted decrease. (Tuned on the library, ε unchanged to 2e-16; the crawls along the
    valleys of the ε < 1e-13 fits take a third of the iterations.)"""
    ii = idx[fix]
    resid = trial.g[fix] - runs.g[ii] - np.einsum("kij,kj->ki", runs.h[ii], trial.step[fix])
    ct = -np.einsum("kji,kj->ki", v[fix], resid) / (wabs[fix] + mu[fix, None])
    ct[wabs[fix] < settings.stiff * wabs[fix].max(axis=1, keepdims=True)] = 0.0
    corr = np.einsum("kij,kj->ki", v[fix], ct)
    small = np.linalg.norm(corr, axis=1) <= settings.correction_limit * np.linalg.norm(trial.step[fix], axis=1)
    fix, ii, corr = fix[small], ii[small], corr[small]
    if not fix.size:
        return
    fc, gc, hc, lowc = evaluate(runs.z[ii] + trial.step[fix] + corr, with_hessian=not evaluate.extended)
    act_c = np.where(np.isfinite(fc), runs.f[ii] - fc + (runs.low[ii] - lowc), -np.inf)
    ok = act_c > settings.correction_gain * pred[fix]
    k = fix[ok]
    trial.step[k] += corr[ok]
    trial.f[k], trial.g[k], trial.low[k] = fc[ok], gc[ok], lowc[ok]
    if not evaluate.extended:
        trial.h[k] = hc[ok]
    trial.actual[k] = act_c[ok]
    trial.better[k] = True
    trial.rho[k] = act_c[ok] / pred[k]


def _update_radius(runs: _Runs, idx, trial: _Trial, length: np.ndarray, settings: SearchSettings) -> None:
    """Shrink the radius after a rejected or poor step, grow it after a good one that reached the
    edge (``length``: of the model step, before any correction)."""
    shrink = ~trial.better | (trial.rho < settings.poor_ratio)
    grow = trial.better & (trial.rho > settings.good_ratio) & (length > settings.edge_fraction * runs.radius[idx])
    runs.radius[idx[shrink]] = settings.shrink_to * length[shrink]
    runs.radius[idx[grow]] = np.minimum(settings.grow_by * runs.radius[idx[grow]], settings.max_step)


def _move(runs: _Runs, idx, trial: _Trial, evaluate: _Evaluator) -> None:
    """Take the accepted steps: z, ε, gradient and the model Hessian there."""
    better = trial.better
    acc = idx[better]
    runs.z[acc] += trial.step[better]
    runs.f[acc], runs.g[acc], runs.low[acc] = trial.f[better], trial.g[better], trial.low[better]
    if acc.size:
        runs.h[acc] = trial.h[better] if not evaluate.extended else evaluate.model_hessian(runs.z[acc])


def trust_step(gt: np.ndarray, w: np.ndarray, radius: np.ndarray,
               settings: SearchSettings = SEARCH) -> tuple[np.ndarray, np.ndarray]:
    """Minimiser of the model gᵀs + ½ sᵀ|H|s within ‖s‖ ≤ radius, in the eigenbasis of H (rows:
    gradient components gt, |eigenvalues| w > 0): s = −gt/(w + μ) with μ ≥ 0 the root of
    1/‖s(μ)‖ = 1/radius (J. J. Moré, D. C. Sorensen, SIAM J. Sci. Stat. Comput. 4, 553, 1983;
    Newton's method on that nearly linear function). Returns (s, μ)."""
    mu = np.zeros(len(gt))
    step = -gt / w
    norm = np.linalg.norm(step, axis=1)
    out = norm > radius
    for _ in range(settings.secular_iterations):
        if not out.any():
            break
        d = w[out] + mu[out, None]
        s_ = -gt[out] / d
        n_ = np.linalg.norm(s_, axis=1)
        dn = -np.sum(s_ * s_ / d, axis=1) / n_  # d‖s‖/dμ
        phi = 1.0 / n_ - 1.0 / radius[out]
        mu_new = np.maximum(mu[out] - phi / (-dn / (n_ * n_)), settings.mu_backoff * mu[out])
        conv = np.abs(n_ - radius[out]) < settings.secular_rtol * radius[out]
        mu[out] = mu_new
        idx = np.flatnonzero(out)
        out[idx[conv]] = False
    step = -gt / (w + mu[:, None])
    norm = np.linalg.norm(step, axis=1)
    over = norm > radius * settings.radius_slack
    step[over] *= (radius[over] / norm[over])[:, None]
    return step, mu
