"""SCF checks against textbook results and exact one-function energies."""

import pytest
from ase import Atoms

import stobuilder
from stobuilder.checks.structure import check_free_atom, check_structure
from stobuilder.scf.mole import make_mole
from stobuilder.scf.run import run_scf
from stobuilder.model.structures import Structure

BOHR = 0.52917721092  # ångström per bohr (CODATA 2010, as PySCF uses)


def test_h2_sto3g_szabo_ostlund():
    # H2 at R = 1.4 bohr in STO-3G with ζ = 1.24: E = −1.1167 hartree
    # (Szabo & Ostlund, Modern Quantum Chemistry, 1989, §3.5.2 worked example).
    basis = stobuilder.build_basis(["H"], gaussians=3, zeta={"H": {"1s": 1.24}})
    h2 = Structure("h2", 0, ("H", "H"), ((0, 0, 0), (0, 0, 1.4 * BOHR)), 0, 0, False)
    check = check_structure(h2, basis)
    (r,) = check.results
    assert check.target == "structure" and r.converged and r.method == "RHF"
    assert r.energy_hartree == pytest.approx(-1.1167, abs=5e-5)


def test_he_single_sto_energy_converges_to_exact():
    # One 1s STO with ζ = 27/16 on He: E = ζ² − 27ζ/8 = −(27/16)² = −2.84765625 hartree
    # (the textbook variational result, e.g. Levine, Quantum Chemistry; Szabo & Ostlund 1989).
    exact = -((27 / 16) ** 2)
    errors = []
    for n in range(1, 7):
        basis = stobuilder.build_basis(["He"], gaussians=n, zeta={"He": {"1s": 27 / 16}})
        r = check_free_atom(basis, "He")
        assert r.converged
        errors.append(r.energy_hartree - exact)
    assert all(e > 0 for e in errors)  # variational: a Gaussian imitation lies above
    assert all(a > b for a, b in zip(errors, errors[1:]))  # and approaches with N
    # The foundation issue asked for 1e-4 hartree at N = 6. That is not what a least-squares
    # STO-6G gives: PySCF's stored STO-6G of He (Hehre, Stewart & Pople 1969, ζ = 1.69), with its
    # exponents rescaled to ζ = 27/16, misses the exact energy by 1.36e-3 hartree too. Our N = 6
    # energy must equal that independent one; 1e-4 needs more Gaussians or another norm.
    from pyscf.gto.basis import load

    stored = load("sto-6g", "He")
    scale = (27 / 16) ** 2 / 1.69**2
    rescaled = [[shell[0], *([a * scale, c] for a, c in shell[1:])] for shell in stored]
    ref = run_scf(make_mole([("He", (0, 0, 0))], {"He": rescaled}, 0, 0), "RHF").energy_hartree
    assert errors[-1] == pytest.approx(ref - exact, abs=1e-7)
    assert 1.3e-3 < errors[-1] < 1.4e-3  # value measured here and by the stored STO-6G alike


def test_hydrogen_atom_approaches_minus_one_half():
    # H atom with the 1s STO at ζ = 1: exactly −1/2 hartree (exact one-electron result). The
    # STO-NG energies rise above it and fall towards it with N; at N = 3 and 6 they equal those of
    # PySCF's stored STO-3G/STO-6G of H (Hehre, Stewart & Pople 1969, ζ = 1.24) rescaled to ζ = 1.
    from pyscf.gto.basis import load

    energies = []
    for n in range(1, 7):
        r = check_free_atom(stobuilder.build_basis(["H"], gaussians=n), "H")
        assert r.method == "ROHF" and r.converged
        energies.append(r.energy_hartree)
    assert all(-0.5 < e for e in energies)
    assert all(a > b for a, b in zip(energies, energies[1:]))
    for n, name in ((3, "sto-3g"), (6, "sto-6g")):
        rescaled = [[sh[0], *([a / 1.24**2, c] for a, c in sh[1:])] for sh in load(name, "H")]
        ref = run_scf(make_mole([("H", (0, 0, 0))], {"H": rescaled}, 0, 1), "ROHF").energy_hartree
        assert energies[n - 1] == pytest.approx(ref, abs=1e-7), name


def test_periodic_and_large_structures_use_free_atoms():
    basis = stobuilder.build_basis(["Zn", "S"])
    zns = Structure("zns", 0, ("Zn", "S"), ((0, 0, 0), (1.35, 1.35, 1.35)), 0, 0, True)
    check = check_structure(zns, basis)
    assert check.target == "free atoms" and "periodic" in check.reason
    assert [r.label.split()[0] for r in check.results] == ["S", "Zn"]
    big = Structure("s2", 0, ("S", "S"), ((0, 0, 0), (0, 0, 1.9)), 0, 0, False)
    check = check_structure(big, basis, max_basis_functions=10)
    assert check.target == "free atoms" and "exceed" in check.reason


def test_not_converged_is_reported_as_such():
    basis = stobuilder.build_basis(["O"])
    mol = make_mole([("O", (0, 0, 0)), ("O", (0, 0, 1.21))], {"O": basis["O"].to_pyscf()}, 0, 2)
    r = run_scf(mol, "ROHF", max_cycle=1)
    assert r.converged is False
