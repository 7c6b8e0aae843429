"""``--merge-into`` under faults (issue 16, class 4): symbolic links, CRLF files, failed replaces,
pathological JSON, file modes. The contract: the backup is a byte copy; a link's target is
updated atomically in its own folder and the link stays a link; a failed merge leaves the file
as it was and no backup; a bad file is a one-line error with exit status 2 and nothing written.

The file-system facts relied on are POSIX's (rename(2) replaces a directory entry and never
follows a symbolic link at the destination; link(2) fails with EEXIST): common practice, no source.
"""

import errno
import json
import os
import stat

import pytest
from ase.build import molecule
from ase.io import write

import stobuilder
from cli_run import assert_one_line_error as _one_line_error
from cli_run import run_cli as _run
from stobuilder.pipeline.merge import merge_file


@pytest.fixture(scope="module")
def users():
    # "their" library: other elements and an O of their own (STO-6G), which ours replaces
    return stobuilder.build_basis(["N", "O", "Cl"], rule="slater", gaussians=6)


@pytest.fixture(scope="module")
def ours():
    return stobuilder.build_basis(["H", "O"], rule="slater", gaussians=3)


@pytest.fixture()
def water(tmp_path):
    path = tmp_path / "in" / "water.xyz"
    path.parent.mkdir()
    write(path, molecule("H2O"))  # ASE G2 geometry
    return str(path)




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
    code, _, err = _run(["build", water, "--merge-into", str(link)], capsys)
    assert code == 0, err
    assert link.is_symlink() and os.readlink(link) == os.path.relpath(real, project)
    assert stobuilder.read_basis(real.read_text(), "nwchem").symbols == ("H", "N", "O", "Cl")
    # the backup sits beside the name the user gave, a byte copy; no temporary file anywhere
    assert (project / "mine.nw.bak").read_text() == original
    assert _listing(project) == ["mine.nw", "mine.nw.bak"]
    assert _listing(library) == ["mine.nw"]


def test_chain_of_links_updates_the_final_file(users, ours, tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    real = tmp_path / "a" / "lib.gbs"
    real.write_text(stobuilder.write_basis(users, "gaussian"))
    hop = tmp_path / "b" / "hop.gbs"
    hop.symlink_to(real)
    first = tmp_path / "first.gbs"
    first.symlink_to(hop)
    merge_file(str(first), ours)
    assert first.is_symlink() and hop.is_symlink()
    assert stobuilder.read_basis(real.read_text(), "gaussian").symbols == ("H", "N", "O", "Cl")


def test_crlf_file_backup_is_a_byte_copy_and_the_merge_keeps_crlf(water, users, tmp_path, capsys):
    target = tmp_path / "mine.nw"
    raw = stobuilder.write_basis(users, "nwchem").replace("\n", "\r\n").encode()
    target.write_bytes(raw)
    code, _, err = _run(["build", water, "--merge-into", str(target)], capsys)
    assert code == 0, err
    assert (tmp_path / "mine.nw.bak").read_bytes() == raw
    merged = target.read_bytes()
    assert merged.count(b"\n") == merged.count(b"\r\n") > 0  # every line end still CRLF
    text = merged.decode().replace("\r\n", "\n")
    assert stobuilder.read_basis(text, "nwchem").symbols == ("H", "N", "O", "Cl")


def test_byte_order_mark_survives(users, ours, tmp_path):
    target = tmp_path / "mine.nw"
    raw = b"\xef\xbb\xbf" + stobuilder.write_basis(users, "nwchem").encode()
    target.write_bytes(raw)
    _, backup = merge_file(str(target), ours)
    assert open(backup, "rb").read() == raw
    assert target.read_bytes().startswith(b"\xef\xbb\xbf")


@pytest.mark.parametrize("mode", [0o640, 0o604, 0o755])
def test_merged_file_and_backup_keep_the_mode(users, ours, tmp_path, mode):
    target = tmp_path / "mine.nw"
    target.write_text(stobuilder.write_basis(users, "nwchem"))
    os.chmod(target, mode)
    _, backup = merge_file(str(target), ours)
    assert stat.S_IMODE(os.stat(target).st_mode) == mode
    assert stat.S_IMODE(os.stat(backup).st_mode) == mode


def test_failed_replace_leaves_the_file_and_no_backup(users, ours, tmp_path, monkeypatch):
    target = tmp_path / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    target.write_text(original)

    def full_disk(src, dst):  # the rename fails as on a full or read-only file system
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), dst)

    monkeypatch.setattr(os, "replace", full_disk)
    with pytest.raises(stobuilder.InputError) as info:
        merge_file(str(target), ours)
    assert "mine.nw" in str(info.value) and "nothing changed" in str(info.value)
    assert target.read_text() == original
    assert _listing(tmp_path) == ["mine.nw"]  # no backup, no temporary file


def test_failed_backup_changes_nothing(users, ours, tmp_path, monkeypatch):
    target = tmp_path / "mine.nw"
    original = stobuilder.write_basis(users, "nwchem")
    target.write_text(original)

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "link", no_space)
    monkeypatch.setattr(os, "open", no_space)
    with pytest.raises(stobuilder.InputError):
        merge_file(str(target), ours)
    monkeypatch.undo()
    assert target.read_text() == original
    assert _listing(tmp_path) == ["mine.nw"]


def test_existing_backups_and_a_dangling_backup_link_are_never_replaced(users, ours, tmp_path):
    target = tmp_path / "mine.nw"
    target.write_text(stobuilder.write_basis(users, "nwchem"))
    (tmp_path / "mine.nw.bak").write_text("theirs")
    (tmp_path / "mine.nw.bak2").symlink_to(tmp_path / "nowhere")
    _, backup = merge_file(str(target), ours)
    assert backup == str(tmp_path / "mine.nw.bak3")
    assert (tmp_path / "mine.nw.bak").read_text() == "theirs"
    assert (tmp_path / "mine.nw.bak2").is_symlink() and not (tmp_path / "nowhere").exists()


def _nested(depth):
    return "[" * depth + "]" * depth


@pytest.mark.parametrize("depth", [10**4, 10**6])
def test_pathologically_nested_qcschema_is_an_input_error(water, users, tmp_path, capsys, depth):
    target = tmp_path / "mine.qcschema.json"
    good = stobuilder.write_basis(users, "qcschema")
    bad = good.replace('"schema_name"', f'"name_x": {_nested(depth)}, "schema_name"', 1)
    target.write_text(bad)
    code, _, err = _run(["build", water, "--merge-into", str(target), "--out", str(tmp_path / "out")], capsys)
    _one_line_error(code, err)
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
        code, _, err = _run(["build", water, "--merge-into", str(target)], capsys)  # must not block on the FIFO
        _one_line_error(code, err)
        assert str(target) in err
    assert _listing(tmp_path) == ["dir.nw", "gone.nw", "in", "pipe.nw"]
    with pytest.raises(stobuilder.InputError, match="not a regular file"):
        merge_file(str(fifo), stobuilder.build_basis(["H"]))


def test_non_utf8_target_is_an_input_error_and_nothing_is_written(water, users, tmp_path, capsys):
    target = tmp_path / "mine.nw"
    raw = stobuilder.write_basis(users, "nwchem").encode() + b"\n# \xff\xfe latin-1 bytes\n"
    target.write_bytes(raw)
    code, _, err = _run(["build", water, "--merge-into", str(target)], capsys)
    _one_line_error(code, err)
    assert "UTF-8" in err and target.read_bytes() == raw
    assert _listing(tmp_path) == ["in", "mine.nw"]
