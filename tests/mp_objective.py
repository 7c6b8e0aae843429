"""The fit objective of stobuilder.expansion.analytic evaluated in mpmath at MP_DIGITS digits: a
test reference for the double-precision and the ball-arithmetic evaluations. It shares the
residual part of the assembly (stobuilder.expansion.assembly.residuals: ε = ‖φ‖² − sᵀG⁻¹s, its
gradient and Hessian) but not the step to the published objective, which ``evaluate_mp`` forms
itself, nor the arithmetic or the radial integrals: integer
n* by erfc and the recurrences of tests/scalar_integrals.py, non-integer n* by mpmath's hyperu
(the closed form Γ(ν)(4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)): I. S. Gradshteyn, I. M. Ryzhik, Table of
Integrals, 7th ed., 2007, 3.462.1) and the upward recurrence, and a Cholesky written out.
"""

from __future__ import annotations

import numpy as np

from scalar_integrals import radial_integrals_mp
from stobuilder.expansion.arithmetic import MIN_RCOND
from stobuilder.expansion.assembly import residuals

MP_DIGITS = 34  # digits of the mpmath evaluation (ε ~ 1e-15 resolved to ~1e-34)


def integrals_nonint_mp(nu: float, count: int, a, zeta):
    """I_ν … I_(ν+count−1) at one α for real ν in mpmath (current precision): the closed form
    Γ(ν)(4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)) for the first two, the recurrence upwards for the rest."""
    import mpmath as mp

    a, zeta, nu = mp.mpf(a), mp.mpf(zeta), mp.mpf(nu)
    z = zeta * zeta / (4 * a)

    def closed(v):
        return mp.gamma(v) * (4 * a) ** (-v / 2) * mp.hyperu(v / 2, mp.mpf(1) / 2, z)

    out = [closed(nu), closed(nu + 1)]
    while len(out) < count:
        v = nu + len(out) - 2
        out.append((v * out[-2] - zeta * out[-1]) / (2 * a))
    return out[:count]


class Extended:
    """mpmath backend of ``assembly.assemble`` (numpy object arrays of mpf, a Cholesky written out)."""

    def __init__(self):
        import mpmath as mp

        self.mp = mp
        self.exp = np.frompyfunc(mp.exp, 1, 1)
        self.sqrt = np.frompyfunc(mp.sqrt, 1, 1)

    def const(self, v):
        return self.mp.mpf(v)

    def log(self, v):
        return self.mp.log(v)

    def lgamma(self, v):
        return self.mp.loggamma(v)

    def _factor_one(self, g):
        size = g.shape[0]
        low = np.full((size, size), self.mp.mpf(0), dtype=object)
        for j in range(size):
            pivot = g[j, j] - (low[j, :j] @ low[j, :j] if j else 0)
            if not pivot > 0:
                return None
            low[j, j] = self.mp.sqrt(pivot)
            if j + 1 < size:
                low[j + 1 :, j] = (g[j + 1 :, j] - (low[j + 1 :, :j] @ low[j, :j] if j else 0)) / low[j, j]
        diag = np.diag(low)
        if not min(diag) >= max(diag) * MIN_RCOND:
            return None
        return low

    def factor(self, g):
        lows = [self._factor_one(gk) for gk in g]
        valid = np.array([low is not None for low in lows])
        size = g.shape[1]

        def solve_one(low, b):
            y = np.array(b.reshape(size, -1), dtype=object)
            for i in range(size):  # L y = b
                y[i] = (y[i] - low[i, :i] @ y[:i]) / low[i, i] if i else y[i] / low[i, i]
            for i in range(size - 1, -1, -1):  # Lᵀ c = y
                y[i] = (y[i] - low[i + 1 :, i] @ y[i + 1 :]) / low[i, i] if i + 1 < size else y[i] / low[i, i]
            return y.reshape(b.shape)

        def solve(b):
            return np.array([solve_one(low, bk) if low is not None else bk for low, bk in zip(lows, b)], dtype=object)

        return solve, valid

    def total(self, v):
        return np.array([self.mp.fsum(row) for row in v], dtype=object)

    matmul = staticmethod(np.matmul)


def evaluate_mp(problem, log_alpha: np.ndarray, order: int = 1):
    """As ``Problem.evaluate`` with every closed form in mpmath at MP_DIGITS digits: ε as mpf, the
    gradient, Hessian and coefficients rounded to float."""
    import mpmath as mp

    x = np.asarray(log_alpha, dtype=float)
    if not problem.inside(x):
        return None
    with mp.workdps(MP_DIGITS):
        ops = Extended()
        xm = np.array([[mp.mpf(float(v)) for v in x]], dtype=object)
        alpha = ops.exp(xm)[0]
        by_zeta: dict[float, list] = {}
        ints = []
        integers = [float(t.n_eff).is_integer() for t in problem.targets]
        for t, integer in zip(problem.targets, integers):
            zeta = mp.mpf(t.zeta)
            if integer:
                m = int(t.n_eff) + t.l + 2
                if t.zeta not in by_zeta:
                    top = max(int(u.n_eff) + u.l + 7 for u, i in zip(problem.targets, integers) if i and u.zeta == t.zeta)
                    by_zeta[t.zeta] = [radial_integrals_mp(top, a, zeta) for a in alpha]
                cols = [col[m - 1 : m + 5] for col in by_zeta[t.zeta]]
            else:
                nu = mp.mpf(t.n_eff) + t.l + 2
                cols = [integrals_nonint_mp(nu, 6, a, zeta) for a in alpha]
            ints.append([np.array([[col[j] for col in cols]], dtype=object) for j in range(6)])
        parts, valid = residuals(ops, problem, xm, ints, order)
        if not valid[0]:
            return None
        # the published objective per target, written out at MP_DIGITS digits: q = 1 − ε/‖φ‖²,
        # f = 2 − 2√q (Hehre, Stewart & Pople 1969: Σ ∫(φ − χ)² with ‖χ‖ = 1), ∂f = −∂q/√q,
        # ∂²f = −∂²q/√q + ∂q ∂qᵀ/(2 q^(3/2))
        fs, coefs = [], []
        grad = hess = None
        for (eps, g, h, c), norm2 in zip(parts, ops_norm2(problem, ops)):
            q = 1 - eps[0] / norm2
            fs.append(2 - 2 * mp.sqrt(q))
            coefs.append(c[0])
            if g is not None:
                dq = -g[0] / norm2
                gf = -dq / mp.sqrt(q)
                grad = gf if grad is None else grad + gf
            if h is not None:
                d2q = -h[0] / norm2
                hf = -d2q / mp.sqrt(q) + np.outer(dq, dq) / (2 * q * mp.sqrt(q))
                hess = hf if hess is None else hess + hf
        tofloat = np.vectorize(float, otypes=[float])
        return (fs, None if grad is None else tofloat(grad),
                None if hess is None else tofloat(hess), [tofloat(c) for c in coefs])


def ops_norm2(problem, ops):
    """‖φ‖² per target at the working precision (the closed form of analytic.sto_h1_norm2)."""
    return problem.norm2_of(ops)
