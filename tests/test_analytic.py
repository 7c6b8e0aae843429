"""The closed-form fit objective (stobuilder.expansion.analytic) against the independent sampled
residual of stobuilder.expansion.residual (trapezoidal rule in ln r, no shared integrals) and
against its own extended-precision evaluation."""

import numpy as np
import pytest

from stobuilder.expansion import analytic as A
from stobuilder.expansion import residual as R
from stobuilder.expansion.integrals import radial_integrals

CASES = [
    ((3.0, 0, 1.0), (3.0, 1, 1.0), (3.0, 2, 1.0)),
    ((2.0, 0, 1.0), (2.0, 1, 1.3)),
    ((3.7, 0, 1.0),),  # n* = 3.7: J. C. Slater, Phys. Rev. 36, 57 (1930)
]


@pytest.mark.parametrize("zeta", [1.0, 0.4, 2.5])
def test_vectorised_integrals_match_the_scalar_recurrences(zeta):
    alpha = np.exp(np.linspace(np.log(1e-3), np.log(1e6), 120))
    ratio = A.integrals_vec(17, alpha, zeta) / radial_integrals(17, alpha, zeta)
    assert np.max(np.abs(ratio - 1)) < 1e-13  # common practice, no source: a few ulp × recurrence length


@pytest.mark.parametrize("norm", ["l2", "h1"])
@pytest.mark.parametrize("targets", CASES)
def test_closed_form_error_and_gradient_match_the_sampled_residual(targets, norm):
    x = np.log(np.array([10.0, 2.0, 0.6, 0.24, 0.1, 0.05]))
    analytic = A.Problem(tuple(A.Target(*t) for t in targets), norm)
    sampled = R.Problem(tuple(R.Target(*t) for t in targets), norm)
    eps, grad, coefs = analytic.evaluate(x)
    eps_mp, grad_mp, coefs_mp = analytic.evaluate_mp(x)
    res, jac, c_ref, eps_ref = sampled.solve(x)
    grad_ref = 2.0 * jac.T @ res
    # double precision: absolute floor ~1e-16 × the size of the terms (module docstring)
    assert np.allclose(eps, eps_ref, rtol=0, atol=2e-14)
    assert np.allclose(grad, grad_ref, rtol=0, atol=1e-13)
    # extended precision against the sampled residual (which carries a relative rounding error)
    assert all(abs(float(e) - r) < 1e-16 + 1e-10 * r for e, r in zip(eps_mp, eps_ref))
    assert np.allclose(grad_mp, grad_ref, rtol=1e-8, atol=1e-15)
    for c, cm, cr in zip(coefs, coefs_mp, c_ref):
        assert np.allclose(c, cr, rtol=1e-9) and np.allclose(cm, cr, rtol=1e-9)
