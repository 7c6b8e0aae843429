"""stobuilder tune: ζ that minimise SCF energies, checked against published exponents, against
independent scalar minimisations on PySCF's own stored STO-3G, and against the scaling identity
of the molecular virial theorem (for the central-difference gradients); and tune at its edges:
weights that differ by a common factor, a ζ held by a bound of the search, file names that try to
become TOML, output locations checked before the first SCF, a structure given twice, an
interrupted run, and hostile names, weights, starts and targets under fuzzing. H2 with two
Gaussians per STO keeps the edge cases fast."""

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
import tomllib
from unittest import mock

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from pyscf import gto, scf
from pyscf.gto.basis import load
from pyscf.data.nist import BOHR
from scipy.optimize import minimize_scalar

from stobuilder.checks import structure as checks
from stobuilder.builder.construct import build_basis
from stobuilder.pipeline.options import BuildOptions, load_zeta_file
from stobuilder.core.errors import InputError
from stobuilder.tune import default_variables, energy_gradient, parse_vary, tune
from support import assert_one_line_error, child_env, run_cli, run_in_threads
from stobuilder.scf import run as scf_run
from stobuilder.scf import mole as scf_mole

# Standard molecular valence ζ(2s) = ζ(2p) of the published STO-3G, bohr⁻¹
# (W. J. Hehre, R. F. Stewart, J. A. Pople, J. Chem. Phys. 51, 2657 (1969), Table I).
PUBLISHED = {"C": 1.72, "N": 1.95, "O": 2.25, "F": 2.55}
MOLECULES = {"C": "CH4", "N": "NH3", "O": "H2O", "F": "HF"}
N = ["--gaussians", "2", "--threads", "1"]
# GRADIENT_TOL = 1e-5 hartree at a curvature d²E/d(ln ζ)² ≳ 0.5 hartree (H2, the estimate in
# test below) puts each search within ~2e-5 of the optimum in ln ζ: two searches agree to 1e-4
# (estimate, common practice, no source)
SAME = 1e-4


@pytest.fixture(autouse=True)
def _one_thread():
    """PySCF on one OpenMP thread: these SCFs are tiny and a second thread only contends for the
    cores (the results do not depend on it)."""
    from pyscf import lib

    with lib.with_omp_threads(1):
        yield


def _write_molecule(folder, name):
    """The molecule at ASE's G2 geometry (ase.collections.g2: L. A. Curtiss et al., J. Chem.
    Phys. 106, 1063 (1997)) as an xyz file."""
    import ase.build
    import ase.io

    path = os.path.join(folder, f"{name.lower()}.xyz")
    ase.io.write(path, ase.build.molecule(name))
    return path


def _h2(folder, name="h2.xyz", r_bohr=1.4):
    path = os.path.join(folder, name)
    with open(path, "w") as fh:
        fh.write(f"2\n\nH 0 0 0\nH 0 0 {r_bohr * BOHR:.12f}\n")
    return path


def _tune(capsys, *argv, status=0):
    code, out, err = run_cli(["tune", *argv, *N, "--json"], capsys)
    assert code == status, err
    return json.loads(out, parse_constant=lambda c: pytest.fail(f"non-finite JSON number {c}")), err


def _pyscf_energy(atoms, basis):
    """RHF energy (hartree) with PySCF alone: atoms [(symbol, (x, y, z) Å)], a PySCF basis."""
    mol = gto.M(atom=atoms, basis=basis, unit="Angstrom", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-11
    energy = mf.kernel()
    assert mf.converged
    return energy


def _stored_scaled(symbol, zeta, zeta_stored, valence_only):
    """PySCF's stored sto-3g shells of ``symbol`` with the exponents of the valence shells
    (every shell but the first s, or every shell) multiplied by (ζ/ζ_stored)²: primitive
    exponents of an STO-nG shell scale as ζ² (Hehre, Stewart & Pople 1969). Independent of
    stobuilder's own fits."""
    out, first_s = [], True
    for shell in load("sto-3g", symbol):
        if valence_only and shell[0] == 0 and first_s:
            first_s = False
            out.append(shell)
            continue
        out.append([shell[0]] + [[p[0] * (zeta / zeta_stored) ** 2, *p[1:]] for p in shell[1:]])
    return out


def _atoms(path):
    import ase.io

    a = ase.io.read(path)
    return [[s, tuple(p)] for s, p in zip(a.get_chemical_symbols(), a.positions)]


def _tune_json(capsys, *argv):
    code, out, err = run_cli(["tune", *argv, "--threads", "1", "--json"], capsys)
    assert code == 0, err
    assert "iteration 1" in err  # progress on stderr
    return json.loads(out, parse_constant=lambda c: pytest.fail(f"non-finite JSON number {c}"))


# ---------------------------------------------------------------------------- H2


def test_h2_zeta_is_the_minimal_basis_optimum_and_the_file_is_deterministic(tmp_path, capsys):
    h2 = _h2(tmp_path)
    ch4 = _write_molecule(tmp_path, "CH4")
    out = str(tmp_path / "h.toml")
    doc = _tune_json(capsys, h2, "--rule", "molecular", "--gaussians", "3", "--vary", "H:1s", "--out", out,
                     "--validate", ch4)
    zeta = doc["zeta"]["H"]["1s"]
    # an independent scalar minimisation: PySCF's stored sto-3g H (ζ = 1.24) rescaled by (ζ/1.24)²
    atoms = _atoms(h2)
    ref = minimize_scalar(
        lambda z: _pyscf_energy(atoms, {"H": _stored_scaled("H", z, 1.24, False)}),
        bounds=(1.0, 1.5), method="bounded", options={"xatol": 1e-6},
    )
    assert abs(zeta - ref.x) < 2e-3
    # the single-ζ minimal-basis optimum of H2 at R = 1.4 bohr lies near 1.19, below the averaged
    # 1.24 of the published set (value from memory; Hehre, Stewart & Pople 1969 for the 1.24)
    assert abs(zeta - 1.19) < 0.01
    assert doc["start_zeta"] == {"H": {"1s": 1.24}}
    assert doc["converged"] is True and doc["out"] == out
    (row,) = doc["energies"]
    assert row["structure"] == h2 and row["final_hartree"] < row["start_hartree"]
    assert row["final_hartree"] == pytest.approx(ref.fun, abs=1e-6)
    # held out: CH4 with the molecular rule is PySCF's stored STO-3G up to our refit of the
    # expansions (a few 1e-6 hartree, examples/README.md); the tuned H changes it
    (held,) = doc["validation"]
    assert held["start_hartree"] == pytest.approx(_pyscf_energy(_atoms(ch4), "sto-3g"), abs=2e-5)
    assert held["final_hartree"] != held["start_hartree"]
    # the file: what build --zeta-file reads, with its comment block; byte-identical on a rerun
    assert load_zeta_file(out) == doc["zeta"]
    text = open(out, encoding="utf-8").read()
    assert "# rule molecular, N = 3 Gaussians per STO, norm l2" in text and h2 in text and "converged: yes" in text
    before = open(out, "rb").read()
    code, _, err = run_cli(["tune", h2, "--rule", "molecular", "--vary", "H:1s", "--out", out, "--threads", "1",
                            "--validate", ch4], capsys)
    assert code == 2 and "use --force" in err  # refuses to overwrite
    code, _, err = run_cli(["tune", h2, "--rule", "molecular", "--vary", "H:1s", "--out", out, "--threads", "1",
                            "--validate", ch4, "--force"], capsys)
    assert code == 0, err
    assert open(out, "rb").read() == before


# ---------------------------------------------------------------------------- C, N, O, F


@pytest.mark.parametrize("element", ["C", "N", "O", "F"])
def test_valence_zeta_of_first_row_hydrides(tmp_path, capsys, element):
    path = _write_molecule(tmp_path, MOLECULES[element])
    out = str(tmp_path / "z.toml")
    # rule molecular: H keeps the published 1.24 it had in the published procedure
    doc = _tune_json(capsys, path, "--rule", "molecular", "--vary", f"{element}:2s,2p", "--out", out)
    zeta = doc["zeta"][element]
    assert zeta["2s"] == zeta["2p"]
    # the published standard molecular value (Hehre, Stewart & Pople 1969)
    assert abs(zeta["2s"] - PUBLISHED[element]) < 0.02
    # an independent scalar minimisation over the valence ζ on PySCF's stored sto-3g, its 2sp
    # exponents rescaled by (ζ/ζ_published)², 1s and H as stored
    atoms = _atoms(path)
    ref = minimize_scalar(
        lambda z: _pyscf_energy(
            atoms, {element: _stored_scaled(element, z, PUBLISHED[element], True), "H": "sto-3g"}
        ),
        bounds=(PUBLISHED[element] - 0.3, PUBLISHED[element] + 0.3), method="bounded", options={"xatol": 1e-6},
    )
    assert abs(zeta["2s"] - ref.x) < 2e-3
    assert load_zeta_file(out) == doc["zeta"]


# ---------------------------------------------------------------------------- gradients


@pytest.mark.parametrize("name, vary", [("H2O", ["O:1s", "O:2s,2p", "H:1s"]), ("CH4", ["C:1s", "C:2s,2p", "H:1s"])])
def test_central_differences_obey_the_scaling_identity(tmp_path, name, vary):
    """Scaling every ζ of a molecule by λ is a scaling of the electron coordinates with the nuclei
    moved to λR, so Σ_k dE/d ln ζ_k = 2T + V + Σ_A R_A·∇_A E (the molecular virial theorem,
    J. C. Slater, J. Chem. Phys. 1, 687 (1933); for basis scaling P.-O. Löwdin, J. Mol.
    Spectrosc. 3, 46 (1959)), T the kinetic energy, V = E − T, ∇E PySCF's analytic nuclear
    gradient. The Slater-rule ζ are not optimal, so every term is non-zero."""
    from stobuilder.pipeline.path import basis_for
    from stobuilder.model.structures import read_structures

    path = _write_molecule(tmp_path, name)
    options = BuildOptions(rule="slater")
    energy, gradient = energy_gradient([path], options, vary)
    assert set(gradient) == set(vary) and all(abs(g) > 1e-3 for g in gradient.values())
    frames = read_structures(path)
    mol = scf_mole.structure_mole(frames[0], basis_for(frames, options))

    def tight(mf):
        mf.conv_tol_grad = 1e-9
        return mf

    mf, _ = scf_run.solve_scf(mol, "RHF", conv_tol=1e-12, configure=tight)
    assert energy == pytest.approx(mf.e_tot, abs=1e-9)
    kinetic = float(np.einsum("ij,ji", mf.make_rdm1(), mol.intor("int1e_kin")))
    virial = 2 * kinetic + (mf.e_tot - kinetic) + float(np.sum(mol.atom_coords() * mf.nuc_grad_method().kernel()))
    # central differences at h = 1e-4 in ln ζ: truncation h²/6·|E'''| ≲ 1e-6 hartree (estimate in
    # stobuilder/tune.py beside STEP)
    assert sum(gradient.values()) == pytest.approx(virial, abs=2e-6)


# ---------------------------------------------------------------------------- four molecules


def test_tuned_file_lowers_every_training_energy_in_build_check(tmp_path, capsys):
    paths = [_write_molecule(tmp_path, MOLECULES[e]) for e in PUBLISHED]
    out = str(tmp_path / "four.toml")
    doc = _tune_json(capsys, *paths, "--rule", "molecular", *[a for e in PUBLISHED for a in ("--vary", f"{e}:2s,2p")],
                     "--out", out)
    assert doc["converged"] is True
    for e in PUBLISHED:  # separable: each element in one molecule, so each value as tuned alone
        assert abs(doc["zeta"][e]["2s"] - PUBLISHED[e]) < 0.02

    def build(*extra):
        code, text, err = run_cli(["build", *paths, "--rule", "molecular", "--check", "--json", "--out",
                                   str(tmp_path / f"basis{len(extra)}"), *extra], capsys)
        assert code == 0, err
        return [s["check"]["energy_hartree"] for s in json.loads(text)["structures"]]

    start, tuned = build(), build("--zeta-file", out)
    rows = doc["energies"]
    for row, e0, e1 in zip(rows, start, tuned):
        assert e1 < e0, row["structure"]
        # build's SCF converges to PySCF's default 1e-9 hartree; tune's to 1e-11
        assert e0 == pytest.approx(row["start_hartree"], abs=1e-7)
        assert e1 == pytest.approx(row["final_hartree"], abs=1e-7)


def test_weight_two_is_the_structure_counted_twice(tmp_path, capsys):
    """Σ w E with w = 2 for one structure is the same sum with a copy of that structure in a
    second file (the definition of the weighted objective; common practice, no source). The
    same file given twice is refused (test_tune_edges.py)."""
    h2, hf = _h2(tmp_path), _write_molecule(tmp_path, "HF")
    copy = tmp_path / "h2-copy.xyz"
    copy.write_bytes(open(h2, "rb").read())
    weights = tmp_path / "w.toml"
    weights.write_text('h2 = 2\n"hf.xyz" = 1.0\n')
    common = ["--rule", "molecular", "--vary", "H:1s"]
    a = _tune_json(capsys, h2, hf, *common, "--weights", str(weights), "--out", str(tmp_path / "a.toml"))
    b = _tune_json(capsys, h2, str(copy), hf, *common, "--out", str(tmp_path / "b.toml"))
    # both searches stop at |dE/d ln ζ| ≤ 1e-5 hartree; the curvature here is ≳ 0.5 hartree, so
    # the two ζ agree to ~2e-5 (estimate, common practice)
    assert a["zeta"]["H"]["1s"] == pytest.approx(b["zeta"]["H"]["1s"], abs=1e-4)
    # and they differ from the unweighted optimum, which sits nearer HF's own
    c = _tune_json(capsys, h2, hf, *common, "--out", str(tmp_path / "c.toml"))
    assert abs(c["zeta"]["H"]["1s"] - a["zeta"]["H"]["1s"]) > 1e-3


def test_default_free_zeta_is_the_valence_shell():
    """Valence shell as the published sets tie it (Hehre, Stewart & Pople 1969: one ζ for 2s and
    2p); a d-block element's (n−1)d is free on its own (common practice, no source)."""
    labels = [v.label for v in default_variables(build_basis(["H", "C", "Fe", "Cl"]))]
    assert labels == ["H:1s", "C:2s,2p", "Cl:3s,3p", "Fe:4s,4p", "Fe:3d"]
    assert [v.label for v in parse_vary(["c:2s,2p", "Fe:3d"])] == ["C:2s,2p", "Fe:3d"]


# ---------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    "extra, weights, needle",
    [
        (["--vary", "N:2s,2p"], None, "N is in none of the training structures"),
        (["--vary", "C:3d"], None, "has no 3d subshell"),
        (["--vary", "C:2s", "--vary", "C:2s,2p"], None, "already free"),
        (["--vary", "C"], None, "expected ELEMENT:SUBSHELL"),
        (["--weights", "W"], "ch4 = [1", "not valid TOML"),
        (["--weights", "W"], 'ch4 = "two"', "is not a number"),
        (["--weights", "W"], "ch4 = -1", "positive finite"),
        (["--weights", "W"], "water = 1", "names no training structure"),
        (["--check"], None, "--check is for build"),
    ],
)
def test_bad_input_is_one_line_and_writes_nothing(tmp_path, capsys, extra, weights, needle):
    path = _write_molecule(tmp_path, "CH4")
    if weights is not None:
        (tmp_path / "w.toml").write_text(weights + "\n")
        extra = [str(tmp_path / "w.toml") if a == "W" else a for a in extra]
    out = tmp_path / "z.toml"
    code, _, err = run_cli(["tune", path, "--out", str(out), "--threads", "1", *extra], capsys)
    assert_one_line_error(code, err)
    assert needle in err
    assert not out.exists()


def _solve_failing(monkeypatch, after):
    """scf_run.solve_scf, with every SCF from call number ``after`` on reported as not converged."""
    real, calls = scf_run.solve_scf, {"n": 0}

    def solve(*args, **kwargs):
        calls["n"] += 1
        mf, iterations = real(*args, **kwargs)
        if calls["n"] > after:
            mf.converged = False
        return mf, iterations

    monkeypatch.setattr(scf_run, "solve_scf", solve)


def test_scf_not_converging_at_the_start_is_bad_input(tmp_path, capsys, monkeypatch):
    path = _write_molecule(tmp_path, "CH4")
    _solve_failing(monkeypatch, 0)
    out = tmp_path / "z.toml"
    code, _, err = run_cli(["tune", path, "--out", str(out), "--threads", "1"], capsys)
    assert_one_line_error(code, err)
    assert "does not converge with the start ζ" in err and not out.exists()


def test_scf_failing_mid_search_keeps_the_best_point(tmp_path, capsys, monkeypatch):
    path = _write_molecule(tmp_path, "CH4")
    _solve_failing(monkeypatch, 10)  # the start point and its gradient (5 SCFs), one more point, then failures
    out = tmp_path / "z.toml"
    code, text, err = run_cli(["tune", path, "--rule", "molecular", "--out", str(out), "--threads", "1", "--json"],
                              capsys)
    assert code == 1, err
    doc = json.loads(text)
    assert doc["converged"] is False
    text = out.read_text(encoding="utf-8")
    assert "converged: NO" in text and "stopped converging" in text
    assert load_zeta_file(str(out)) == doc["zeta"]
    (row,) = doc["energies"]
    assert row["final_hartree"] <= row["start_hartree"]


def test_free_atom_with_every_zeta_free_obeys_the_virial_theorem(tmp_path, capsys):
    """With every ζ of a free atom free, the energy is stationary under a uniform scaling, so
    2T + V = 0 at the optimum (the virial theorem; V. Fock, Z. Phys. 63, 855 (1930)). The atom
    goes through tune's free-atom path (fixed occupations as build --check); the check here is
    a plain PySCF ROHF of the N quartet in the written basis."""
    path = tmp_path / "n.xyz"
    path.write_text("1\n\nN 0 0 0\n")
    out = str(tmp_path / "n.toml")
    doc = _tune_json(capsys, str(path), "--rule", "molecular", "--vary", "N:1s", "--vary", "N:2s,2p", "--out", out)
    basis = build_basis(["N"], rule="molecular", zeta=load_zeta_file(out))
    mol = gto.M(atom="N 0 0 0", basis={"N": basis["N"].to_pyscf()}, spin=3, verbose=0)
    mf = scf.ROHF(mol)
    mf.conv_tol = 1e-12
    energy = mf.kernel()
    assert mf.converged
    assert energy == pytest.approx(doc["energies"][0]["final_hartree"], abs=1e-8)
    dm = mf.make_rdm1()
    kinetic = float(np.einsum("ij,ji", dm[0] + dm[1], mol.intor("int1e_kin")))
    # 2T + V = Σ dE/d ln ζ: each |component| ≤ 1e-5 hartree at the end of the search, plus
    # ≲ 1e-5 from rounding ζ to 6 decimals (E'' ≈ 2T₁ₛ ≈ 100 hartree times Δ ln ζ₁ₛ ≈ 7e-8)
    assert 2 * kinetic + (energy - kinetic) == pytest.approx(0.0, abs=3e-5)


# ---------------------------------------------------------------------------- weights that differ by a common factor


@pytest.mark.parametrize("scale", [1e-6, 1e6])
def test_a_common_factor_of_the_weights_changes_nothing(tmp_path, capsys, scale):
    """argmin c·f = argmin f for c > 0 (the definition of a minimum): weights ×1e-6 and ×1e6 give
    the ζ of weights ×1, converged, with the same weights (scaled to mean 1) reported."""
    a, b = _h2(tmp_path, "short.xyz", 1.4), _h2(tmp_path, "long.xyz", 2.0)

    def run(factor, name):
        w = tmp_path / f"{name}.w.toml"
        w.write_text(f"short = {1.0 * factor!r}\nlong = {3.0 * factor!r}\n")
        doc, _ = _tune(capsys, a, b, "--weights", str(w), "--out", str(tmp_path / f"{name}.toml"))
        return doc

    ref, scaled = run(1.0, "one"), run(scale, "scaled")
    assert ref["converged"] is True and scaled["converged"] is True, scaled["message"]
    assert scaled["zeta"]["H"]["1s"] == pytest.approx(ref["zeta"]["H"]["1s"], abs=SAME)
    assert [r["weight"] for r in scaled["energies"]] == pytest.approx([0.5, 1.5], rel=1e-12)


def test_one_structure_with_a_tiny_weight_is_still_tuned(tmp_path, capsys):
    """A weight of 1e-6 on the only structure: the search still runs (it used to stop at once at the start ζ)."""
    h2 = _h2(tmp_path)
    w = tmp_path / "w.toml"
    w.write_text("h2 = 1e-6\n")
    plain, _ = _tune(capsys, h2, "--out", str(tmp_path / "a.toml"))
    tiny, _ = _tune(capsys, h2, "--weights", str(w), "--out", str(tmp_path / "b.toml"))
    assert tiny["converged"] is True and tiny["iterations"] > 0
    assert tiny["zeta"]["H"]["1s"] == pytest.approx(plain["zeta"]["H"]["1s"], abs=SAME)
    # one structure: its weight scaled to mean 1 is 1, so the two files agree byte for byte
    assert (tmp_path / "a.toml").read_bytes() == (tmp_path / "b.toml").read_bytes()
    # the single-ζ minimal-basis optimum of H2 at R = 1.4 bohr, 1.197 for the true STO
    # (C. A. Coulson, Trans. Faraday Soc. 33, 1479 (1937)); two Gaussians shift it a little
    assert abs(plain["zeta"]["H"]["1s"] - 1.197) < 0.01


# ---------------------------------------------------------------------------- a ζ held by a bound of the search


def test_a_start_far_from_the_optimum_recentres_the_search(tmp_path, capsys):
    """--zeta H:1s=0.4: the optimum (≈ 1.2) lies beyond the first round's range [0.2, 0.8]; the
    search goes on from 0.8 and reaches it, and only then calls the run converged."""
    h2 = _h2(tmp_path)
    ref, _ = _tune(capsys, h2, "--out", str(tmp_path / "ref.toml"))
    far, err = _tune(capsys, h2, "--zeta", "H:1s=0.4", "--out", str(tmp_path / "far.toml"))
    assert far["start_zeta"] == {"H": {"1s": 0.4}}
    assert far["zeta"]["H"]["1s"] == pytest.approx(ref["zeta"]["H"]["1s"], abs=SAME)
    assert far["converged"] is True and far["at_bound"] == {"H": {"1s": False}}
    assert "re-centred" in err


def test_a_zeta_held_by_the_global_limit_is_not_converged(tmp_path, capsys, monkeypatch):
    """With the largest ζ allowed lowered to 0.9 bohr⁻¹, below H2's optimum (≈ 1.2, Coulson
    1937), the search ends on that limit: reported per ζ in the JSON, in the file's header, in
    the table and by exit status 1."""
    import stobuilder.tune as tune_module

    monkeypatch.setattr(tune_module, "ZETA_MAX", 0.9)
    h2 = _h2(tmp_path)
    out = tmp_path / "z.toml"
    doc, _ = _tune(capsys, h2, "--zeta", "H:1s=0.6", "--out", str(out), status=1)
    assert doc["converged"] is False and doc["at_bound"] == {"H": {"1s": True}}
    assert doc["zeta"] == {"H": {"1s": 0.9}} and "held by a bound" in doc["message"]
    text = out.read_text(encoding="utf-8")
    assert "converged: NO" in text and "# held by a bound of the search range (not an optimum): H:1s" in text
    assert load_zeta_file(str(out)) == doc["zeta"]
    code, table, _ = run_cli(["tune", h2, "--zeta", "H:1s=0.6", "--out", str(out), "--force", *N], capsys)
    assert code == 1 and "NOT CONVERGED" in table and "held by a bound" in table
    # the Python API says the same
    result = tune([h2], tune_module.BuildOptions(gaussians=2, zeta={"H": {"1s": 0.6}}))
    assert result.at_bounds == ("H:1s",) and not result.converged


def test_iterations_running_out_on_a_bound_is_not_converged(tmp_path):
    """One iteration from ζ = 0.4 ends on the first round's bound 0.8, below the optimum (≈ 1.2,
    Coulson 1937): held by a bound, not converged, and the message says why."""
    from stobuilder.pipeline.options import BuildOptions

    result = tune([_h2(tmp_path)], BuildOptions(gaussians=2, zeta={"H": {"1s": 0.4}}), max_iterations=1)
    assert result.final == (0.8,) and result.at_bounds == ("H:1s",) and not result.converged
    assert "iteration limit" in result.message
    with pytest.raises(InputError, match="max_iterations"):
        tune([_h2(tmp_path)], max_iterations=-1)


# ---------------------------------------------------------------------------- file names that try to become TOML


def test_a_file_name_cannot_become_toml_entries(tmp_path, capsys):
    """A structure file named "h2\\n[He]\\n1s = 5.0\\n.xyz": its name goes into the zeta file's
    comment as one line; the file holds H only and build --zeta-file applies nothing to He."""
    hostile = _h2(tmp_path, "h2\n[He]\n1s = 5.0\n.xyz")
    out = tmp_path / "z.toml"
    code, table, err = run_cli(["tune", hostile, "--out", str(out), *N], capsys)
    assert code == 0, err
    doc = tomllib.loads(out.read_text(encoding="utf-8"))
    assert set(doc) == {"H"} and set(doc["H"]) == {"1s"}
    assert all(line.startswith("#") for line in out.read_text(encoding="utf-8").split("\n[H]\n")[0].splitlines())
    assert "[He]" not in table.splitlines() and "1s = 5.0" not in table.splitlines()
    he = tmp_path / "he.xyz"
    he.write_text("1\n\nHe 0 0 0\n")
    plain, tuned = tmp_path / "plain", tmp_path / "tuned"
    for folder, extra in ((plain, []), (tuned, ["--zeta-file", str(out)])):
        code, _, err = run_cli(["build", _h2(tmp_path), str(he), "--out", str(folder), *extra], capsys)
        assert code == 0, err
    assert (plain / "he.nw").read_bytes() == (tuned / "he.nw").read_bytes()
    assert (plain / "h2.nw").read_bytes() != (tuned / "h2.nw").read_bytes()  # H's tuned ζ is applied


# ---------------------------------------------------------------------------- output locations, checked before the first SCF


def _sys_target():
    if not os.path.isdir("/sys/kernel"):
        pytest.skip("no /sys: a location no one may create a file in")
    return "/sys/kernel/tuned-zeta.toml"


@pytest.mark.parametrize(
    "where, needle",
    [
        ("nodir/sub/x.toml", "does not exist"),
        ("existing.toml", "use --force"),
        ("afile/x.toml", "is not a folder"),
        ("folder", "is a folder"),
        ("SYS", "cannot write there"),
    ],
)
def test_the_output_location_is_checked_before_any_scf(tmp_path, capsys, where, needle, no_scf):
    h2 = _h2(tmp_path)
    (tmp_path / "existing.toml").write_text("# mine\n")
    (tmp_path / "afile").write_text("x\n")
    (tmp_path / "folder").mkdir()
    target = _sys_target() if where == "SYS" else str(tmp_path / where)
    before = sorted(os.listdir(tmp_path))
    code, _, err = run_cli(["tune", h2, "--out", target, *N], capsys)
    assert_one_line_error(code, err)
    assert "--out" in err and needle in err
    assert sorted(os.listdir(tmp_path)) == before and (tmp_path / "existing.toml").read_text() == "# mine\n"


def test_an_input_is_never_the_output_even_with_force(tmp_path, capsys, no_scf):
    h2 = _h2(tmp_path)
    weights = tmp_path / "w.toml"
    weights.write_text("h2 = 1\n")
    before = {p: open(p, "rb").read() for p in (h2, str(weights))}
    for target in before:
        code, _, err = run_cli(["tune", h2, "--weights", str(weights), "--out", target, "--force", *N], capsys)
        assert_one_line_error(code, err)
        assert "is the input" in err
    assert {p: open(p, "rb").read() for p in before} == before


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into a read-only folder")
def test_a_read_only_folder_is_refused_before_any_scf(tmp_path, capsys, no_scf):
    h2 = _h2(tmp_path)
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        code, _, err = run_cli(["tune", h2, "--out", str(locked / "z.toml"), *N], capsys)
    finally:
        locked.chmod(0o755)
    assert_one_line_error(code, err)
    assert "cannot write there" in err and os.listdir(locked) == []


# ---------------------------------------------------------------------------- a structure given twice


def test_a_structure_given_twice_is_refused(tmp_path, capsys, no_scf):
    """As bench ("given twice") and relax (two structures writing one file) refuse it; a weight
    of 2 is the way to count a structure twice."""
    h2 = _h2(tmp_path)
    link = tmp_path / "link.xyz"
    link.symlink_to(h2)
    for second in (h2, os.path.join(str(tmp_path), ".", "h2.xyz"), str(link)):
        code, _, err = run_cli(["tune", h2, second, "--out", str(tmp_path / "z.toml"), *N], capsys)
        assert_one_line_error(code, err)
        assert "given twice as a training structure" in err and "weight of 2" in err
    code, _, err = run_cli(["tune", h2, "--validate", str(link), str(link), "--out", str(tmp_path / "z.toml"), *N],
                           capsys)
    assert_one_line_error(code, err)
    assert "given twice as a held-out structure" in err
    with pytest.raises(InputError, match="given twice"):
        tune([h2, h2])
    assert not (tmp_path / "z.toml").exists()


# ---------------------------------------------------------------------------- ζ of the options


@pytest.mark.parametrize("argv, words", [
    (["--zeta", "C:2p=1.0"], "--zeta names elements in no structure: C"),
    (["--zeta-file", "LIB"], "--zeta-file LIB: it names none of the structures' elements (it names C, O;"),
])
def test_zeta_naming_no_training_element_is_refused_before_any_scf(tmp_path, capsys, argv, words, no_scf):
    """The typo guard of build and relax (``pipeline.check_zeta_elements``): tune ignored them."""
    h2 = _h2(tmp_path)
    library = tmp_path / "lib.toml"
    library.write_text("[C]\n2p = 1.7\n[O]\n2p = 2.3\n")
    argv = [a.replace("LIB", str(library)) for a in argv]
    code, _, err = run_cli(["tune", h2, *argv, "--out", str(tmp_path / "z.toml"), *N], capsys)
    assert_one_line_error(code, err)
    assert words.replace("LIB", str(library)) in err, err
    assert not (tmp_path / "z.toml").exists()


def test_the_zeta_file_keeps_the_fixed_zeta_and_gives_the_energies_it_reports(tmp_path, capsys):
    """Li (1s² 2s, ROHF) with its 1s fixed by --zeta and a library from --zeta-file: the file tune
    writes holds the tuned 2s,2p, the fixed 1s and the library's unused [C], and build --check
    with that file alone gives the tuned energy tune reports (the same basis, the same SCF)."""
    li = tmp_path / "li.xyz"
    li.write_text("1\n\nLi 0 0 0\n")
    library = tmp_path / "lib.toml"
    library.write_text("[C]\n2p = 1.7\n[Li]\n2s = 0.9\n")
    out = tmp_path / "z.toml"
    doc, _ = _tune(capsys, str(li), "--zeta", "Li:1s=2.6", "--zeta-file", str(library), "--vary", "Li:2s,2p",
                   "--out", str(out))
    tuned = doc["zeta"]["Li"]
    assert doc["fixed_zeta"] == {"Li": {"1s": 2.6}, "C": {"2p": 1.7}}
    assert load_zeta_file(str(out)) == {"Li": {**tuned, "1s": 2.6}, "C": {"2p": 1.7}}
    text = out.read_text(encoding="utf-8")
    assert "1s = 2.6  # fixed: your own ζ" in text and "2p = 1.7  # fixed: zeta file" in text and str(library) in text
    code, report, err = run_cli(["build", str(li), "--gaussians", "2", "--zeta-file", str(out), "--check", "--json",
                                 "--out", str(tmp_path / "basis")], capsys)
    assert code == 0, err
    check = json.loads(report)["structures"][0]["check"]
    # both SCFs converged to 1e-9 hartree or better (PySCF's default conv_tol; tune's 1e-11)
    assert check["energy_hartree"] == pytest.approx(doc["energies"][0]["final_hartree"], abs=1e-8)


# ---------------------------------------------------------------------------- an interrupted run


@pytest.mark.slow
def test_sigint_is_one_line_exit_130_and_leaves_nothing(tmp_path):
    """SIGINT during the search: "stobuilder: interrupted", exit 130 (128 + SIGINT, the shell's
    convention), no zeta file and no temporary file (nothing finished: a search is one result)."""
    import ase.build
    import ase.io

    path = str(tmp_path / "h2o.xyz")
    ase.io.write(path, ase.build.molecule("H2O"))
    env = child_env()
    code = "import sys; from stobuilder.cli import main; sys.exit(main(sys.argv[1:]))"
    proc = subprocess.Popen([sys.executable, "-c", code, "tune", path, "--out", "z.toml", "--threads", "1"],
                            cwd=str(tmp_path), env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    seen = []
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:  # wait for the first progress line: the search has begun
        line = proc.stderr.readline()
        if not line:
            break
        seen.append(line)
        if "iteration 0" in line:
            proc.send_signal(signal.SIGINT)
            break
    out, rest = proc.communicate(timeout=120)
    err = "".join(seen) + rest
    assert "iteration 0" in err, err
    assert proc.returncode == 130, err
    assert err.splitlines()[-1] == "stobuilder: interrupted" and "Traceback" not in err
    assert os.listdir(tmp_path) == ["h2o.xyz"]


# ---------------------------------------------------------------------------- hostile names, weights, starts and targets under fuzzing


_TUNE_H2 = "2\n\nH 0 0 0\nH 0 0 0.7408\n"  # R = 1.4 bohr (0.7408 Å; value from memory)


def _toml_key(text):
    """``text`` as a TOML basic-string key: every character TOML forbids raw (controls, DEL) and
    the quote and backslash as \\uXXXX (TOML 1.0, basic strings)."""
    return '"' + "".join(f"\\u{ord(c):04x}" if ord(c) < 0x20 or c in '\x7f"\\' else c for c in text) + '"'


def _tune_reference_zeta():
    """H2's tuned ζ with unit weights, the rule's start and a plain file name (computed once)."""
    import tomllib

    if not hasattr(_tune_reference_zeta, "value"):
        with tempfile.TemporaryDirectory() as folder:
            path = os.path.join(folder, "h2.xyz")
            with open(path, "w") as handle:
                handle.write(_TUNE_H2)
            out = os.path.join(folder, "z.toml")
            code, message = run_in_threads(["tune", path, "--gaussians", "1", "--threads", "1", "--out", out])
            assert code == 0, message
            with open(out, "rb") as handle:
                _tune_reference_zeta.value = tomllib.load(handle)["H"]["1s"]
    return _tune_reference_zeta.value


@pytest.mark.slow
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    name=st.text(st.characters(blacklist_characters="/\x00", blacklist_categories=("Cs",)), min_size=1, max_size=16),
    scale=st.one_of(st.just(None), st.integers(-300, 300).map(lambda k: 10.0**k)),
    start=st.one_of(st.just(None), st.floats(min_value=0.002, max_value=900)),
    where=st.sampled_from(["plain"] * 4 + ["missing-folder", "file-as-folder", "existing", "twice"]),
)
def test_tune_hostile_names_weights_starts_and_targets_end_in_the_contract(name, scale, start, where):
    """tune on H2 under a hostile file name, a common factor of the weights from 1e-300 to
    1e300, a start ζ anywhere in the allowed range and bad --out targets: exit 0 with a zeta file
    that holds H only (no name becomes an entry) and the ζ of the plain run (argmin c·f = argmin f;
    the search re-centres until the optimum is reached), or exit 2 with one error line, no SCF
    run and nothing written. (common practice, no source)"""
    import tomllib

    from stobuilder.checks import structure as checks

    reference = _tune_reference_zeta()
    with tempfile.TemporaryDirectory() as folder:
        inputs = os.path.join(folder, "in")
        os.mkdir(inputs)
        path = os.path.join(inputs, name + ".xyz")
        try:
            with open(path, "w") as handle:
                handle.write(_TUNE_H2)
        except OSError:  # a name the file system refuses (too long in bytes)
            return
        out_dir = os.path.join(folder, "out")
        os.mkdir(out_dir)
        out = {"missing-folder": os.path.join(out_dir, "no", "z.toml"),
               "file-as-folder": os.path.join(inputs, name + ".xyz", "z.toml")}.get(where, os.path.join(out_dir, "z.toml"))
        if where == "existing":
            with open(out, "w") as handle:
                handle.write("# mine\n")
        argv = ["tune", path] + ([path] if where == "twice" else []) + ["--gaussians", "1", "--threads", "1", "--out", out]
        if scale is not None:
            weights = os.path.join(folder, "w.toml")
            with open(weights, "w", encoding="utf-8") as handle:
                handle.write(f"{_toml_key(name + '.xyz')} = {scale!r}\n")
            argv += ["--weights", weights]
        if start is not None:
            argv.append(f"--zeta=H:1s={start!r}")
        scf_runs = {"n": 0}
        real_solve = scf_run.solve_scf

        def counting_solve(*args, **kwargs):
            scf_runs["n"] += 1
            return real_solve(*args, **kwargs)

        with mock.patch.object(scf_run, "solve_scf", counting_solve):
            code, message = run_in_threads(argv)
        event(f"tune {where} exit {code}")
        assert "Traceback" not in message
        if where == "plain":
            assert code == 0, (argv, message)
            with open(out, "rb") as handle:
                doc = tomllib.load(handle)
            assert set(doc) == {"H"} and set(doc["H"]) == {"1s"}, doc
            # each search stops within ~1e-4 of the optimum in ln ζ (SAME, above)
            assert abs(doc["H"]["1s"] - reference) <= 1e-4 * reference, (argv, doc)
        else:
            assert code == 2 and scf_runs["n"] == 0, (argv, message)
            errors = [line for line in message.splitlines() if line.startswith("stobuilder: error: ")]
            assert len(errors) == 1 and message.endswith(errors[0] + "\n"), message
            assert os.listdir(out_dir) == (["z.toml"] if where == "existing" else []), os.listdir(out_dir)

