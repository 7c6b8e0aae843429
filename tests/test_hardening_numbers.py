"""Issue 16, class 2: numbers that are not finite or not physical are errors, at one point.

ζ, Gaussian exponents, charge and spin are checked by stobuilder.core.limits (called by the options
object and the basis build, which every door goes through); every JSON we print is strict.
The ranges are stated in README ("Limits").
"""

import json
import os

import pytest
from ase.build import molecule
from ase.io import write

from stobuilder import build_basis, element_basis
from stobuilder.cli import main
from stobuilder.core.errors import InputError
from stobuilder.core.limits import EXPONENT_MAX, EXPONENT_MIN, ZETA_MAX, ZETA_MIN, exponent_value, zeta_value
from stobuilder.pipeline.options import BuildOptions, load_zeta_file

from test_hardening_checks import assert_bad_input, run, strict_json, xyz


@pytest.fixture()
def water(tmp_path):
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    return path


@pytest.mark.parametrize("value", ["1e-160", "1e300", "1e400", "nan", "inf", "-inf", "-1", "0", "5e-324", "1e-4", "1001"])
def test_zeta_on_the_command_line(tmp_path, capsys, water, value):
    out_dir = tmp_path / "o"
    for command in (["build", str(water)], ["batch", str(water)]):
        code, _, err = run([*command, "--zeta", f"O:2p={value}", "--out", str(out_dir)], capsys)
        assert_bad_input(code, err, out_dir, "--zeta", "O:2p")


@pytest.mark.parametrize("value", ["1e-160", "1e300", "nan", "inf", "-1.5", "0", "1" + "0" * 400, "true", '"2.1"'])
def test_zeta_in_a_zeta_file(tmp_path, capsys, water, value):
    zfile = tmp_path / "z.toml"
    zfile.write_text(f"[O]\n2p = {value}\n")
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(water), "--zeta-file", str(zfile), "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, "z.toml", "[O] 2p")


def test_zeta_file_naming_one_element_twice(tmp_path):
    zfile = tmp_path / "z.toml"
    zfile.write_text("[H]\n1s = 1.2\n[h]\n1s = 1.3\n")
    with pytest.raises(InputError, match=r"\[H\] and \[h\] are both element H"):
        load_zeta_file(zfile)


def test_fit_zeta_out_of_range_is_an_error_not_infinity(capsys):
    # the example: `fit --zeta 1e200` printed inf exponents and "Infinity" in its JSON
    for value in ("1e200", "nan", "inf", "1e-200", "0"):
        code, out, err = run(["fit", "1s", "--zeta", value, "--json"], capsys)
        assert code == 2 and out == "" and err.startswith("stobuilder: error: --zeta") and err.count("\n") == 1
    code, out, _ = run(["fit", "1s", "--zeta", str(ZETA_MAX), "--gaussians", "12", "--json"], capsys)
    assert code == 0 and all(EXPONENT_MIN <= a <= EXPONENT_MAX for a in strict_json(out)["exponents"])


def test_a_negative_zeta_from_the_rule_is_refused(tmp_path, capsys):
    # the example: `build h.xyz --charge -5` wrote ζ = −0.875 (Slater's rules for
    # H⁵⁻ 1s2 2s2 2p2 give Zeff = 1 − 2·0.85 − 3·0.35 = −1.75 for 2s2p; Slater 1930)
    src = xyz(tmp_path / "h.xyz", ["H 0 0 0"])
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(src), "--charge", "-5", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "ζ = -0.875", "needs a positive ζ")
    code, _, err = run(["atom", "H", "--charge", "-5"], capsys)
    assert code == 2 and "ζ = -0.875" in err and err.count("\n") == 1


@pytest.mark.parametrize("option, value", [("--charge", "1e400"), ("--charge", "nan"), ("--charge", "1.5"),
                                           ("--spin", "inf"), ("--spin", "-1"), ("--spin", "2.0"),
                                           ("--gaussians", "13"), ("--gaussians", "0"), ("--gaussians", "3.5")])
def test_charge_spin_gaussians_out_of_range(tmp_path, capsys, water, option, value):
    out_dir = tmp_path / "o"
    for command in (["build", str(water)], ["batch", str(water)]):
        code, _, err = run([*command, option, value, "--out", str(out_dir)], capsys)
        assert_bad_input(code, err, out_dir, option if value not in ("-1",) else "spin")


def test_batch_gaussians_13_exits_2_like_build(tmp_path, capsys, water):
    # issue 15: batch marked every item failed and exited 1; now the options are validated once
    for command in ("build", "batch"):
        code, _, err = run([command, str(water), "--gaussians", "13", "--out", str(tmp_path / command)], capsys)
        assert code == 2 and err == "stobuilder: error: --gaussians must be <= 12, got 13\n"


def test_limits_reject_subnormal_and_overflowing_exponents():
    for bad in (5e-324, 1e-310, float("inf"), float("nan"), 0.0, -1.0, 1e300):
        with pytest.raises(InputError, match="Gaussian exponent"):
            exponent_value(bad, "O 2p")
    assert exponent_value(1.0, "x") == 1.0
    for bad in (10**400, float("nan"), True, "2", None, ZETA_MIN / 2, ZETA_MAX * 2):
        with pytest.raises(InputError):
            zeta_value(bad, "ζ")
    assert zeta_value(10**2, "ζ") == 100.0


def test_the_python_api_goes_through_the_same_checks():
    for bad in (1e-200, 1e200, float("inf"), -2.0):
        with pytest.raises(InputError, match="zeta override 2p"):
            element_basis("O", zeta={"2p": bad})
    with pytest.raises(InputError, match="needs a positive ζ"):
        build_basis(["H"], charge=-5)
    basis = build_basis(["O"], gaussians=12, zeta={"O": {"1s": ZETA_MAX, "2p": ZETA_MIN}})
    assert all(EXPONENT_MIN <= a <= EXPONENT_MAX for s in basis["O"].shells for a in s.exponents)


@pytest.mark.parametrize(
    "kwargs, words",
    [
        ({"gaussians": True}, "gaussians must be a whole number"),
        ({"gaussians": 3.0}, "gaussians must be a whole number"),
        ({"charge": 0.5}, "charge must be a whole number"),
        ({"spin": -2}, "spin must be >= 0"),
        ({"rule": "nope"}, "nope"),
        ({"norm": "l3"}, "norm 'l3'"),
        ({"method": "mp2"}, "unknown SCF method"),
        ({"codes": ("nope",)}, "nope"),
        ({"zeta": {"O": {"2p": float("nan")}}}, "zeta O:2p"),
        ({"zeta": {"Xx": {"1s": 1.0}}}, "Xx"),
        ({"check": "yes"}, "check must be True or False"),
        ({"max_check_frames": 0}, "max_check_frames must be >= 1"),
    ],
)
def test_build_options_validate_once_with_one_line(kwargs, words):
    # the Python door names the Python argument, never a command-line flag (issue 21)
    with pytest.raises(InputError, match=None) as info:
        BuildOptions(**kwargs)
    assert words in str(info.value) and "\n" not in str(info.value) and "--" not in str(info.value)


def test_build_options_round_trip_through_json():
    options = BuildOptions(rule="molecular", gaussians=6, codes=("all",), zeta={"fe": {"3d": 2.1}, "O": {"2p": 2.2}},
                           charge=-1, spin=1, check=True, method="uhf", sharing="shared")
    text = json.dumps(options.to_json(), allow_nan=False)
    back = BuildOptions.from_json(text)
    assert back == options and hash(back) == hash(options)
    assert back.zeta_map == {"Fe": {"3d": 2.1}, "O": {"2p": 2.2}}
    assert len(back.codes) > 5  # "all" expanded once, when made
    with pytest.raises(InputError, match="unknown option colour"):
        BuildOptions.from_json({"colour": "red"})


def test_every_json_we_print_is_strict(tmp_path, capsys, water):
    commands = [
        ["build", str(water), "--check", "--out", str(tmp_path / "b"), "--json"],
        ["batch", str(water), "--out", str(tmp_path / "c"), "--json", "--progress", "off"],
        ["atom", "N", "--gaussians", "3", "--json"],
        ["fit", "2s", "2p", "--gaussians", "4", "--json"],
        ["zeta", "Fe", "--json"],
        ["formats", "--json"],
    ]
    for argv in commands:
        code, out, err = run(argv, capsys)
        assert code == 0, err
        strict_json(out)
    assert os.path.exists(tmp_path / "b" / "water.nw")


# Issue 21 §4: "--steps 1e9 says 'not a whole number' (it is one, just out of range)" held for every
# whole-number flag; they now share relax's parser (cli._whole_in): a whole number in exponent
# notation is one, out of range or not; a decimal point or a fraction is not.
WHOLE_FLAGS = [(["build", "W"], "--charge"), (["build", "W"], "--spin"), (["build", "W"], "--gaussians"),
               (["batch", "W", "--out", "O"], "--workers"), (["bench", "W", "--out", "O"], "--workers"),
               (["tune", "W", "--out", "O/z.toml"], "--threads"), (["relax", "W"], "--steps"),
               (["atom", "H"], "--charge"), (["zeta", "H"], "--charge"), (["fit", "1s"], "--gaussians")]


def _argv(words, tmp_path, water):
    return [str(water) if w == "W" else w.replace("O", str(tmp_path / "o")) if w.startswith("O") else w for w in words]


@pytest.mark.parametrize("words, flag", WHOLE_FLAGS)
def test_every_whole_number_flag_says_out_of_range_not_not_a_whole_number(tmp_path, capsys, water, words, flag):
    argv = _argv(words, tmp_path, water) + ["--out", str(tmp_path / "o")] * (words[0] in ("build", "relax"))
    code, _, err = run([*argv, flag, "1e999999999"], capsys)
    assert code == 2 and err.count("\n") == 1 and flag in err and "is out of range" in err, err
    for value in ("1.5", "2.0", "ten", "nan"):
        code, _, err = run([*argv, flag, value], capsys)
        assert code == 2 and flag in err and f"'{value}' is not a whole number" in err, err
    assert not (tmp_path / "o").exists()


def test_a_flag_in_exponent_notation_reaches_the_options_range_check(tmp_path, capsys, water):
    # --gaussians 1e9 is the whole number 10**9: the options' own range says what is wrong
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(water), "--gaussians", "1e9", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, "--gaussians must be <= 12, got 1000000000")
    code, stdout, err = run(["build", str(water), "--gaussians", "2e0", "--code", "nwchem", "--out", str(out_dir)], capsys)
    assert code == 0 and (out_dir / "water.nw").exists(), err
