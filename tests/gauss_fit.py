"""Test helper: a long least-squares Gaussian expansion of a normalised STO, independent of stobuilder.

Even-tempered exponents with coefficients fitted on a fine logarithmic radial grid (weighted
least squares, SVD); used only to feed PySCF (libcint) with Gaussian stand-ins of the STOs.
"""

from __future__ import annotations

import numpy as np
from pyscf import gto


def fit_sto_gaussians(n: int, l: int, zeta: float, count: int) -> list[tuple[float, float]]:
    """[(α, c)] for r^l e^(−α r²) primitives (coefficients for normalised primitives) ≈ r^(n−1) e^(−ζ r)."""
    r = np.exp(np.linspace(np.log(1e-5), np.log(60.0), 6000)) / zeta
    w = np.gradient(r) * r**2
    alphas = zeta**2 * np.geomspace(3e-2 / n**2, 3e3 / n**2, count)
    target = r ** (n - 1) * np.exp(-zeta * r)
    design = r[:, None] ** l * np.exp(-np.outer(r**2, alphas))
    sw = np.sqrt(w)
    coef, *_ = np.linalg.lstsq(design * sw[:, None], target * sw, rcond=1e-13)
    return [(float(a), float(c / gto.gto_norm(l, a))) for a, c in zip(alphas, coef)]


def pyscf_atom(symbol: str, shells, count: int, charge: int = 0, spin: int = 0) -> gto.Mole:
    """A PySCF Mole for one atom at the origin whose basis is ``count``-Gaussian stand-ins of the STOs."""
    basis = [[s.l] + [[a, c] for a, c in fit_sto_gaussians(s.n, s.l, s.zeta, count)] for s in shells]
    return gto.M(atom=[[symbol, (0.0, 0.0, 0.0)]], basis={symbol: basis}, charge=charge, spin=spin,
                 cart=False, verbose=0)
