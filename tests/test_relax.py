"""stobuilder relax end to end: the files by path (relaxed extxyz read back by ASE and by
stobuilder, basis files identical to build's), strict JSON, exit status 1 when out of steps,
and the bad-input contract (exit 2, one line, nothing written)."""

import json
import os

import numpy as np
import pytest
from ase.units import Hartree

from cli_run import assert_one_line_error, run_cli

EXAMPLES = os.path.join(os.path.dirname(__file__), "..", "examples", "structures")
AMMONIA = os.path.join(EXAMPLES, "ammonia.xyz")
H2S = os.path.join(EXAMPLES, "hydrogen_sulfide.xyz")


@pytest.fixture(autouse=True)
def _one_thread():
    """PySCF on one OpenMP thread (tiny molecules; see tests/test_calculator.py)."""
    from pyscf import lib

    with lib.with_omp_threads(1):
        yield


def strict_json(text):
    def reject(name):
        raise ValueError(f"non-finite number {name} in JSON")

    return json.loads(text, parse_constant=reject)


def test_relax_writes_relaxed_structures_and_basis_files(tmp_path, capsys):
    import ase.io

    from stobuilder import read_structures

    out = tmp_path / "out"
    argv = ["relax", AMMONIA, H2S, "--rule", "molecular", "--code", "nwchem", "--code", "pyscf", "--fmax", "0.01",
            "--out", str(out), "--json"]
    code, stdout, err = run_cli(argv, capsys)
    assert code == 0, err
    doc = strict_json(stdout)
    assert list(doc) == ["structures"] and len(doc["structures"]) == 2
    for entry, name in zip(doc["structures"], ("ammonia", "hydrogen_sulfide")):
        assert set(entry) == {"path", "relaxed_path", "energy_hartree", "steps", "converged", "max_force_ev_per_a",
                              "files"}
        assert entry["converged"] is True and entry["steps"] >= 1 and entry["max_force_ev_per_a"] <= 0.01
        assert entry["relaxed_path"] == str(out / f"{name}.relaxed.extxyz")
        assert entry["files"] == {"nwchem": str(out / f"{name}.nw"), "pyscf": str(out / f"{name}.py")}
        atoms = ase.io.read(entry["relaxed_path"])  # ASE's own reader, by path
        forces = atoms.get_forces()
        assert np.sqrt((forces**2).sum(axis=1)).max() <= 0.01
        assert abs(atoms.get_potential_energy() / Hartree - entry["energy_hartree"]) <= 1e-9
        assert atoms.info["relax_converged"] is True and atoms.info["relax_steps"] == entry["steps"]
        (frame,) = read_structures(entry["relaxed_path"])  # and ours, as build would read it
        assert frame.charge == 0 and frame.spin == 0
        assert f"{name}.xyz step 0: E = " in err and "max force" in err  # one line per step on stderr
    # the relaxed NH3 with the molecular rule is the STO-3G optimum: r(NH) 1.033 Å, HNH 104.2°
    # (Hehre, Radom, Schleyer & Pople, Ab Initio Molecular Orbital Theory, 1986; values from
    # memory); fmax 0.01 eV/Å leaves about 3e-4 Å (NH stretch curvature ~ 30 eV/Å², common
    # practice, no source)
    nh3 = ase.io.read(doc["structures"][0]["relaxed_path"])
    assert abs(nh3.get_distance(0, 1) - 1.033) <= 0.003 and abs(nh3.get_angle(1, 0, 2) - 104.2) <= 0.3
    # the basis files are build's, byte for byte
    build_out = tmp_path / "build"
    code, _, err = run_cli(["build", AMMONIA, H2S, "--rule", "molecular", "--code", "nwchem", "--code", "pyscf",
                            "--out", str(build_out)], capsys)
    assert code == 0, err
    for name in ("ammonia.nw", "ammonia.py", "hydrogen_sulfide.nw", "hydrogen_sulfide.py"):
        assert (out / name).read_bytes() == (build_out / name).read_bytes()
    assert sorted(os.listdir(out)) == sorted(["ammonia.nw", "ammonia.py", "ammonia.relaxed.extxyz",
                                              "hydrogen_sulfide.nw", "hydrogen_sulfide.py",
                                              "hydrogen_sulfide.relaxed.extxyz"])  # no temporary files
    # the same run again: byte-identical files; existing files need --force
    before = {p: (out / p).read_bytes() for p in os.listdir(out)}
    code, _, err = run_cli(argv, capsys)
    assert_one_line_error(code, err)
    assert "use --force" in err
    code, _, err = run_cli(argv + ["--force"], capsys)
    assert code == 0, err
    assert {p: (out / p).read_bytes() for p in os.listdir(out)} == before


def test_relax_out_of_steps_exits_1_and_says_so(tmp_path, capsys):
    out = tmp_path / "out"
    code, stdout, err = run_cli(["relax", AMMONIA, "--steps", "1", "--optimizer", "fire", "--out", str(out)], capsys)
    assert code == 1, err
    assert "NOT CONVERGED after 1 steps" in stdout
    assert "ammonia.xyz step 1:" in err and "step 2:" not in err
    code, stdout, _ = run_cli(["relax", AMMONIA, "--steps", "1", "--out", str(out), "--force", "--json"], capsys)
    assert code == 1
    (entry,) = strict_json(stdout)["structures"]
    assert entry["converged"] is False and entry["steps"] == 1 and entry["max_force_ev_per_a"] > 0.05
    assert "relax_converged=F" in open(entry["relaxed_path"]).read()


def test_relax_builds_the_basis_once_per_structure(tmp_path, monkeypatch):
    from stobuilder import pipeline
    from stobuilder.options import BuildOptions
    from stobuilder.relax import relax_structures

    calls = []
    real = pipeline.basis_for

    def counting(frames, options):
        calls.append(frames[0].path)
        return real(frames, options)

    monkeypatch.setattr(pipeline, "basis_for", counting)
    (result,) = relax_structures([AMMONIA], BuildOptions(), out_dir=str(tmp_path), fmax=0.05)
    assert result.converged and result.steps >= 2
    assert len(calls) == 1  # prepare's build, handed to the calculator; no rebuild per step


@pytest.mark.parametrize(
    "extra, needle",
    [
        (["--rule", "no-such-rule"], "no-such-rule"),
        (["--check"], "--check"),
        (["--fmax", "-1"], "--fmax"),
        (["--fmax", "nan"], "--fmax"),
        (["--steps", "-3"], "--steps"),
        (["--spin", "1"], "cannot have spin 1"),
        (["--method", "rhf", "--spin", "2"], "RHF needs a closed shell"),
        (["--zeta", "Fe:3d=2.1"], None),
        # NH3 with charge -12: 22 electrons, 11 α, in the 8 functions of a minimal basis (found by
        # the fuzz test: it reached PySCF's occupation step as a traceback)
        (["--charge", "-12"], "do not fit"),
    ],
)
def test_relax_bad_options_exit_2_and_write_nothing(tmp_path, capsys, extra, needle):
    out = tmp_path / "out"
    code, _, err = run_cli(["relax", AMMONIA, "--out", str(out), *extra], capsys)
    assert_one_line_error(code, err)
    if needle:
        assert needle in err
    assert not out.exists()


def test_relax_bad_structures_exit_2_and_write_nothing(tmp_path, capsys):
    empty = tmp_path / "empty.xyz"
    empty.write_text("")
    close = tmp_path / "close.xyz"
    close.write_text("2\n\nH 0 0 0\nH 0 0 0.01\n")
    out = tmp_path / "out"
    for path, needle in ((os.path.join(EXAMPLES, "zinc_sulfide.cif"), "periodic"), (str(empty), "empty"),
                         (str(close), "apart"), (str(tmp_path / "missing.xyz"), "no such file")):
        code, _, err = run_cli(["relax", AMMONIA, path, "--out", str(out)], capsys)  # a good file first
        assert_one_line_error(code, err)
        assert needle in err
        assert not out.exists()


def test_an_scf_that_fails_during_a_relaxation_writes_nothing(tmp_path):
    from stobuilder import InputError
    from stobuilder.options import BuildOptions
    from stobuilder.relax import relax_structures

    out = tmp_path / "out"
    with pytest.raises(InputError) as e:
        relax_structures([AMMONIA], BuildOptions(), out_dir=str(out), max_cycle=1, conv_tol=1e-14)
    text = str(e.value)
    assert "\n" not in text and "step 0" in text and "did not converge" in text and "nothing written" in text
    assert not out.exists()
