"""Atoms in several STOs per subshell (stobuilder.exact.manyzeta): variational bounds, the virial
theorem, the single-ζ limit, and the published double-ζ energies."""

from __future__ import annotations

import pytest

from stobuilder.exact.manyzeta import MIN_RATIO, optimize_stos, starting_stos
from stobuilder.exact.solver import RadialSTO, solve_sto_scf
from stobuilder.model.elements import ground_state
from stobuilder.screening.optimized import occupied_zeta

# Numerical Hartree–Fock limits (Froese Fischer, The Hartree–Fock Method for Atoms, Wiley 1977;
# the same to about 1e-6 in Bunge, Barrientos & Bunge, At. Data Nucl. Data Tables 53, 113, 1993);
# values from memory, in hartree.
HF_LIMIT = {"He": -2.8616800, "Be": -14.5730232, "O": -74.8093984}

# Double-ζ energies of Clementi & Roetti, At. Data Nucl. Data Tables 14, 177 (1974); values from
# memory, in hartree (He and Be as also quoted in the issue that asked for this).
CLEMENTI_ROETTI_DZ = {"He": -2.86167, "Be": -14.57237, "O": -74.80432}


def _optimum(symbol: str, k: int, n_rule: str = "same"):
    conf = ground_state(symbol)
    method = "rhf" if conf.unpaired == 0 else "rohf"
    return optimize_stos(conf, starting_stos(conf, occupied_zeta(conf), k, n_rule), method)


@pytest.mark.parametrize("symbol", ["He", "Be", "O"])
def test_double_zeta_reaches_the_published_values_and_the_virial_theorem(symbol):
    r = _optimum(symbol, 2)
    # at or below the published double-ζ energy (rounded to 1e-5 there), never below the HF limit
    assert r.energy <= CLEMENTI_ROETTI_DZ[symbol] + 5e-6
    assert r.energy > HF_LIMIT[symbol]
    # the virial theorem at the optimum (Löwdin 1959): −V/T = 2
    assert r.virial_ratio == pytest.approx(2.0, abs=1e-8)
    assert len(r.stos) == 2 * len(ground_state(symbol).subshells)


def test_energy_falls_with_k_and_stays_above_the_limit():
    # variational principle: each basis contains the previous one's span in the limit of its ζ
    energies = [_optimum("He", k).energy for k in (1, 2, 3, 4)]
    # one 1s STO: E(ζ) = ζ² − (27/8)ζ, minimum −(27/16)² at ζ = 27/16 (textbook variational result,
    # I. N. Levine, Quantum Chemistry, ch. 9)
    assert energies[0] == pytest.approx(-2.84765625, abs=1e-10)
    assert all(a > b for a, b in zip(energies, energies[1:]))
    assert energies[-1] > HF_LIMIT["He"] - 1e-9  # the limit is given to 1e-7; the true value is −2.86167999561
    assert energies[-1] - HF_LIMIT["He"] < 1e-7


@pytest.mark.parametrize("symbol,method", [("Be", "rhf"), ("O", "rohf")])
def test_k_equal_zeta_reproduce_the_single_zeta_energy(symbol, method):
    # two STOs with one ζ span one function: the canonical orthogonalisation keeps one of them and
    # the energy is today's single-ζ energy (exact, common practice, no source)
    conf = ground_state(symbol)
    zeta = occupied_zeta(conf)
    single = tuple(RadialSTO(s.label, s.n, s.l, zeta[s.label]) for s in conf.subshells)
    doubled = single + single
    e1 = solve_sto_scf(conf, single, method).result.energy
    e2 = solve_sto_scf(conf, doubled, method).result.energy
    assert e2 == pytest.approx(e1, abs=1e-9)


def test_open_shell_radial_functions_are_shared_across_m():
    # O 2p⁴ (px² py pz) with two p STOs: the radial function of 2p is one for all m, as in the
    # restricted HF limit; the per-m determinant would let px relax apart and lie lower.
    r = _optimum("O", 2)
    p_orbitals = [o for o in r.orbital_energies if o.label.startswith("2p")]
    assert len({round(o.energy, 9) for o in p_orbitals if o.occupation == 2}) == 1
    # the expansion is reported once per occupied subshell
    assert [name for name, _ in r.expansions] == ["1s", "2s", "2p"]


def test_collapsing_functions_are_held_apart_and_reported():
    # start two 1s STOs of He almost on top of each other: the search keeps their ratio ≥ MIN_RATIO,
    # never stops on the nearly singular overlap, and ends at the double-ζ optimum (ratio ≈ 2)
    conf = ground_state("He")
    start = (RadialSTO("1s", 1, 0, 1.6875), RadialSTO("1s", 1, 0, 1.6875 * 1.0000001))
    r = optimize_stos(conf, start, "rhf")
    z = sorted(f.zeta for f in r.stos)
    assert z[1] / z[0] >= MIN_RATIO * (1 - 1e-12)
    assert r.energy <= CLEMENTI_ROETTI_DZ["He"] + 5e-6
    # a bound held tight is said in the notes
    tight = optimize_stos(conf, start, "rhf", min_ratio=3.0)
    assert any("minimum ζ ratio 3" in note for note in tight.notes)
    assert tight.energy > r.energy


def test_atom_command_with_two_stos_per_subshell(tmp_path):
    # the command a user runs, strict JSON: Be double-ζ at the Clementi–Roetti value (from memory),
    # the distance to the HF limit (Froese Fischer 1977, from memory) and the expansions printed
    import json
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", "stobuilder", "atom", "Be", "--stos", "2", "--json"],
                         capture_output=True, text=True, check=True, cwd=tmp_path)
    doc = json.loads(out.stdout, parse_constant=lambda c: (_ for _ in ()).throw(ValueError(c)))
    assert doc["stos_per_subshell"] == 2 and len(doc["stos"]) == 4
    assert doc["energy_exact_hartree"] == pytest.approx(CLEMENTI_ROETTI_DZ["Be"], abs=1e-5)
    limit = doc["hartree_fock_limit"]
    assert limit["energy_hartree"] == HF_LIMIT["Be"]
    assert limit["above_hartree"] == pytest.approx(doc["energy_exact_hartree"] - HF_LIMIT["Be"], abs=1e-12)
    assert 0 < limit["above_hartree"] < 1e-3
    assert set(doc["expansions"]) == {"1s", "2s"} and all(len(c) == 4 for c in doc["expansions"].values())
    # a rule that gives one ζ per subshell cannot make two: one line, status 2, no traceback
    bad = subprocess.run([sys.executable, "-m", "stobuilder", "atom", "Be", "--stos", "2", "--rule", "clementi"],
                         capture_output=True, text=True, cwd=tmp_path)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr and len(bad.stderr.strip().splitlines()) == 1
    assert not list(tmp_path.iterdir())  # nothing written
