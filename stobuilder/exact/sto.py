"""Slater-type orbitals on one centre: normalisation and the exact one-centre integrals.

An STO here is χ(r) = N r^(n−1) e^(−ζ r) S_lm(θ, φ) with integer n ≤ 7 (n ≤ 6 in a basis, n + 1 for
exponent derivatives), l ≤ 3, ζ in bohr⁻¹ and N = (2ζ)^(n+½) / √((2n)!) so that ⟨χ|χ⟩ = 1.
S_lm are real spherical harmonics in PySCF's (libcint's) order and signs: p as (x, y, z), l ≥ 2 as
m = −l … l with positive x/y polynomials (dxy, dyz, dz², dxz, dx²−y²).

All radial integrals are closed forms over ∫₀^∞ r^k e^(−a r) dr = k!/a^(k+1); electron repulsion uses
the Laplace expansion of 1/r₁₂, the radial Slater integrals R^k, split into the two regions
r₂ > r₁ and r₁ > r₂ so that every term of the sums is positive (no cancellation), and real Gaunt
coefficients from Wigner 3j symbols (Racah's formula, exact in integers).
Sources: J. C. Slater, Quantum Theory of Atomic Structure, vol. 1 (McGraw-Hill 1960), ch. 13 and
appendix 20 (R^k); C. C. J. Roothaan, J. Chem. Phys. 19, 1445 (1951) (one-centre STO integrals);
G. Racah, Phys. Rev. 62, 438 (1942) (3j symbols).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache

import numpy as np

from stobuilder.core.errors import InputError

MAX_L = 3
MAX_N = 7


@dataclass(frozen=True)
class STOShell:
    """One subshell of STOs: all 2l + 1 real harmonics of r^(n−1) e^(−ζ r); ζ in bohr⁻¹."""

    n: int
    l: int
    zeta: float


def check_shell(shell: STOShell) -> None:
    """Raise InputError for an STO subshell outside n ≤ 7, l ≤ min(n − 1, 3), ζ > 0."""
    if not (1 <= shell.n <= MAX_N and 0 <= shell.l <= min(shell.n - 1, MAX_L)):
        raise InputError(f"STO n={shell.n}, l={shell.l} is not supported (n ≤ {MAX_N}, l ≤ min(n−1, {MAX_L}))")
    if not (shell.zeta > 0 and math.isfinite(shell.zeta)):
        raise InputError(f"STO exponent ζ = {shell.zeta!r} must be a positive number")


def norm(n: int, zeta: float) -> float:
    """Radial normalisation N = (2ζ)^(n+½)/√((2n)!) of r^(n−1) e^(−ζ r) (Slater 1930)."""
    return (2.0 * zeta) ** (n + 0.5) / math.sqrt(math.factorial(2 * n))


def radial_value(n: int, zeta: float, r: np.ndarray) -> np.ndarray:
    """Normalised radial function N r^(n−1) e^(−ζ r) at radii r (bohr)."""
    r = np.asarray(r, dtype=float)
    return norm(n, zeta) * r ** (n - 1) * np.exp(-zeta * r)


def _gamma_int(k: int, a: float) -> float:
    """∫₀^∞ r^k e^(−a r) dr = k!/a^(k+1) for integer k ≥ 0."""
    return math.factorial(k) / a ** (k + 1)


# ---------------------------------------------------------------- one-electron radial integrals
def radial_overlap(a: STOShell, b: STOShell) -> float:
    """⟨a|b⟩ for the same l: N_a N_b (n_a+n_b)!/(ζ_a+ζ_b)^(n_a+n_b+1)."""
    return norm(a.n, a.zeta) * norm(b.n, b.zeta) * _gamma_int(a.n + b.n, a.zeta + b.zeta)


def radial_nuclear(a: STOShell, b: STOShell) -> float:
    """⟨a|1/r|b⟩ for the same l (bohr⁻¹); multiply by −Z for the nuclear attraction."""
    return norm(a.n, a.zeta) * norm(b.n, b.zeta) * _gamma_int(a.n + b.n - 1, a.zeta + b.zeta)


def radial_kinetic(a: STOShell, b: STOShell) -> float:
    """⟨a|−½∇²|b⟩ for the same l (hartree).

    −½∇² on r^(n−1)e^(−ζr) S_lm gives −½[(n(n−1) − l(l+1)) r^(n−3) − 2nζ r^(n−2) + ζ² r^(n−1)] e^(−ζr) S_lm.
    """
    n, z, l = b.n, b.zeta, b.l
    s = a.zeta + b.zeta
    m = a.n + b.n  # powers below: r^(n_a−1) r^(n_b−3+j) r²
    c0 = n * (n - 1) - l * (l + 1)
    total = 0.0
    if c0:
        total += c0 * _gamma_int(m - 2, s)
    total += -2.0 * n * z * _gamma_int(m - 1, s) + z * z * _gamma_int(m, s)
    return -0.5 * norm(a.n, a.zeta) * norm(b.n, b.zeta) * total


# ---------------------------------------------------------------- Slater integrals R^k
_FACTORIALS = np.array([float(math.factorial(i)) for i in range(171)])  # exact to rounding up to 170!


def _half_grid(p, alpha, q, beta, k: int) -> np.ndarray:
    """∫₀^∞ dr₁ r₁^(p+2+k) e^(−α r₁) ∫_{r₁}^∞ dr₂ r₂^(q+1−k) e^(−β r₂) (all terms positive), on a
    grid: p, alpha of shape (X, 1), q, beta of shape (1, Y) → (X, Y); scalars give a scalar."""
    m = q + 1 - k
    ab = alpha + beta
    total = np.zeros(np.broadcast_shapes(np.shape(p), np.shape(q)))
    for j in range(int(m.max()) + 1):
        term = _FACTORIALS[m] / _FACTORIALS[j] * beta ** (j - m - 1) * _FACTORIALS[p + 2 + k + j] / ab ** (p + 3 + k + j)
        total += np.where(j <= m, term, 0.0)
    return total


def slater_rk(k: int, a: STOShell, b: STOShell, c: STOShell, d: STOShell) -> float:
    """Radial Slater integral R^k(ab, cd) = ∫∫ P_ab(r₁) P_cd(r₂) r<^k / r>^(k+1) r₁² r₂² dr₁ dr₂.

    P_ab = R_a R_b are products of normalised radial functions; k ≤ min(l_a + l_b, l_c + l_d)
    keeps every power non-negative. Hartree. Source: Slater (1960), appendix 20.
    """
    p, alpha = a.n + b.n - 2, a.zeta + b.zeta
    q, beta = c.n + d.n - 2, c.zeta + d.zeta
    nn = norm(a.n, a.zeta) * norm(b.n, b.zeta) * norm(c.n, c.zeta) * norm(d.n, d.zeta)
    p, q = np.asarray(p), np.asarray(q)
    return float(nn * (_half_grid(p, alpha, q, beta, k) + _half_grid(q, beta, p, alpha, k)))


# ---------------------------------------------------------------- angular part
def _fact(n: int) -> int:
    return math.factorial(n)


@lru_cache(maxsize=None)
def wigner_3j(j1: int, j2: int, j3: int, m1: int, m2: int, m3: int) -> float:
    """Wigner 3j symbol for integer arguments by Racah's formula (Racah 1942), exact up to one sqrt."""
    if m1 + m2 + m3 != 0 or not (abs(j1 - j2) <= j3 <= j1 + j2):
        return 0.0
    if abs(m1) > j1 or abs(m2) > j2 or abs(m3) > j3:
        return 0.0
    tri = Fraction(_fact(j1 + j2 - j3) * _fact(j1 - j2 + j3) * _fact(-j1 + j2 + j3), _fact(j1 + j2 + j3 + 1))
    pref = tri * _fact(j1 + m1) * _fact(j1 - m1) * _fact(j2 + m2) * _fact(j2 - m2) * _fact(j3 + m3) * _fact(j3 - m3)
    kmin = max(0, j2 - j3 - m1, j1 - j3 + m2)
    kmax = min(j1 + j2 - j3, j1 - m1, j2 + m2)
    s = Fraction(0)
    for t in range(kmin, kmax + 1):
        s += Fraction(
            (-1) ** t,
            _fact(t) * _fact(j3 - j2 + t + m1) * _fact(j3 - j1 + t - m2) * _fact(j1 + j2 - j3 - t)
            * _fact(j1 - t - m1) * _fact(j2 - t + m2),
        )
    sign = -1 if (j1 - j2 - m3) % 2 else 1
    return sign * math.sqrt(pref) * float(s)


def real_m_order(l: int) -> tuple[int, ...]:
    """The m of the real harmonics of one l in PySCF's order: p as x, y, z = (1, −1, 0)."""
    return (1, -1, 0) if l == 1 else tuple(range(-l, l + 1))


def _real_to_complex(l: int, m: int) -> dict[int, complex]:
    """S_lm = Σ_μ U_μ Y_lμ (Y with the Condon–Shortley phase; S with positive x/y polynomials)."""
    if m == 0:
        return {0: 1.0}
    s = (-1) ** abs(m)
    if m > 0:  # S = (−1)^m √2 Re Y_lm = ((−1)^m Y_lm + Y_l,−m)/√2
        return {m: s / math.sqrt(2), -m: 1 / math.sqrt(2)}
    mm = -m  # S = (−1)^m √2 Im Y_l|m| = ((−1)^m Y_l|m| − Y_l,−|m|)/(i√2)
    return {mm: s / (1j * math.sqrt(2)), -mm: -1 / (1j * math.sqrt(2))}


@lru_cache(maxsize=None)
def real_gaunt(l1: int, m1: int, l2: int, m2: int, l3: int, m3: int) -> float:
    """∫ S_l1m1 S_l2m2 S_l3m3 dΩ over real spherical harmonics (exact up to rounding)."""
    if (l1 + l2 + l3) % 2 or not (abs(l1 - l2) <= l3 <= l1 + l2):
        return 0.0
    pre = math.sqrt((2 * l1 + 1) * (2 * l2 + 1) * (2 * l3 + 1) / (4 * math.pi)) * wigner_3j(l1, l2, l3, 0, 0, 0)
    total = 0j
    for a, ua in _real_to_complex(l1, m1).items():
        for b, ub in _real_to_complex(l2, m2).items():
            c = -a - b
            if c in _real_to_complex(l3, m3):
                total += ua * ub * _real_to_complex(l3, m3)[c] * wigner_3j(l1, l2, l3, a, b, c)
    return float(total.real) * pre


@lru_cache(maxsize=None)
def angular_tensor(la: int, lb: int, k: int) -> np.ndarray:
    """G[q, ma, mb] = ∫ S_la,ma S_lb,mb S_k,q dΩ for the real harmonics in PySCF order."""
    qs = range(-k, k + 1)
    return np.array(
        [[[real_gaunt(la, ma, lb, mb, k, q) for mb in real_m_order(lb)] for ma in real_m_order(la)] for q in qs]
    )


# ---------------------------------------------------------------- integrals over a basis
@dataclass(frozen=True)
class OneCentreBasis:
    """A list of STO subshells on one centre and the map from basis functions to subshells."""

    shells: tuple[STOShell, ...]

    @property
    def nao(self) -> int:
        return sum(2 * s.l + 1 for s in self.shells)

    @property
    def function_shell(self) -> np.ndarray:
        return np.array([i for i, s in enumerate(self.shells) for _ in range(2 * s.l + 1)])

    @property
    def function_m(self) -> np.ndarray:
        return np.array([m for s in self.shells for m in real_m_order(s.l)])

    def slices(self) -> list[slice]:
        out, start = [], 0
        for s in self.shells:
            out.append(slice(start, start + 2 * s.l + 1))
            start += 2 * s.l + 1
        return out


def make_basis(shells) -> OneCentreBasis:
    """Validated OneCentreBasis from an iterable of STOShell or (n, l, ζ) tuples."""
    out = tuple(s if isinstance(s, STOShell) else STOShell(int(s[0]), int(s[1]), float(s[2])) for s in shells)
    for s in out:
        check_shell(s)
    return OneCentreBasis(out)


def _one_electron(basis: OneCentreBasis, radial) -> np.ndarray:
    n = basis.nao
    out = np.zeros((n, n))
    sl = basis.slices()
    for i, a in enumerate(basis.shells):
        for j, b in enumerate(basis.shells):
            if a.l == b.l:
                out[sl[i], sl[j]] = np.eye(2 * a.l + 1) * radial(a, b)
    return out


def overlap_matrix(basis: OneCentreBasis) -> np.ndarray:
    """Overlap matrix ⟨μ|ν⟩ of the basis functions (dimensionless)."""
    return _one_electron(basis, radial_overlap)


def kinetic_matrix(basis: OneCentreBasis) -> np.ndarray:
    """Kinetic-energy matrix ⟨μ|−½∇²|ν⟩ in hartree."""
    return _one_electron(basis, radial_kinetic)


def nuclear_matrix(basis: OneCentreBasis, z: float) -> np.ndarray:
    """Nuclear-attraction matrix ⟨μ|−Z/r|ν⟩ in hartree for a point nucleus of charge z at the centre."""
    return -float(z) * _one_electron(basis, radial_nuclear)


def eri_tensor(basis: OneCentreBasis, first: int | None = None) -> np.ndarray:
    """Electron-repulsion integrals (μν|λσ) in chemists' notation, hartree, shape (nao,)*4, or
    with ``first`` only ν, λ, σ < first: shape (nao, first, first, first) (the block the
    ζ gradient needs, 8× smaller for an augmented basis).

    (μν|λσ) = Σ_k 4π/(2k+1) Σ_q G^kq_μν G^kq_λσ R^k(ab, cd), with a…d the subshells of μ…σ
    (Laplace expansion of 1/r₁₂; Slater 1960, ch. 13). R^k of all subshell pairs at once
    (``slater_rk`` on a grid).
    """
    shells = basis.shells
    ns = len(shells)
    nao = basis.nao
    first = nao if first is None else first
    sl = basis.slices()
    lmax = max(s.l for s in shells)
    eri = np.zeros((nao, first, first, first))
    fs = basis.function_shell
    n = np.array([s.n for s in shells])
    zeta = np.array([s.zeta for s in shells])
    norms = np.array([norm(s.n, s.zeta) for s in shells])
    pairs = [(i, j) for i in range(ns) for j in range(i + 1)]
    for k in range(0, 2 * lmax + 1):
        # G^kq over all function pairs
        g = np.zeros((2 * k + 1, nao, nao))
        good = []
        for i, j in pairs:
            a, b = shells[i], shells[j]
            if (a.l + b.l + k) % 2 == 0 and abs(a.l - b.l) <= k <= a.l + b.l:
                good.append((i, j))
                t = angular_tensor(a.l, b.l, k)
                g[:, sl[i], sl[j]] = t
                g[:, sl[j], sl[i]] = t.transpose(0, 2, 1)
        if not good:
            continue
        ii, jj = np.array(good).T
        p, alpha, nab = n[ii] + n[jj] - 2, zeta[ii] + zeta[jj], norms[ii] * norms[jj]
        col = (slice(None), None)
        row = (None, slice(None))
        v = (_half_grid(p[col], alpha[col], p[row], alpha[row], k) + _half_grid(p[row], alpha[row], p[col], alpha[col], k))
        v *= nab[col] * nab[row]
        rk = np.zeros((ns, ns, ns, ns))
        for x, y in ((ii, jj), (jj, ii)):
            for c, d in ((ii, jj), (jj, ii)):
                rk[x[col], y[col], c[row], d[row]] = v
        rk_block = rk[np.ix_(fs, fs[:first], fs[:first], fs[:first])]
        ang = np.einsum("qmn,qls->mnls", g[:, :, :first], g[:, :first, :first]) * (4.0 * math.pi / (2 * k + 1))
        eri += ang * rk_block
    return eri


__all__ = [
    "OneCentreBasis",
    "STOShell",
    "angular_tensor",
    "eri_tensor",
    "kinetic_matrix",
    "make_basis",
    "norm",
    "nuclear_matrix",
    "overlap_matrix",
    "radial_value",
    "real_gaunt",
    "real_m_order",
    "slater_rk",
    "wigner_3j",
]
