"""Issue 16, class 1: the SCF check never fails after files are written, nor with a traceback.

The contract (README "Checks"): every structure is read, its geometry and electron counts
checked, its basis built and its SCF checks run before the first file is written; a check that
fails writes nothing. An explicit --method applies to the structure; free atoms take the method
their own electron count allows, and the output says so.
"""

import json
import os

import numpy as np
import pytest
from ase.build import molecule
from ase.io import write

from stobuilder.cli import main
from stobuilder.core.errors import InputError


def strict_json(text):
    """json.loads that refuses NaN and Infinity (RFC 8259 has neither)."""

    def refuse(name):
        raise ValueError(f"not strict JSON: {name}")

    return json.loads(text, parse_constant=refuse)


def run(argv, capsys):
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def assert_bad_input(code, err, out_dir, *words):
    """Exit 2, one line `stobuilder: error: ...` naming the problem, nothing written."""
    assert code == 2
    assert err.startswith("stobuilder: error: ") and err.count("\n") == 1, err
    for word in words:
        assert word in err, err
    assert not os.path.exists(out_dir) or os.listdir(out_dir) == []


def xyz(path, lines):
    path.write_text(f"{len(lines)}\n\n" + "\n".join(lines) + "\n")
    return path


def test_rhf_on_ammonia_applies_to_the_structure_and_free_atoms_say_what_they_took(tmp_path, capsys):
    # the example: NH3 is closed shell, H and N atoms are not
    src = tmp_path / "ammonia.xyz"
    write(src, molecule("NH3"))  # ASE G2 geometry
    code, out, err = run(["build", str(src), "--check", "--method", "rhf", "--out", str(tmp_path / "o"), "--json"], capsys)
    assert code == 0, err
    (report,) = strict_json(out)["structures"]
    check = report["check"]
    assert check["target"] == "structure" and check["method"] == "RHF" and check["converged"]
    assert {a["symbol"] for a in check["exact_sto_atoms"]} == {"H", "N"}
    notes = " ".join(report["notes"])
    assert "free atom H 1s1: ROHF" in notes and "free atom N [He] 2s2 2p3: ROHF" in notes
    assert (tmp_path / "o" / "ammonia.nw").is_file()


def test_uhf_request_applies_to_free_atoms_too(tmp_path, capsys):
    src = tmp_path / "w.xyz"
    write(src, molecule("H2O"))
    code, out, err = run(["build", str(src), "--check", "--method", "uhf", "--out", str(tmp_path / "o"), "--json"], capsys)
    assert code == 0, err
    (report,) = strict_json(out)["structures"]
    assert report["check"]["method"] == "UHF" and report["notes"] == []


def test_rhf_on_an_open_shell_structure_is_refused_before_writing(tmp_path, capsys):
    src = tmp_path / "ammonia.xyz"
    write(src, molecule("NH3"))
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(src), "--check", "--method", "rhf", "--spin", "2", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "RHF needs a closed shell")


@pytest.mark.parametrize(
    "atoms, words",
    [
        (["H 0 0 0", "H 0 0 0"], ["0 Å apart"]),  # two atoms at one position (the example)
        (["H 0 0 0", "H 0.00001 0 0"], ["1e-05 Å apart"]),  # 1e-5 Å apart (the example)
        (["O 0 0 0", "H 0.05 0 0", "H 0 0.96 0"], ["atoms 1 (O) and 2 (H)", "0.05 Å apart"]),
        (["H 0 0 0", "H nan 0 0"], ["atom 2 (H)", "not a finite number"]),  # NaN coordinates
        (["H 0 0 0", "H 0 inf 0"], ["atom 2 (H)", "not a finite number"]),
        (["H 0 0 0", "H 0 0 1e300"], ["beyond 1e6"]),
    ],
)
def test_bad_geometry_is_an_error_before_any_file(tmp_path, capsys, atoms, words):
    src = xyz(tmp_path / "bad.xyz", atoms)
    out_dir = tmp_path / "o"
    for check in ([], ["--check"]):
        code, _, err = run(["build", str(src), "--out", str(out_dir), *check], capsys)
        assert_bad_input(code, err, out_dir, str(src), *words)


def test_the_minimum_distance_is_0_1_angstrom(tmp_path, capsys):
    # just above the stated minimum (README) is accepted, just below is not
    ok = xyz(tmp_path / "ok.xyz", ["H 0 0 0", "H 0.1001 0 0"])
    assert run(["build", str(ok), "--out", str(tmp_path / "a")], capsys)[0] == 0
    bad = xyz(tmp_path / "bad.xyz", ["H 0 0 0", "H 0.0999 0 0"])
    code, _, err = run(["build", str(bad), "--out", str(tmp_path / "b")], capsys)
    assert_bad_input(code, err, tmp_path / "b", "closer than the 0.1 Å")


@pytest.mark.parametrize("charge", ["-8", "-30"])
def test_electrons_that_do_not_fit_the_basis_are_refused_before_the_scf(tmp_path, capsys, charge):
    # NH3 in a minimal basis has 8 functions: at most 16 electrons
    src = tmp_path / "ammonia.xyz"
    write(src, molecule("NH3"))
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(src), "--check", "--charge", charge, "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "do not fit in the 8 basis functions")


@pytest.mark.parametrize("charge", ["+11", "200"])
def test_charges_that_leave_no_electrons(tmp_path, capsys, charge):
    src = tmp_path / "w.xyz"
    write(src, molecule("H2O"))
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(src), "--check", "--charge", charge, "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "electrons")


def test_a_check_that_raises_writes_nothing_and_names_the_file(tmp_path, capsys, monkeypatch):
    """An SCF failing numerically inside PySCF (injected: a LinAlgError) is a one-line error
    naming the structure, and none of the build's files is written, not even those of the
    structures checked before it."""
    import stobuilder.checks.structure as checks

    real = checks.check_structure

    def failing(structure, basis, method="auto"):
        if structure.formula == "H3N":
            raise np.linalg.LinAlgError("Matrix is not positive definite")
        return real(structure, basis, method=method)

    monkeypatch.setattr(checks, "check_structure", failing)
    first, second = tmp_path / "a.xyz", tmp_path / "b.xyz"
    write(first, molecule("H2O"))
    write(second, molecule("NH3"))
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(first), str(second), "--check", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(second), "the SCF check failed (LinAlgError")


def test_a_failed_check_keeps_the_old_files_under_force(tmp_path, capsys, monkeypatch):
    import stobuilder.checks.structure as checks

    src = tmp_path / "w.xyz"
    write(src, molecule("H2O"))
    out_dir = tmp_path / "o"
    assert run(["build", str(src), "--out", str(out_dir)], capsys)[0] == 0
    before = (out_dir / "w.nw").read_bytes()

    def failing(*args, **kwargs):
        raise OverflowError("math range error")

    monkeypatch.setattr(checks, "check_structure", failing)
    code, _, err = run(["build", str(src), "--check", "--force", "--gaussians", "6", "--out", str(out_dir)], capsys)
    assert code == 2 and "OverflowError" in err
    assert (out_dir / "w.nw").read_bytes() == before
    assert sorted(os.listdir(out_dir)) == ["w.nw"]  # no temporary file left


def test_batch_item_whose_check_raises_fails_and_writes_nothing(tmp_path, capsys, monkeypatch):
    import concurrent.futures as cf

    import stobuilder.checks.structure as checks
    from stobuilder.batch import discover, run_batch
    from stobuilder.pipeline.options import BuildOptions

    def failing(*args, **kwargs):
        raise np.linalg.LinAlgError("singular")

    monkeypatch.setattr(checks, "check_structure", failing)
    (tmp_path / "in").mkdir()
    write(tmp_path / "in" / "w.xyz", molecule("H2O"))
    out = tmp_path / "out"
    summary = run_batch(discover([str(tmp_path / "in")]), BuildOptions(check=True), str(out),
                        executor=cf.ThreadPoolExecutor(1))
    assert (summary.done, summary.failed) == (0, 1)
    assert "the SCF check failed (LinAlgError: singular)" in summary.failures[0][1]
    assert not (out / "w.nw").exists()


def test_atom_and_build_give_one_energy(tmp_path, capsys):
    """``atom X --gaussians N`` is the basis ``build`` writes for X in the same SCF state: a
    free-atom structure through ``build --check`` (default spin: the ground state's, Hund's rule)
    gives the same energy to 1e-9 hartree. (Before, atom fitted each subshell on its own: C at
    N = 3 gave −37.225692 against build's −37.228007 hartree, issue 15.)"""
    for symbol, n in (("C", "3"), ("O", "6"), ("Fe", "3")):
        src = xyz(tmp_path / f"{symbol}.xyz", [f"{symbol} 0 0 0"])
        code, out, err = run(["build", str(src), "--check", "--gaussians", n, "--out", str(tmp_path / symbol), "--json"], capsys)
        assert code == 0, err
        (report,) = strict_json(out)["structures"]
        code, out, err = run(["atom", symbol, "--gaussians", n, "--json"], capsys)
        assert code == 0, err
        atom = strict_json(out)
        (row,) = atom["gaussian"]
        assert report["check"]["method"] == atom["method"].upper()
        assert report["check"]["converged"] and row["converged"]
        assert abs(report["check"]["energy_hartree"] - row["energy_hartree"]) < 1e-9, symbol


def test_a_free_atom_structure_defaults_to_the_ground_state_spin(tmp_path):
    # Hund's rule ground states (NIST Atomic Spectra Database, ground levels): O 3P (2S = 2),
    # Fe 5D (2S = 4), N 4S (2S = 3); a molecule keeps the lowest spin
    from stobuilder.model.structures import read_structures

    for symbol, spin in (("O", 2), ("Fe", 4), ("N", 3), ("He", 0)):
        (frame,) = read_structures(xyz(tmp_path / f"{symbol}.xyz", [f"{symbol} 0 0 0"]))
        assert frame.spin == spin
    (frame,) = read_structures(xyz(tmp_path / "o2.xyz", ["O 0 0 0", "O 0 0 1.21"]))
    assert frame.spin == 0


def test_method_choice_lives_in_one_place():
    from stobuilder.model.methods import free_atom_method, pick_method

    assert pick_method("auto", 0) == "RHF" and pick_method("auto", 2) == "ROHF"
    assert free_atom_method("rhf", 1, "H") == ("ROHF", "H: ROHF (RHF needs a closed shell; it has 1 unpaired electron)")
    assert free_atom_method("uhf", 1) == ("UHF", "")
    with pytest.raises(InputError, match="RHF needs a closed shell"):
        pick_method("rhf", 1)
    with pytest.raises(InputError, match="unknown SCF method"):
        pick_method("mp2", 0)


def test_exact_sto_scf_on_far_off_zeta_is_an_error_naming_the_atom(capsys):
    # from 2s ζ = 0.001 the ζ optimisation overflows (measured: OverflowError in exp); the
    # exact-STO engine's numerical failures end as one line naming the atom
    code, out, err = run(["atom", "C", "--zeta", "2s=0.001", "--optimize"], capsys)
    assert code == 2 and out == "" and err.count("\n") == 1
    assert err.startswith("stobuilder: error: C [He] 2s2 2p2: the exact-STO ζ optimisation failed numerically")


# ---------------------------------------------------------------------------- size guard and progress (issue 21)


def _h_lattice(path, count, spacing=1.5):
    """``count`` H atoms on a simple cubic lattice of ``spacing`` Å (built with numpy)."""
    side = int(np.ceil(count ** (1 / 3)))
    grid = np.stack(np.meshgrid(*[np.arange(side)] * 3, indexing="ij"), -1).reshape(-1, 3)[:count] * spacing
    path.write_text(f"{count}\n\n" + "\n".join(f"H {x:.3f} {y:.3f} {z:.3f}" for x, y, z in grid) + "\n")
    return path


@pytest.fixture()
def big(tmp_path):
    return _h_lattice(tmp_path / "h5000.xyz", 5000)


@pytest.mark.parametrize("command", [["relax"], ["tune"]])
def test_a_5000_atom_structure_is_refused_before_any_scf(big, tmp_path, capsys, no_scf, monkeypatch, command):
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    out = tmp_path / "out"
    target = ["--out", str(out)] if command == ["relax"] else ["--out", str(tmp_path / "z.toml")]
    code, _, err = run([*command, str(big), *target], capsys)
    # 5000 basis functions: in-core integrals 5000⁴/1e6 MB would not fit, so direct SCF,
    # 40·8·5000² bytes = 8000 MB of matrices + 250 MB buffers (stobuilder.scf.size.scf_size)
    assert_bad_input(code, err, out, str(big), "5000 basis functions", "8,250 MB", "4,000 MB", "STOBUILDER_MAX_MEMORY")
    assert not (tmp_path / "z.toml").exists()


def test_the_size_guard_sits_in_check_electrons_and_its_limit_can_be_raised(big, monkeypatch):
    from stobuilder import build_basis, read_structures
    from stobuilder.pipeline.path import check_electrons

    (frame,) = read_structures(str(big))
    basis = build_basis(["H"])
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    with pytest.raises(InputError, match="direct SCF"):
        check_electrons(frame, basis, "auto")
    monkeypatch.setenv("STOBUILDER_MAX_MEMORY", "9000")
    check_electrons(frame, basis, "auto")  # fits under the raised limit (no SCF runs here)
    check_electrons(frame, basis, "auto", checks=True)  # the checks take its free atoms instead
    monkeypatch.setenv("STOBUILDER_MAX_MEMORY", "lots")
    with pytest.raises(InputError, match="STOBUILDER_MAX_MEMORY='lots'"):
        check_electrons(frame, basis, "auto")


def test_the_calculator_refuses_a_5000_atom_molecule_before_its_scf(big, no_scf, monkeypatch):
    from ase.io import read

    from stobuilder.calculator import STOCalculator

    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    atoms = read(str(big))
    atoms.calc = STOCalculator()
    with pytest.raises(InputError, match="5000 basis functions"):
        atoms.get_potential_energy()


def test_build_check_of_5000_atoms_checks_free_atoms_within_the_limit(big, tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    code, out, err = run(["build", str(big), "--check", "--json", "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    check = strict_json(out)["structures"][0]["check"]
    assert check["target"] == "free atoms" and "5000 basis functions" in check["reason"]


def test_a_small_molecule_passes_the_guard(tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    code, out, err = run(["build", str(path), "--check", "--json", "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    assert strict_json(out)["structures"][0]["check"]["converged"] is True


def test_a_long_scf_prints_its_cycles_on_stderr(tmp_path, capsys, monkeypatch):
    import stobuilder.scf.run as scf_run

    monkeypatch.setattr(scf_run, "PROGRESS_SECONDS", 0.0)  # every SCF counts as long
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    code, _, err = run(["build", str(path), "--check", "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    lines = [line for line in err.splitlines() if "SCF (RHF, 7 basis functions): cycle " in line]
    assert lines and all(line.startswith("stobuilder: ") and " hartree, " in line and "s elapsed" in line for line in lines)
    assert [int(line.split("cycle ")[1].split(",")[0]) for line in lines][:2] == [1, 2]


@pytest.fixture()
def bench_threads(monkeypatch):
    """The bench's calculations in a thread of this process, where ``no_scf`` reaches them."""
    import concurrent.futures as cf

    from stobuilder.jobs import executors

    monkeypatch.setattr(executors, "local_executor", lambda workers: cf.ThreadPoolExecutor(1))


def test_bench_refuses_a_molecule_too_big_for_memory_before_any_scf(big, tmp_path, capsys, no_scf, bench_threads,
                                                                     monkeypatch):
    # issue 21: "bench tried to allocate 60 GiB"; the same estimate as relax and tune (above)
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    out = tmp_path / "out"
    code, _, err = run(["bench", str(big), "--out", str(out), "--progress", "off"], capsys)
    assert_bad_input(code, err, out, str(big), "5000 basis functions", "8,250 MB", "4,000 MB", "STOBUILDER_MAX_MEMORY")


def test_bench_refuses_a_reference_basis_too_big_for_memory_before_any_scf(tmp_path, capsys, no_scf, bench_threads,
                                                                           monkeypatch):
    # CH4 in cc-pVTZ: C 4s3p2d1f = 30 and H 3s2p1d = 14 spherical functions (Dunning, J. Chem. Phys. 90,
    # 1007 (1989); value from memory), 86 in all: its integrals, 86⁴/1e6 = 54.7 MB, do not fit in
    # 0.95 × 20 MB, so direct SCF, 250 MB of buffers + 40·8·86² bytes (stobuilder.scf.size.scf_size);
    # the minimal basis, 9 functions, fits (about 0.03 MB)
    from stobuilder.scf.size import scf_size

    monkeypatch.setenv("STOBUILDER_MAX_MEMORY", "20")
    expected = scf_size(86, "RHF", 20.0)
    assert not expected.incore
    out = tmp_path / "out"
    code, _, err = run(["bench", "--set", "g2-1", "CH4", "--reference", "cc-pvtz", "--out", str(out), "--progress", "off"],
                       capsys)
    assert_bad_input(code, err, out, "CH4 in cc-pvtz", "86 basis functions", f"about {expected.memory_mb:,.0f} MB",
                     "limit of 20 MB", "STOBUILDER_MAX_MEMORY")
    assert scf_size(9, "RHF", 20.0).fits
