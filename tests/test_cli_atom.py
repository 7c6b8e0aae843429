"""`stobuilder atom` (its JSON says whether each SCF converged), user exponents on `build`, and the
exact-STO atoms of `build --check`."""

import json

import pytest

from support import run_cli

BOHR = 0.52917721092  # ångström per bohr (CODATA 2010, as PySCF uses)


def test_atom_he_exact_variational_result(capsys):
    code, out, err = run_cli(["atom", "He", "--zeta", "1s=1.6875", "--gaussians", "3", "6", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    # He with one 1s STO of ζ = 27/16: E = −(27/16)² = −2.84765625 hartree (textbook variational result).
    assert doc["energy_exact_hartree"] == pytest.approx(-2.84765625, abs=1e-10)
    assert doc["virial_ratio"] == pytest.approx(2.0, abs=1e-10)  # virial theorem at the optimum ζ
    e3, e6 = (row["energy_hartree"] for row in doc["gaussian"])
    assert -2.84765625 < e6 < e3  # the Gaussian imitations lie above, closer with more Gaussians
    assert set(doc) >= {"element", "configuration", "state", "method", "zeta", "energy_exact_hartree", "virial_ratio", "gaussian"}


def test_atom_optimize_carbon_clementi_raimondi(capsys):
    code, out, err = run_cli(["atom", "C", "--optimize", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    # Clementi & Raimondi, J. Chem. Phys. 38, 2686 (1963): C 1s 5.6727, 2s 1.6083, 2p 1.5679,
    # E = −37.6224 hartree (values from memory).
    assert doc["zeta"]["1s"] == pytest.approx(5.6727, abs=1e-3)
    assert doc["zeta"]["2s"] == pytest.approx(1.6083, abs=1e-3)
    assert doc["zeta"]["2p"] == pytest.approx(1.5679, abs=1e-3)
    assert doc["energy_exact_hartree"] == pytest.approx(-37.6224, abs=5e-4)


def test_atom_text_names_the_element_and_configuration_once(capsys):
    code, out, err = run_cli(["atom", "C"], capsys)
    assert code == 0, err
    first = out.splitlines()[0]
    # C ground configuration [He] 2s2 2p2 and its Hund's-rule ground term 3P (common practice, no source)
    assert first == "C [He] 2s2 2p2 (3P, high-spin ROHF determinant)"
    assert out.count("[He] 2s2 2p2") == 1


def test_atom_text_lists_each_expansion_with_its_norm(capsys):
    # the table's rows are those of the JSON, each named by N and the fitting norm
    code, out, err = run_cli(["atom", "He", "--zeta", "He:1s=1.6875", "--gaussians", "3", "6", "--norm", "h1"], capsys)
    assert code == 0, err
    _, doc, _ = run_cli(["atom", "He", "--zeta", "1s=1.6875", "--gaussians", "3", "--gaussians", "6", "--norm", "h1",
                         "--json"], capsys)
    rows = [line for line in out.splitlines() if line.startswith("  STO-")]
    energies = [row["energy_hartree"] for row in json.loads(doc)["gaussian"]]
    assert [r.split(":")[0] for r in rows] == ["  STO-3G (h1 fit)", "  STO-6G (h1 fit)"]
    assert [f"E = {e:.10f} hartree" in r for r, e in zip(rows, energies)] == [True, True]


@pytest.mark.parametrize(
    "argv,named",
    [
        (["atom", "He", "--zeta", "1s=abc"], "abc"),
        (["atom", "He", "--zeta", "1s=-2"], "positive"),
        (["atom", "He", "--zeta", "2p=1.0"], "2p"),
        (["atom", "Qq"], "Qq"),
    ],
)
def test_atom_bad_input(argv, named, capsys):
    code, out, err = run_cli(argv, capsys)
    assert code == 2 and len(err.strip().splitlines()) == 1 and named in err and "Traceback" not in err


def _h2(tmp_path):
    path = tmp_path / "h2.xyz"
    path.write_text(f"2\n\nH 0 0 0\nH 0 0 {1.4 * BOHR:.10f}\n")
    return path


def test_build_with_zeta_file_gives_szabo_ostlund_h2(tmp_path, capsys):
    # H2 at R = 1.4 bohr, STO-3G with ζ = 1.24: E = −1.1167 hartree (Szabo & Ostlund, Modern
    # Quantum Chemistry, 1989, §3.5.2).
    zfile = tmp_path / "zeta.toml"
    zfile.write_text("[H]\n1s = 1.24\n")
    code, out, err = run_cli(["build", str(_h2(tmp_path)), "--zeta-file", str(zfile), "--check", "--json", "--out", str(tmp_path / "o")], capsys)
    assert code == 0, err
    check = json.loads(out)["structures"][0]["check"]
    assert check["energy_hartree"] == pytest.approx(-1.1167, abs=5e-5)
    (h,) = check["exact_sto_atoms"]
    # One H 1s STO with ζ = 1.24: E = ζ²/2 − ζ = −0.4712 hartree (exact one-electron result).
    assert h["energy_exact_hartree"] == pytest.approx(1.24**2 / 2 - 1.24, abs=1e-10)
    assert h["expansion_error_hartree"] > 0


def test_build_zeta_option_overrides_the_file(tmp_path, capsys):
    zfile = tmp_path / "zeta.toml"
    zfile.write_text("[H]\n1s = 1.0\n")
    code, out, err = run_cli(
        ["build", str(_h2(tmp_path)), "--zeta-file", str(zfile), "--zeta", "H:1s=1.24", "--json", "--out", str(tmp_path / "o")],
        capsys,
    )
    assert code == 0, err
    text = (tmp_path / "o" / "h2.nw").read_text()
    assert "1s 1.240000" in text


@pytest.mark.parametrize(
    "extra,named",
    [
        (["--zeta", "H:2p=1.0"], "2p"),
        (["--zeta", "O:1s=7.0"], "O"),
        (["--zeta", "H1s=1.0"], "ELEMENT:LABEL=VALUE"),
        (["--zeta-file", "missing.toml"], "missing.toml"),
    ],
)
def test_build_bad_zeta(tmp_path, capsys, extra, named):
    out_dir = tmp_path / "never"
    code, out, err = run_cli(["build", str(_h2(tmp_path)), "--out", str(out_dir), *extra], capsys)
    assert code == 2 and named in err and len(err.strip().splitlines()) == 1
    assert not out_dir.exists()


def test_exact_atoms_leave_out_effective_n_stos():
    # The exact-STO integrals cover integer n only; with r^(n*−1) STOs (Slater 1930: n* = 3.7 for
    # n = 4) the K atom has no exact counterpart and is left out rather than compared wrongly.
    import stobuilder
    from stobuilder.checks.structure import exact_sto_atoms

    effective = stobuilder.build_basis(["H", "K"], radial="effective-n")
    assert [a.symbol for a in exact_sto_atoms(effective, ["H", "K"])] == ["H"]
    integer = stobuilder.build_basis(["H", "K"])
    assert [a.symbol for a in exact_sto_atoms(integer, ["H", "K"])] == ["H", "K"]


def test_atom_json_says_whether_the_scf_converged(capsys):
    code, out, err = run_cli(["atom", "He", "--zeta", "1s=1.6875", "--gaussians", "3", "--json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["converged"] is True and doc["gaussian"][0]["converged"] is True
    # He 1s² with ζ = 27/16: E = −(27/16)² = −2.84765625 hartree (the variational textbook result,
    # e.g. I. N. Levine, Quantum Chemistry, 7th ed., 2014, sec. 9.4)
    assert doc["energy_exact_hartree"] == pytest.approx(-(27 / 16) ** 2, abs=1e-10)

