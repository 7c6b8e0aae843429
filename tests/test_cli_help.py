"""Each command's --help lists exactly the options it accepts (none it would refuse, no
deprecated spelling), and the deprecated spellings still work: the same result as the new flag
(the files they write byte for byte, or the same parsed command line where a run is long), with
one line ``stobuilder: OLD is deprecated; use NEW`` on stderr."""

import argparse
import re
from pathlib import Path

import pytest

from stobuilder.cli import COMMANDS, parser
from support import assert_one_line_error, run_cli

BASIS = {"--rule", "--gaussians", "--norm", "--sharing", "--radial", "--zeta", "--zeta-file"}
OUTPUT = {"--code", "--sp-shells"}
SCF = {"--method", "--charge", "--spin"}
HELP = {"-h", "--help"}

# The options each command honours (its contract; README "Command line").
ACCEPTED = {
    "build": HELP | BASIS | OUTPUT | SCF | {"--check", "--out", "--force", "--split-elements", "--merge-into", "--json"},
    "batch": HELP | BASIS | OUTPUT | SCF | {"--check", "--out", "--workers", "--scheduler", "--force", "--progress", "--json"},
    "relax": HELP | BASIS | OUTPUT | SCF | {"--fmax", "--steps", "--optimizer", "--out", "--force", "--json"},
    "tune": HELP | BASIS | SCF | {"--vary", "--weights", "--validate", "--out", "--force", "--threads", "--json"},
    "atom": HELP | {"--rule", "--configuration", "--charge", "--zeta", "--optimize", "--stos", "--sto-n", "--gaussians", "--norm", "--method",
                    "--json"},
    "bench": HELP | {"--set", "--list-sets", "--rule", "--gaussians", "--norm", "--zeta-file", "--reference", "--out",
                     "--workers", "--scheduler", "--force", "--progress", "--json"},
    "fit": HELP | {"--gaussians", "--norm", "--zeta", "--plot", "--force", "--json"},
    "zeta": HELP | {"--rule", "--charge", "--json"},
    "formats": HELP | {"--json"},
}

# Spellings that work but are not shown: deprecated aliases, and build's flags tune and relax refuse.
HIDDEN = {
    "build": {"--fit", "--shared-exponents", "--separate-fits"},
    "batch": {"--fit", "--shared-exponents", "--separate-fits"},
    "relax": {"--fit", "--shared-exponents", "--separate-fits", "--check"},
    "tune": {"--fit", "--shared-exponents", "--separate-fits", "--check", "--code", "--sp-shells"},
    "atom": {"--fit"}, "bench": {"--fit"}, "fit": {"--fit"}, "zeta": set(), "formats": set(),
}


def _help(name, capsys):
    with pytest.raises(SystemExit) as stop:
        run_cli([name, "--help"], capsys)
    assert stop.value.code == 0
    return capsys.readouterr().out


def test_every_command_is_in_the_table():
    assert set(COMMANDS) == set(ACCEPTED) == set(HIDDEN)


@pytest.mark.parametrize("name", sorted(ACCEPTED))
def test_help_lists_exactly_the_accepted_options(name, capsys):
    text = _help(name, capsys)
    listed = set()
    for line in text.splitlines():
        m = re.match(r"^  (-[\w-]+(?:, -[\w-]+)*)", line)  # an option's own line, not a wrapped help text
        if m:
            listed |= set(m.group(1).split(", "))
    assert listed == ACCEPTED[name]
    for flag in HIDDEN[name]:
        assert not re.search(re.escape(flag) + r"(?![\w-])", text), f"{name} --help shows {flag}"


@pytest.mark.parametrize("name", sorted(ACCEPTED))
def test_hidden_spellings_are_parsed_by_the_command(name):
    sub = next(a for a in parser()._actions if isinstance(a, argparse._SubParsersAction)).choices[name]
    hidden = {o for a in sub._actions if a.help is argparse.SUPPRESS for o in a.option_strings}
    shown = {o for a in sub._actions if a.help is not argparse.SUPPRESS for o in a.option_strings}
    assert hidden == HIDDEN[name] and shown == ACCEPTED[name]


@pytest.mark.parametrize("name, flag", [("tune", "--check"), ("tune", "--code"), ("tune", "--sp-shells"),
                                        ("relax", "--check")])
def test_a_refused_flag_says_it_is_builds(name, flag, capsys, water):
    code, out, err = run_cli([name, water, flag], capsys)
    assert_one_line_error(code, err)
    assert f"{flag} is for build" in err and out == ""


def _files(folder: Path) -> dict:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.parametrize("old, new, note", [
    (["--fit", "h1"], ["--norm", "h1"], "--fit is deprecated; use --norm"),
    (["--shared-exponents", "--sp-shells"], ["--sharing", "shared", "--sp-shells"],
     "--shared-exponents is deprecated; use --sharing shared"),
    (["--separate-fits"], ["--sharing", "separate"], "--separate-fits is deprecated; use --sharing separate"),
])
def test_build_deprecated_flags_write_the_same_bytes(old, new, note, tmp_path, capsys, water):
    code, _, err = run_cli(["build", water, *new, "--code", "all", "--out", str(tmp_path / "new")], capsys)
    assert code == 0 and err == ""
    code, _, err = run_cli(["build", water, *old, "--code", "all", "--out", str(tmp_path / "old")], capsys)
    assert code == 0 and err == f"stobuilder: {note}\n"
    written = _files(tmp_path / "new")
    assert len(written) == 8 and _files(tmp_path / "old") == written
    # and the alias changes the basis as the new flag does (the comparison can fail)
    run_cli(["build", water, "--code", "all", "--out", str(tmp_path / "default")], capsys)
    assert _files(tmp_path / "default") != written


def test_batch_deprecated_fit_writes_the_same_bytes(tmp_path, capsys, water, threads):
    for flag, out in (("--norm", "new"), ("--fit", "old")):
        code, _, err = run_cli(["batch", water, "--out", str(tmp_path / out), flag, "h1", "--progress", "off",
                                "--workers", "1"], capsys)
        assert code == 0, err
        assert ("deprecated" in err) == (flag == "--fit")
    assert err.splitlines()[0] == "stobuilder: --fit is deprecated; use --norm"
    old, new = (_files(tmp_path / d) for d in ("old", "new"))
    assert old["water.nw"] == new["water.nw"]


def test_fit_deprecated_flags_print_the_same_fit(capsys):
    code, new, err = run_cli(["fit", "2s,2p", "--norm", "h1", "--zeta", "2s=1.95"], capsys)
    assert code == 0 and err == ""
    code, old, err = run_cli(["fit", "2s,2p", "--fit", "h1", "--zeta", "1.95"], capsys)
    assert code == 0 and old == new
    assert err == "stobuilder: --fit is deprecated; use --norm\nstobuilder: --zeta 1.95 is deprecated; use --zeta 2s=1.95\n"
    assert "2s zeta 1.95, 2p zeta 1.95" in new  # the ζ went to the fit: the comparison can fail
    # the element prefix is optional; a label outside the fit, or two scales, are one-line errors
    assert run_cli(["fit", "2s,2p", "--norm", "h1", "--zeta", "C:2p=1.95"], capsys)[1] == new
    for bad in (["--zeta", "3d=1.2"], ["--zeta", "2s=1.2", "--zeta", "2p=1.3"], ["--zeta", "1.2x"]):
        code, _, err = run_cli(["fit", "2s,2p", *bad], capsys)
        assert_one_line_error(code, err)
        assert "--zeta" in err


def _parsed(argv):
    return {k: v for k, v in vars(parser().parse_args(argv)).items() if not k.startswith("_")}


@pytest.mark.parametrize("old, new", [
    (["atom", "C", "--fit", "h1", "--gaussians", "3", "6"], ["atom", "C", "--norm", "h1", "--gaussians", "3", "--gaussians", "6"]),
    (["bench", "--set", "g2-1", "--fit", "l2", "--fit", "h1", "--out", "d"], ["bench", "--set", "g2-1", "--norm", "l2", "--norm", "h1", "--out", "d"]),
    (["relax", "x.xyz", "--fit", "h1", "--shared-exponents"], ["relax", "x.xyz", "--norm", "h1", "--sharing", "shared"]),
    (["tune", "x.xyz", "--separate-fits", "--fit", "h1"], ["tune", "x.xyz", "--sharing", "separate", "--norm", "h1"]),
])
def test_long_commands_parse_the_deprecated_flags_as_the_new(old, new):
    assert _parsed(old) == _parsed(new)
    assert _parsed(old) != _parsed(new[:1] + [a for a in new[1:] if a in ("C", "x.xyz")])  # the comparison can fail


@pytest.mark.parametrize("argv", [["--shared-exponents", "--separate-fits"], ["--sharing", "family", "--separate-fits"],
                                  ["--norm", "l2", "--fit", "h1"]])
def test_two_spellings_of_one_option_that_disagree_are_an_error(argv, capsys, water, tmp_path):
    code, _, err = run_cli(["build", water, *argv, "--out", str(tmp_path / "b")], capsys)
    assert_one_line_error(code, err)
    assert "give one" in err and not (tmp_path / "b").exists()


def test_gaussians_has_one_shape_in_the_comparing_commands():
    # repeatable, several at once allowed: atom's and bench's README forms both hold
    assert _parsed(["atom", "C", "--gaussians", "3", "6", "--gaussians", "12"])["gaussians"] == [3, 6, 12]
    assert _parsed(["bench", "--gaussians", "3", "--gaussians", "6"])["gaussians"] == [3, 6]
    assert _parsed(["build", "x.xyz", "--gaussians", "6"])["gaussians"] == 6


def test_a_structure_after_several_gaussians_is_named_with_the_reason(capsys, tmp_path, water):
    # --gaussians takes every value after it (README synopsis: [--gaussians N...]...), so a
    # structure written after it is read as a count: the one-line error says so and how to write
    # it (common practice, no source); written first, the same command line parses
    code, _, err = run_cli(["bench", "--gaussians", "3", str(water), "--out", str(tmp_path / "b")], capsys)
    assert_one_line_error(code, err)
    assert str(water) in err and "not a whole number" in err and "structures before it" in err
    assert not (tmp_path / "b").exists()
    assert _parsed(["bench", str(water), "--gaussians", "3"])["gaussians"] == [3]
