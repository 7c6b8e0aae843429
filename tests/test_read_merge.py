"""Strict readers (bad input → one-line InputError naming the line; CLI exit 2; nothing written)
and merging our elements into a user's basis file without losing anything of theirs."""

import os
import re

import pytest
from ase.build import molecule
from ase.io import write

import stobuilder
from cli_run import run_cli as _run
from stobuilder.formats.common import number

ALL = tuple(stobuilder.formats())


@pytest.fixture(scope="module")
def basis():
    return stobuilder.build_basis(["H", "O"], rule="slater", gaussians=3)


@pytest.fixture(scope="module")
def users():
    # "their" file: other elements, and an O of their own (STO-6G) that ours must replace.
    return stobuilder.build_basis(["N", "O", "Cl"], rule="slater", gaussians=6)


def _error(text, code):
    with pytest.raises(stobuilder.InputError) as info:
        stobuilder.read_basis(text, code)
    message = str(info.value)
    assert "\n" not in message and re.search(r"line \d+", message), message
    return message


def _line_of(text, needle):
    return text[: text.index(needle)].count("\n") + 1


# A line inside the last element's entry after which the text is cut: a shell/block header.
_HEADER = {
    "nwchem": r"^\w+\s+[SPD]$",
    "gaussian": r"^[SPD] \d+ 1\.0$",
    "psi4": r"^[SPD] \d+ 1\.0$",
    "cp2k": r"^\s+\d+\s+\d+\s+\d+\s+\d+\s+\d",
    "dalton": r"^\s+\d+\s+\d+\s+0$",
    "openmolcas": r"^\s+\d+\s+\d+$",
}


@pytest.mark.parametrize("code", ALL)
def test_truncated_text_names_the_line(basis, code):
    lines = stobuilder.write_basis(basis, code).splitlines()
    if code in _HEADER:
        last = max(i for i, x in enumerate(lines) if re.match(_HEADER[code], x))
        cut = lines[: last + 2]  # the header and one of its three primitives
    else:
        cut = lines[: len(lines) // 2]
    _error("\n".join(cut) + "\n", code)


_WRONG_ELEMENT = {
    "nwchem": ("O S", "Xx S"),
    "gaussian": ("O 0", "Xx 0"),
    "psi4": ("O 0", "Xx 0"),
    "cp2k": ("O  STO", "Xx  STO"),
    "dalton": ("a 8\n", "a 200\n"),
    "openmolcas": ("O..... / inline", "Xx..... / inline"),
    "qcschema": ('"O": {', '"Xx": {'),
    "pyscf": ("'O': [", "'Xx': ["),
}


@pytest.mark.parametrize("code", ALL)
def test_unknown_element_names_the_line(basis, code):
    text = stobuilder.write_basis(basis, code)
    old, new = _WRONG_ELEMENT[code]
    bad = text.replace(old, new, 1)
    assert bad != text
    message = _error(bad, code)
    assert f"line {_line_of(bad, new)}:" in message, message


@pytest.mark.parametrize("code", ALL)
def test_non_numeric_field_names_the_line(basis, code):
    text = stobuilder.write_basis(basis, code)
    alpha = basis["O"].shells[0].exponents[1]
    token = repr(alpha) if code in ("qcschema", "pyscf") else number(alpha).strip()
    bad_token = {"qcschema": '"abc"', "pyscf": "'abc'"}.get(code, "abc")
    bad = text.replace(token, bad_token, 1)
    assert bad != text
    message = _error(bad, code)
    assert f"line {_line_of(bad, bad_token)}" in message, message


_TERMINATOR = {"nwchem": "END", "gaussian": "****", "psi4": "****", "openmolcas": "End of basis", "qcschema": "}", "pyscf": "}"}
# CP2K and Dalton entries have no terminator in their layouts: a truncated entry is caught above.


@pytest.mark.parametrize("code", sorted(_TERMINATOR))
def test_missing_terminator_names_the_line(basis, code):
    lines = stobuilder.write_basis(basis, code).splitlines()
    assert lines[-1] == _TERMINATOR[code]
    _error("\n".join(lines[:-1]) + "\n", code)


def test_qcschema_reader_is_checked_by_qcelemental(basis):
    # A shell whose coefficients do not match its exponents fails qcelemental's BasisSet model.
    coefficient = basis.elements[0].shells[0].coefficients[1]
    full = stobuilder.write_basis(basis, "qcschema")
    assert f"{coefficient!r},\n" in full
    text = full.replace(f"{coefficient!r},\n", "", 1)
    with pytest.raises(stobuilder.InputError, match="qcschema"):
        stobuilder.read_basis(text, "qcschema")


# ---------------------------------------------------------------------------- merging


@pytest.mark.parametrize("code", ALL)
def test_merge_replaces_ours_and_keeps_theirs(basis, users, code):
    theirs = stobuilder.write_basis(users, code)
    if code == "cp2k":  # CP2K replaces the entry of the same element and name (see the next tests)
        theirs = theirs.replace("STO-6G-slater", "STO-3G-slater")
    merged = stobuilder.merge_basis(theirs, basis, code)
    back = stobuilder.read_basis(merged, code)
    assert set(back.symbols) == {"H", "N", "O", "Cl"}
    before = stobuilder.read_basis(theirs, code)
    for symbol in ("N", "Cl"):
        assert back[symbol].shells == before[symbol].shells
    mine = stobuilder.read_basis(stobuilder.write_basis(basis, code), code)
    for symbol in ("H", "O"):
        assert back[symbol].shells == mine[symbol].shells
    # their comment lines (our provenance header here) are still there
    comments = [x for x in theirs.splitlines() if "written by stobuilder" in x]
    assert all(c in merged.splitlines() for c in comments)
    # merging again changes nothing
    assert stobuilder.merge_basis(merged, basis, code) == merged


@pytest.mark.parametrize("code", ["nwchem", "cp2k"])
def test_merged_file_loads_by_path_in_pyscf(basis, users, code, tmp_path):
    # PySCF's path loader (pyscf.gto.basis.load, what gto.M(basis=path) calls) finds every element
    # of the merged file, ours replaced and theirs kept: the replaced element's separator line goes
    # with it, and an added element brings its own.
    from pyscf import gto

    theirs = stobuilder.write_basis(users, code)
    if code == "cp2k":
        theirs = theirs.replace("STO-6G-slater", "STO-3G-slater")
    merged = stobuilder.merge_basis(theirs, basis, code)
    assert merged.count("# BASIS SET for O:") == 1
    path = tmp_path / ("merged" + stobuilder.formats()[code].extension)
    path.write_text(merged)
    for symbol, source in (("H", basis), ("O", basis), ("N", users), ("Cl", users)):
        loaded, ours = gto.basis.load(str(path), symbol, optimize=False), source[symbol].to_pyscf()
        assert [s[0] for s in loaded] == [s[0] for s in ours], symbol
        for a, b in zip(loaded, ours):  # 16 significant digits written
            assert [x for p in a[1:] for x in p] == pytest.approx([x for p in b[1:] for x in p], rel=1e-15), symbol


def test_merge_keeps_openmolcas_centre_lines(basis, users):
    lines = stobuilder.write_basis(users, "openmolcas").splitlines()
    ends = [i for i, x in enumerate(lines) if x == "End of basis"]
    lines.insert(ends[1], "O1   0.0 0.0 0.0 Angstrom")  # the centre of their O block (N, O, Cl)
    theirs = "\n".join(lines) + "\n"
    merged = stobuilder.merge_basis(theirs, basis, "openmolcas")
    assert merged.count("O1   0.0 0.0 0.0 Angstrom") == 1
    assert stobuilder.read_basis(merged, "openmolcas")["O"].shells == stobuilder.read_basis(
        stobuilder.write_basis(basis, "openmolcas"), "openmolcas"
    )["O"].shells


def test_merge_into_cp2k_keeps_other_names_of_our_elements(basis):
    other = stobuilder.build_basis(["O"], rule="slater", gaussians=6)
    theirs = stobuilder.write_basis(other, "cp2k").replace("STO-6G-slater", "THEIR-O")
    merged = stobuilder.merge_basis(theirs, basis, "cp2k")
    assert "O  THEIR-O" in merged and "O  STO-3G-slater" in merged
    from stobuilder.pipeline.merge import merge_text

    assert merge_text(theirs, basis, "cp2k") == merged  # the entry check passes with two O entries


# ---------------------------------------------------------------------------- command line



@pytest.fixture()
def water(tmp_path):
    path = tmp_path / "water.xyz"
    write(path, molecule("H2O"))  # ASE G2 geometry
    return str(path)


def test_cli_formats_lists_them(capsys):
    code, out, _ = _run(["formats"], capsys)
    assert code == 0
    for f in stobuilder.formats().values():
        assert f.name in out and f.extension in out and f.description in out
    assert len(stobuilder.formats()) >= 6


def test_cli_code_all_writes_every_format(water, tmp_path, capsys):
    out_dir = tmp_path / "out"
    code, _, err = _run(["build", water, "--code", "all", "--out", str(out_dir)], capsys)
    assert code == 0, err
    names = sorted(os.listdir(out_dir))
    assert names == sorted("water" + f.extension for f in stobuilder.formats().values())
    for f in stobuilder.formats().values():
        text = (out_dir / ("water" + f.extension)).read_text()
        assert stobuilder.read_basis(text, f.name).symbols == ("H", "O")


def test_cli_split_elements(water, tmp_path, capsys):
    out_dir = tmp_path / "out"
    code, _, err = _run(["build", water, "--code", "gaussian", "--split-elements", "--out", str(out_dir)], capsys)
    assert code == 0, err
    assert sorted(os.listdir(out_dir)) == ["water.H.gbs", "water.O.gbs"]
    assert stobuilder.read_basis((out_dir / "water.O.gbs").read_text(), "gaussian").symbols == ("O",)


def test_cli_merge_into_backs_up_then_merges(water, users, tmp_path, capsys):
    target = tmp_path / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    target.write_text(original)
    code, _, err = _run(["build", water, "--merge-into", str(target)], capsys)
    assert code == 0, err
    assert (tmp_path / "mine.nw.bak").read_text() == original
    assert stobuilder.read_basis(target.read_text(), "nwchem").symbols == ("H", "N", "O", "Cl")
    code, _, err = _run(["build", water, "--merge-into", str(target)], capsys)  # a second backup, never overwritten
    assert code == 0 and (tmp_path / "mine.nw.bak2").exists()


def test_cli_merge_into_bad_file_exits_2_and_writes_nothing(water, basis, tmp_path, capsys):
    target = tmp_path / "mine.gbs"
    bad = stobuilder.write_basis(basis, "gaussian").replace("O 0", "Qq 0")
    target.write_text(bad)
    code, _, err = _run(["build", water, "--merge-into", str(target), "--out", str(tmp_path / "out")], capsys)
    assert code == 2
    assert err.count("\n") == 1 and "mine.gbs" in err and re.search(r"line \d+", err), err
    assert target.read_text() == bad
    assert sorted(os.listdir(tmp_path)) == ["mine.gbs", "water.xyz"]
