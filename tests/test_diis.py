"""The DIIS extrapolation every SCF of stobuilder uses (stobuilder.core.diis).

DIIS coefficients minimise |Σ c_i e_i|² subject to Σ c_i = 1 (Pulay, Chem. Phys. Lett. 73, 393,
1980); for independent error vectors the Lagrange solution is c = B⁻¹1 / (1ᵀB⁻¹1) with
B_ij = <e_i|e_j> (textbook constrained least squares; common practice, no source).
"""

import numpy as np
import pytest
from pyscf import lib

from stobuilder.core.diis import RobustDIIS, diis_coefficients


def _bordered(errors):
    b = np.array([[np.dot(x, y) for y in errors] for x in errors])
    h = np.zeros((len(errors) + 1,) * 2)
    h[0, 1:] = h[1:, 0] = 1
    h[1:, 1:] = b
    return h, b


@pytest.mark.parametrize("seed", range(5))
@pytest.mark.parametrize("scale", [1e-6, 1.0, 1e6])
def test_independent_errors_give_the_lagrange_solution(seed, scale):
    errors = np.random.default_rng(seed).standard_normal((4, 9)) * scale
    h, b = _bordered(errors)
    inv_one = np.linalg.solve(b, np.ones(4))
    expected = inv_one / inv_one.sum()
    c = diis_coefficients(h)[1:]
    np.testing.assert_allclose(c, expected, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("size", [1e2, 1e4, 1e8])
def test_dependent_large_errors_still_give_a_constrained_minimum(size):
    # e, 2e, e: dependent error vectors of large norm, as a trial ζ far from the optimum gives.
    # The exact minimum of |Σ c e_i| under Σ c = 1 is 0 (e.g. c = (1, -1, 1)); PySCF's own
    # extrapolation either raises here or returns coefficients that break Σ c = 1.
    e = np.array([1.0, 3.0, 7.0]) * size
    errors = [e, 2 * e, e]
    h, _ = _bordered(errors)
    c = diis_coefficients(h)[1:]
    assert abs(c.sum() - 1) < 1e-9
    residual = np.linalg.norm(sum(ci * ei for ci, ei in zip(c, errors)))
    assert residual < 1e-9 * np.linalg.norm(e)


def test_identical_errors_extrapolate_to_the_mean():
    # identical error vectors: every c with Σ c = 1 is a minimum; the minimum-norm one is the mean
    d = RobustDIIS()
    d.min_space = 1
    e = np.array([1000.0, 3000.0, 7000.0])
    for k in range(3):
        out = lib.diis.DIIS.update(d, np.arange(3.0) * (k + 1), xerr=e)
    np.testing.assert_allclose(out, np.arange(3.0) * 2, rtol=1e-12)


def test_scf_with_it_matches_pyscf_default():
    # the same converged energy as PySCF's own DIIS on a well-behaved molecule
    from pyscf import gto, scf

    from stobuilder.core.diis import use_robust_diis

    mol = gto.M(atom="O 0 0 0; H 0 0.757 0.587; H 0 -0.757 0.587", basis="sto-3g", verbose=0)
    plain = scf.RHF(mol)
    plain.conv_tol = 1e-11
    robust = use_robust_diis(scf.RHF(mol))
    robust.conv_tol = 1e-11
    assert abs(plain.kernel() - robust.kernel()) < 1e-9
    assert robust.converged
