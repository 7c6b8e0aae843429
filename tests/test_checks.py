"""SCF checks against textbook results and exact one-function energies; and the checks of
``build --check``: they never fail after files are written, nor with a traceback.

The contract (README "Checks"): every structure is read, its geometry and electron counts
checked, its basis built and its SCF checks run before the first file is written; a check that
fails writes nothing. An explicit --method applies to the structure; free atoms take the method
their own electron count allows, and the output says so. A structure too big for an SCF within
the memory limit (STOBUILDER_MAX_MEMORY) is refused before any SCF, or checked by its free atoms;
a long SCF prints its cycles on stderr.
"""

import os

import numpy as np
import pytest
from ase.build import molecule
from ase.io import write

import stobuilder
from stobuilder.checks.structure import check_free_atom, check_structure
from stobuilder.scf.mole import make_mole
from stobuilder.scf.run import run_scf
from stobuilder.core.errors import InputError
from stobuilder.model.structures import Structure
from support import assert_bad_input, run_cli, strict_json, xyz
from stobuilder.scf import run as scf_run

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
    # A target of 1e-4 hartree at N = 6 was once asked for. That is not what a least-squares
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


# ---------------------------------------------------------------------------- the SCF method of the structure and of its free atoms


def test_rhf_on_ammonia_applies_to_the_structure_and_free_atoms_say_what_they_took(tmp_path, capsys):
    # NH3 is closed shell, its H and N atoms are not
    src = tmp_path / "ammonia.xyz"
    write(src, molecule("NH3"))  # ASE G2 geometry
    code, out, err = run_cli(["build", str(src), "--check", "--method", "rhf", "--out", str(tmp_path / "o"), "--json"], capsys)
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
    code, out, err = run_cli(["build", str(src), "--check", "--method", "uhf", "--out", str(tmp_path / "o"), "--json"], capsys)
    assert code == 0, err
    (report,) = strict_json(out)["structures"]
    assert report["check"]["method"] == "UHF" and report["notes"] == []


def test_rhf_on_an_open_shell_structure_is_refused_before_writing(tmp_path, capsys):
    src = tmp_path / "ammonia.xyz"
    write(src, molecule("NH3"))
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(src), "--check", "--method", "rhf", "--spin", "2", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "RHF needs a closed shell")


def test_method_choice_lives_in_one_place():
    from stobuilder.model.methods import free_atom_method, pick_method

    assert pick_method("auto", 0) == "RHF" and pick_method("auto", 2) == "ROHF"
    assert free_atom_method("rhf", 1, "H") == ("ROHF", "H: ROHF (RHF needs a closed shell; it has 1 unpaired electron)")
    assert free_atom_method("uhf", 1) == ("UHF", "")
    with pytest.raises(InputError, match="RHF needs a closed shell"):
        pick_method("rhf", 1)
    with pytest.raises(InputError, match="unknown SCF method"):
        pick_method("mp2", 0)



# ---------------------------------------------------------------------------- electrons that do not fit, checks that fail


@pytest.mark.parametrize("charge", ["-8", "-30"])
def test_electrons_that_do_not_fit_the_basis_are_refused_before_the_scf(tmp_path, capsys, charge):
    # NH3 in a minimal basis has 8 functions: at most 16 electrons
    src = tmp_path / "ammonia.xyz"
    write(src, molecule("NH3"))
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(src), "--check", "--charge", charge, "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "do not fit in the 8 basis functions")


@pytest.mark.parametrize("charge", ["+11", "200"])
def test_charges_that_leave_no_electrons(tmp_path, capsys, charge):
    src = tmp_path / "w.xyz"
    write(src, molecule("H2O"))
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(src), "--check", "--charge", charge, "--out", str(out_dir)], capsys)
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
    code, _, err = run_cli(["build", str(first), str(second), "--check", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(second), "the SCF check failed (LinAlgError")


def test_a_failed_check_keeps_the_old_files_under_force(tmp_path, capsys, monkeypatch):
    import stobuilder.checks.structure as checks

    src = tmp_path / "w.xyz"
    write(src, molecule("H2O"))
    out_dir = tmp_path / "o"
    assert run_cli(["build", str(src), "--out", str(out_dir)], capsys)[0] == 0
    before = (out_dir / "w.nw").read_bytes()

    def failing(*args, **kwargs):
        raise OverflowError("math range error")

    monkeypatch.setattr(checks, "check_structure", failing)
    code, _, err = run_cli(["build", str(src), "--check", "--force", "--gaussians", "6", "--out", str(out_dir)], capsys)
    assert code == 2 and "OverflowError" in err
    assert (out_dir / "w.nw").read_bytes() == before
    assert sorted(os.listdir(out_dir)) == ["w.nw"]  # no temporary file left


def test_exact_sto_scf_on_far_off_zeta_is_an_error_naming_the_atom(capsys):
    # from 2s ζ = 0.001 the ζ optimisation overflows (measured: OverflowError in exp); the
    # exact-STO engine's numerical failures end as one line naming the atom
    code, out, err = run_cli(["atom", "C", "--zeta", "2s=0.001", "--optimize"], capsys)
    assert code == 2 and out == "" and err.count("\n") == 1
    assert err.startswith("stobuilder: error: C [He] 2s2 2p2: the exact-STO ζ optimisation failed numerically")



# ---------------------------------------------------------------------------- atom and build agree


def test_atom_and_build_give_one_energy(tmp_path, capsys):
    """``atom X --gaussians N`` is the basis ``build`` writes for X in the same SCF state: a
    free-atom structure through ``build --check`` (default spin: the ground state's, Hund's rule)
    gives the same energy to 1e-9 hartree. (Before, atom fitted each subshell on its own: C at
    N = 3 gave −37.225692 against build's −37.228007 hartree.)"""
    for symbol, n in (("C", "3"), ("O", "6"), ("Fe", "3")):
        src = xyz(tmp_path / f"{symbol}.xyz", [f"{symbol} 0 0 0"])
        code, out, err = run_cli(["build", str(src), "--check", "--gaussians", n, "--out", str(tmp_path / symbol), "--json"], capsys)
        assert code == 0, err
        (report,) = strict_json(out)["structures"]
        code, out, err = run_cli(["atom", symbol, "--gaussians", n, "--json"], capsys)
        assert code == 0, err
        atom = strict_json(out)
        (row,) = atom["gaussian"]
        assert report["check"]["method"] == atom["method"].upper()
        assert report["check"]["converged"] and row["converged"]
        assert abs(report["check"]["energy_hartree"] - row["energy_hartree"]) < 1e-9, symbol



# ---------------------------------------------------------------------------- the size guard and progress


@pytest.mark.parametrize("command", [["relax"], ["tune"]])
def test_a_5000_atom_structure_is_refused_before_any_scf(big, tmp_path, capsys, no_scf, monkeypatch, command):
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    out = tmp_path / "out"
    target = ["--out", str(out)] if command == ["relax"] else ["--out", str(tmp_path / "z.toml")]
    code, _, err = run_cli([*command, str(big), *target], capsys)
    # 5000 basis functions: in-core integrals 5000⁴/1e6 MB would not fit, so direct SCF,
    # 40·8·5000² bytes = 8000 MB of matrices + 250 MB buffers (stobuilder.checks.structure.scf_size)
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


def test_build_check_of_5000_atoms_checks_free_atoms_within_the_limit(big, tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    code, out, err = run_cli(["build", str(big), "--check", "--json", "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    check = strict_json(out)["structures"][0]["check"]
    assert check["target"] == "free atoms" and "5000 basis functions" in check["reason"]


def test_a_small_molecule_passes_the_guard(tmp_path, capsys, monkeypatch):
    monkeypatch.delenv("STOBUILDER_MAX_MEMORY", raising=False)
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    code, out, err = run_cli(["build", str(path), "--check", "--json", "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    assert strict_json(out)["structures"][0]["check"]["converged"] is True


def test_a_long_scf_prints_its_cycles_on_stderr(tmp_path, capsys, monkeypatch):
    import stobuilder.checks.structure as checks

    monkeypatch.setattr(scf_run, "PROGRESS_SECONDS", 0.0)  # every SCF counts as long
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    code, _, err = run_cli(["build", str(path), "--check", "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    lines = [line for line in err.splitlines() if "SCF (RHF, 7 basis functions): cycle " in line]
    assert lines and all(line.startswith("stobuilder: ") and " hartree, " in line and "s elapsed" in line for line in lines)
    assert [int(line.split("cycle ")[1].split(",")[0]) for line in lines][:2] == [1, 2]

