"""tune at its edges (issue 21): weights that differ by a common factor, a ζ held by a bound of
the search, file names that try to become TOML, output locations checked before the first SCF,
a structure given twice, an interrupted run. H2 with two Gaussians per STO keeps them fast."""

import json
import os
import signal
import subprocess
import sys
import time
import tomllib

import pytest
from pyscf.data.nist import BOHR

from cli_run import assert_one_line_error, run_cli
from stobuilder.core.errors import InputError
from stobuilder.pipeline.options import load_zeta_file
from stobuilder.tune import tune

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
N = ["--gaussians", "2", "--threads", "1"]
# GRADIENT_TOL = 1e-5 hartree at a curvature d²E/d(ln ζ)² ≳ 0.5 hartree (H2, the estimate in
# test_tune.py) puts each search within ~2e-5 of the optimum in ln ζ: two searches agree to 1e-4
# (estimate, common practice, no source)
SAME = 1e-4


@pytest.fixture(autouse=True)
def _one_thread():
    from pyscf import lib

    with lib.with_omp_threads(1):
        yield


def _h2(folder, name="h2.xyz", r_bohr=1.4):
    path = os.path.join(folder, name)
    with open(path, "w") as fh:
        fh.write(f"2\n\nH 0 0 0\nH 0 0 {r_bohr * BOHR:.12f}\n")
    return path


def _tune(capsys, *argv, status=0):
    code, out, err = run_cli(["tune", *argv, *N, "--json"], capsys)
    assert code == status, err
    return json.loads(out, parse_constant=lambda c: pytest.fail(f"non-finite JSON number {c}")), err


# ---------------------------------------------------------------------------- 1. weights


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
    """The case of the issue: h2 = 1e-6 stopped at once at the start ζ."""
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


# ---------------------------------------------------------------------------- 2. bounds


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


# ---------------------------------------------------------------------------- 3. names


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


# ---------------------------------------------------------------------------- 4. --out


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


# ---------------------------------------------------------------------------- 5. twice


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


# ---------------------------------------------------------------------------- 5b. ζ of the options (issue 21)


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


# ---------------------------------------------------------------------------- 6. SIGINT


def test_sigint_is_one_line_exit_130_and_leaves_nothing(tmp_path):
    """SIGINT during the search: "stobuilder: interrupted", exit 130 (128 + SIGINT, the shell's
    convention), no zeta file and no temporary file (nothing finished: a search is one result)."""
    import ase.build
    import ase.io

    path = str(tmp_path / "h2o.xyz")
    ase.io.write(path, ase.build.molecule("H2O"))
    env = dict(os.environ, PYTHONPATH=ROOT, OMP_NUM_THREADS="1")
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
