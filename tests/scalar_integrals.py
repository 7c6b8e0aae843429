"""Analytic overlaps between a Slater-type radial function and Gaussian radial functions, one α
at a time by recurrences: a reference for the tests (the package's fits take I_ν from the tables
of stobuilder.expansion.radial_tables and share none of this code).

All functions here work with the radial parts only; the angular factor Y_lm is the same on both
sides of every overlap and integrates to 1. Units: exponents ζ in bohr⁻¹, α in bohr⁻².

The one integral everything rests on is

    I_ν(α, ζ) = ∫_0^∞ r^(ν−1) exp(−α r² − ζ r) dr,        dI_ν/dα = −I_(ν+2),

for which Gradshteyn & Ryzhik (Table of Integrals, 7th ed., 2007, 3.462.1) give the closed form
Γ(ν) (4α)^(−ν/2) U(ν/2, 1/2, ζ²/(4α)) (through D_−ν(z) = 2^(−ν/2) e^(−z²/4) U(ν/2, 1/2, z²/2)).
SciPy's ``hyperu`` evaluates that form to only ~3e-8 relative accuracy for some arguments (we
measured it against adaptive quadrature, see tests/test_expansion.py), which is too coarse for
fits whose exponents must agree with published tables to 1e-5 and whose gradients must vanish to
1e-12. We therefore evaluate I_ν for integer ν from

    I_1 = ½ √(π/α) erfcx(ζ / (2√α))                        (exact, SciPy's scaled erfc)
    I_(ν+1) / I_ν = ν / (ζ + 2α I_(ν+2)/I_(ν+1))             (integration by parts)

The integration-by-parts relation is 0 = ν I_ν − 2α I_(ν+2) − ζ I_(ν+1). For α ≥ UP_SWITCH ζ²
it is used upwards from I_1 and I_2 = (1 − ζ I_1)/(2α) (the subtracted term is the smaller one
there). For smaller α the ratio relation, a continued fraction with positive terms only, is
evaluated downwards from the tail approximation r ≈ (−ζ + √(ζ² + 8αν)) / (4α) (its fixed point),
so there is no cancellation (backward recurrence in the dominant direction; W. Gautschi, SIAM
Review 9, 24, 1967). Against Arb ball arithmetic both branches agree to ~5e-15 relative for
ν ≤ 17 (tests); the upward recurrence from α = 0.3 ζ² (the earlier switch) lost up to 1.4e-12
there, and a tail of 250 √α/ζ terms 2e-14 near α = 3 ζ². In mpmath (34 digits) the upward
recurrence is used from 0.3 ζ² on, where it loses about 4 of those digits (1.6e-30 relative at
α = 0.3 ζ², ν ≤ 30, measured).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erfcx, gammaln

# α/ζ² from which the upward recurrence is used (the continued fraction below) in double
# precision, and the continued fraction's tail length nu_max + CF_BASE + CF_SLOPE √α/ζ (measured
# against Arb, see the module docstring)
UP_SWITCH = 6.0
CF_BASE, CF_SLOPE = 40, 500.0
_SWITCH_MP = 0.3  # the same switch in mpmath precision


def _integrals_one(nu_max: int, a: float, zeta: float) -> list[float]:
    """I_1 … I_nu_max at one α (see the module docstring for the two stable recurrences)."""
    i1 = 0.5 * math.sqrt(math.pi / a) * float(erfcx(zeta / (2.0 * math.sqrt(a))))
    out = [i1]
    if a >= UP_SWITCH * zeta * zeta:
        # upward: 2α I_(ν+2) = ν I_ν − ζ I_(ν+1); the subtracted term is the smaller one here
        out.append((1.0 - zeta * i1) / (2.0 * a))
        for nu in range(1, nu_max - 1):
            out.append((nu * out[nu - 1] - zeta * out[nu]) / (2.0 * a))
        return out[:nu_max]
    # downward continued fraction for r_ν = I_(ν+1)/I_ν; error damps by ~ζ/√(2αν) per step
    top = nu_max + CF_BASE + int(CF_SLOPE * math.sqrt(a) / zeta)
    ratio = (-zeta + math.sqrt(zeta * zeta + 8.0 * a * top)) / (4.0 * a)
    # its first correction for the slow variation of r_ν with ν, −2αr₀/(ζ + 4αr₀)² (own
    # derivation; the result is checked against Arb in tests/test_analytic.py)
    ratio -= 2.0 * a * ratio / (zeta + 4.0 * a * ratio) ** 2
    ratios = [0.0] * nu_max
    for nu in range(top - 1, 0, -1):
        ratio = nu / (zeta + 2.0 * a * ratio)
        if nu < nu_max:
            ratios[nu] = ratio
    for nu in range(1, nu_max):
        out.append(out[-1] * ratios[nu])
    return out


def radial_integrals_mp(nu_max: int, a, zeta=1):
    """I_1 … I_nu_max at one α in mpmath precision (the current mp.dps), same recurrences.

    An independent extended-precision check of the fits (tests): the Gram form 1 − sᵀG⁻¹s of ε
    and its gradient need more than double precision when ε ≲ 1e-6.
    """
    import mpmath as mp

    a, zeta = mp.mpf(a), mp.mpf(zeta)
    x = zeta / (2 * mp.sqrt(a))
    i1 = mp.sqrt(mp.pi / a) / 2 * mp.erfc(x) * mp.exp(x * x)
    out = [i1]
    if a >= _SWITCH_MP * zeta * zeta:
        out.append((1 - zeta * i1) / (2 * a))
        for nu in range(1, nu_max - 1):
            out.append((nu * out[nu - 1] - zeta * out[nu]) / (2 * a))
        return out[:nu_max]
    top = nu_max + int((40 + 250.0 * math.sqrt(float(a)) / float(zeta)) * mp.mp.dps / 10.0)
    ratio = (-zeta + mp.sqrt(zeta * zeta + 8 * a * top)) / (4 * a)
    ratios = [mp.mpf(0)] * nu_max
    for nu in range(top - 1, 0, -1):
        ratio = nu / (zeta + 2 * a * ratio)
        if nu < nu_max:
            ratios[nu] = ratio
    for nu in range(1, nu_max):
        out.append(out[-1] * ratios[nu])
    return out


def radial_integrals(nu_max: int, alpha: np.ndarray, zeta: float = 1.0) -> np.ndarray:
    """I_ν(α, ζ) for ν = 1 … nu_max at every α.

    Parameters
    ----------
    nu_max : int
        Largest power index ν (≥ 1) wanted.
    alpha : array of float
        Gaussian exponents α > 0 in bohr⁻².
    zeta : float
        Slater exponent ζ > 0 in bohr⁻¹.

    Returns
    -------
    ndarray of shape (nu_max, len(alpha)); row ν − 1 holds I_ν.
    """
    cols = [_integrals_one(nu_max, float(a), float(zeta)) for a in np.atleast_1d(alpha)]
    return np.array(cols).T.reshape(nu_max, len(cols))


def sto_norm(n: int, zeta: float = 1.0) -> float:
    """Radial normalisation N of r^(n−1) e^(−ζr): N = (2ζ)^(n+½) / √((2n)!)."""
    return math.exp((n + 0.5) * math.log(2.0 * zeta) - 0.5 * math.lgamma(2 * n + 1))


def gaussian_log_norm(l: int, alpha: np.ndarray) -> np.ndarray:
    """ln N_α of r^l e^(−αr²): N_α² ∫ r^(2l+2) e^(−2αr²) dr = 1, N_α² = 2 (2α)^(l+3/2) / Γ(l+3/2)."""
    return 0.5 * (math.log(2.0) + (l + 1.5) * np.log(2.0 * np.asarray(alpha)) - gammaln(l + 1.5))


def sto_gaussian_overlap(
    n: int, l: int, alpha: np.ndarray, zeta: float = 1.0, integrals: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Overlaps s_k = ⟨φ_nl | g_k⟩ of a normalised STO with normalised Gaussians, and ds_k/d ln α_k.

    Parameters
    ----------
    n, l : int
        Principal and angular quantum numbers of the STO N r^(n−1) e^(−ζr) Y_lm.
    alpha : array of float
        Exponents α_k (bohr⁻²) of the Gaussians N_k r^l e^(−α_k r²) Y_lm.
    zeta : float
        Slater exponent in bohr⁻¹.
    integrals : array, optional
        ``radial_integrals(m, alpha, zeta)`` with m ≥ n + l + 4, to share one evaluation
        between several subshells.
    """
    a = np.asarray(alpha, dtype=float)
    nu = n + l + 2
    ints = radial_integrals(nu + 2, a, zeta) if integrals is None else integrals
    pref = sto_norm(n, zeta) * np.exp(gaussian_log_norm(l, a))
    s = pref * ints[nu - 1]
    # d ln N_k / d ln α = (l + 3/2)/2 ; dI_ν/dα = −I_(ν+2)
    ds = (l + 1.5) / 2.0 * s - a * pref * ints[nu + 1]
    return s, ds
