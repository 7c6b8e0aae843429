"""The `molecular` rule at N = 3 against PySCF's stored STO-3G, free atom by free atom.

Reference: PySCF's sto-3g.dat, a transcription of Hehre, Stewart & Pople, J. Chem. Phys. 51, 2657
(1969); Hehre, Ditchfield, Stewart & Pople, J. Chem. Phys. 52, 2769 (1970); Pietro et al.,
J. Am. Chem. Soc. 102, 2225 (1980); Pietro & Hehre, J. Comput. Chem. 4, 241 (1983).

Our basis has the same ζ and our own refitted ζ = 1 expansions. The free-atom energies agree to
1e-6 hartree for H–C. From N on they differ by more (measured: N 1.1e-6, Ne 4.6e-6, Ar 5.0e-6,
Kr −3.2e-5, Ag −1.0e-3, I −1.3e-4 hartree), and refitting shows the stored side is off:
- every element with a 2sp shell: the published 2sp expansion is not at the least-squares optimum
  (first exponent 8.2e-6 relative from it, larger ε; tests/test_expansion.py::
  test_sto3g_2sp_published_fit_not_converged). Its effect on the energy grows with Z.
- Sc onwards, the published [3s,3p,3d] expansion: larger ε than ours
  (test_our_error_never_larger_than_published).
- Zr–I, the [4s,4p,4d] expansion: not converged (test_sto3g_4s4p4d_published_fit_not_converged),
  and for Zr–Cd the third 4s coefficient is transcribed as 1.1557874500 for 1.1155787450
  (test_sto3g_4s_coefficient_transposed).
- Zr: the exponents of its 5SP and valence D blocks are swapped
  (test_sto3g_zirconium_swapped_exponents).
- Y: its blocks mix fits (test_sto3g_yttrium_mixed_fits); the molecular rule leaves Y out.
The test proves that these families, and nothing else, carry the difference: with exactly the
stored blocks of the named families put in place of ours, the energies agree to 1e-6 hartree.
"""

import pytest
from pyscf.gto.basis import load

import stobuilder
from stobuilder.checks import check_free_atom, make_mole, run_scf
from stobuilder.checks import _atom_solver, irrep_occupations, pick_method
from stobuilder.elements import atomic_number, element_symbol, parse_configuration
from stobuilder.errors import InputError
from stobuilder.screening.molecular import table

ELEMENTS = list(table()["elements"])


def off_optimum_families(z: int) -> set[int]:
    """Principal quantum numbers whose stored STO-3G blocks refitting shows to be off (docstring)."""
    families = set()
    if z >= 3:
        families.add(2)
    if z >= 21:
        families.add(3)
    if 40 <= z <= 53:
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
    result = run_scf(mol, method, configure=_atom_solver(irrep_occupations(conf), method))
    assert result.converged
    return result.energy_hartree


@pytest.mark.parametrize("symbol", ELEMENTS)
def test_free_atom_energy_against_stored_sto3g(symbol):
    basis = stobuilder.build_basis([symbol], rule="molecular", gaussians=3)
    r = check_free_atom(basis, symbol)
    assert r.reference_basis == "sto-3g" and r.converged and r.reference_converged
    families = off_optimum_families(atomic_number(symbol))
    if atomic_number(symbol) <= 6:
        assert abs(r.delta_hartree) < 1e-6, symbol
    # Put the stored blocks of the documented families in place of ours; the rest stays ours.
    element = basis[symbol]
    conf = parse_configuration(element.configuration, symbol)
    ours = element.to_pyscf()
    labels = [s.label for s in sorted(element.shells, key=lambda s: s.l)]
    stored = sorted(load("sto-3g", symbol), key=lambda s: s[0])
    assert [sh[0] for sh in stored] == [sh[0] for sh in ours]  # same shells, same order
    hybrid = [stored[i] if int(labels[i][0]) in families else ours[i] for i in range(len(ours))]
    e_hybrid = _energy(symbol, hybrid, conf)
    assert e_hybrid == pytest.approx(r.reference_energy_hartree, abs=1e-6), symbol
