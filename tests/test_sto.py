"""Exact one-centre STO integrals against closed forms and against libcint over long Gaussian expansions."""

import math

import numpy as np
import pytest
from gauss_fit import pyscf_atom

from stobuilder.exact import sto
from stobuilder.core.errors import InputError


@pytest.mark.parametrize("zeta", [0.5, 1.0, 1.6875, 7.3])
def test_1s_closed_forms(zeta):
    # ⟨1s|1/r|1s⟩ = ζ, ⟨1s|−½∇²|1s⟩ = ζ²/2, (1s1s|1s1s) = 5ζ/8:
    # A. Szabo and N. S. Ostlund, Modern Quantum Chemistry (Macmillan 1982; Dover 1989), exercise 2.x on He;
    # I. N. Levine, Quantum Chemistry, ch. 9 (He variational treatment).
    b = sto.make_basis([(1, 0, zeta)])
    assert sto.nuclear_matrix(b, 1.0)[0, 0] == pytest.approx(-zeta, rel=1e-14)
    assert sto.kinetic_matrix(b)[0, 0] == pytest.approx(zeta**2 / 2, rel=1e-14)
    assert sto.eri_tensor(b)[0, 0, 0, 0] == pytest.approx(5 * zeta / 8, rel=1e-14)


@pytest.mark.parametrize("n,l", [(n, l) for n in range(1, 7) for l in range(min(n, 4))])
def test_normalised_and_hydrogenic_expectations(n, l):
    # Nodeless hydrogen-like orbital n, l = n − 1 with ζ = Z/n: ⟨T⟩ = Z²/(2n²), ⟨1/r⟩ = Z/n²
    # (virial theorem and the hydrogen atom; Levine, Quantum Chemistry, ch. 6). For any n:
    # ⟨1/r⟩ = ζ/n for r^(n−1)e^(−ζr) (∫ r^(2n−1)e^(−2ζr) / ∫ r^(2n)e^(−2ζr), elementary).
    zeta = 1.3
    b = sto.make_basis([(n, l, zeta)])
    assert np.allclose(sto.overlap_matrix(b), np.eye(2 * l + 1), atol=1e-14)
    assert np.allclose(-sto.nuclear_matrix(b, 1.0), np.eye(2 * l + 1) * zeta / n, rtol=1e-13)
    if l == n - 1:
        assert np.allclose(sto.kinetic_matrix(b), np.eye(2 * l + 1) * zeta**2 / 2, rtol=1e-13)


def test_3j_and_gaunt_known_values():
    # (1 1 2; 1 −1 0) = 1/√30 and (1 1 0; 0 0 0) = −1/√3: A. R. Edmonds, Angular Momentum in
    # Quantum Mechanics (Princeton 1957), table 2 (closed forms of the 3j symbols); value from memory.
    assert sto.wigner_3j(1, 1, 2, 1, -1, 0) == pytest.approx(1 / math.sqrt(30), abs=1e-15)
    assert sto.wigner_3j(1, 1, 0, 0, 0, 0) == pytest.approx(-1 / math.sqrt(3), abs=1e-15)
    # ∫ S_lm S_l'm' S_00 dΩ = δ/√(4π) (orthonormality; common practice, no source)
    for l in range(4):
        assert np.allclose(sto.angular_tensor(l, l, 0)[0] * math.sqrt(4 * math.pi), np.eye(2 * l + 1), atol=1e-14)


def test_slater_f0_f2_of_2p_closed_form():
    # For 2p with exponent ζ: F⁰(2p,2p) = 93ζ/256 and F²(2p,2p) = 45ζ/256 (Slater, Quantum Theory of
    # Atomic Structure, vol. 1, 1960, appendix 20; value from memory, re-derived by hand).
    zeta = 1.7
    p = sto.STOShell(2, 1, zeta)
    assert sto.slater_rk(0, p, p, p, p) == pytest.approx(93 * zeta / 256, rel=1e-14)
    assert sto.slater_rk(2, p, p, p, p) == pytest.approx(45 * zeta / 256, rel=1e-14)


def test_rejects_unsupported_shells():
    with pytest.raises(InputError, match="not supported"):
        sto.make_basis([(2, 2, 1.0)])
    with pytest.raises(InputError, match="positive"):
        sto.make_basis([(1, 0, -1.0)])


SHELLS = [(1, 0, 5.7), (3, 0, 1.1), (2, 1, 1.57), (4, 1, 0.9), (3, 2, 1.3)]  # sorted by l as PySCF sorts


def _errors(b, count):
    mol = pyscf_atom("C", b.shells, count)
    one = [
        np.abs(mol.intor("int1e_ovlp") - sto.overlap_matrix(b)).max(),
        np.abs(mol.intor("int1e_kin") - sto.kinetic_matrix(b)).max(),
        np.abs(mol.intor("int1e_nuc") - sto.nuclear_matrix(b, 6)).max(),
    ]
    return one, np.abs(mol.intor("int2e") - sto.eri_tensor(b)).max()


def test_agrees_with_libcint_as_gaussian_expansion_grows():
    # libcint over least-squares Gaussian stand-ins (tests/gauss_fit.py); the errors must fall with N.
    # Measured (max |Δ| over one-electron matrices / over ERIs, hartree): N=6 0.93 / 0.067;
    # N=10 0.016 / 2.0e-3; N=14 7.4e-4 / 5.9e-5.
    b = sto.make_basis(SHELLS)
    previous = None
    for count in (6, 10, 14):
        one, two = _errors(b, count)
        total = (max(one), two)
        if previous is not None:
            assert total[0] < previous[0] and total[1] < previous[1]
        previous = total
    assert previous[0] < 1e-2 and previous[1] < 1e-3


def test_f_functions_agree_with_libcint():
    b = sto.make_basis([(1, 0, 2.0), (2, 1, 1.2), (4, 3, 2.5)])
    one, two = _errors(b, 14)
    assert max(one) < 1e-2 and two < 1e-3
