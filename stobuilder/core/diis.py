"""PySCF's DIIS with the extrapolation solved stably, for every SCF we run.

DIIS (Pulay, Chem. Phys. Lett. 73, 393, 1980) chooses coefficients c with Σc = 1 that minimise
|Σ c_i e_i|² over the stored error vectors e_i, by solving the bordered system
[[0, 1ᵀ], [1, B]] (λ, c) = (1, 0) with B_ij = <e_i|e_j>. PySCF solves it with
``numpy.linalg.solve`` and drops dependent error vectors only where an eigenvalue is below 1e-14
in absolute terms. With large error vectors (a trial ζ far from the optimum, a poor first guess)
the rounding of a dependent direction lies far above 1e-14: the solve then either returns
meaningless coefficients or meets an exactly zero pivot and raises (on numpy ≥ 2.4 PySCF's
handler names ``numpy.linalg.linalg``, which no longer exists, so the failure is an
AttributeError). Seen here: the exact-STO ζ optimisation of Mo (4d5 5s1) stopped so in a line
search. ``RobustDIIS`` divides B by its largest diagonal element first (the minimiser c does not
change), then solves by PySCF's own rule for the dependent case, the eigen-decomposition with
the near-zero eigenvalues dropped; for a well-conditioned system that is the same solution.
"""

from __future__ import annotations

import numpy as np
from pyscf.scf.diis import CDIIS

CUTOFF = 1e-12  # eigenvalues of the scaled DIIS matrix (overlaps divided by the largest) below this are dropped


def diis_coefficients(h: np.ndarray) -> np.ndarray:
    """(λ, c) of the bordered DIIS matrix ``h`` (row and column 0 the constraint Σc = 1)."""
    h = np.array(h)
    scale = np.abs(np.diagonal(h)[1:]).max() if len(h) > 1 else 0.0
    if scale > 0:
        h[1:, 1:] /= scale
    g = np.zeros(len(h), h.dtype)
    g[0] = 1
    w, v = np.linalg.eigh(h)
    keep = np.abs(w) > CUTOFF
    return v[:, keep] @ ((v[:, keep].conj().T @ g) / w[keep])


class RobustDIIS(CDIIS):
    """CDIIS whose extrapolation is solved by ``diis_coefficients`` (see the module docstring)."""

    def extrapolate(self, nd=None):
        if nd is None:
            nd = self.get_num_vec()
        c = diis_coefficients(self._H[: nd + 1, : nd + 1])
        xnew = None
        for i, ci in enumerate(c[1:]):
            xi = np.asarray(self.get_vec(i))
            xnew = xi * ci if xnew is None else xnew + xi * ci
        return xnew


def use_robust_diis(mf):
    """``mf`` (a PySCF SCF object) with ``RobustDIIS`` as its DIIS class; returns ``mf``."""
    mf.DIIS = RobustDIIS
    return mf
