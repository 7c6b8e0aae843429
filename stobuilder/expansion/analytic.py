"""The fit objective in closed form: ε = ‖φ‖² − sᵀG⁻¹s and its gradient in ln α, L² or H¹ norm.

Every quantity is an analytic integral: Gaussian–Gaussian overlaps are powers, STO–Gaussian
overlaps are the radial integrals I_ν(α, ζ) = ∫_0^∞ r^(ν−1) e^(−αr² − ζr) dr of
stobuilder.expansion.integrals (erfcx with stable recurrences, dI_ν/dα = −I_(ν+2)); for a
non-integer n* the two lowest I_ν come from the confluent hypergeometric closed form
Γ(ν) (4α)^(−ν/2) U(ν/2, ½, ζ²/(4α)) (I. S. Gradshteyn, I. M. Ryzhik, Table of Integrals, 7th ed.,
2007, 3.462.1) evaluated in mpmath, the others by the recurrence 2α I_(ν+2) = ν I_ν − ζ I_(ν+1)
in extended precision. No quadrature grid is used.

Norms. "l2": ∫ |φ − χ|² dτ (W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657,
1969). "h1": ∫ |φ − χ|² dτ + ζ₁⁻² ∫ |∇φ − ∇χ|² dτ, ζ₁ the exponent of the first subshell (the
norm and so the fit are invariant under r → ζr). For R(r) Y_lm the gradient term integrates to
∫ (r^l (R/r^l)')² r² dr (by parts; the boundary terms vanish for these functions); for the
Gaussian r^l (g/r^l)' = −2αr g, for the STO r^l (φ/r^l)' = φ ((n* − 1 − l)/r − ζ), so every H¹
inner product is again a sum of I_ν.

Precision. In double precision ε = ‖φ‖² − sᵀG⁻¹s carries an absolute rounding error ~1e-16 (the
cancellation of two numbers near 1), and so does its gradient; that is harmless for the search,
but moves the optimum in the flattest direction by up to ~1e-5 in ln α. ``evaluate_mp`` therefore
evaluates the same closed forms in mpmath (MP_DIGITS digits) for the final Newton polish and for
the reported ε and coefficients.

Gradient (variable projection, G. H. Golub, V. Pereyra, SIAM J. Numer. Anal. 10, 413, 1973):
with c = G⁻¹s optimal, ∂ε/∂x_k = −2 c_k ∂s_k/∂x_k + 2 c_k Σ_j c_j ∂G_kj/∂x_k (x = ln α, the
partial derivative taken in the first index only).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, cho_solve
from scipy.special import erfcx, gammaln

from .integrals import _SWITCH, radial_integrals_mp

# Range of the exponents a fit may use, bohr⁻² at ζ = 1 (scaled by ζ_min², ζ_max² of a fit):
# no fit of the library comes near either end (they span 4e-3 … 7e3).
ALPHA_MIN = 1e-3
ALPHA_MAX = 1e6
# √ of the smallest reciprocal condition number of the Gram matrix accepted: cond(G) ≤ 1e14
# (common practice, no source: beyond it the coefficients lose more than 2 of their 16 digits).
MIN_RCOND = 1e-7
MP_DIGITS = 34  # digits of the extended-precision evaluation (ε ~ 1e-10 resolved to ~1e-30)


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


def integrals_vec(nu_max: int, alpha: np.ndarray, zeta: float) -> np.ndarray:
    """I_1 … I_nu_max (rows) at every α, integer ν: the recurrences of stobuilder.expansion.integrals
    vectorised over α (upward for α ≥ 0.3 ζ², the continued fraction downwards below)."""
    out = np.empty((nu_max, alpha.size))
    i1 = 0.5 * np.sqrt(np.pi / alpha) * erfcx(zeta / (2.0 * np.sqrt(alpha)))
    up = alpha >= _SWITCH * zeta * zeta
    if up.any():
        au = alpha[up]
        rows = [i1[up], (1.0 - zeta * i1[up]) / (2.0 * au)]
        for nu in range(1, nu_max - 1):
            rows.append((nu * rows[nu - 1] - zeta * rows[nu]) / (2.0 * au))
        out[:, up] = np.array(rows[:nu_max])
    down = ~up
    if down.any():
        ad = alpha[down]
        top = nu_max + 40 + int(250.0 * math.sqrt(float(ad.max())) / zeta)
        two_a = 2.0 * ad
        ratio = (-zeta + np.sqrt(zeta * zeta + 8.0 * ad * top)) / (4.0 * ad)
        # r_ν = M_ν(r_(ν+1)) with the Möbius map M_ν = [[0, ν], [2α, ζ]]: the tail ν = nu_max …
        # top − 1 is composed as a product of positive matrices (pairwise, rescaled; no cancellation)
        nus = np.arange(nu_max, top, dtype=float)
        mats = np.empty((ad.size, nus.size, 2, 2))
        mats[:, :, 0, 0] = 0.0
        mats[:, :, 0, 1] = nus[None, :]
        mats[:, :, 1, 0] = two_a[:, None]
        mats[:, :, 1, 1] = zeta
        while mats.shape[1] > 1:
            if mats.shape[1] % 2:
                mats = np.concatenate([mats, np.broadcast_to(np.eye(2), (ad.size, 1, 2, 2))], axis=1)
            mats = mats[:, 0::2] @ mats[:, 1::2]
            mats /= mats.max(axis=(2, 3), keepdims=True)
        prod = mats[:, 0]
        ratio = (prod[:, 0, 0] * ratio + prod[:, 0, 1]) / (prod[:, 1, 0] * ratio + prod[:, 1, 1])
        ratios = [None] * nu_max
        for nu in range(nu_max - 1, 0, -1):
            ratio = nu / (zeta + two_a * ratio)
            ratios[nu] = ratio
        rows = [i1[down]]
        for nu in range(1, nu_max):
            rows.append(rows[-1] * ratios[nu])
        out[:, down] = np.array(rows)
    return out


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
        self._nonint_cache: dict[tuple[float, float, float], tuple[float, ...]] = {}

    # ------------------------------------------------------------------ double precision
    def _integrals(self, alpha: np.ndarray) -> list[np.ndarray]:
        """Per target: rows I_m, I_(m+1), I_(m+2), I_(m+3) with m = n* + l + 2."""
        cache: dict[float, np.ndarray] = {}
        out = []
        for t, integer in zip(self.targets, self.integer):
            m = t.n_eff + t.l + 2
            if integer:
                if t.zeta not in cache:
                    top = max(int(u.n_eff) + u.l + 5 for u, i in zip(self.targets, self.integer) if i and u.zeta == t.zeta)
                    cache[t.zeta] = integrals_vec(top, alpha, t.zeta)
                out.append(cache[t.zeta][int(m) - 1 : int(m) + 3])
            else:
                out.append(np.array([self._nonint_column(m, float(a), t.zeta) for a in alpha]).T)
        return out

    def _nonint_column(self, nu: float, a: float, zeta: float) -> tuple[float, ...]:
        """I_ν … I_(ν+3) at one α for non-integer ν (mpmath hyperu, 24 digits), cached per (ν, α, ζ):
        a fit re-evaluates most exponents unchanged (finite differences, line searches)."""
        key = (nu, a, zeta)
        col = self._nonint_cache.get(key)
        if col is None:
            import mpmath as mp

            if len(self._nonint_cache) > 200000:
                self._nonint_cache.clear()
            with mp.workdps(24):
                col = tuple(float(v) for v in integrals_nonint_mp(nu, 4, a, zeta))
            self._nonint_cache[key] = col
        return col

    def _gram(self, l: int, alpha: np.ndarray, gradient: bool):
        """Gram matrix of the normalised Gaussians in the norm, and ∂G_kj/∂ln α_k (first index)."""
        p = l + 1.5
        sum_ = np.add.outer(alpha, alpha)
        frac = alpha[:, None] / sum_
        g = (2.0 * np.sqrt(np.outer(alpha, alpha)) / sum_) ** p
        dg = g * p * (0.5 - frac) if gradient else None
        if self.h1:
            t = 4.0 * p * np.outer(alpha, alpha) / sum_ / (self.scale * self.scale)
            if gradient:
                dg = dg * (1.0 + t) + g * t * (1.0 - frac)
            g = g * (1.0 + t)
        return g, dg

    def _overlaps(self, t: Target, alpha: np.ndarray, ints: np.ndarray, gradient: bool):
        """s_k = ⟨φ|g_k⟩ in the norm and ∂s_k/∂ln α_k."""
        p = t.l + 1.5
        pref = sto_norm(t.n_eff, t.zeta) * np.exp(0.5 * (math.log(2.0) + p * np.log(2.0 * alpha) - gammaln(p)))
        s = pref * ints[0]
        ds = p / 2.0 * s - alpha * pref * ints[2] if gradient else None
        if self.h1:
            a, sc2 = t.n_eff - 1.0 - t.l, self.scale * self.scale
            h = -2.0 * alpha * pref * (a * ints[0] - t.zeta * ints[1]) / sc2
            if gradient:
                ds = ds + (1.0 + p / 2.0) * h + 2.0 * alpha * alpha * pref * (a * ints[2] - t.zeta * ints[3]) / sc2
            s = s + h
        return s, ds

    def evaluate(self, log_alpha: np.ndarray, gradient: bool = True):
        """(ε per target, ∇ Σε in ln α or None, optimal coefficients per target), in double precision.

        Returns None outside the exponent range, or when a Gram matrix is numerically singular.
        """
        x = np.asarray(log_alpha, dtype=float)
        lo, hi = self.bounds
        if not (np.all(x > lo) and np.all(x < hi)):
            return None
        alpha = np.exp(x)
        ints = self._integrals(alpha)
        grams: dict[int, tuple] = {}
        eps, coefs = [], []
        grad = np.zeros_like(alpha) if gradient else None
        for t, norm2, it in zip(self.targets, self.norm2, ints):
            if t.l not in grams:
                g, dg = self._gram(t.l, alpha, gradient)
                try:
                    chol = cho_factor(g, lower=True, check_finite=False)
                except np.linalg.LinAlgError:
                    return None
                diag = np.diag(chol[0])
                if not diag.min() >= MIN_RCOND * diag.max():
                    return None
                grams[t.l] = (g, dg, chol)
            g, dg, chol = grams[t.l]
            s, ds = self._overlaps(t, alpha, it, gradient)
            c = cho_solve(chol, s, check_finite=False)
            eps.append(norm2 - float(s @ c))
            coefs.append(c)
            if gradient:
                grad += -2.0 * c * ds + 2.0 * c * (dg @ c)
        return eps, grad, coefs

    # ------------------------------------------------------------------ extended precision
    def evaluate_mp(self, log_alpha: np.ndarray, gradient: bool = True):
        """As ``evaluate`` with every closed form in mpmath at MP_DIGITS digits (ε as mpf, the
        gradient and coefficients rounded to float). None when a Gram matrix is singular."""
        import mpmath as mp

        with mp.workdps(MP_DIGITS):
            alpha = [mp.exp(mp.mpf(float(v))) for v in log_alpha]
            size = len(alpha)
            sc2 = mp.mpf(self.scale) ** 2
            ints_by_zeta: dict[float, list] = {}
            eps, coefs = [], []
            grad = [mp.mpf(0)] * size
            grams: dict[int, tuple] = {}
            for t, integer in zip(self.targets, self.integer):
                zeta = mp.mpf(t.zeta)
                p = t.l + mp.mpf(3) / 2
                m = t.n_eff + t.l + 2
                if integer:
                    if t.zeta not in ints_by_zeta:
                        top = max(int(u.n_eff) + u.l + 5 for u in self.targets if u.zeta == t.zeta)
                        ints_by_zeta[t.zeta] = [radial_integrals_mp(top, a, zeta) for a in alpha]
                    ints = [col[int(m) - 1 : int(m) + 3] for col in ints_by_zeta[t.zeta]]
                else:
                    ints = [integrals_nonint_mp(mp.mpf(t.n_eff) + t.l + 2, 4, a, zeta) for a in alpha]
                if t.l not in grams:
                    g = mp.matrix(size, size)
                    dg = mp.matrix(size, size)
                    for i in range(size):
                        for j in range(size):
                            sum_ = alpha[i] + alpha[j]
                            frac = alpha[i] / sum_
                            gij = (2 * mp.sqrt(alpha[i] * alpha[j]) / sum_) ** p
                            dgij = gij * p * (mp.mpf(1) / 2 - frac)
                            if self.h1:
                                tt = 4 * p * alpha[i] * alpha[j] / sum_ / sc2
                                dgij = dgij * (1 + tt) + gij * tt * (1 - frac)
                                gij = gij * (1 + tt)
                            g[i, j], dg[i, j] = gij, dgij
                    grams[t.l] = (g, dg)
                g, dg = grams[t.l]
                n_sto = (2 * zeta) ** (mp.mpf(t.n_eff) + mp.mpf(1) / 2) / mp.sqrt(mp.gamma(2 * mp.mpf(t.n_eff) + 1))
                a_ = mp.mpf(t.n_eff) - 1 - t.l
                s, ds = [], []
                for k in range(size):
                    pref = n_sto * mp.sqrt(2 * (2 * alpha[k]) ** p / mp.gamma(p))
                    i0, i1, i2, i3 = ints[k]
                    sk = pref * i0
                    dsk = p / 2 * sk - alpha[k] * pref * i2
                    if self.h1:
                        h = -2 * alpha[k] * pref * (a_ * i0 - zeta * i1) / sc2
                        dsk += (1 + p / 2) * h + 2 * alpha[k] ** 2 * pref * (a_ * i2 - zeta * i3) / sc2
                        sk += h
                    s.append(sk)
                    ds.append(dsk)
                try:
                    c = mp.cholesky_solve(g, mp.matrix(s))
                except (ZeroDivisionError, ValueError):
                    return None
                if self.h1:
                    a2 = mp.mpf(t.n_eff) - 1 - t.l
                    nn = mp.mpf(t.n_eff)
                    norm2 = 1 + (a2 * a2 * 4 * zeta**2 / (2 * nn * (2 * nn - 1)) - 2 * a2 * zeta**2 / nn + zeta**2) / sc2
                else:
                    norm2 = mp.mpf(1)
                eps.append(norm2 - mp.fsum(s[k] * c[k] for k in range(size)))
                coefs.append(np.array([float(c[k]) for k in range(size)]))
                if gradient:
                    for k in range(size):
                        dgc = mp.fsum(dg[k, j] * c[j] for j in range(size))
                        grad[k] += -2 * c[k] * ds[k] + 2 * c[k] * dgc
            return eps, (np.array([float(v) for v in grad]) if gradient else None), coefs
