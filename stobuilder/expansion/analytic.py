"""The fit problem in closed form: the objective Σ 2(1 − √q) of several STOs sharing one set of
Gaussian exponents (q = sᵀG⁻¹s/‖φ‖², the squared cosine between an STO and the Gaussian span;
2(1 − √q) = ‖φ − χ‖² with φ and the best contraction χ normalised: Hehre, Stewart & Pople 1969,
Stewart 1970), its gradient and its exact Hessian in ln α, L² or H¹ norm (``Problem``), evaluated
in double precision (batched over exponent sets: the search) or in Arb ball arithmetic (the
finish). Below, ε = ‖φ‖² − sᵀG⁻¹s is the residual the objective is formed from (``assembly``).

The jobs around it: ``radial_tables`` supplies the radial integrals I_ν(α, ζ) = ∫_0^∞ r^(ν−1)
e^(−αr² − ζr) dr that every STO–Gaussian overlap is made of (Gaussian–Gaussian overlaps are
powers); ``assembly`` turns them into ε, gradient and Hessian by variable projection;
``arithmetic`` holds the two backends it runs in. No quadrature grid is used.

Norms. "l2": ∫ |φ − χ|² dτ (W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657,
1969). "h1": ∫ |φ − χ|² dτ + ζ₁⁻² ∫ |∇φ − ∇χ|² dτ, ζ₁ the exponent of the first subshell (the
norm and so the fit are invariant under r → ζr). For R(r) Y_lm the gradient term integrates to
∫ (r^l (R/r^l)')² r² dr (by parts; the boundary terms vanish for these functions); for the
Gaussian r^l (g/r^l)' = −2αr g, for the STO r^l (φ/r^l)' = φ ((n* − 1 − l)/r − ζ), so every H¹
inner product is again a sum of I_ν.

Precision. In double precision ε = ‖φ‖² − sᵀG⁻¹s carries an absolute rounding error of
~1e-16–1e-15 (the cancellation of two numbers near ‖φ‖², with G, s and the prefactors accurate
to a few ulp: I_ν from ``RadialTable``, Chebyshev pieces in ln α computed in Arb, ~1e-15
relative; measured against the extended evaluations), its gradient ~1e-15 and its Hessian
~1e-14: enough to search, not enough to place an optimum whose ε is ~1e-15 (or its flattest
direction to better than ~1e-5 in ln α). ``evaluate_ball`` evaluates the same closed forms in Arb
ball arithmetic (python-flint; F. Johansson, IEEE Trans. Comput. 66, 1281, 2017) at 113 bits,
every I_ν from Chebyshev pieces computed at 192 bits (``BallTable``: within ~3e-37 of the closed
forms, which it falls back to where a series has not converged); the linear algebra uses Arb's
midpoint solver, so the results are accurate to about that level without being rigorous
enclosures. The tests check both against an independent mpmath evaluation of the same closed
forms (tests/mp_objective.py) and against a sampled residual that shares no integrals
(tests/sampled_residual.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from stobuilder.expansion.arithmetic import ARB_LOCK, BALL_BITS, DOUBLE, BallArithmetic, exp_affine
from stobuilder.expansion.assembly import assemble, assemble_double
from stobuilder.expansion.radial_tables import ball_table, radial_table

# Range of the exponents a fit may use, bohr⁻² at ζ = 1 (scaled by ζ_min², ζ_max² of a fit):
# no fit of the library comes near either end (they span 4e-3 … 7e3).
ALPHA_MIN = 1e-3
ALPHA_MAX = 1e6


@dataclass(frozen=True)
class Target:
    """One STO of a fit: R(r) = N r^(n_eff − 1) e^(−ζ r), angular momentum l (Gaussians r^l)."""

    n_eff: float
    l: int
    zeta: float


def sto_norm(n_eff: float, zeta: float) -> float:
    """N of r^(n*−1) e^(−ζr): N² ∫ r^(2n*) e^(−2ζr) dr = 1, N = (2ζ)^(n*+½) / √Γ(2n*+1)."""
    return math.exp((n_eff + 0.5) * math.log(2.0 * zeta) - 0.5 * math.lgamma(2.0 * n_eff + 1.0))


def sto_h1_norm2(n_eff: float, l: int, zeta: float, scale: float) -> float:
    """‖φ‖² in the H¹ norm: 1 + ζ₁⁻² N² ∫ r^(2n*) e^(−2ζr) ((n*−1−l)/r − ζ)² dr, in closed form."""
    a = n_eff - 1.0 - l
    grad2 = a * a * 4.0 * zeta * zeta / (2.0 * n_eff * (2.0 * n_eff - 1.0)) - 2.0 * a * zeta * zeta / n_eff + zeta * zeta
    return 1.0 + grad2 / (scale * scale)


def gaussian_overlap(l: int, alpha: np.ndarray) -> np.ndarray:
    """Overlap matrix of normalised r^l e^(−αr²) radial functions: (2√(αα')/(α+α'))^(l+3/2)."""
    a = np.asarray(alpha, dtype=float)
    return (2.0 * np.sqrt(np.outer(a, a)) / np.add.outer(a, a)) ** (l + 1.5)


def _log_prefactor_pair(t: Target) -> tuple[float, float]:
    """(p/2) ln 2 + ln N_STO + ½ ln 2 − ½ ln Γ(p) (p = l + 3/2) as hi + lo, from mpmath at 40 digits."""
    import mpmath as mp

    with mp.workdps(40):
        n, p = mp.mpf(t.n_eff), mp.mpf(t.l) + mp.mpf(3) / 2
        v = ((n + mp.mpf(1) / 2) * mp.log(2 * mp.mpf(t.zeta)) - mp.loggamma(2 * n + 1) / 2
             + (mp.log(2) - mp.loggamma(p)) / 2 + p / 2 * mp.log(2))
        hi = float(v)
        return hi, float(v - hi)


class Problem:
    """The closed-form fit problem of several STOs sharing one set of Gaussian exponents."""

    def __init__(self, targets: tuple[Target, ...], norm: str):
        self.targets = targets
        self.h1 = norm == "h1"
        self.scale = targets[0].zeta
        zmin, zmax = min(t.zeta for t in targets), max(t.zeta for t in targets)
        self.bounds = (math.log(ALPHA_MIN * zmin * zmin), math.log(ALPHA_MAX * zmax * zmax))
        self.norm2 = [sto_h1_norm2(t.n_eff, t.l, t.zeta, self.scale) if self.h1 else 1.0 for t in targets]
        # one table of I_ν per (n*, ζ), for the highest l among those targets (the lower l by
        # the downward recurrence)
        tops: dict[tuple[float, float], list[int]] = {}
        for t in targets:
            tops.setdefault((t.n_eff, t.zeta), []).append(t.l)
        self._tables = {key: (radial_table(key[0], max(ls), key[1]), min(ls)) for key, ls in tops.items()}
        ls = sorted({t.l for t in targets})
        self.arrays = {
            "p_l": np.array([l + 1.5 for l in ls]),
            "l_index": np.array([ls.index(t.l) for t in targets]),
            "p_t": np.array([t.l + 1.5 for t in targets]),
            "a_t": np.array([t.n_eff - 1.0 - t.l for t in targets]),
            "zeta_t": np.array([t.zeta for t in targets]),
            "norm2": np.array(self.norm2),
        }
        # ln(N_STO N_k) − (p/2) ln α = (p/2) ln 2 + ln N_STO + ½ ln 2 − ½ ln Γ(p) as a
        # double-double (hi, lo)
        pairs = [_log_prefactor_pair(t) for t in targets]
        self.arrays["pre_hi"] = np.array([hi for hi, _ in pairs])
        self.arrays["pre_lo"] = np.array([lo for _, lo in pairs])

    # ------------------------------------------------------------------ helpers per backend
    def norm2_of(self, ops):
        """‖φ‖² per target in the backend's arithmetic (``sto_h1_norm2``'s closed form)."""
        if ops is DOUBLE:
            return self.norm2
        c = ops.const
        out = []
        for t in self.targets:
            if not self.h1:
                out.append(c(1))
                continue
            a, n, z, sc2 = c(t.n_eff) - 1 - t.l, c(t.n_eff), c(t.zeta), c(self.scale) ** 2
            out.append(1 + (a * a * 4 * z * z / (2 * n * (2 * n - 1)) - 2 * a * z * z / n + z * z) / sc2)
        return out

    def prefactor(self, ops, t: Target, x):
        """N_STO × N_k per exponent: N_STO = (2ζ)^(n*+½)/√Γ(2n*+1), N_k = √(2 (2α_k)^p / Γ(p))."""
        p = t.l + 1.5
        if ops is DOUBLE:
            i = self.targets.index(t)
            return exp_affine(x, p / 2, self.arrays["pre_hi"][i], self.arrays["pre_lo"][i])
        c, log, lgamma = ops.const, ops.log, ops.lgamma
        n, pa = c(t.n_eff), c(p)
        log_const = ((n + c(1) / 2) * log(2 * c(t.zeta)) - lgamma(2 * n + 1) / 2
                     + (log(c(2)) - lgamma(pa)) / 2 + log(c(2)) * (pa / 2))
        return ops.exp(x * (pa / 2) + log_const)

    def _integrals(self, alpha: np.ndarray, log_alpha: np.ndarray) -> list[np.ndarray]:
        """Per target (double, from the tables): rows I_m … I_(m+5) with m = n* + l + 2 at
        α = exp(ln α) (both given)."""
        cache: dict[tuple[float, float], np.ndarray] = {}
        out = []
        for t in self.targets:
            key = (t.n_eff, t.zeta)
            table, l_min = self._tables[key]
            if key not in cache:
                cache[key] = table.columns(log_alpha, alpha, l_min)
            out.append(cache[key][t.l - l_min : t.l - l_min + 6])
        return out

    def inside(self, log_alpha) -> np.ndarray:
        """Per row of ln α: every exponent inside the range a fit may use."""
        lo, hi = self.bounds
        x = np.asarray(log_alpha, dtype=float)
        return np.all((x > lo) & (x < hi), axis=-1)

    # ------------------------------------------------------------------ evaluations
    def evaluate_batch(self, log_alpha: np.ndarray, order: int = 1):
        """Double precision for a batch of exponent sets x (S, N): (the objective 2(1 − √q) per
        target as (S,) arrays, their sum (S,), its gradient (S, N) and Hessian (S, N, N), the
        optimal coefficients c = G⁻¹s per target (S, N)); gradient and Hessian None below
        ``order`` (0, 1, 2). The sum is +inf where a set leaves the exponent range
        or its Gram matrix is numerically singular."""
        x = np.array(log_alpha, dtype=float)
        inside = self.inside(x)
        x[~inside] = np.linspace(0.0, -1.0, x.shape[1])  # placeholders, reported as inf
        alpha = np.exp(x)
        ints = np.array([i.reshape(6, *x.shape) for i in self._integrals(alpha.ravel(), x.ravel())])
        eps, total, grad, hess, coefs, valid = assemble_double(self, x, ints, order)
        bad = ~(valid & inside & np.isfinite(total))
        if bad.any():
            total = np.where(bad, np.inf, total)
            if grad is not None:
                grad[bad] = 0.0
            if hess is not None:
                hess[bad] = np.eye(x.shape[1])
        return eps, total, grad, hess, coefs

    def evaluate(self, log_alpha: np.ndarray, order: int = 1):
        """One exponent set in double precision: (objective per target, its gradient and Hessian,
        coefficients per target), None outside the exponent range or for a numerically singular Gram matrix."""
        x = np.asarray(log_alpha, dtype=float)
        eps, total, grad, hess, coefs = self.evaluate_batch(x[None, :], order)
        if not np.isfinite(total[0]):
            return None
        return ([float(e[0]) for e in eps], None if grad is None else grad[0], None if hess is None else hess[0],
                [c[0] for c in coefs])

    def evaluate_ball(self, log_alpha: np.ndarray, order: int = 1, with_total: bool = False):
        """As ``evaluate`` in Arb ball arithmetic (python-flint) at BALL_BITS bits, everything
        returned rounded to float (the objective is resolved to ~1e-30 absolute before rounding). The I_ν come
        from ``radial_tables.BallTable`` (~3e-37 relative), or where its series has not converged
        from the closed forms at a working precision raised until Arb's error bound is below
        2^-BALL_BITS; the linear algebra uses Arb's midpoint solver, so the results are accurate
        to about 2^-BALL_BITS but are not rigorous enclosures."""
        x = np.asarray(log_alpha, dtype=float)
        if not self.inside(x):
            return None
        with ARB_LOCK:
            return self._evaluate_ball_locked(x, order, with_total)

    def _evaluate_ball_locked(self, x: np.ndarray, order: int, with_total: bool):
        from flint import arb, ctx

        saved = ctx.prec
        try:
            ctx.prec = BALL_BITS
            ops = BallArithmetic()
            xb = np.array([[arb(float(v)) for v in x]], dtype=object)
            by_key: dict[tuple[float, float], list] = {}
            ints = []
            for t in self.targets:
                key = (t.n_eff, t.zeta)
                l_min = self._tables[key][1]
                if key not in by_key:  # one table per (n*, ζ), as in ``_integrals``
                    l_top = self._tables[key][0].l
                    table = ball_table(t.n_eff, l_top, t.zeta)
                    by_key[key] = [table.columns(float(v), l_min) for v in x]
                    ctx.prec = BALL_BITS
                cols = [col[t.l - l_min : t.l - l_min + 6] for col in by_key[key]]
                ints.append([np.array([[col[j] for col in cols]], dtype=object) for j in range(6)])
            eps, total, grad, hess, coefs, valid = assemble(ops, self, xb, ints, order)
            if not valid[0]:
                return None
            tofloat = np.vectorize(lambda v: float(v.mid()), otypes=[float])
            out = ([float(e[0].mid()) for e in eps], None if grad is None else tofloat(grad[0]),
                   None if hess is None else tofloat(hess[0]), [tofloat(c[0]) for c in coefs])
            if with_total:  # the objective as a pair (high, low) of doubles, for comparisons finer than an ulp
                high = float(total[0].mid())
                out = out + ((high, float((total[0] - high).mid())),)
            return out
        finally:
            ctx.prec = saved
