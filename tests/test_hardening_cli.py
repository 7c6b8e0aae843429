"""Smaller contracts of the command line (issue 16, class 7): no file is replaced without
--force (an existing --plot file, a dangling symbolic link at a target); errors from deep inside
name the element, its configuration and the rule; a closed pipe ends the program quietly; a zeta
file cannot name one element twice; ``atom --json`` says whether the SCF converged; an on-demand
optimisation reports progress on stderr.

The exit status of a command whose output pipe closed: 141 = 128 + SIGPIPE (13), what POSIX
shells report for a process ended by SIGPIPE (`yes | head -1`), or 0: common practice, no source.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from cli_run import assert_one_line_error as _one_line_error
from cli_run import run_cli as _run

ROOT = Path(__file__).resolve().parents[1]


def child_env(**extra) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["OMP_NUM_THREADS"] = "1"
    env.update(extra)
    return env




@pytest.fixture()
def hydrogen(tmp_path):
    path = tmp_path / "h.xyz"
    path.write_text("1\n\nH 0.0 0.0 0.0\n")
    return str(path)


# ---------------------------------------------------------------------------- nothing replaced without --force


def test_fit_plot_refuses_an_existing_file_and_a_dangling_link(tmp_path, capsys):
    pytest.importorskip("matplotlib")
    existing = tmp_path / "fit.png"
    existing.write_bytes(b"mine")
    code, _, err = _run(["fit", "1s", "--plot", str(existing)], capsys)
    _one_line_error(code, err)
    assert "--force" in err and existing.read_bytes() == b"mine"
    dangling = tmp_path / "link.png"
    dangling.symlink_to(tmp_path / "elsewhere" / "x.png")
    code, _, err = _run(["fit", "1s", "--plot", str(dangling)], capsys)
    _one_line_error(code, err)
    assert "dangling" in err and dangling.is_symlink()
    code, _, err = _run(["fit", "1s", "--plot", str(existing), "--force"], capsys)
    assert code == 0, err
    assert existing.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification, W3C 2003)


def test_a_dangling_link_at_a_build_target_is_not_replaced_without_force(hydrogen, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    link = out / "h.nw"
    link.symlink_to(tmp_path / "nowhere.nw")
    code, _, err = _run(["build", hydrogen, "--out", str(out)], capsys)
    _one_line_error(code, err)
    assert "h.nw" in err and "dangling" in err
    assert link.is_symlink() and not (tmp_path / "nowhere.nw").exists()
    split = out / "h.H.gbs"
    split.symlink_to(tmp_path / "nowhere.gbs")
    code, _, err = _run(["build", hydrogen, "--out", str(out), "--code", "gaussian", "--split-elements"], capsys)
    _one_line_error(code, err)
    code, _, err = _run(["build", hydrogen, "--out", str(out), "--force"], capsys)
    assert code == 0, err
    assert link.is_file() and not link.is_symlink() and "basis" in link.read_text().lower()


# ---------------------------------------------------------------------------- deep errors name where they come from


@pytest.mark.parametrize("argv, words", [
    (["zeta", "H: 6f1"], ["H 6f1", "rule slater", "6f"]),
    (["zeta", "H: 7s1"], ["H 7s1", "rule slater", "n = 7"]),
    (["zeta", "Fe: [Ar] 3d6 7s2", "--rule", "clementi"], ["Fe [Ar] 3d6 7s2", "rule clementi", "7s"]),
    (["atom", "H", "--charge", "-5"], ["H [He] 2s2 2p2", "charge -5", "ζ = -0.875"]),
    (["zeta", "H", "--charge", "-5"], ["H [He] 2s2 2p2", "charge -5", "Zeff = -1.75"]),
    # Li⁸⁻ [Ne] 3s1: S(2s) = 7·0.35 + 2·0.85 = 4.15, Zeff = 3 − 4.15 = −1.15 (Slater 1930)
    (["atom", "Li", "--charge", "-8"], ["Li [Ne] 3s1", "charge -8", "subshell 2s", "Zeff = -1.15"]),
])
def test_deep_errors_name_the_element_configuration_and_rule(argv, words, capsys):
    # Slater's rules for H⁵⁻ 1s2 2s2 2p2: S(2s) = 3·0.35 + 2·0.85 = 2.75, Zeff = 1 − 2.75 = −1.75,
    # ζ = Zeff/2 = −0.875 (J. C. Slater, Phys. Rev. 36, 57, 1930)
    code, _, err = _run(argv, capsys)
    _one_line_error(code, err)
    for word in words:
        assert word in err, (word, err)


def test_build_with_an_impossible_anion_writes_nothing(hydrogen, tmp_path, capsys):
    out = tmp_path / "out"
    code, _, err = _run(["build", hydrogen, "--charge", "-5", "--out", str(out)], capsys)
    _one_line_error(code, err)
    assert "H [He] 2s2 2p2" in err and not out.exists()


# ---------------------------------------------------------------------------- closed pipes


def _closed_early(args):
    """Run the command line, read one line of its output, close the pipe; (status, stderr)."""
    proc = subprocess.Popen([sys.executable, "-m", "stobuilder.cli", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, env=child_env())
    proc.stdout.readline()
    proc.stdout.close()
    err = proc.stderr.read().decode()
    proc.stderr.close()
    return proc.wait(timeout=120), err


@pytest.mark.parametrize("args", [["formats"], ["formats", "--json"],
                                  ["zeta", *"H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co "
                                   "Ni Cu Zn Ga Ge As Se Br Kr".split() * 12, "--json"]])
def test_a_closed_pipe_ends_quietly(args):
    status, err = _closed_early(args)
    assert status in (0, 141), (status, err)
    assert err == "", err


def test_a_closed_pipe_through_the_shell(tmp_path):
    command = f"set -o pipefail; {sys.executable} -m stobuilder.cli formats | head -1"
    run = subprocess.run(["bash", "-c", command], capture_output=True, text=True, env=child_env(), timeout=120)
    assert run.stdout.startswith("name") and run.stdout.count("\n") == 1
    assert run.stderr == "" and run.returncode in (0, 141)


# ---------------------------------------------------------------------------- zeta files


@pytest.mark.parametrize("text, words", [
    ("[H]\n1s = 1.2\n[h]\n1s = 1.3\n", ["[H]", "[h]", "element H"]),
    ("[Fe]\n3d = 2.1\n[FE]\n4s = 1.1\n", ["[Fe]", "[FE]"]),
    ('[H]\n1s = 1.2\n" 1s" = 1.3\n', ["1s twice"]),
])
def test_a_zeta_file_cannot_name_one_element_or_subshell_twice(hydrogen, tmp_path, capsys, text, words):
    path = tmp_path / "z.toml"
    path.write_text(text)
    code, _, err = _run(["build", hydrogen, "--zeta-file", str(path), "--out", str(tmp_path / "out")], capsys)
    _one_line_error(code, err)
    for word in words:
        assert word in err
    assert not (tmp_path / "out").exists()


def test_a_zeta_file_with_a_utf8_byte_order_mark_is_read(hydrogen, tmp_path, capsys):
    path = tmp_path / "z.toml"
    path.write_bytes(b"\xef\xbb\xbf[H]\n1s = 1.24\n")  # the BOM some editors put first
    code, out, err = _run(["build", hydrogen, "--zeta-file", str(path), "--json", "--out", str(tmp_path / "out")],
                          capsys)
    assert code == 0, err
    assert "1s 1.240000" in (tmp_path / "out" / "h.nw").read_text()
    import stobuilder

    assert stobuilder.load_zeta_file(str(path)) == {"H": {"1s": 1.24}}


# ---------------------------------------------------------------------------- atom --json


def test_atom_json_says_whether_the_scf_converged(capsys):
    code, out, err = _run(["atom", "He", "--zeta", "1s=1.6875", "--gaussians", "3", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["converged"] is True and doc["gaussian"][0]["converged"] is True
    # He 1s² with ζ = 27/16: E = −(27/16)² = −2.84765625 hartree (the variational textbook result,
    # e.g. I. N. Levine, Quantum Chemistry, 7th ed., 2014, sec. 9.4)
    assert doc["energy_exact_hartree"] == pytest.approx(-(27 / 16) ** 2, abs=1e-10)


# ---------------------------------------------------------------------------- progress of on-demand optimisation


def test_on_demand_optimisation_reports_progress_and_gives_the_same_result(tmp_path, capsys, monkeypatch):
    from stobuilder.checks.atom import optimize_zeta
    from stobuilder.model.elements import ground_state
    from stobuilder.screening import optimized

    monkeypatch.setenv("STOBUILDER_CACHE_DIR", str(tmp_path / "cache" / "fits"))
    monkeypatch.setattr(optimized, "PROGRESS_SECONDS", 0.0)
    optimized._optimise.cache_clear()
    code, out, err = _run(["zeta", "Mg", "--charge", "1", "--rule", "optimized", "--json"], capsys)
    assert code == 0, err
    assert "stobuilder: optimising ζ of Mg [Ne] 3s1" in err
    assert "BFGS step 1" in err and "ζ optimised in" in err
    shown = {s["label"]: s["zeta"] for s in json.loads(out)["elements"][0]["shells"] if s["label"] != "3p"}
    quiet = optimize_zeta("Mg", configuration=ground_state("Mg", 1)).zeta  # no progress callback
    assert shown == dict(quiet)  # bit for bit: progress lines compute nothing
    optimized._optimise.cache_clear()
    code, _, err = _run(["zeta", "Mg", "--charge", "1", "--rule", "optimized"], capsys)  # now from the disk cache
    assert code == 0 and "optimising" not in err
    optimized._optimise.cache_clear()


# ---------------------------------------------------------------------------- a zeta file is a library; flags named (issue 21)


def test_build_applies_a_zeta_library_file_where_its_elements_occur(hydrogen, tmp_path, capsys):
    library = tmp_path / "lib.toml"
    library.write_text("[C]\n2p = 1.7\n[O]\n2p = 2.3\n[H]\n1s = 1.24\n")  # tune's file for a training set
    code, out, err = _run(["build", hydrogen, "--zeta-file", str(library), "--out", str(tmp_path / "out")], capsys)
    assert code == 0, err
    assert "1s 1.240000" in (tmp_path / "out" / "h.nw").read_text()


@pytest.mark.parametrize("text, words", [("[C]\n2p = 1.7\n[O]\n2p = 2.3\n", "C, O"), ("", "no ζ"), ("[H]\n", "no ζ")])
def test_build_refuses_a_zeta_file_naming_none_of_the_elements(hydrogen, tmp_path, capsys, text, words):
    library = tmp_path / "lib.toml"
    library.write_text(text)
    code, _, err = _run(["build", hydrogen, "--zeta-file", str(library), "--out", str(tmp_path / "out")], capsys)
    _one_line_error(code, err)
    assert f"--zeta-file {library}:" in err and words in err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("argv, words", [
    (["--zeta", "C:2p=1.0"], "--zeta names elements in no structure: C"),
    (["--charge", "5000"], "--charge must be <= 1000"),
    (["--gaussians", "13"], "--gaussians must be <= 12"),
    (["--zeta", "H:1s=abc"], "--zeta 'H:1s=abc'"),
])
def test_cli_errors_name_the_flag(hydrogen, tmp_path, capsys, argv, words):
    code, _, err = _run(["build", hydrogen, *argv, "--out", str(tmp_path / "out")], capsys)
    _one_line_error(code, err)
    assert words in err, err


def test_relax_applies_a_zeta_library_file(tmp_path, capsys):
    h2 = tmp_path / "h2.xyz"
    h2.write_text("2\n\nH 0 0 0\nH 0 0 0.74\n")
    library = tmp_path / "lib.toml"
    library.write_text("[C]\n2p = 1.7\n[H]\n1s = 1.24\n")
    code, out, err = _run(["relax", str(h2), "--zeta-file", str(library), "--out", str(tmp_path / "out"), "--json"],
                          capsys)
    assert code == 0, err
    assert "1s 1.240000" in (tmp_path / "out" / "h2.nw").read_text()


def test_merge_errors_name_the_flags(hydrogen, tmp_path, capsys):
    target = tmp_path / "b.nw"
    target.write_text('BASIS "ao basis" SPHERICAL\nEND\n')
    code, _, err = _run(["build", hydrogen, "--merge-into", str(target), "--split-elements"], capsys)
    _one_line_error(code, err)
    assert "--merge-into and --split-elements exclude each other" in err


# ---------------------------------------------------------------------------- a tampered fit cache (issue 21)


def _scaled_exponents(doc):
    """The issue's case: every exponent ×1.5 and the checksum made to match the edited entry."""
    from stobuilder.expansion import library

    doc["fit"]["exponents"] = [1.5 * a for a in doc["fit"]["exponents"]]
    doc["sha256"] = library._entry_digest(doc["key"], doc["fit"])
    return json.dumps(doc)


def _edited_coefficient(doc):
    """One coefficient changed, the checksum left as it was."""
    doc["fit"]["coefficients"]["4s"][0] *= 1.01
    return json.dumps(doc)


@pytest.mark.parametrize("tamper", [_scaled_exponents, _edited_coefficient, lambda doc: "{ not json"])
def test_a_tampered_fit_cache_gives_the_same_bytes_as_a_clean_one(tmp_path, tamper):
    """K with --radial effective-n needs the 4s,4p fit at n* = 3.7 (Slater, Phys. Rev. 36, 57
    (1930): n* = 3.7 for n = 4; value from memory), which no shipped library holds: it is fitted
    on demand and cached in $STOBUILDER_CACHE_DIR/fits. Each build runs in a fresh process (no
    fit memoised). A cache file edited after it was written is not used: the build gives the
    bytes of a clean cache, and the file is rewritten as it was."""
    structure = tmp_path / "k.xyz"
    structure.write_text("1\n\nK 0 0 0\n")
    env = child_env(STOBUILDER_CACHE_DIR=str(tmp_path / "cache"))

    def build(out):
        run = subprocess.run([sys.executable, "-m", "stobuilder.cli", "build", str(structure), "--radial", "effective-n",
                              "--out", str(tmp_path / out)], capture_output=True, text=True, env=env, timeout=120)
        assert run.returncode == 0, run.stderr
        return (tmp_path / out / "k.nw").read_bytes()

    clean = build("clean")
    (entry,) = (tmp_path / "cache" / "fits").iterdir()
    written = entry.read_bytes()
    assert json.loads(written)["fit"]["n_eff"] == {"4s": 3.7, "4p": 3.7}
    entry.write_text(tamper(json.loads(written)))
    assert build("again") == clean
    assert entry.read_bytes() == written
