"""Strict readers (bad input → one-line InputError naming the line; CLI exit 2; nothing written)
and merging our elements into a user's basis file without losing anything of theirs.

``--merge-into`` under faults: symbolic links, CRLF files, failed replaces, pathological JSON,
file modes. The contract: the backup is a byte copy; a link's target is updated atomically in its
own folder and the link stays a link; a failed merge leaves the file as it was and no backup; a
bad file is a one-line error with exit status 2 and nothing written. The file-system facts relied
on are POSIX's (rename(2) replaces a directory entry and never follows a symbolic link at the
destination; link(2) fails with EEXIST): common practice, no source.
"""

import errno
import json
import os
import re
import stat

import pytest

import stobuilder
from stobuilder.formats.common import number
from stobuilder.pipeline.merge import merge_file
from support import assert_one_line_error, run_cli

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



def test_cli_formats_lists_them(capsys):
    code, out, _ = run_cli(["formats"], capsys)
    assert code == 0
    for f in stobuilder.formats().values():
        assert f.name in out and f.extension in out and f.description in out
    assert len(stobuilder.formats()) >= 6


def test_cli_code_all_writes_every_format(water, tmp_path, capsys):
    out_dir = tmp_path / "out"
    code, _, err = run_cli(["build", water, "--code", "all", "--out", str(out_dir)], capsys)
    assert code == 0, err
    names = sorted(os.listdir(out_dir))
    assert names == sorted("water" + f.extension for f in stobuilder.formats().values())
    for f in stobuilder.formats().values():
        text = (out_dir / ("water" + f.extension)).read_text()
        assert stobuilder.read_basis(text, f.name).symbols == ("H", "O")


def test_cli_split_elements(water, tmp_path, capsys):
    out_dir = tmp_path / "out"
    code, _, err = run_cli(["build", water, "--code", "gaussian", "--split-elements", "--out", str(out_dir)], capsys)
    assert code == 0, err
    assert sorted(os.listdir(out_dir)) == ["water.H.gbs", "water.O.gbs"]
    assert stobuilder.read_basis((out_dir / "water.O.gbs").read_text(), "gaussian").symbols == ("O",)


def test_cli_merge_into_backs_up_then_merges(water, users, tmp_path, capsys):
    target = tmp_path / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    target.write_text(original)
    code, _, err = run_cli(["build", water, "--merge-into", str(target)], capsys)
    assert code == 0, err
    assert (tmp_path / "mine.nw.bak").read_text() == original
    assert stobuilder.read_basis(target.read_text(), "nwchem").symbols == ("H", "N", "O", "Cl")
    code, _, err = run_cli(["build", water, "--merge-into", str(target)], capsys)  # a second backup, never overwritten
    assert code == 0 and (tmp_path / "mine.nw.bak2").exists()


def test_cli_merge_into_bad_file_exits_2_and_writes_nothing(water, basis, tmp_path, capsys):
    target = tmp_path / "mine.gbs"
    bad = stobuilder.write_basis(basis, "gaussian").replace("O 0", "Qq 0")
    target.write_text(bad)
    code, _, err = run_cli(["build", water, "--merge-into", str(target), "--out", str(tmp_path / "out")], capsys)
    assert code == 2
    assert err.count("\n") == 1 and "mine.gbs" in err and re.search(r"line \d+", err), err
    assert target.read_text() == bad
    assert sorted(os.listdir(tmp_path)) == ["in", "mine.gbs"]  # the input's folder and the target only


# ---------------------------------------------------------------------------- merge under faults: links, line ends, modes, failed replaces


def _listing(folder):
    return sorted(os.listdir(folder))


def test_symlinked_library_stays_a_link_and_its_target_is_updated(water, users, tmp_path, capsys):
    library = tmp_path / "library"
    library.mkdir()
    real = library / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    real.write_text(original)
    project = tmp_path / "project"
    project.mkdir()
    link = project / "mine.nw"
    link.symlink_to(os.path.relpath(real, project))  # a relative link, as users make them
    code, _, err = run_cli(["build", water, "--merge-into", str(link)], capsys)
    assert code == 0, err
    assert link.is_symlink() and os.readlink(link) == os.path.relpath(real, project)
    assert stobuilder.read_basis(real.read_text(), "nwchem").symbols == ("H", "N", "O", "Cl")
    # the backup sits beside the name the user gave, a byte copy; no temporary file anywhere
    assert (project / "mine.nw.bak").read_text() == original
    assert _listing(project) == ["mine.nw", "mine.nw.bak"]
    assert _listing(library) == ["mine.nw"]


def test_chain_of_links_updates_the_final_file(users, basis, tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    real = tmp_path / "a" / "lib.gbs"
    real.write_text(stobuilder.write_basis(users, "gaussian"))
    hop = tmp_path / "b" / "hop.gbs"
    hop.symlink_to(real)
    first = tmp_path / "first.gbs"
    first.symlink_to(hop)
    merge_file(str(first), basis)
    assert first.is_symlink() and hop.is_symlink()
    assert stobuilder.read_basis(real.read_text(), "gaussian").symbols == ("H", "N", "O", "Cl")


def test_crlf_file_backup_is_a_byte_copy_and_the_merge_keeps_crlf(water, users, tmp_path, capsys):
    target = tmp_path / "mine.nw"
    raw = stobuilder.write_basis(users, "nwchem").replace("\n", "\r\n").encode()
    target.write_bytes(raw)
    code, _, err = run_cli(["build", water, "--merge-into", str(target)], capsys)
    assert code == 0, err
    assert (tmp_path / "mine.nw.bak").read_bytes() == raw
    merged = target.read_bytes()
    assert merged.count(b"\n") == merged.count(b"\r\n") > 0  # every line end still CRLF
    text = merged.decode().replace("\r\n", "\n")
    assert stobuilder.read_basis(text, "nwchem").symbols == ("H", "N", "O", "Cl")


def test_byte_order_mark_survives(users, basis, tmp_path):
    target = tmp_path / "mine.nw"
    raw = b"\xef\xbb\xbf" + stobuilder.write_basis(users, "nwchem").encode()
    target.write_bytes(raw)
    _, backup = merge_file(str(target), basis)
    assert open(backup, "rb").read() == raw
    assert target.read_bytes().startswith(b"\xef\xbb\xbf")


@pytest.mark.parametrize("mode", [0o640, 0o604, 0o755])
def test_merged_file_and_backup_keep_the_mode(users, basis, tmp_path, mode):
    target = tmp_path / "mine.nw"
    target.write_text(stobuilder.write_basis(users, "nwchem"))
    os.chmod(target, mode)
    _, backup = merge_file(str(target), basis)
    assert stat.S_IMODE(os.stat(target).st_mode) == mode
    assert stat.S_IMODE(os.stat(backup).st_mode) == mode


def test_failed_replace_leaves_the_file_and_no_backup(users, basis, tmp_path, monkeypatch):
    target = tmp_path / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    target.write_text(original)

    def full_disk(src, dst):  # the rename fails as on a full or read-only file system
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), dst)

    monkeypatch.setattr(os, "replace", full_disk)
    with pytest.raises(stobuilder.InputError) as info:
        merge_file(str(target), basis)
    assert "mine.nw" in str(info.value) and "nothing changed" in str(info.value)
    assert target.read_text() == original
    assert _listing(tmp_path) == ["mine.nw"]  # no backup, no temporary file


def test_failed_backup_changes_nothing(users, basis, tmp_path, monkeypatch):
    target = tmp_path / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    target.write_text(original)

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "link", no_space)
    monkeypatch.setattr(os, "open", no_space)
    with pytest.raises(stobuilder.InputError):
        merge_file(str(target), basis)
    monkeypatch.undo()
    assert target.read_text() == original
    assert _listing(tmp_path) == ["mine.nw"]


def test_existing_backups_and_a_dangling_backup_link_are_never_replaced(users, basis, tmp_path):
    target = tmp_path / "mine.nw"
    target.write_text(stobuilder.write_basis(users, "nwchem"))
    (tmp_path / "mine.nw.bak").write_text("theirs")
    (tmp_path / "mine.nw.bak2").symlink_to(tmp_path / "nowhere")
    _, backup = merge_file(str(target), basis)
    assert backup == str(tmp_path / "mine.nw.bak3")
    assert (tmp_path / "mine.nw.bak").read_text() == "theirs"
    assert (tmp_path / "mine.nw.bak2").is_symlink() and not (tmp_path / "nowhere").exists()



# ---------------------------------------------------------------------------- bad merge targets


def _nested(depth):
    return "[" * depth + "]" * depth


@pytest.mark.parametrize("depth", [10**4, 10**6])
def test_pathologically_nested_qcschema_is_an_input_error(water, users, tmp_path, capsys, depth):
    target = tmp_path / "mine.qcschema.json"
    good = stobuilder.write_basis(users, "qcschema")
    bad = good.replace('"schema_name"', f'"name_x": {_nested(depth)}, "schema_name"', 1)
    target.write_text(bad)
    code, _, err = run_cli(["build", water, "--merge-into", str(target), "--out", str(tmp_path / "out")], capsys)
    assert_one_line_error(code, err)
    assert "mine.qcschema.json" in err and "nested too deeply" in err
    assert target.read_text() == bad
    assert _listing(tmp_path) == ["in", "mine.qcschema.json"]


@pytest.mark.parametrize("where", ["top", "exponents", "coefficients", "description"])
def test_nesting_anywhere_in_a_qcschema_document_is_an_input_error(users, where):
    doc = json.loads(stobuilder.write_basis(users, "qcschema"))
    deep = json.loads(_nested(500))  # within json's own limit: reaches the checks after parsing
    if where == "top":
        text = _nested(5000)
    else:
        if where == "description":
            doc["description"] = deep
        else:
            doc["center_data"]["N"]["electron_shells"][0][where] = [deep]
        text = json.dumps(doc)
    with pytest.raises(stobuilder.InputError) as info:
        stobuilder.read_basis(text, "qcschema")
    assert "\n" not in str(info.value)


def test_dangling_link_fifo_and_folder_as_target_are_errors(water, tmp_path, capsys):
    dangling = tmp_path / "gone.nw"
    dangling.symlink_to(tmp_path / "nowhere.nw")
    fifo = tmp_path / "pipe.nw"
    os.mkfifo(fifo)
    folder = tmp_path / "dir.nw"
    folder.mkdir()
    for target in (dangling, fifo, folder):
        code, _, err = run_cli(["build", water, "--merge-into", str(target)], capsys)  # must not block on the FIFO
        assert_one_line_error(code, err)
        assert str(target) in err
    assert _listing(tmp_path) == ["dir.nw", "gone.nw", "in", "pipe.nw"]
    with pytest.raises(stobuilder.InputError, match="not a regular file"):
        merge_file(str(fifo), stobuilder.build_basis(["H"]))


def test_non_utf8_target_is_an_input_error_and_nothing_is_written(water, users, tmp_path, capsys):
    target = tmp_path / "mine.nw"
    raw = stobuilder.write_basis(users, "nwchem").encode() + b"\n# \xff\xfe latin-1 bytes\n"
    target.write_bytes(raw)
    code, _, err = run_cli(["build", water, "--merge-into", str(target)], capsys)
    assert_one_line_error(code, err)
    assert "UTF-8" in err and target.read_bytes() == raw
    assert _listing(tmp_path) == ["in", "mine.nw"]

