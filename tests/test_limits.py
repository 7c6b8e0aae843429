"""Numbers that are not finite or not physical are errors, checked at one point.

ζ, Gaussian exponents, charge and spin are checked by stobuilder.core.limits (called by the options
object and the basis build, which every door goes through); the ranges are stated in README
("Limits"). Every whole-number flag shares one parser. Text from inputs that goes into a
file we write passes through limits.one_line, which escapes every line end.
"""

import pytest

from stobuilder import build_basis, element_basis
from stobuilder.core.errors import InputError
from stobuilder.core.limits import EXPONENT_MAX, EXPONENT_MIN, ZETA_MAX, ZETA_MIN, exponent_value, zeta_value
from support import assert_bad_input, run_cli, strict_json, xyz


@pytest.mark.parametrize("value", ["1e-160", "1e300", "1e400", "nan", "inf", "-inf", "-1", "0", "5e-324", "1e-4", "1001"])
def test_zeta_on_the_command_line(tmp_path, capsys, water, value):
    out_dir = tmp_path / "o"
    for command in (["build", str(water)], ["batch", str(water)]):
        code, _, err = run_cli([*command, "--zeta", f"O:2p={value}", "--out", str(out_dir)], capsys)
        assert_bad_input(code, err, out_dir, "--zeta", "O:2p")


@pytest.mark.parametrize("value", ["1e-160", "1e300", "nan", "inf", "-1.5", "0", "1" + "0" * 400, "true", '"2.1"'])
def test_zeta_in_a_zeta_file(tmp_path, capsys, water, value):
    zfile = tmp_path / "z.toml"
    zfile.write_text(f"[O]\n2p = {value}\n")
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(water), "--zeta-file", str(zfile), "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, "z.toml", "[O] 2p")


def test_fit_zeta_out_of_range_is_an_error_not_infinity(capsys):
    # the bug: `fit --zeta 1e200` printed inf exponents and "Infinity" in its JSON
    for value in ("1e200", "nan", "inf", "1e-200", "0"):
        code, out, err = run_cli(["fit", "1s", "--zeta", value, "--json"], capsys)
        assert code == 2 and out == "" and err.startswith("stobuilder: error: --zeta") and err.count("\n") == 1
    code, out, _ = run_cli(["fit", "1s", "--zeta", str(ZETA_MAX), "--gaussians", "12", "--json"], capsys)
    assert code == 0 and all(EXPONENT_MIN <= a <= EXPONENT_MAX for a in strict_json(out)["exponents"])


def test_a_negative_zeta_from_the_rule_is_refused(tmp_path, capsys):
    # the bug: `build h.xyz --charge -5` wrote ζ = −0.875 (Slater's rules for
    # H⁵⁻ 1s2 2s2 2p2 give Zeff = 1 − 2·0.85 − 3·0.35 = −1.75 for 2s2p; Slater 1930)
    src = xyz(tmp_path / "h.xyz", ["H 0 0 0"])
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(src), "--charge", "-5", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, str(src), "ζ = -0.875", "needs a positive ζ")
    code, _, err = run_cli(["atom", "H", "--charge", "-5"], capsys)
    assert code == 2 and "ζ = -0.875" in err and err.count("\n") == 1


@pytest.mark.parametrize("option, value", [("--charge", "1e400"), ("--charge", "nan"), ("--charge", "1.5"),
                                           ("--spin", "inf"), ("--spin", "-1"), ("--spin", "2.0"),
                                           ("--gaussians", "13"), ("--gaussians", "0"), ("--gaussians", "3.5")])
def test_charge_spin_gaussians_out_of_range(tmp_path, capsys, water, option, value):
    out_dir = tmp_path / "o"
    for command in (["build", str(water)], ["batch", str(water)]):
        code, _, err = run_cli([*command, option, value, "--out", str(out_dir)], capsys)
        assert_bad_input(code, err, out_dir, option if value not in ("-1",) else "spin")


def test_batch_gaussians_13_exits_2_like_build(tmp_path, capsys, water):
    # the bug: batch marked every item failed and exited 1; now the options are validated once
    for command in ("build", "batch"):
        code, _, err = run_cli([command, str(water), "--gaussians", "13", "--out", str(tmp_path / command)], capsys)
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
        with pytest.raises(InputError, match="zeta O:2p"):
            element_basis("O", zeta={"2p": bad})
    with pytest.raises(InputError, match="needs a positive ζ"):
        build_basis(["H"], charge=-5)
    basis = build_basis(["O"], gaussians=12, zeta={"O": {"1s": ZETA_MAX, "2p": ZETA_MIN}})
    assert all(EXPONENT_MIN <= a <= EXPONENT_MAX for s in basis["O"].shells for a in s.exponents)



# ---------------------------------------------------------------------------- whole-number flags


# "--steps 1e9 says 'not a whole number' (it is one, just out of range)" once held for every
# whole-number flag; they share relax's parser (cli.common.whole_in): a whole number in exponent
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
    code, _, err = run_cli([*argv, flag, "1e999999999"], capsys)
    assert code == 2 and err.count("\n") == 1 and flag in err and "is out of range" in err, err
    for value in ("1.5", "2.0", "ten", "nan"):
        code, _, err = run_cli([*argv, flag, value], capsys)
        assert code == 2 and flag in err and f"'{value}' is not a whole number" in err, err
    assert not (tmp_path / "o").exists()


def test_a_flag_in_exponent_notation_reaches_the_options_range_check(tmp_path, capsys, water):
    # --gaussians 1e9 is the whole number 10**9: the options' own range says what is wrong
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(water), "--gaussians", "1e9", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, "--gaussians must be <= 12, got 1000000000")
    code, stdout, err = run_cli(["build", str(water), "--gaussians", "2e0", "--code", "nwchem", "--out", str(out_dir)], capsys)
    assert code == 0 and (out_dir / "water.nw").exists(), err



# ---------------------------------------------------------------------------- limits.one_line


LINE_ENDS = ["\n", "\r", "\r\n", "\v", "\f", "\x1c", "\x1d", "\x1e", "\x85", "\u2028", "\u2029"]  # str.splitlines' set (Python docs)


def test_one_line_docstring_example():
    import doctest

    import stobuilder.core.limits

    finder = doctest.DocTestFinder()
    (test,) = [t for t in finder.find(stobuilder.core.limits) if t.name.endswith("one_line")]
    result = doctest.DocTestRunner().run(test)
    assert result.attempted >= 1 and result.failed == 0


@pytest.mark.parametrize("end", LINE_ENDS + ["\x00", "\x7f", "\t", '"', "\\"])
def test_one_line_escapes_and_decodes_back(end):
    import ast
    import json
    import tomllib

    from stobuilder.core.limits import one_line

    text = f"a{end}b [He] = 1"
    escaped = one_line(text)
    assert escaped == "a" + "".join(f"\\u{ord(c):04x}" for c in end) + "b [He] = 1"
    assert len(escaped.splitlines()) == 1
    assert tomllib.loads(f'k = "{escaped}"')["k"] == text
    assert json.loads(f'"{escaped}"') == text
    assert ast.literal_eval(f'"{escaped}"') == text

