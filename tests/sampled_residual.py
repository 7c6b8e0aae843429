"""An independent reference for the tests: the fit residual φ − Σ c_k g_k sampled on a radial
quadrature grid, and its Jacobian. (The package's fits use closed forms only,
stobuilder.expansion.analytic; this module shares no integrals with it. It was the fit loop of
versions up to ALGORITHM "vp-lm-newton-1".)

Why sampled: the least-squares error of a good fit is tiny (ε ≈ 1e-9 at N = 12), and the
Gram-matrix form ε = 1 − sᵀG⁻¹s loses it to cancellation in double precision (absolute floor
~1e-16, which moves the optimum exponents in the flattest direction by ~1e-5). Writing the
problem as a linear least-squares problem on weighted samples, min_c ‖b − A c‖ with
A_ik = √w_i g_k(r_i) and b_i = √w_i φ(r_i), and solving it by Householder QR computes the
residual itself, whose norm carries a relative (not absolute) rounding error (Å. Björck,
Numerical Methods for Least Squares Problems, SIAM 1996, ch. 2).

Quadrature: the trapezoidal rule in t = ln r, r = e^t, dr = r dt. Every integrand is analytic in
the strip |Im t| < π/4 and decays double-exponentially for t → +∞ and exponentially for
t → −∞, so the rule converges geometrically, error ~ exp(−2π d / h) (L. N. Trefethen,
J. A. C. Weideman, SIAM Review 56, 385, 2014): for e^(−α e^(2t)) the strip is |Im t| < π/4 and
the error bound ~ exp(−π²/(2h)) times the size of the integrand on the strip edge. Measured: at
h = 0.1 the ε of the whole library move by up to 1e-19 absolute (1e-4 relative for ε ~ 1e-15);
at h = 0.08 by < 1e-23 against h = 0.06; the overlaps agree with the analytic ones of
tests/scalar_integrals.py to ~2e-14 relative (the limit set by R_MIN for α ~ 1e6); the
extended-precision gradient at the fitted STO-6G 3s3p3d exponents is ~1e-17 (tests).

Norms. "l2": ∫ |φ − χ|² dτ (Hehre, Stewart & Pople 1969). "h1": the Sobolev norm
∫ |φ − χ|² dτ + ζ₁⁻² ∫ |∇φ − ∇χ|² dτ with ζ₁ the exponent of the first subshell of the fit
(1 bohr⁻¹ for the ζ = 1 library): measuring the gradient in the STO's own length unit keeps the
norm, and so the fit, invariant under r → ζr, so a fit at ζ = 1 scales exactly by ζ². For
R(r) Y_lm, |∇|² integrates to ∫ (R'² + l(l+1) R²/r²) r² dr, which by parts (u = R/r^l, the
boundary terms r^(2l+1) u² vanish for the STOs and Gaussians here) equals ∫ (r^l u')² r² dr; so
the H¹ residual is two stacked blocks, R and r^l (R/r^l)'.

Variable projection: for fixed α the coefficients are linear; the residual of the projected
problem r(x) = (I − P_A) b, x = ln α, has the Jacobian of G. H. Golub and V. Pereyra,
SIAM J. Numer. Anal. 10, 413 (1973):  J_k = −P⊥ D_k c_k − Q R⁻ᵀ e_k (D_kᵀ r), where D_k = ∂A_k/∂x_k.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.linalg.lapack import dgeqrf, dorgqr, dtrtri, dtrtrs
from scipy.special import gammaln

STEP = 0.08  # trapezoidal step in ln r (see the module docstring)
# Grid ends: below R_MIN a Gaussian of α ≤ 1e5 bohr⁻² (ζ = 1 fits reach 7e3) has < 1e-16 of its
# norm, the residual < 1e-24 of ε; beyond the far end e^(−2 α r²) < e^(−80) for α ≥ ALPHA_MIN.
R_MIN = 1e-8  # bohr, at ζ_max = 1
ALPHA_MIN = 1e-3  # bohr⁻² at ζ = 1: the fits stay inside [ALPHA_MIN, ALPHA_MAX] × ζ_min² / ζ_max²
ALPHA_MAX = 1e6


@dataclass(frozen=True)
class Target:
    """One STO of a fit: R(r) = N r^(n_eff − 1) e^(−ζ r), angular momentum l (Gaussians r^l)."""

    n_eff: float
    l: int
    zeta: float


def grid(zeta_min: float, zeta_max: float = 1.0, step: float = STEP) -> tuple[np.ndarray, np.ndarray]:
    """Radii r_i (bohr) and weights w_i with Σ w_i f(r_i) ≈ ∫_0^∞ f(r) r² dr (trapezoidal in ln r)."""
    r_max = math.sqrt(40.0 / ALPHA_MIN) / zeta_min
    t = np.arange(math.log(R_MIN / zeta_max), math.log(r_max) + step, step)
    r = np.exp(t)
    return r, step * r**3


def sto_norm(n_eff: float, zeta: float) -> float:
    """N of r^(n*−1) e^(−ζr): N² ∫ r^(2n*) e^(−2ζr) dr = 1, N = (2ζ)^(n*+½) / √Γ(2n*+1)."""
    return math.exp((n_eff + 0.5) * math.log(2.0 * zeta) - 0.5 * math.lgamma(2.0 * n_eff + 1.0))


def sto_blocks(target: Target, r: np.ndarray, sw: np.ndarray, h1: bool, scale: float) -> np.ndarray:
    """The weighted samples b of one STO: [R] or [R, R'/ζ₁, √(l(l+1)) R/(r ζ₁)] stacked."""
    n, l, z = target.n_eff, target.l, target.zeta
    radial = sto_norm(n, z) * np.exp((n - 1.0) * np.log(r) - z * r)
    if not h1:
        return sw * radial
    deriv = radial * ((n - 1.0 - l) / r - z)  # r^l (R / r^l)'
    return np.concatenate([sw * radial, sw * deriv / scale])


def gaussian_blocks(
    l: int, alpha: np.ndarray, r: np.ndarray, sw: np.ndarray, h1: bool, scale: float, derivative: bool = True,
    shared: tuple[np.ndarray, np.ndarray] | None = None,
) -> tuple[np.ndarray, np.ndarray | None]:
    """A (weighted samples of the normalised Gaussians N_k r^l e^(−α_k r²)) and D = ∂A/∂ln α_k
    (None unless ``derivative``). ``shared`` = (α_k r_i², e^(−α_k r_i²)), common to all l."""
    p = l + 1.5
    norm = np.exp(0.5 * (math.log(2.0) + p * np.log(2.0 * alpha) - gammaln(p)))
    if shared is None:
        ar2 = np.outer(r * r, alpha)
        shared = (ar2, np.exp(-ar2))
    ar2, e = shared
    swc = (sw * r**l)[:, None]
    a = (swc * e) * norm[None, :]  # √w_i g_k(r_i)
    dfac = p / 2.0 - ar2  # ∂ ln(N_k e^(−α r²)) / ∂ ln α_k
    if not h1:
        return a, (a * dfac if derivative else None)
    # r^l (R / r^l)' = −2 α r R for the Gaussian; ∂/∂ln α of it = (1 + dfac) × itself
    ap = a * (-2.0 / scale) * np.outer(r, alpha)
    if not derivative:
        return np.vstack([a, ap]), None
    return np.vstack([a, ap]), np.vstack([a * dfac, ap * (1.0 + dfac)])


class Problem:
    """The sampled fit problem of several STOs sharing one set of Gaussian exponents."""

    def __init__(self, targets: tuple[Target, ...], norm: str, step: float = STEP):
        self.targets = targets
        self.h1 = norm == "h1"
        self.scale = targets[0].zeta
        zmin, zmax = min(t.zeta for t in targets), max(t.zeta for t in targets)
        self.r, w = grid(zmin, zmax, step)
        self.sw = np.sqrt(w)
        self.r2 = self.r * self.r
        self.b = [sto_blocks(t, self.r, self.sw, self.h1, self.scale) for t in targets]
        self.bounds = (math.log(ALPHA_MIN * zmin * zmin), math.log(ALPHA_MAX * zmax * zmax))

    def solve(self, log_alpha: np.ndarray, jacobian: bool = True):
        """Residual vector, its Jacobian in ln α (or None), coefficients and ε per target.

        The coefficients are the optimum of the norm (not renormalised); ε_i = ‖b_i − A_i c_i‖².
        Returns None when a Gaussian overlap matrix is numerically singular (see MIN_RCOND).
        """
        if not np.all(np.abs(log_alpha) < 50.0):  # a wild trial step: no fit, and exp() would overflow
            return None
        alpha = np.exp(log_alpha)
        ar2 = np.outer(self.r2, alpha)
        shared = (ar2, np.exp(-ar2))
        res, jac, coefs, eps = [], [], [], []
        cache: dict[int, tuple] = {}
        for t, b in zip(self.targets, self.b):
            if t.l not in cache:
                a, d = gaussian_blocks(t.l, alpha, self.r, self.sw, self.h1, self.scale, jacobian, shared)
                qr_, tau, _, _ = dgeqrf(a)  # Householder QR (LAPACK), A = Q R
                rr = np.triu(qr_[: alpha.size])
                q, _, _ = dorgqr(qr_, tau)
                diag = np.abs(np.diag(rr))
                cache[t.l] = (d, q, rr, diag)
            d, q, rr, diag = cache[t.l]
            if diag.min() < MIN_RCOND * diag.max():
                return None
            qb = q.T @ b
            c = dtrtrs(rr, qb)[0]
            resid = b - q @ qb
            res.append(resid)
            coefs.append(c)
            eps.append(float(resid @ resid))
            if jacobian:
                dc = d * c[None, :]
                term1 = dc - q @ (q.T @ dc)
                rinv_t = dtrtri(rr)[0].T * (d.T @ resid)[None, :]  # R⁻ᵀ diag(Dᵀr)
                jac.append(-(term1 + q @ rinv_t))
        return np.concatenate(res), (np.vstack(jac) if jacobian else None), coefs, eps

    def objective(self, log_alpha: np.ndarray):
        """The published objective from the sampled residual: per target f = ‖φ̂ − χ̂‖², φ̂ and
        the optimal χ̂ normalised in the norm (Hehre, Stewart & Pople 1969; Stewart 1970: ∫(φ − χ)²
        with ‖χ‖ = 1), and the gradient of Σf in ln α. The residual r = b − χ is orthogonal to
        χ, so ‖χ‖² = ‖b‖² − ε and f = 2(1 − ‖χ‖/‖b‖) = 2e/(1 + √(1 − e)), e = ε/‖b‖² (‖b‖² the
        sampled ‖φ‖²); ∂f = ∂ε/(‖b‖² √(1 − e)). Returns (f per target, ∇Σf)."""
        res, jac, _, eps = self.solve(log_alpha)
        fs, grad = [], np.zeros(len(log_alpha))
        start = 0
        for b, e_abs in zip(self.b, eps):
            rows = slice(start, start + b.size)
            start += b.size
            norm2 = float(b @ b)
            e = e_abs / norm2
            root = math.sqrt(1.0 - e)
            fs.append(2.0 * e / (1.0 + root))
            grad += 2.0 * jac[rows].T @ res[rows] / (norm2 * root)
        return fs, grad


# √ of the smallest reciprocal condition number of the Gaussian overlap matrix accepted:
# cond(G) = cond(A)² ≤ 1e14 (common practice, no source: beyond it the coefficients lose more
# than 2 of their 16 digits and neighbouring primitives describe the same function).
MIN_RCOND = 1e-7
