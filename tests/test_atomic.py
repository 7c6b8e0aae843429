"""Exact-STO atomic SCF and optimised exponents against textbook and published results; an
on-demand optimisation reports its progress on stderr and gives the same ζ as a quiet one."""

import json

import pytest

from stobuilder.checks.atom import atom_report
from stobuilder.checks.atom import atom_energy, optimize_zeta
from stobuilder.pipeline.options import load_zeta_file, parse_zeta_overrides
from stobuilder.core.errors import InputError
from stobuilder.expansion import MAX_GAUSSIANS
from support import run_cli


def test_helium_at_27_16():
    # E = −(27/16)² = −2.84765625 hartree: the variational He result (I. N. Levine, Quantum Chemistry,
    # 7th ed. 2014, sec. 8.2; Szabo & Ostlund, Modern Quantum Chemistry, 1989).
    r = atom_energy("He", zeta={"1s": 27 / 16})
    assert r.energy == pytest.approx(-(27 / 16) ** 2, abs=1e-10)
    assert r.virial_ratio == pytest.approx(2.0, abs=1e-12)
    assert r.state == "He 1s2 (1S, closed-shell RHF determinant)"


@pytest.mark.parametrize("symbol,z", [("H", 1), ("He", 2), ("Li", 3), ("C", 6), ("Ne", 10)])
def test_hydrogen_like_ions(symbol, z):
    # One electron, ζ = Z: E = −Z²/2 exactly (hydrogen atom; Levine, Quantum Chemistry, ch. 6).
    r = atom_energy(symbol, charge=z - 1, zeta={"1s": float(z)})
    assert r.energy == pytest.approx(-z * z / 2, abs=1e-12)


@pytest.mark.parametrize("conf,zeta,n", [("2p1", 0.5, 2), ("3d1", 1 / 3, 3), ("4f1", 0.25, 4)])
def test_hydrogen_excited_nodeless(conf, zeta, n):
    # Nodeless H orbitals (l = n − 1) are single STOs with ζ = 1/n: E = −1/(2n²) (Levine, ch. 6).
    r = atom_energy("H", configuration=conf, zeta={conf[:2]: zeta})
    assert r.energy == pytest.approx(-1 / (2 * n * n), abs=1e-12)


# Clementi & Raimondi, J. Chem. Phys. 38, 2686 (1963), optimised single-ζ exponents; values from memory.
# Energies: the same single-ζ SCF minima as quoted in the literature after them (e.g. Clementi & Roetti,
# At. Data Nucl. Data Tables 14, 177, 1974); values from memory.
CLEMENTI_RAIMONDI = {
    "He": ({"1s": 1.6875}, -2.8477),
    "Li": ({"1s": 2.6906, "2s": 0.6396}, -7.4185),
    "Be": ({"1s": 3.6848, "2s": 0.9560}, -14.5567),
    "B": ({"1s": 4.6795, "2s": 1.2881, "2p": 1.2107}, -24.4984),
    "C": ({"1s": 5.6727, "2s": 1.6083, "2p": 1.5679}, -37.6224),
    "N": ({"1s": 6.6651, "2s": 1.9237, "2p": 1.9170}, -54.2689),
    "O": ({"1s": 7.6579, "2s": 2.2458, "2p": 2.2266}, -74.5404),
    "F": ({"1s": 8.6501, "2s": 2.5638, "2p": 2.5500}, -98.9421),
    "Ne": ({"1s": 9.6421, "2s": 2.8792, "2p": 2.8792}, -127.8122),
}


@pytest.mark.parametrize("symbol", list(CLEMENTI_RAIMONDI))
def test_optimised_single_zeta_first_row(symbol):
    zeta, energy = CLEMENTI_RAIMONDI[symbol]
    r = optimize_zeta(symbol)
    assert r.converged
    assert set(r.zeta) == set(zeta)
    for label, value in zeta.items():
        assert r.zeta[label] == pytest.approx(value, abs=1e-3)
    assert r.energy == pytest.approx(energy, abs=5e-4)
    # virial theorem at a true optimum over all ζ (Löwdin 1959): −V/T = 2
    assert abs(r.virial_ratio - 2.0) < 1e-6


@pytest.mark.parametrize("symbol", ["Na", "Cl", "Sc"])
def test_virial_at_optimum_beyond_first_row(symbol):
    # −V/T = 2 at the optimum (virial theorem, Löwdin, J. Mol. Spectrosc. 3, 46, 1959)
    r = optimize_zeta(symbol)
    assert abs(r.virial_ratio - 2.0) < 1e-6


def test_open_shell_states_and_methods():
    c = atom_energy("C")
    assert c.state == "C [He] 2s2 2p2 (3P, high-spin ROHF determinant)"
    occupied_p = [o.label for o in c.orbital_energies if o.label.startswith("2p") and o.occupation > 0]
    assert sorted(occupied_p) == ["2px", "2py"]
    assert "4S" in atom_energy("N").state
    # UHF lies at or below ROHF for the same exponents (variational freedom; common practice, no source)
    assert atom_energy("N", method="uhf").energy <= atom_energy("N").energy + 1e-10
    assert "not a pure LS term" in atom_energy("Ti").state
    with pytest.raises(InputError, match="unpaired"):
        atom_energy("C", method="rhf")


def test_zeta_override_errors():
    with pytest.raises(InputError, match="3d"):
        atom_energy("C", zeta={"3d": 1.0})
    with pytest.raises(InputError, match="positive"):
        atom_energy("C", zeta={"2p": -1.0})
    with pytest.raises(InputError, match="not a number"):
        atom_energy("C", zeta={"2p": "abc"})


def test_parse_zeta_overrides():
    assert parse_zeta_overrides(["1s=1.6875"], per_element=False) == {"1s": 1.6875}
    assert parse_zeta_overrides(["Fe:3d=2.1", "fe:4s=1.2"], per_element=True) == {"Fe": {"3d": 2.1, "4s": 1.2}}
    for bad in ("1s", "1x=2", "1s=abc", "1s=0", "2d=1.0"):
        with pytest.raises(InputError, match="^zeta '"):  # a Python call names the Python argument, not --zeta
            parse_zeta_overrides([bad], per_element=False)
    with pytest.raises(InputError, match="ELEMENT:LABEL"):
        parse_zeta_overrides(["3d=2.1"], per_element=True)
    with pytest.raises(InputError, match="unknown element"):
        parse_zeta_overrides(["Xx:3d=2.1"], per_element=True)


def test_load_zeta_file(tmp_path):
    good = tmp_path / "z.toml"
    good.write_text('[Fe]\n3d = 2.1\n4s = 1.25\n\n[o]\n"2p" = 2.2\n')
    assert load_zeta_file(good) == {"Fe": {"3d": 2.1, "4s": 1.25}, "O": {"2p": 2.2}}
    bad = tmp_path / "bad.toml"
    bad.write_text("[Fe]\n3d = -1\n")
    with pytest.raises(InputError, match="bad.toml"):
        load_zeta_file(bad)
    broken = tmp_path / "broken.toml"
    broken.write_text("[Fe\n")
    with pytest.raises(InputError, match="not valid TOML"):
        load_zeta_file(broken)
    with pytest.raises(InputError, match="cannot read"):
        load_zeta_file(tmp_path / "missing.toml")


def test_report_gaussian_error_shrinks():
    # Exact STO vs its STO-nG imitation in PySCF (C, Slater exponents); the error must fall with N.
    # Measured E(STO-nG) − E(exact), hartree, with the family fits build writes: N=1 5.67, 2 1.52, 3 0.391,
    # 4 0.110, 5 0.0357, 6 0.0126 (one fit per subshell gave 5.66, 1.49, 0.393, 0.118, 0.0377, 0.0132),
    # and (one fit per subshell, slow, fitted on demand) 8 1.9e-3, 10 7.4e-4, 12 9.9e-5.
    rep = atom_report("C", gaussians=[1, 2, 3, 4, 5, 6])
    assert set(rep) == {"element", "configuration", "state", "method", "zeta", "energy_exact_hartree", "converged",
                        "virial_ratio", "gaussian", "orbital_energies", "stos_per_subshell", "stos", "expansions",
                        "hartree_fock_limit", "notes"}
    # C's single-ζ determinant is a pure 3P term: its distance to the HF limit (Froese Fischer 1977)
    assert rep["hartree_fock_limit"]["above_hartree"] == pytest.approx(rep["energy_exact_hartree"] + 37.6886190, abs=1e-12)
    diffs = [g["energy_hartree"] - rep["energy_exact_hartree"] for g in rep["gaussian"]]
    assert all(d > 0 for d in diffs)  # the Gaussian imitation is variationally worse
    assert all(b < a for a, b in zip(diffs, diffs[1:]))


L2_SHORTFALL = pytest.mark.xfail(
    strict=True,
    reason="measured E(STO-12G, least squares, the family fits build writes) − E(exact) at the optimised ζ: "
    "Li 1.6e-5, C 6.7e-5, N 9.1e-5, O 1.2e-4, F 1.5e-4, Ne 1.8e-4 hartree: the least-squares 1s fit misses the cusp and its energy error grows "
    "about as Z², so O, F and Ne need more than 12 Gaussians in that norm; the H1 fits reach the target",
)
FIRST_ROW = ["Li", "B", "C", "N", "O", "F", "Ne"]


@pytest.mark.slow
@pytest.mark.parametrize("symbol", [s if s in ("Li", "B", "C", "N") else pytest.param(s, marks=L2_SHORTFALL) for s in FIRST_ROW])
def test_report_largest_expansion_first_row(symbol):
    # The target: below 1e-4 hartree per first-row atom at the largest N the expansion
    # module supports (MAX_GAUSSIANS, 12 now), least-squares expansions.
    rep = atom_report(symbol, gaussians=[MAX_GAUSSIANS], optimize=True)
    assert 0 < rep["gaussian"][0]["energy_hartree"] - rep["energy_exact_hartree"] < 1e-4


@pytest.mark.slow
@pytest.mark.parametrize("symbol", FIRST_ROW)
def test_report_largest_h1_expansion_first_row(symbol):
    # The same target with the Sobolev-norm expansions, which control the kinetic energy: met for
    # every first-row atom (measured |ΔE| ≤ 3e-5 hartree at N = 12). The H1 contraction is not the
    # STO itself, so its SCF energy may lie slightly below the exact-STO one (measured for Li–Ne).
    rep = atom_report(symbol, gaussians=[MAX_GAUSSIANS], optimize=True, norm="h1")
    assert abs(rep["gaussian"][0]["energy_hartree"] - rep["energy_exact_hartree"]) < 1e-4


def test_on_demand_optimisation_reports_progress_and_gives_the_same_result(tmp_path, capsys, monkeypatch):
    from stobuilder.checks.atom import optimize_zeta
    from stobuilder.model.elements import ground_state
    from stobuilder.screening import optimized

    monkeypatch.setenv("STOBUILDER_CACHE_DIR", str(tmp_path / "cache" / "fits"))
    monkeypatch.setattr(optimized, "PROGRESS_SECONDS", 0.0)
    optimized._optimise.cache_clear()
    code, out, err = run_cli(["zeta", "Mg", "--charge", "1", "--rule", "optimized", "--json"], capsys)
    assert code == 0, err
    assert "stobuilder: optimising ζ of Mg [Ne] 3s1" in err
    assert "BFGS step 1" in err and "ζ optimised in" in err
    shown = {s["label"]: s["zeta"] for s in json.loads(out)["elements"][0]["shells"] if s["label"] != "3p"}
    quiet = optimize_zeta("Mg", configuration=ground_state("Mg", 1)).zeta  # no progress callback
    assert shown == dict(quiet)  # bit for bit: progress lines compute nothing
    optimized._optimise.cache_clear()
    code, _, err = run_cli(["zeta", "Mg", "--charge", "1", "--rule", "optimized"], capsys)  # now from the disk cache
    assert code == 0 and "optimising" not in err
    optimized._optimise.cache_clear()

