"""The `molecular` rule at N = 3 against PySCF's stored STO-3G, free atom by free atom.

Reference: PySCF's sto-3g.dat, a transcription of Hehre, Stewart & Pople, J. Chem. Phys. 51, 2657
(1969); Hehre, Ditchfield, Stewart & Pople, J. Chem. Phys. 52, 2769 (1970) [HDSP70]; Pietro et al.,
J. Am. Chem. Soc. 102, 2225 (1980); Pietro & Hehre, J. Comput. Chem. 4, 241 (1983).

Our basis has the same ζ and our own ζ = 1 expansions, fitted to the published objective (each
contraction normalised; stobuilder.expansion.fit). The free-atom energies agree to 1e-6 hartree
for every element of the table (measured: |ΔE| ≤ 6.4e-7, Mg; ≤ 1e-7 for all others up to Ne)
except Zr–Cd, where the stored side carries named transcription defects
(tests/test_expansion.py):
- Zr–Cd, the third 4s coefficient of the [4s,4p,4d] block is 1.1557874500 for 1.1155787450
  (test_sto3g_4s_coefficient_transposed; measured ΔE −3.2e-1 (Zr) … +1.9e-3 hartree);
- Zr: the exponents of its 5SP and valence D blocks are swapped
  (test_sto3g_zirconium_swapped_exponents).
- Y: its blocks mix fits (test_sto3g_yttrium_mixed_fits); the molecular rule leaves Y out.
When our fits minimised Σ(1 − q) (the unnormalised errors) every element from Li on
differed by up to 5e-6 hartree, and the stored 2sp, [3s,3p,3d] and [4s,4p,4d] fits were wrongly
taken for unconverged ones. The test proves that the named blocks, and nothing else, carry the
Zr–Cd differences: with exactly those stored blocks put in place of ours the energies agree to
1e-6 hartree, and with the 4s digit put right in the stored block Nb–Cd agree with ours.
"""

import pytest
from pyscf.gto.basis import load

import stobuilder
from stobuilder.checks.structure import check_free_atom
from stobuilder.scf.mole import make_mole
from stobuilder.scf.run import run_scf
from stobuilder.model.methods import pick_method
from stobuilder.scf.free_atom import irrep_configurer, irrep_occupations
from stobuilder.model.elements import atomic_number, element_symbol
from stobuilder.core.errors import InputError
from stobuilder.screening.molecular import table

ELEMENTS = list(table()["elements"])


def defect_families(z: int) -> set[int]:
    """Principal quantum numbers whose stored STO-3G blocks carry a named defect (docstring)."""
    families = set()
    if 40 <= z <= 48:
        families.add(4)
    if z == 40:
        families.add(5)
    return families


def test_table_covers_every_element_pyscf_stores_but_y():
    stored = []
    for z in range(1, 87):
        try:
            if load("sto-3g", element_symbol(z)):
                stored.append(element_symbol(z))
        except Exception:
            pass
    assert [s for s in stored if s != "Y"] == ELEMENTS
    with pytest.raises(InputError, match="inconsistent"):
        stobuilder.build_basis(["Y"], rule="molecular")


def _energy(symbol, shells, conf):
    spin = conf.unpaired
    method = pick_method("auto", spin)
    mol = make_mole([(symbol, (0, 0, 0))], {symbol: shells}, conf.charge, spin, symmetry=True)
    result = run_scf(mol, method, configure=irrep_configurer(irrep_occupations(conf), method))
    assert result.converged
    return result.energy_hartree


@pytest.mark.parametrize("symbol", ELEMENTS)
def test_free_atom_energy_against_stored_sto3g(symbol):
    basis = stobuilder.build_basis([symbol], rule="molecular", gaussians=3)
    r = check_free_atom(basis, symbol)
    assert r.reference_basis == "sto-3g" and r.converged and r.reference_converged
    families = defect_families(atomic_number(symbol))
    if not families:
        assert abs(r.delta_hartree) < 1e-6, symbol
        return
    # Put the stored blocks of the documented families in place of ours; the rest stays ours.
    element = basis[symbol]
    conf = element.configuration
    ours = element.to_pyscf()
    labels = [s.label for s in sorted(element.shells, key=lambda s: s.l)]
    stored = sorted(load("sto-3g", symbol), key=lambda s: s[0])
    assert [sh[0] for sh in stored] == [sh[0] for sh in ours]  # same shells, same order
    hybrid = [stored[i] if int(labels[i][0]) in families else ours[i] for i in range(len(ours))]
    e_hybrid = _energy(symbol, hybrid, conf)
    assert e_hybrid == pytest.approx(r.reference_energy_hartree, abs=1e-6), symbol
    if families == {4}:  # Nb–Cd: the stored 4sp block with its 4s digit put right is ours
        fixed = []
        for shell in stored:
            rows = [list(p) for p in shell[1:]]
            if shell[0] == 0 and any(p[1] == 1.15578745 for p in rows):
                rows = [[a, 1.115578745 if c == 1.15578745 else c] for a, c in rows]
            fixed.append([shell[0], *rows])
        assert _energy(symbol, fixed, conf) == pytest.approx(r.energy_hartree, abs=1e-6), symbol


# ---------------------------------------------------------------- molecules (ase.collections.g2)


def _molecule_delta(name, gaussians):
    """E(ours, --rule molecular) − E(PySCF's stored sto-nG) of one g2 molecule, RHF (UHF when the
    molecule has unpaired electrons), hartree."""
    from ase.collections import g2
    from pyscf import gto, scf

    atoms = g2[name]
    symbols = atoms.get_chemical_symbols()
    spin = int(round(sum(atoms.get_initial_magnetic_moments())))
    basis = stobuilder.build_basis(sorted(set(symbols)), rule="molecular", gaussians=gaussians)
    geometry = [(s, tuple(p)) for s, p in zip(symbols, atoms.positions)]
    energies = []
    for b in ({s: basis[s].to_pyscf() for s in set(symbols)}, f"sto-{gaussians}g"):
        mf = (scf.RHF if spin == 0 else scf.UHF)(gto.M(atom=geometry, basis=b, spin=spin, unit="Angstrom", verbose=0))
        mf.conv_tol = 1e-11
        energies.append(mf.kernel())
        assert mf.converged, name
    return energies[0] - energies[1]


# Molecules with 2sp and 3sp shells, the ones most off when our fits minimised Σ(1 − q) (measured then: H2O
# +1.95e-6, O2 +3.8e-6, SH2 +5.4e-6, P2/Si2/S2 +1.1e-5, SiCl4 +2.7e-5 hartree). All 162 of g2,
# measured once: median |ΔE| 1.5e-8, max 2.9e-7 hartree (C2F4).
STO3G_SAMPLE = ["H2O", "O2", "SH2", "P2", "Si2", "S2", "SiCl4", "CO", "LiF"]


@pytest.mark.parametrize("name", STO3G_SAMPLE)
def test_molecule_energy_against_stored_sto3g(name):
    assert abs(_molecule_delta(name, 3)) < 1e-6, name


# With N = 6 against PySCF's sto-6g: a sample with every element H–Ar that g2 holds (He, Ne, Mg,
# Ar as free atoms below). All 162 of g2, measured once: median |ΔE| 2.3e-10, the
# largest BF3 1.2e-6 and BCl3 1.1e-6 (boron, whose stored exponents scatter:
# tests/test_expansion.py::test_sto6g_matches_stewart_closely), every other within 2e-9.
STO6G_SAMPLE = ["LiF", "BeH", "CO", "N2", "NaCl", "AlF3", "SiH4", "PH3", "SH2"]


@pytest.mark.parametrize("name", STO6G_SAMPLE)
def test_molecule_energy_against_stored_sto6g(name):
    assert abs(_molecule_delta(name, 6)) < 1e-6, name


@pytest.mark.parametrize("symbol", ["He", "B", "Ne", "Mg", "Ar"])
def test_free_atom_energy_against_stored_sto6g(symbol):
    """The elements H–Ar the sample above lacks, as free atoms (measured: |ΔE| ≤ 7e-10 hartree).
    Mg: PySCF's sto-6g.dat holds a copy of Na's blocks (tests/test_expansion.py::
    test_sto6g_magnesium_is_a_copy_of_sodium); with Na's ζ (10.61, 3.48, 1.75 [HDSP70]) our Mg
    basis gives the stored energy, with Mg's own it lies 1.6 hartree below."""
    zeta = {"Mg": {"1s": 10.61, "2s": 3.48, "2p": 3.48, "3s": 1.75, "3p": 1.75}} if symbol == "Mg" else None
    r = check_free_atom(stobuilder.build_basis([symbol], rule="molecular", gaussians=6, zeta=zeta), symbol)
    assert r.reference_basis == "sto-6g" and r.converged and r.reference_converged
    assert abs(r.delta_hartree) < 1e-6, symbol
    if symbol == "Mg":
        own = check_free_atom(stobuilder.build_basis([symbol], rule="molecular", gaussians=6), symbol)
        assert own.delta_hartree < -1.0
