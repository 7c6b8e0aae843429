"""The fit objective in closed form: ε = ‖φ‖² − sᵀG⁻¹s, its gradient and its exact Hessian in
ln α, L² or H¹ norm, in double precision (batched over exponent sets) or in ball arithmetic.

Every quantity is an analytic integral: Gaussian–Gaussian overlaps are powers, STO–Gaussian
overlaps are the radial integrals I_ν(α, ζ) = ∫_0^∞ r^(ν−1) e^(−αr² − ζr) dr (dI_ν/dα =
−I_(ν+2)): for integer ν from erfc and the recurrence 2α I_(ν+2) = ν I_ν − ζ I_(ν+1) (as in
stobuilder.expansion.integrals), for a non-integer n* from the confluent hypergeometric closed
form Γ(ν) (4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)) (I. S. Gradshteyn, I. M. Ryzhik, Table of Integrals, 7th
ed., 2007, 3.462.1) and the recurrence, in extended precision; the double-precision evaluation
interpolates them (``RadialTable``: Chebyshev pieces in ln α computed in Arb, ~1e-15 relative).
No quadrature grid is used.

Norms. "l2": ∫ |φ − χ|² dτ (W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657,
1969). "h1": ∫ |φ − χ|² dτ + ζ₁⁻² ∫ |∇φ − ∇χ|² dτ, ζ₁ the exponent of the first subshell (the
norm and so the fit are invariant under r → ζr). For R(r) Y_lm the gradient term integrates to
∫ (r^l (R/r^l)')² r² dr (by parts; the boundary terms vanish for these functions); for the
Gaussian r^l (g/r^l)' = −2αr g, for the STO r^l (φ/r^l)' = φ ((n* − 1 − l)/r − ζ), so every H¹
inner product is again a sum of I_ν.

Precision. In double precision ε = ‖φ‖² − sᵀG⁻¹s carries an absolute rounding error of
~1e-16–1e-15 (the cancellation of two numbers near ‖φ‖², with G, s and the prefactors accurate
to a few ulp; measured against the extended evaluations), its gradient ~1e-15 and its Hessian
~1e-14: enough to search, not enough to place an
optimum whose ε is ~1e-15 (or its flattest direction to better than ~1e-5 in ln α).
``evaluate_ball`` evaluates the same closed forms in Arb ball arithmetic (python-flint;
F. Johansson, IEEE Trans. Comput. 66, 1281, 2017) at 113 bits, every I_ν from Chebyshev pieces
computed at 192 bits (``_BallTable``: within ~3e-37 of the closed forms, which it falls back to
where a series has not converged: integer ν by erfc and the recurrences, non-integer ν from
Arb's hypgeom_u, at a working precision raised until Arb's own error bound is below 2^-113);
the linear algebra uses Arb's midpoint solver, so the results are accurate to about that level
without being rigorous enclosures. ``evaluate_mp`` does the same in
mpmath at MP_DIGITS digits (non-integer ν from mpmath's hyperu) and serves as the independent
check of the other two (tests).

Gradient and Hessian (variable projection, G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10,
413, 1973): with c = G⁻¹s optimal, ∂ε/∂x_k = −2 c_k ∂s_k/∂x_k + 2 c_k Σ_j c_j ∂G_kj/∂x_k
(x = ln α, the partial derivative taken in the first index only); the Hessian is derived in
``_assemble``.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .integrals import radial_integrals_mp

# Range of the exponents a fit may use, bohr⁻² at ζ = 1 (scaled by ζ_min², ζ_max² of a fit):
# no fit of the library comes near either end (they span 4e-3 … 7e3).
ALPHA_MIN = 1e-3
ALPHA_MAX = 1e6
# √ of the smallest reciprocal condition number of the Gram matrix accepted: cond(G) ≤ 1e14
# (common practice, no source: beyond it the coefficients lose more than 2 of their 16 digits).
MIN_RCOND = 1e-7
MP_DIGITS = 34  # digits of the mpmath evaluation (ε ~ 1e-15 resolved to ~1e-34)


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


class _Double:
    """Double-precision backend of ``_assemble``: numpy floats, batched LAPACK."""

    exp = staticmethod(np.exp)
    sqrt = staticmethod(np.sqrt)

    @staticmethod
    def const(v):
        return float(v)

    @staticmethod
    def checked(g):
        """(g', valid): which Gram matrices of g (S, N, N) are positive definite with the smallest
        Cholesky diagonal ≥ MIN_RCOND × the largest (that ratio bounds cond(G) from below by its
        inverse square: a cheap guard against near-dependent primitives); g' has the others
        replaced by the identity."""
        valid = np.ones(g.shape[0], dtype=bool)
        try:
            low = np.linalg.cholesky(g)
        except np.linalg.LinAlgError:
            low = np.empty_like(g)
            for k in range(g.shape[0]):
                try:
                    low[k] = np.linalg.cholesky(g[k])
                except np.linalg.LinAlgError:
                    valid[k] = False
                    low[k] = np.eye(g.shape[1])
        diag = np.diagonal(low, axis1=1, axis2=2)
        valid &= diag.min(axis=1) >= MIN_RCOND * diag.max(axis=1)
        if not valid.all():
            g = g.copy()
            g[~valid] = np.eye(g.shape[1])
        return g, valid

    @classmethod
    def factor(cls, g):
        """(solve, valid): a batched solver for the checked Gram matrices (see ``checked``)."""
        g, valid = cls.checked(g)

        def solve(b):
            return np.linalg.solve(g, b[..., None])[..., 0] if b.ndim == 2 else np.linalg.solve(g, b)

        return solve, valid

    @staticmethod
    def total(v):
        return v.sum(axis=-1)

    matmul = staticmethod(np.matmul)


class _Extended:
    """mpmath backend of ``_assemble`` (numpy object arrays of mpf, a Cholesky written out)."""

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


class _Ball:
    """python-flint (Arb ball arithmetic, C) backend of ``_assemble``: numpy object arrays of
    arb at BALL_BITS bits, the matrix products and solves in arb_mat (midpoint algorithm); about
    five times faster than mpmath. The Gram matrices are checked for MIN_RCOND in double."""

    def __init__(self):
        from flint import arb, arb_mat

        self.arb, self.arb_mat = arb, arb_mat
        self.exp = np.frompyfunc(lambda v: v.exp(), 1, 1)
        self.sqrt = np.frompyfunc(lambda v: v.sqrt(), 1, 1)

    def const(self, v):
        return self.arb(v)

    @staticmethod
    def log(v):
        return v.log()

    @staticmethod
    def lgamma(v):
        return v.lgamma()

    def _mat(self, m):
        return self.arb_mat(m.tolist())

    def _back(self, m):
        out = np.empty((m.nrows(), m.ncols()), dtype=object)
        for i, row in enumerate(m.tolist()):
            out[i, :] = row
        return out

    def factor(self, g):
        mid = np.vectorize(lambda v: float(v.mid()), otypes=[float])(g)
        _, valid = _Double.factor(mid)
        mats = [self._mat(gk) for gk in g]

        def solve(b):
            out = []
            for m, bk, ok in zip(mats, b, valid):
                if not ok:
                    out.append(bk)
                    continue
                col = bk.ndim == 1
                rhs = self._mat(bk.reshape(bk.shape[0], -1))
                x = self._back(m.solve(rhs, algorithm="approx"))
                out.append(x[:, 0] if col else x)
            return np.array(out, dtype=object)

        return solve, valid

    def total(self, v):
        out = np.empty(v.shape[0], dtype=object)
        for k, row in enumerate(v):
            acc = self.arb(0)
            for item in row:
                acc += item
            out[k] = acc
        return out

    def matmul(self, a, b):
        return np.array([self._back(self._mat(ak) * self._mat(bk)) for ak, bk in zip(a, b)], dtype=object)


@lru_cache(maxsize=None)
def _pairs(size: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column indices above the diagonal of an N × N matrix (``np.triu_indices`` order)."""
    return np.triu_indices(size, 1)


def _symmetric(ops, upper, diagonal, size: int, lower=None):
    """(S, N, N) from the values above the diagonal (S, N(N−1)/2, ``_pairs`` order), ``lower``
    below it (default the same: a symmetric matrix) and a constant diagonal."""
    iu, ju = _pairs(size)
    out = np.empty((upper.shape[0], size, size), dtype=upper.dtype)
    out[:, iu, ju] = upper
    out[:, ju, iu] = upper if lower is None else lower
    out[:, np.arange(size), np.arange(size)] = ops.const(diagonal)
    return out


def _gram_shared(ops, x, alpha):
    """The l-independent parts of the Gram matrices, from α = e^x (no exponential per pair, each
    pair formed once): q = α/(α+β), its complement q̄ = β/(α+β) (the transpose of q, not 1 − q,
    which loses digits where q is near 1), T = q − q̄, and sech((x − y)/2) = 2√(αβ)/(α+β) above
    the diagonal (S, N(N−1)/2)."""
    size = x.shape[1]
    iu, ju = _pairs(size)
    a_i, a_j = alpha[:, iu], alpha[:, ju]
    total = a_i + a_j
    q = _symmetric(ops, a_i / total, 0.5, size, a_j / total)
    qc = np.swapaxes(q, 1, 2)
    root = ops.sqrt(alpha)
    sech_upper = root[:, iu] * root[:, ju] * 2 / total
    return q, qc, q - qc, sech_upper


def _gram_parts(ops, x, alpha, p, h1: bool, scale, order: int, shared=None):
    """G and its partial derivatives in x = ln α for normalised Gaussians of angular momentum l
    (batched: x has shape (S, N), the results (S, N, N)).

    L²: G(x, y) = sech((x − y)/2)^p, p = l + 3/2; with q = α/(α+β), q̄ = 1 − q and T = tanh((x−y)/2) = q − q̄:
    ∂₁G = −(p/2) T G, ∂₁²G = [(p²/4) T² − (p/4)(1 − T²)] G, ∂₁∂₂G = −∂₁²G.
    H¹ multiplies by 1 + κh, h = αβ/(α+β), κ = 4p/ζ₁² (∂₁h = h(1−q), ∂₂h = hq,
    ∂₁²h = h(1−q)(1−2q), ∂₁∂₂h = 2hq(1−q); 1 − q is q̄ and 1 − 2q is −T).
    Returns (G, A = ∂₁G, B = ∂₁²G, C = ∂₁∂₂G), the last three None below the ``order`` asked.
    ``p`` = l + 3/2 (exact in binary, as are p/2, p²/4), or an array of shape (L, 1, 1, 1) for
    several l at once (the results then (L, S, N, N)). (Arrays stand left of extended-precision
    scalars: mpmath's own operators would first try, slowly, to convert the array.)
    """
    q, qc, t, sech_upper = shared if shared is not None else _gram_shared(ops, x, alpha)
    # G = sech^p = sech^(l+1) √sech (no power with a fractional exponent)
    if isinstance(p, float):  # one l: formed above the diagonal only
        g = _symmetric(ops, sech_upper ** int(p - 0.5) * ops.sqrt(sech_upper), 1, x.shape[1])
    else:  # double precision, several l at once (p of shape (L, 1, 1, 1))
        sech = _symmetric(ops, sech_upper, 1, x.shape[1])
        g = sech ** (p - 0.5) * np.sqrt(sech)
    a = t * g * (-p / 2) if order >= 1 else None
    b = (t * t * (p * p / 4) - (1 - t * t) * (p / 4)) * g if order >= 2 else None
    c = -b if order >= 2 else None
    if h1:
        kh = alpha[:, :, None] * qc * (4 * p) / (scale * scale)  # κ h
        f = kh + 1
        if order >= 2:
            b = b * f + a * kh * qc * 2 - g * kh * qc * t
            c = c * f + a * kh * q - a * kh * qc + g * kh * q * qc * 2
        if order >= 1:
            a = a * f + g * kh * qc
        g = g * f
    return g, a, b, c


def _overlap_parts(t: Target, alpha, ints, h1: bool, scale, zeta, a_, order: int, pre):
    """s_k = ⟨φ|g_k⟩ in the norm and its first two derivatives in x_k = ln α_k.

    s = P I_m with P ∝ α^(p/2) (``pre``), dI_ν/d ln α = −α I_(ν+2):
    s' = (p/2) s − α P I_(m+2),  s'' = P [(p²/4) I_m − (p+1) α I_(m+2) + α² I_(m+4)].
    H¹ adds h = −(2/ζ₁²) P α K with K_j = a I_(m+j) − ζ I_(m+j+1), a = n* − 1 − l:
    h' = f [(p/2+1) K₀ − α K₂],  h'' = f [(p/2+1)² K₀ − (p+3) α K₂ + α² K₄], f = −(2/ζ₁²) P α.
    """
    p = t.l + 1.5
    i0, i1, i2, i3, i4, i5 = ints
    s = pre * i0
    s1 = s * (p / 2) - alpha * pre * i2 if order >= 1 else None
    s2 = pre * (i0 * (p * p / 4) - alpha * i2 * (p + 1) + alpha * alpha * i4) if order >= 2 else None
    if h1:
        k0, k2, k4 = i0 * a_ - i1 * zeta, i2 * a_ - i3 * zeta, i4 * a_ - i5 * zeta
        f = pre * alpha * (-2) / (scale * scale)
        s = s + f * k0
        if order >= 1:
            s1 = s1 + f * (k0 * (p / 2 + 1) - alpha * k2)
        if order >= 2:
            s2 = s2 + f * (k0 * (p / 2 + 1) ** 2 - alpha * k2 * (p + 3) + alpha * alpha * k4)
    return s, s1, s2


def _matvec(ops, m, v):
    return ops.matmul(m, v[..., None])[..., 0]


def _assemble(ops, problem: "Problem", x, ints_per_target, order: int):
    """ε per target, Σε, ∇Σε and the exact Hessian of Σε in ln α (variable projection, c = G⁻¹s),
    batched over the rows of x (S, N).

    ε = ‖φ‖² − sᵀc.  With u = s' − A c (A_kj = ∂₁G_kj; u_k = ⟨∂g_k/∂x_k, φ − χ⟩):
    ∂ε/∂x_k = −2 c_k u_k.  With W = diag(u) − Aᵀ diag(c), ∂c/∂x = G⁻¹ W =: D, and
    ∂²ε/∂x_m∂x_n = −2 u_m D_mn − 2 δ_mn c_m (s''_m − (B c)_m) + 2 c_m C_mn c_n + 2 c_m (A D)_mn
    (B = ∂₁²G, C = ∂₁∂₂G; derived by differentiating G c = s; checked against finite
    differences in the tests).  Returns (eps list of (S,), total (S,), grad, hess, coefs, valid).
    """
    size = x.shape[1]
    diag = np.arange(size)
    alpha = ops.exp(x)
    grams: dict[int, tuple] = {}
    shared = _gram_shared(ops, x, alpha)
    eps, coefs = [], []
    grad = hess = None
    valid = np.ones(x.shape[0], dtype=bool)
    scale = ops.const(problem.scale)
    for t, norm2, ints in zip(problem.targets, problem.norm2_of(ops), ints_per_target):
        if t.l not in grams:
            g, a, b, c = _gram_parts(ops, x, alpha, t.l + 1.5, problem.h1, scale, order, shared)
            solve, ok = ops.factor(g)
            valid &= ok
            grams[t.l] = (a, b, c, solve)
        a, b, c, solve = grams[t.l]
        pre = problem.prefactor(ops, t, x)
        s, s1, s2 = _overlap_parts(t, alpha, ints, problem.h1, scale, ops.const(t.zeta),
                                   ops.const(t.n_eff) - 1 - t.l, order, pre)
        coef = solve(s)
        eps.append(-ops.total(s * coef) + norm2)
        coefs.append(coef)
        if order >= 1:
            u = s1 - _matvec(ops, a, coef)
            grad = (coef * u * -2) if grad is None else grad - coef * u * 2
        if order >= 2:
            w = -(np.swapaxes(a, 1, 2) * coef[:, None, :])
            w[:, diag, diag] += u
            d = solve(w)
            h = u[:, :, None] * d * -2 + coef[:, :, None] * c * coef[:, None, :] * 2 + coef[:, :, None] * ops.matmul(a, d) * 2
            h[:, diag, diag] -= coef * (s2 - _matvec(ops, b, coef)) * 2
            hess = h if hess is None else hess + h
    if hess is not None:
        hess = (hess + np.swapaxes(hess, 1, 2)) / 2
    total = eps[0]
    for e in eps[1:]:
        total = total + e
    return eps, total, grad, hess, coefs, valid


def _log_prefactor_pair(t: Target) -> tuple[float, float]:
    """(p/2) ln 2 + ln N_STO + ½ ln 2 − ½ ln Γ(p) (p = l + 3/2) as hi + lo, from mpmath at 40 digits."""
    import mpmath as mp

    with mp.workdps(40):
        n, p = mp.mpf(t.n_eff), mp.mpf(t.l) + mp.mpf(3) / 2
        v = ((n + mp.mpf(1) / 2) * mp.log(2 * mp.mpf(t.zeta)) - mp.loggamma(2 * n + 1) / 2
             + (mp.log(2) - mp.loggamma(p)) / 2 + p / 2 * mp.log(2))
        hi = float(v)
        return hi, float(v - hi)


def _exp_affine(x: np.ndarray, h, c_hi, c_lo) -> np.ndarray:
    """exp(h x + c) to a few ulp for |h x + c| up to ~100 (np.exp of the rounded argument would be
    off by |h x + c| ulp): h = p/2 has at most 4 significant bits, so h x is exact as the sum
    of the two halves of x (T. J. Dekker, Numer. Math. 18, 224, 1971), the sum with c = c_hi +
    c_lo is formed with its rounding error (Knuth's TwoSum), and exp(hi + lo) = exp(hi)(1 + lo)."""
    big = x * 134217729.0  # 2^27 + 1: Dekker's split
    x_hi = big - (big - x)
    prod = x * h
    err = (x_hi * h - prod) + (x - x_hi) * h
    total = prod + c_hi
    back = total - prod
    err = err + (prod - (total - back)) + (c_hi - back) + c_lo
    return np.exp(total) * (1.0 + err)


_DOUBLE = _Double()


def _assemble_double(problem: "Problem", x: np.ndarray, ints: np.ndarray, order: int):
    """``_assemble`` in double precision with every target and every angular momentum in one
    array (fewer, larger numpy calls: the same formulas, checked against ``_assemble`` in the
    tests). ``ints`` has shape (T, 6, S, N)."""
    size = x.shape[1]
    diag = np.arange(size)
    alpha = np.exp(x)
    k = problem.arrays
    shared = _gram_shared(_DOUBLE, x, alpha)
    g, a, b, c = _gram_parts(_DOUBLE, x, alpha, k["p_l"][:, None, None, None], problem.h1, problem.scale, order,
                             shared)
    n_l, n_s = g.shape[0], g.shape[1]
    gm, ok = _Double.checked(g.reshape(n_l * n_s, size, size))
    valid = ok.reshape(n_l, n_s).all(axis=0)
    gl = np.linalg.solve
    li = k["l_index"]  # target → its l group
    gt = gm.reshape(n_l, n_s, size, size)[li]  # (T, S, N, N), identity where not valid
    pt = k["p_t"][:, None, None]  # (T, 1, 1)
    pre = _exp_affine(x[None], pt / 2, k["pre_hi"][:, None, None], k["pre_lo"][:, None, None])
    i0, i1, i2, i3, i4, i5 = (ints[:, j] for j in range(6))
    s = pre * i0
    s1 = s * (pt / 2) - alpha[None] * pre * i2 if order >= 1 else None
    s2 = pre * (i0 * (pt * pt / 4) - alpha[None] * i2 * (pt + 1) + alpha[None] ** 2 * i4) if order >= 2 else None
    if problem.h1:
        a_, zeta = k["a_t"][:, None, None], k["zeta_t"][:, None, None]
        k0, k2, k4 = i0 * a_ - i1 * zeta, i2 * a_ - i3 * zeta, i4 * a_ - i5 * zeta
        fh = pre * alpha[None] * (-2) / (problem.scale * problem.scale)
        s = s + fh * k0
        if order >= 1:
            s1 = s1 + fh * (k0 * (pt / 2 + 1) - alpha[None] * k2)
        if order >= 2:
            s2 = s2 + fh * (k0 * (pt / 2 + 1) ** 2 - alpha[None] * k2 * (pt + 3) + alpha[None] ** 2 * k4)
    coef = gl(gt, s[..., None])[..., 0]  # (T, S, N)
    eps = k["norm2"][:, None] - np.einsum("tsk,tsk->ts", s, coef)
    total = eps.sum(axis=0)
    grad = hess = None
    if order >= 1:
        at = a[li]
        u = s1 - np.einsum("tsij,tsj->tsi", at, coef)
        grad = (coef * u * -2).sum(axis=0)
    if order >= 2:
        w = -(np.swapaxes(at, 2, 3) * coef[:, :, None, :])
        w[:, :, diag, diag] += u
        d = gl(gt, w)
        h = (u[..., None] * d * -2 + coef[..., :, None] * c[li] * coef[..., None, :] * 2
             + coef[..., :, None] * (at @ d) * 2)
        h[:, :, diag, diag] -= coef * (s2 - np.einsum("tsij,tsj->tsi", b[li], coef)) * 2
        hess = h.sum(axis=0)
        hess = (hess + np.swapaxes(hess, 1, 2)) / 2
    return list(eps), total, grad, hess, list(coef), valid


class Problem:
    """The closed-form fit problem of several STOs sharing one set of Gaussian exponents."""

    def __init__(self, targets: tuple[Target, ...], norm: str):
        self.targets = targets
        self.h1 = norm == "h1"
        self.scale = targets[0].zeta
        zmin, zmax = min(t.zeta for t in targets), max(t.zeta for t in targets)
        self.bounds = (math.log(ALPHA_MIN * zmin * zmin), math.log(ALPHA_MAX * zmax * zmax))
        self.norm2 = [sto_h1_norm2(t.n_eff, t.l, t.zeta, self.scale) if self.h1 else 1.0 for t in targets]
        self.integer = [float(t.n_eff).is_integer() for t in targets]
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
        if ops is _DOUBLE:
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
        if ops is _DOUBLE:
            i = self.targets.index(t)
            return _exp_affine(x, p / 2, self.arrays["pre_hi"][i], self.arrays["pre_lo"][i])
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
        """Double precision for a batch of exponent sets x (S, N): (ε per target as (S,) arrays,
        Σε (S,), ∇Σε (S, N), Hessian (S, N, N), coefficients per target (S, N)); gradient and
        Hessian None below ``order`` (0, 1, 2). Σε is +inf where a set leaves the exponent range
        or its Gram matrix is numerically singular."""
        x = np.array(log_alpha, dtype=float)
        inside = self.inside(x)
        x[~inside] = np.linspace(0.0, -1.0, x.shape[1])  # placeholders, reported as inf
        alpha = np.exp(x)
        ints = np.array([i.reshape(6, *x.shape) for i in self._integrals(alpha.ravel(), x.ravel())])
        eps, total, grad, hess, coefs, valid = _assemble_double(self, x, ints, order)
        bad = ~(valid & inside & np.isfinite(total))
        if bad.any():
            total = np.where(bad, np.inf, total)
            if grad is not None:
                grad[bad] = 0.0
            if hess is not None:
                hess[bad] = np.eye(x.shape[1])
        return eps, total, grad, hess, coefs

    def evaluate(self, log_alpha: np.ndarray, order: int = 1):
        """One exponent set in double precision: (ε per target, ∇Σε, Hessian, coefficients per
        target), None outside the exponent range or for a numerically singular Gram matrix."""
        x = np.asarray(log_alpha, dtype=float)
        eps, total, grad, hess, coefs = self.evaluate_batch(x[None, :], order)
        if not np.isfinite(total[0]):
            return None
        return ([float(e[0]) for e in eps], None if grad is None else grad[0], None if hess is None else hess[0],
                [c[0] for c in coefs])

    def evaluate_mp(self, log_alpha: np.ndarray, order: int = 1):
        """As ``evaluate`` with every closed form in mpmath at MP_DIGITS digits: ε as mpf, the
        gradient, Hessian and coefficients rounded to float."""
        import mpmath as mp

        x = np.asarray(log_alpha, dtype=float)
        if not self.inside(x):
            return None
        with mp.workdps(MP_DIGITS):
            ops = _Extended()
            xm = np.array([[mp.mpf(float(v)) for v in x]], dtype=object)
            alpha = ops.exp(xm)[0]
            by_zeta: dict[float, list] = {}
            ints = []
            for t, integer in zip(self.targets, self.integer):
                zeta = mp.mpf(t.zeta)
                if integer:
                    m = int(t.n_eff) + t.l + 2
                    if t.zeta not in by_zeta:
                        top = max(int(u.n_eff) + u.l + 7 for u, i in zip(self.targets, self.integer) if i and u.zeta == t.zeta)
                        by_zeta[t.zeta] = [radial_integrals_mp(top, a, zeta) for a in alpha]
                    cols = [col[m - 1 : m + 5] for col in by_zeta[t.zeta]]
                else:
                    nu = mp.mpf(t.n_eff) + t.l + 2
                    cols = [integrals_nonint_mp(nu, 6, a, zeta) for a in alpha]
                ints.append([np.array([[col[j] for col in cols]], dtype=object) for j in range(6)])
            eps, total, grad, hess, coefs, valid = _assemble(ops, self, xm, ints, order)
            if not valid[0]:
                return None
            tofloat = np.vectorize(float, otypes=[float])
            return ([e[0] for e in eps], None if grad is None else tofloat(grad[0]),
                    None if hess is None else tofloat(hess[0]), [tofloat(c[0]) for c in coefs])

    def evaluate_ball(self, log_alpha: np.ndarray, order: int = 1, with_total: bool = False):
        """As ``evaluate`` in Arb ball arithmetic (python-flint) at BALL_BITS bits, everything
        returned rounded to float (ε is resolved to ~1e-30 absolute before rounding). The I_ν come
        from ``_BallTable`` (~3e-37 relative), or where its series has not converged from the
        closed forms at a working precision raised until Arb's error bound is below 2^-BALL_BITS
        (``_integrals_ball``, ``_nonint_arb``); the linear algebra uses Arb's midpoint solver, so
        the results are accurate to about 2^-BALL_BITS but are not rigorous enclosures."""
        x = np.asarray(log_alpha, dtype=float)
        if not self.inside(x):
            return None
        with _ARB_LOCK:
            return self._evaluate_ball_locked(x, order, with_total)

    def _evaluate_ball_locked(self, x: np.ndarray, order: int, with_total: bool):
        from flint import arb, ctx

        saved = ctx.prec
        try:
            ctx.prec = BALL_BITS
            ops = _Ball()
            xb = np.array([[arb(float(v)) for v in x]], dtype=object)
            alpha = ops.exp(xb)[0]
            by_key: dict[tuple[float, float], list] = {}
            ints = []
            for t in self.targets:
                key = (t.n_eff, t.zeta)
                l_min = self._tables[key][1]
                if key not in by_key:  # one table per (n*, ζ), as in ``_integrals``
                    l_top = self._tables[key][0].l
                    table = _BALL_TABLES.setdefault((t.n_eff, l_top, t.zeta), _BallTable(t.n_eff, l_top, t.zeta))
                    by_key[key] = [table.columns(float(v), l_min) for v in x]
                    ctx.prec = BALL_BITS
                cols = [col[t.l - l_min : t.l - l_min + 6] for col in by_key[key]]
                ints.append([np.array([[col[j] for col in cols]], dtype=object) for j in range(6)])
            eps, total, grad, hess, coefs, valid = _assemble(ops, self, xb, ints, order)
            if not valid[0]:
                return None
            tofloat = np.vectorize(lambda v: float(v.mid()), otypes=[float])
            out = ([float(e[0].mid()) for e in eps], None if grad is None else tofloat(grad[0]),
                   None if hess is None else tofloat(hess[0]), [tofloat(c[0]) for c in coefs])
            if with_total:  # Σε as a pair (high, low) of doubles, for comparisons finer than an ulp
                high = float(total[0].mid())
                out = out + ((high, float((total[0] - high).mid())),)
            return out
        finally:
            ctx.prec = saved


BALL_BITS = 113  # working precision of the ball evaluation (34 decimal digits)
# python-flint's working precision (ctx.prec) is global to the process, threads included: every
# use of it holds this lock
_ARB_LOCK = threading.RLock()
_BALL_TOL = 2.0 ** -BALL_BITS


# Pieces of the tables of I_ν: unit width in ln α, Chebyshev degree (the error reaches the
# rounding level, ~1e-15 relative, from degree 12 on: measured; the tests check degree 14),
# working precision
TABLE_DEGREE = 14
TABLE_BITS = 128


class RadialTable:
    """I_ν(α) = ∫ r^(ν−1) e^(−αr² − ζr) dr in double precision for the batched evaluation.

    With m = n* + l + 2 for the highest l of a fit, ln I_(m+4) and ln I_(m+5) are Chebyshev
    polynomials of x = ln α on each piece [k, k + 1) (built on first use), every lower ν (down to
    the lowest l's m) follows by the downward recurrence I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν, whose
    terms are all positive. A piece costs TABLE_DEGREE + 1 evaluations in Arb (integer ν: I_1
    from erfc and the upward recurrence; otherwise the closed form with hypgeom_u, both at a
    working precision raised until Arb's error bound is below 2^-(TABLE_BITS − 40)), at Chebyshev
    nodes formed in ball arithmetic (nodes rounded to double would cost ~1e-14: ln I changes by
    ~(ν+1)/2 per unit of x); the coefficients come from the discrete cosine transform in Arb,
    rounded to double, and are stored as I = E · exp(p(t)) with E = e^(c₀), so |p| stays small.
    The double-precision recurrences this replaces lost up to 1.4e-12 relative at ν = 17 near
    α = ζ² (measured against Arb); the tables are within ~1e-15 everywhere (tests). Tables are
    shared by every fit of the process (``radial_table``)."""

    def __init__(self, n_eff: float, l: int, zeta: float):
        self.n_eff, self.l, self.zeta = n_eff, l, zeta
        self.pieces: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # k → (E (2,), coefficients (2, D+1))
        self._stacked = None  # (k_first, E, coefficients) of the pieces k_first … as arrays

    def _piece(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        from flint import arb, ctx

        with _ARB_LOCK:
            saved = ctx.prec
            try:
                coefs = _chebyshev_piece(self.n_eff, self.l, self.zeta, k, TABLE_DEGREE, TABLE_BITS)
                big_e, rounded = [], []
                for c in coefs:
                    e = float(c[0].exp().mid())
                    c[0] -= arb(e).log()
                    big_e.append(e)
                    rounded.append([float(v.mid()) for v in c])
            finally:
                ctx.prec = saved
        return np.array(big_e), np.array(rounded)

    def columns(self, log_alpha: np.ndarray, alpha: np.ndarray, l_min: int | None = None) -> np.ndarray:
        """I_ν (rows) for ν = n* + l_min + 2 … n* + l + 7 at every ln α (and α = exp(ln α)); l_min
        defaults to the table's l (six rows)."""
        k = np.floor(log_alpha).astype(int)
        stacked = self._stacked
        if stacked is None or k.min() < stacked[0] or k.max() >= stacked[0] + len(stacked[1]):
            with _ARB_LOCK:  # (other threads may be adding pieces)
                # every piece from the lowest to the highest k asked for so far, as arrays
                # indexed by k − k_first
                first = int(k.min()) if stacked is None else min(int(k.min()), stacked[0])
                last = int(k.max()) if stacked is None else max(int(k.max()), stacked[0] + len(stacked[1]) - 1)
                for key in range(first, last + 1):
                    if key not in self.pieces:
                        self.pieces[key] = self._piece(key)
                stacked = (first, np.array([self.pieces[key][0] for key in range(first, last + 1)]),
                           np.array([self.pieces[key][1] for key in range(first, last + 1)]))
                self._stacked = stacked
        where = k - stacked[0]
        big_e = stacked[1][where]  # (M, 2)
        coefs = stacked[2][where]  # (M, 2, D+1)
        t = (2.0 * (log_alpha - k) - 1.0)[:, None]
        b1 = np.zeros((len(k), 2))
        b2 = np.zeros((len(k), 2))
        for n in range(TABLE_DEGREE, 0, -1):  # Clenshaw
            b1, b2 = 2.0 * t * b1 - b2 + coefs[:, :, n], b1
        values = big_e * np.exp(t * b1 - b2 + coefs[:, :, 0])
        low = self.l if l_min is None else l_min
        return np.array(_downward(values[:, 0], values[:, 1], alpha, self.zeta, self.n_eff + low + 2, self.l - low + 6))


def _downward(second, top, alpha, zeta, m, count: int) -> list:
    """I_m … I_(m+count−1) from the two highest, I_(m+count−2) = ``second`` and I_(m+count−1) =
    ``top``, by I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν (all terms positive); numpy arrays or arb."""
    rows = [None] * (count - 2) + [second, top]
    for j in range(count - 3, -1, -1):
        rows[j] = (2 * alpha * rows[j + 2] + zeta * rows[j + 1]) / (m + j)
    return rows


_TABLES: dict[tuple[float, int, float], RadialTable] = {}


def radial_table(n_eff: float, l: int, zeta: float) -> RadialTable:
    """The process-wide table of I_ν for (n*, highest l, ζ) (created on first use)."""
    key = (float(n_eff), int(l), float(zeta))
    table = _TABLES.get(key)
    if table is None:
        with _ARB_LOCK:
            table = _TABLES.setdefault(key, RadialTable(*key))
    return table


def _u_half(a, w):
    """U(a, ½, w) (Arb's hypgeom_u) for w > 0 with a radius: evaluated at w's midpoint, which
    Arb does up to ten times faster than on an interval (measured at w ~ 75, 128 bits), and
    widened by the propagated input error, |w U'/U| ≤ a + w times w's relative radius (U'(a, b, w)
    = −a U(a + 1, b + 1, w), and U(a + 1, 3/2, w) ≤ (1 + w/a) U(a, ½, w)/w for these arguments:
    a bound, not sharp)."""
    from flint import arb

    mid = arb(w.mid())
    u = mid.hypgeom_u(a, arb(0.5))
    spread = abs(u) * (a + w) * w.rad() / mid
    return u + arb(0, float(spread.upper()) * (1 + 2.0 ** -50)) if w.rad() > 0 else u


def _table_node(n_eff: float, l: int, zeta: float, k: int, angle_index: int, size: int, bits: int):
    """ln I_(m+4), ln I_(m+5) (m = n* + l + 2) as arb at the Chebyshev node x = k + (1 + cos θ)/2,
    θ = π(2j + 1)/(2 size), formed in ball arithmetic: integer ν from erfc and the upward
    recurrence, otherwise the closed form with hypgeom_u; the working precision is raised until
    Arb's error bound is below 2^-(bits − 40)."""
    from flint import arb, ctx

    prec = bits
    while True:
        ctx.prec = prec
        angle = arb.pi() * (2 * angle_index + 1) / (2 * size)
        a = (arb(k) + (1 + angle.cos()) / 2).exp()
        zb = arb(zeta)
        m = arb(n_eff) + (l + 2)
        if float(n_eff).is_integer():
            top = int(n_eff) + l + 7
            rows = [(arb.pi() / a).sqrt() / 2 * (zb / (2 * a.sqrt())).erfc() * (zb * zb / (4 * a)).exp()]
            rows.append((1 - zb * rows[0]) / (2 * a))
            for nu in range(1, top - 1):
                rows.append((rows[nu - 1] * nu - zb * rows[nu]) / (2 * a))
            values = [rows[top - 2], rows[top - 1]]
        else:
            four_a = 4 * a
            w = zb * zb / four_a
            values = [nu.gamma() * four_a ** (-nu / 2) * _u_half(nu / 2, w) for nu in (m + 4, m + 5)]
        if all(v.rad() < abs(v.mid()) * arb(2) ** (40 - bits) for v in values) or prec > 4000:
            return [v.log() for v in values]
        prec *= 2


def _chebyshev_piece(n_eff: float, l: int, zeta: float, k: int, degree: int, bits: int):
    """Chebyshev coefficients (arb, at ``bits``) of ln I_(m+4) and ln I_(m+5) on [k, k + 1] in
    t = 2(x − k) − 1, from the values at the degree + 1 nodes by the discrete cosine transform.
    The caller holds _ARB_LOCK and restores ctx.prec."""
    from flint import arb, ctx

    size = degree + 1
    values = [_table_node(n_eff, l, zeta, k, j, size, bits) for j in range(size)]
    ctx.prec = bits
    # cos(n θ_j) = T_n(cos θ_j) by the Chebyshev recurrence (one cosine per node)
    nodes = [(arb.pi() * (2 * j + 1) / (2 * size)).cos() for j in range(size)]
    basis = [[arb(1)] * size, list(nodes)]
    for n in range(2, size):
        basis.append([2 * t * a - b for t, a, b in zip(nodes, basis[-1], basis[-2])])
    out = []
    for q in range(2):
        c = [sum((values[j][q] * basis[n][j] for j in range(size)), arb(0)) * 2 / size for n in range(size)]
        c[0] /= 2
        out.append(c)
    return out


# Pieces of the tables of I_ν used by the ball evaluation: Chebyshev degree and working
# precision (the last coefficients of ln I are ~1e-37 … 1e-56, measured; a piece whose last
# BALL_TAIL coefficients exceed 2^-BALL_TAIL_BITS, an absolute error of ln I and so a relative
# one of I, falls back to the closed forms)
BALL_TABLE_DEGREE = 36
BALL_TABLE_BITS = 192
BALL_TAIL, BALL_TAIL_BITS = 3, 118


class _BallTable:
    """I_ν in Arb for ``evaluate_ball``: with m = n* + l + 2 for the highest l of a fit, ln I_(m+4)
    and ln I_(m+5) as polynomials in t = 2(x − k) − 1 on each piece [k, k + 1) of x = ln α (the
    Chebyshev series at BALL_TABLE_BITS, converted to the monomial basis and evaluated at that
    precision: the conversion's coefficients grow to ~2^43 at degree 36, below the 79 spare
    bits), every lower ν by the downward recurrence. Against the closed forms at 320 bits
    within ~3e-37 (tests); an exponent costs ~3 µs instead of ~90 µs for two hypgeom_u
    (non-integer n*) or ~13 µs for erfc and the recurrence at a raised precision (integer n*).
    Pieces whose series does not converge to 2^-BALL_TAIL_BITS use those closed forms."""

    def __init__(self, n_eff: float, l: int, zeta: float):
        self.n_eff, self.l, self.zeta = n_eff, l, zeta
        self.pieces: dict[int, tuple | None] = {}

    def _piece(self, k: int):
        from flint import arb, arb_poly

        coefs = _chebyshev_piece(self.n_eff, self.l, self.zeta, k, BALL_TABLE_DEGREE, BALL_TABLE_BITS)
        tol = arb(2) ** (-BALL_TAIL_BITS)
        if any(abs(v) > tol for c in coefs for v in c[-BALL_TAIL:]):
            return None
        t = arb_poly([0, 1])
        polys = []
        for c in coefs:
            low, high = arb_poly([1]), t
            poly = c[0] * low + c[1] * high
            for n in range(2, len(c)):
                low, high = high, 2 * t * high - low
                poly += c[n] * high
            polys.append(poly)
        return tuple(polys)

    def columns(self, log_a: float, l_min: int | None = None):
        """I_ν as arb for ν = n* + l_min + 2 … n* + l + 7 at α = e^log_a (l_min defaults to the
        table's l: six values); the caller holds _ARB_LOCK and restores ctx.prec."""
        from flint import arb, ctx

        low = self.l if l_min is None else l_min
        k = math.floor(log_a)
        if k not in self.pieces:
            self.pieces[k] = self._piece(k)
        piece = self.pieces[k]
        if piece is None:  # the closed forms
            if float(self.n_eff).is_integer():
                m = int(self.n_eff) + low + 2
                return _integrals_ball(int(self.n_eff) + self.l + 7, log_a, self.zeta)[m - 1:]
            top = _nonint_arb(self.n_eff, self.l, log_a, self.zeta, BALL_BITS)
            if low == self.l:
                return top
            return _nonint_arb(self.n_eff, low, log_a, self.zeta, BALL_BITS)[: self.l - low] + top
        ctx.prec = BALL_TABLE_BITS
        xb = arb(log_a)
        t = 2 * (xb - k) - 1
        return _downward(piece[0](t).exp(), piece[1](t).exp(), xb.exp(), arb(self.zeta),
                         arb(self.n_eff) + (low + 2), self.l - low + 6)


_BALL_TABLES: dict[tuple[float, int, float], _BallTable] = {}


def _nonint_arb(n_eff: float, l: int, a: float, zeta: float, bits: int):
    """I_m … I_(m+5) for m = n* + l + 2 (n* not an integer) as arb, at α = e^a:
    the two highest from the closed form Γ(ν)(4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)) (Gradshteyn & Ryzhik
    3.462.1; Arb's hypgeom_u), the others by the recurrence downwards,
    I_ν = (2α I_(ν+2) + ζ I_(ν+1))/ν, whose terms are all positive; ν is formed in ball
    arithmetic from n* and l. The working precision is raised until Arb's error bound on every
    value is below 2^-bits relative."""
    from flint import arb, ctx

    saved = ctx.prec
    prec = bits + 64
    try:
        while True:
            ctx.prec = prec
            ab = arb(a).exp()
            zb, m = arb(zeta), arb(n_eff) + (l + 2)
            four_a = 4 * ab
            w = zb * zb / four_a

            def closed(nu):
                return nu.gamma() * four_a ** (-nu / 2) * _u_half(nu / 2, w)

            rows = _downward(closed(m + 4), closed(m + 5), ab, zb, m, 6)
            tol = arb(2) ** (-bits)
            if all(v.rad() < abs(v.mid()) * tol for v in rows) or prec > 4000:
                return rows
            prec *= 2
    finally:
        ctx.prec = saved


def _integrals_ball(nu_max: int, log_a: float, zeta: float):
    """I_1 … I_nu_max at α = e^log_a as arb: I_1 from erfc, then the upward recurrence at a working
    precision doubled until the error bound of every I_ν is below 2^-BALL_BITS relative (the
    recurrence loses up to ~30 digits at α = 1e-3 ζ², measured)."""
    from flint import arb, ctx

    saved = ctx.prec
    prec = BALL_BITS + 96
    try:
        while True:
            ctx.prec = prec
            ab, zb = arb(log_a).exp(), arb(zeta)
            half_inv = 1 / (2 * ab)
            w = zb / (2 * ab.sqrt())
            rows = [(arb.pi() / ab).sqrt() / 2 * w.erfc() * (w * w).exp()]
            rows.append((1 - zb * rows[0]) * half_inv)
            for nu in range(1, nu_max - 1):
                rows.append((rows[nu - 1] * nu - zb * rows[nu]) * half_inv)
            rows = rows[:nu_max]
            # the recurrence's error bound grows with ν: the last row is the worst
            if rows[-1].rad() < abs(rows[-1].mid()) * _BALL_TOL or prec > 4000:
                return rows
            prec *= 2
    finally:
        ctx.prec = saved
