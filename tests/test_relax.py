"""stobuilder relax end to end: the files by path (relaxed extxyz read back by ASE and by
stobuilder, basis files identical to build's), strict JSON, exit status 1 when out of steps,
and the bad-input contract (exit 2, one line, nothing written); output locations checked before
the first SCF, an interrupted run keeps the finished structures, a zeta file applies as a library."""

import os

import numpy as np
import pytest
from ase.units import Hartree

from support import assert_one_line_error, child_env, read_only_folder, run_cli, strict_json

EXAMPLES = os.path.join(os.path.dirname(__file__), "..", "examples", "structures")
AMMONIA = os.path.join(EXAMPLES, "ammonia.xyz")
H2S = os.path.join(EXAMPLES, "hydrogen_sulfide.xyz")


@pytest.fixture(autouse=True)
def _one_thread():
    """PySCF on one OpenMP thread (tiny molecules; see tests/test_calculator.py)."""
    from pyscf import lib

    with lib.with_omp_threads(1):
        yield


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
    from stobuilder.builder import construct
    from stobuilder.pipeline.options import BuildOptions
    from stobuilder.relax import relax_structures

    calls = []
    real = construct.build_basis

    def counting(elements, spec=None, **kw):
        calls.append(elements)  # basis_of, the one basis cache, builds through build_basis
        return real(elements, spec, **kw)

    monkeypatch.setattr(construct, "build_basis", counting)
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
    from stobuilder.pipeline.options import BuildOptions
    from stobuilder.relax import relax_structures

    out = tmp_path / "out"
    with pytest.raises(InputError) as e:
        relax_structures([AMMONIA], BuildOptions(), out_dir=str(out), max_cycle=1, conv_tol=1e-14)
    text = str(e.value)
    assert "\n" not in text and "step 0" in text and "did not converge" in text and "nothing written" in text
    assert not out.exists()


H2_TEXT = "2\n\nH 0 0 0\nH 0 0 0.80\n"  # near the H2 bond length (value from memory: 0.74 Å)


def _listing(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


@pytest.mark.parametrize("case", ["input file", "input file, --force", "under a file", "read-only"])
def test_relax_refuses_a_bad_output_location_before_the_first_scf(tmp_path, capsys, no_scf, case):
    # the bug: each of these ran the whole relaxation, then exited 2
    h2 = tmp_path / "h2.xyz"
    h2.write_text(H2_TEXT)
    out = {"input file": h2, "input file, --force": h2, "under a file": h2 / "sub"}.get(case)
    if case == "read-only":
        locked = read_only_folder(tmp_path)
        if locked is None:
            pytest.skip("no folder here refuses new files")
        out = locked / "stobuilder-relax-out"
    before = _listing(tmp_path)
    argv = ["relax", str(h2), "--gaussians", "2", "--out", str(out)] + (["--force"] if "force" in case else [])
    code, _, err = run_cli(argv, capsys)
    assert_one_line_error(code, err)
    assert ("cannot" in err) if case == "read-only" else ("not a folder" in err), err
    assert _listing(tmp_path) == before and h2.read_text() == H2_TEXT
    if case in ("under a file", "read-only"):
        assert not out.exists()


def test_relax_writes_each_structure_when_done_and_an_scf_failure_keeps_the_ones_before(tmp_path, monkeypatch):
    from ase.calculators.calculator import SCFError

    from stobuilder import InputError
    from stobuilder.scf import run as scf_run
    from stobuilder.pipeline.options import BuildOptions
    from stobuilder.relax import relax_structures

    first, second = tmp_path / "a.xyz", tmp_path / "b.xyz"
    first.write_text(H2_TEXT)
    second.write_text("3\n\nO 0 0 0\nH 0 0.76 0.59\nH 0 -0.76 0.59\n")
    out = tmp_path / "out"
    real = scf_run.solve_scf
    seen = []

    def solve(mol, *args, **kwargs):
        if mol.natm == 3:  # the water: its first file must be on disk by now
            seen.append(sorted(os.listdir(out)))
            raise SCFError("a simulated SCF failure")
        return real(mol, *args, **kwargs)

    monkeypatch.setattr(scf_run, "solve_scf", solve)
    with pytest.raises(InputError) as e:
        relax_structures([str(first), str(second)], BuildOptions(gaussians=2), out_dir=str(out))
    text = str(e.value)
    assert "\n" not in text and text.startswith(f"{second}: step 0: a simulated SCF failure")
    assert f"kept the files of 1 relaxed before it ({first})" in text
    assert seen == [["a.nw", "a.relaxed.extxyz"]]
    assert sorted(os.listdir(out)) == ["a.nw", "a.relaxed.extxyz"]


INTERRUPTED_RUN = """
import sys, time
from stobuilder.scf import run as scf_run
real = scf_run.solve_scf
def slow(mol, *args, **kwargs):
    if mol.natm == 3:  # the second structure (water): a slow SCF at every step
        time.sleep(0.2)
    return real(mol, *args, **kwargs)
scf_run.solve_scf = slow
from stobuilder.cli import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.slow
def test_an_interrupted_relax_keeps_the_finished_structures_and_says_so(tmp_path):
    # the bug: SIGINT in the second of two molecules lost the converged first one
    import signal
    import subprocess
    import sys
    import time

    import ase.io

    first, second = tmp_path / "a_h2.xyz", tmp_path / "b_water.xyz"
    first.write_text(H2_TEXT)
    second.write_text("3\n\nO 0 0 0\nH 0 0.80 0.55\nH 0 -0.75 0.62\n")
    out = tmp_path / "out"
    kept = out / "a_h2.relaxed.extxyz"
    env = child_env()
    proc = subprocess.Popen([sys.executable, "-c", INTERRUPTED_RUN, "relax", str(first), str(second), "--gaussians",
                             "2", "--out", str(out)], cwd=str(tmp_path), env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while not kept.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        assert proc.poll() is None and kept.exists(), "the first structure's file did not appear while running"
        time.sleep(0.1)  # into the water's relaxation (each of its steps sleeps 0.2 s), not between the two
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, err  # 128 + SIGINT, as the other commands exit on an interrupt
    assert "Traceback" not in err
    lines = err.splitlines()
    assert lines[-1] == "stobuilder: interrupted"
    assert f"stobuilder: kept {first} (relaxed," in err and str(kept) in err
    assert "stobuilder: relax stopped: 1 of 2 structures written" in lines[-2]
    assert f"{second} was running, nothing of it written" in lines[-2] or second.name not in lines[-2]
    assert sorted(os.listdir(out)) == ["a_h2.nw", "a_h2.relaxed.extxyz"]  # no water file, no temporary
    atoms = ase.io.read(str(kept), format="extxyz")  # complete and valid
    assert atoms.get_chemical_symbols() == ["H", "H"] and atoms.info["relax_converged"] is True
    assert abs(atoms.get_potential_energy() / Hartree - atoms.info["energy_hartree"]) <= 1e-9
    assert np.abs(atoms.get_forces()).max() <= 0.05  # converged to the default fmax


def test_text_from_the_input_cannot_break_out_of_the_extxyz_or_the_progress_lines(tmp_path, capsys):
    import ase.io

    odd = tmp_path / 'we"ird\nname.xyz'
    odd.write_text(H2_TEXT)
    out = tmp_path / "out"
    code, _, err = run_cli(["relax", str(odd), "--gaussians", "2", "--out", str(out)], capsys)
    assert code == 0, err
    steps = [line for line in err.splitlines() if " step " in line]
    assert steps and all(line.startswith("stobuilder: ") and "we\\u0022ird\\u000aname.xyz step" in line
                         for line in steps), err
    relaxed = out / 'we"ird\nname.relaxed.extxyz'
    text = relaxed.read_text()
    assert text.count("\n") == 2 + 2 and '"ird' not in text and "name" not in text  # no input text in it
    atoms = ase.io.read(str(relaxed), format="extxyz")
    assert set(atoms.info) == {"charge", "spin", "energy_hartree", "relax_steps", "relax_converged"}


@pytest.mark.parametrize(
    "value, needle",
    [("1e9", "out of range: steps go from 0 to 100000"), ("100001", "out of range"), ("-3", "out of range"),
     ("1.5", "is not a whole number"), ("nan", "is not a whole number"), ("ten", "is not a whole number"),
     ("1e999999999", "out of range")],
)
def test_relax_steps_flag_says_the_range_or_not_a_whole_number(tmp_path, capsys, value, needle):
    # the bug: --steps 1e9 said "not a whole number"; it is one, out of range
    out = tmp_path / "out"
    code, _, err = run_cli(["relax", AMMONIA, "--steps", value, "--out", str(out)], capsys)
    assert_one_line_error(code, err)
    assert "--steps" in err and needle in err, err
    assert not out.exists()


def test_relax_steps_flag_takes_a_whole_number_written_with_an_exponent(tmp_path, capsys):
    out = tmp_path / "out"
    code, stdout, err = run_cli(["relax", AMMONIA, "--steps", "1e0", "--optimizer", "fire", "--gaussians", "2",
                                 "--out", str(out)], capsys)
    assert code == 1 and "NOT CONVERGED after 1 steps" in stdout, err


@pytest.mark.parametrize(
    "kwargs, needle",
    [({"steps": 10**9}, "steps must be <= 100000"), ({"steps": 2.0}, "steps must be a whole number"),
     ({"fmax": -1}, "fmax=-1"), ({"fmax": float("nan")}, "fmax=nan"), ({"optimizer": "lbfgs"}, "optimizer='lbfgs'")],
)
def test_the_python_door_names_python_arguments(tmp_path, kwargs, needle):
    from stobuilder import InputError
    from stobuilder.pipeline.options import BuildOptions
    from stobuilder.relax import relax_structures

    with pytest.raises(InputError) as e:
        relax_structures([AMMONIA], BuildOptions(), out_dir=str(tmp_path / "out"), **kwargs)
    assert needle in str(e.value) and "--" not in str(e.value)
    with pytest.raises(InputError) as e:
        relax_structures([AMMONIA], BuildOptions(check=True), out_dir=str(tmp_path / "out"))
    assert "options.checks.run" in str(e.value) and "--" not in str(e.value)


def test_the_python_door_raises_relaxinterrupted_with_the_results_written(tmp_path, monkeypatch):
    import _thread
    import threading
    import time

    from stobuilder.scf import run as scf_run
    from stobuilder.pipeline.options import BuildOptions
    from stobuilder.relax import RelaxInterrupted, relax_structures

    first, second = tmp_path / "a.xyz", tmp_path / "b.xyz"
    first.write_text(H2_TEXT)
    second.write_text("3\n\nO 0 0 0\nH 0 0.80 0.55\nH 0 -0.75 0.62\n")
    out = tmp_path / "out"
    real = scf_run.solve_scf

    def solve(mol, *args, **kwargs):
        if mol.natm == 3:  # the water, in the worker thread: Ctrl-C in the waiting thread
            _thread.interrupt_main()
            time.sleep(0.2)  # an SCF still running after the interrupt
        return real(mol, *args, **kwargs)

    monkeypatch.setattr(scf_run, "solve_scf", solve)
    with pytest.raises(RelaxInterrupted) as e:
        relax_structures([str(first), str(second)], BuildOptions(gaussians=2), out_dir=str(out))
    assert isinstance(e.value, KeyboardInterrupt)
    assert [r.path for r in e.value.finished] == [str(first)] and e.value.running == str(second)
    assert e.value.finished[0].relaxed_path == str(out / "a.relaxed.extxyz") and e.value.finished[0].converged
    for worker in [t for t in threading.enumerate() if t.name == "stobuilder-relax"]:
        worker.join(30)  # the worker ends at its next step and writes nothing more
        assert not worker.is_alive()
    assert sorted(os.listdir(out)) == ["a.nw", "a.relaxed.extxyz"]


def test_relax_applies_a_zeta_library_file(tmp_path, capsys):
    h2 = tmp_path / "h2.xyz"
    h2.write_text("2\n\nH 0 0 0\nH 0 0 0.74\n")
    library = tmp_path / "lib.toml"
    library.write_text("[C]\n2p = 1.7\n[H]\n1s = 1.24\n")
    code, out, err = run_cli(["relax", str(h2), "--zeta-file", str(library), "--out", str(tmp_path / "out"), "--json"],
                          capsys)
    assert code == 0, err
    assert "1s 1.240000" in (tmp_path / "out" / "h2.nw").read_text()

