"""Issue 16, class 3: a build writes all of its files or none, names the target in every error,
respects the umask, and a merged file keeps its mode.

One write path, stobuilder.core.files: stage every temporary file (flushed, fsynced, mode set), then
rename them all. Faults are injected where the operating system would raise them (a full disk
raises ENOSPC from write or fsync; os.replace can fail); the expected behaviour is that of
POSIX rename(2) and open(2) with the umask (common practice, no source).
"""

import errno
import os
import stat

import pytest
from ase.build import molecule
from ase.io import write

import stobuilder.core.files as files
from stobuilder.cli import main

from cli_run import read_only_folder
from test_hardening_checks import assert_bad_input, run


@pytest.fixture()
def two(tmp_path):
    a, b = tmp_path / "a.xyz", tmp_path / "b.xyz"
    write(a, molecule("H2O"))  # ASE G2 geometries
    write(b, molecule("NH3"))
    return a, b


def leftovers(folder):
    return [f for f in os.listdir(folder) if f.startswith(files.TEMP_PREFIX)] if os.path.isdir(folder) else []


@pytest.fixture()
def umask():
    old = os.umask(0o022)
    os.umask(old)

    def set_(mask):
        os.umask(mask)

    yield set_
    os.umask(old)


@pytest.mark.parametrize("mask, mode", [(0o022, 0o644), (0o027, 0o640), (0o002, 0o664), (0o077, 0o600)])
def test_new_files_respect_the_umask(tmp_path, capsys, two, umask, mask, mode):
    # open(2): a new file gets 0o666 & ~umask; mkstemp alone would give 0o600 whatever the umask
    umask(mask)
    out_dir = tmp_path / "o"
    assert run(["build", *map(str, two), "--code", "nwchem", "--code", "cp2k", "--out", str(out_dir)], capsys)[0] == 0
    written = sorted(os.listdir(out_dir))
    assert written == ["a.cp2k.basis", "a.nw", "b.cp2k.basis", "b.nw"]
    assert {stat.S_IMODE(os.stat(out_dir / f).st_mode) for f in written} == {mode}


def test_batch_files_respect_the_umask(tmp_path, capsys, two, umask):
    umask(0o027)
    out_dir = tmp_path / "o"
    assert run(["batch", str(two[0]), "--out", str(out_dir), "--workers", "1", "--progress", "off"], capsys)[0] == 0
    assert stat.S_IMODE(os.stat(out_dir / "a.nw").st_mode) == 0o640


@pytest.mark.parametrize("mode", [0o600, 0o644, 0o664])
def test_a_merged_file_keeps_its_mode(tmp_path, capsys, two, umask, mode):
    umask(0o022)
    library = tmp_path / "lib" / "mine.nw"
    assert run(["build", str(two[0]), "--out", str(tmp_path / "lib")], capsys)[0] == 0
    os.replace(tmp_path / "lib" / "a.nw", library)
    os.chmod(library, mode)
    code, _, err = run(["build", str(two[1]), "--merge-into", str(library)], capsys)
    assert code == 0, err
    assert stat.S_IMODE(os.stat(library).st_mode) == mode
    assert "N" in library.read_text() and leftovers(library.parent) == []


def test_a_full_disk_writes_nothing_and_names_the_target(tmp_path, capsys, two, monkeypatch):
    """ENOSPC on the third file staged (of four): no file appears, no temporary file stays, and
    the message names the target, not the temporary file."""
    real = os.fsync
    calls = []

    def fsync(fd):
        calls.append(fd)
        if len(calls) == 3:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    out_dir = tmp_path / "o"
    code, _, err = run(["build", *map(str, two), "--code", "nwchem", "--code", "pyscf", "--out", str(out_dir)], capsys)
    assert code == 2 and err.count("\n") == 1
    assert "No space left on device" in err and str(out_dir / "b.nw") in err
    assert files.TEMP_PREFIX not in err and ".tmp" not in err
    assert os.listdir(out_dir) == []


def test_a_failed_rename_puts_everything_back(tmp_path, capsys, two, monkeypatch):
    """The third rename fails: the two files already renamed are undone (a new one removed, a
    replaced one restored byte for byte), and no temporary or backup file stays."""
    out_dir = tmp_path / "o"
    assert run(["build", str(two[0]), "--out", str(out_dir)], capsys)[0] == 0
    old_a = (out_dir / "a.nw").read_bytes()
    real = os.replace
    renames = []

    def replace(src, dst):
        if os.path.basename(str(src)).startswith(files.TEMP_PREFIX) and not str(src).endswith("-old.tmp"):
            renames.append(dst)
            if len(renames) == 3:
                raise OSError(errno.EIO, os.strerror(errno.EIO))
        return real(src, dst)

    monkeypatch.setattr(os, "replace", replace)
    code, _, err = run(["build", *map(str, two), "--code", "nwchem", "--code", "psi4", "--gaussians", "6", "--force",
                        "--out", str(out_dir)], capsys)
    assert code == 2 and "Input/output error" in err and str(renames[2]) in err
    assert sorted(os.listdir(out_dir)) == ["a.nw"]
    assert (out_dir / "a.nw").read_bytes() == old_a


def test_one_target_that_cannot_be_written_stops_the_whole_build(tmp_path, capsys, two):
    out_dir = tmp_path / "o"
    (out_dir / "b.nw").mkdir(parents=True)  # a folder where a file should go
    code, _, err = run(["build", *map(str, two), "--out", str(out_dir)], capsys)
    assert code == 2 and f"{out_dir / 'b.nw'} is a folder" in err
    assert sorted(os.listdir(out_dir)) == ["b.nw"]


def test_an_unwritable_output_folder_is_named_before_any_work(tmp_path, capsys, two, monkeypatch, no_scf):
    """No file can be created where the output folder is to be made (EACCES from the probe,
    files.check_targets): refused before the SCF of --check, naming the folder."""
    import tempfile

    def mkstemp(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(tempfile, "mkstemp", mkstemp)
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(two[0]), "--check", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, f"{out_dir}: cannot be made in {tmp_path} (Permission denied)")


def test_a_file_that_cannot_be_written_when_the_time_comes_is_named(tmp_path, capsys, two, monkeypatch):
    """The folder takes files when checked but the write itself fails (the disk filled up in
    between): the error names the target, never the temporary file."""

    def write_temp(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(files, "_write_temp", write_temp)
    out_dir = tmp_path / "o"
    code, _, err = run(["build", str(two[0]), "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, f"{out_dir / 'a.nw'}: cannot write it (Permission denied)")


def test_batch_item_that_cannot_be_written_writes_none_of_its_files(tmp_path, capsys, two, monkeypatch):
    import concurrent.futures as cf

    from stobuilder.batch import discover, run_batch
    from stobuilder.pipeline.options import BuildOptions

    real = files.stage

    def stage(path, data, keep_mode=False):
        if path.endswith("a.py"):
            raise files.InputError(f"{path}: cannot write it (No space left on device)")
        return real(path, data, keep_mode)

    monkeypatch.setattr(files, "stage", stage)
    out = tmp_path / "out"
    summary = run_batch(discover([str(two[0]), str(two[1])]), BuildOptions(codes=("nwchem", "pyscf")), str(out),
                        executor=cf.ThreadPoolExecutor(1))
    assert (summary.done, summary.failed) == (1, 1)
    assert "a.py: cannot write it (No space left on device); no files written" in summary.failures[0][1]
    assert sorted(f for f in os.listdir(out) if not f.endswith(".jsonl")) == ["b.nw", "b.py"]


def test_every_writer_goes_through_files(tmp_path, umask):
    """The fit cache, the library regeneration and the plots use files.atomic_write (one fsync
    and mode policy): written files get the umask's mode."""
    from pathlib import Path

    from stobuilder.expansion import library
    from stobuilder.maintainer import fits as regenerate
    from stobuilder.maintainer import molecular as regenerate_molecular

    umask(0o027)
    for writer, name in ((library._write_atomic, "cache.json"), (regenerate.write_atomic, "lib.json"),
                         (regenerate_molecular.write_atomic, "mol.json")):
        target = Path(tmp_path / name)
        writer(target, "{}\n") if writer is not regenerate_molecular.write_atomic else writer(str(target), "{}\n")
        assert stat.S_IMODE(os.stat(target).st_mode) == 0o640 and target.read_text() == "{}\n"
    assert regenerate_molecular.write_atomic is files.atomic_write
    assert leftovers(tmp_path) == []


def test_main_never_leaves_temporary_files(tmp_path, capsys, two):
    out_dir = tmp_path / "o"
    assert main(["build", *map(str, two), "--code", "all", "--out", str(out_dir)]) == 0
    assert leftovers(out_dir) == []
    assert main(["build", *map(str, two), "--code", "all", "--out", str(out_dir)]) == 2  # exists, no --force
    assert leftovers(out_dir) == []


# ---------------------------------------------------------------------------- text from inputs in file headers
# Issue 21: text from an input that goes into a basis file's header (a rule name, a configuration,
# a note; a structure's file name) goes through stobuilder.core.limits.one_line, so that it cannot end
# the comment and become live content of the file.

HOSTILE = "x\nEND\n****\nH S\n  1.0  1.0\r\nBASIS \"ao basis\"\u2028a 1\x85* Basis set\x1c$ \"q\"\\"


def _hostile_basis():
    from dataclasses import replace

    import stobuilder

    clean = replace(stobuilder.build_basis(["H", "O"]), notes=("a plain note",))
    elements = tuple(replace(e, configuration=e.configuration + HOSTILE) for e in clean.elements)
    return clean, replace(clean, elements=elements, rule="slater" + HOSTILE, notes=(HOSTILE,))


@pytest.mark.parametrize("code", ["nwchem", "gaussian", "psi4", "cp2k", "pyscf", "dalton", "openmolcas", "qcschema"])
def test_header_text_from_inputs_cannot_break_out_of_its_comment(code):
    import stobuilder

    clean, hostile = _hostile_basis()
    text = stobuilder.write_basis(hostile, code)
    # every line of the file is either a line of the clean file or a comment line of it, with the
    # hostile text escaped inside (one line each: the same number of lines as the clean file)
    assert len(text.splitlines()) == len(stobuilder.write_basis(clean, code).splitlines())
    back = stobuilder.read_basis(text, code)
    assert [e.shells for e in back.elements] == [e.shells for e in stobuilder.read_basis(
        stobuilder.write_basis(clean, code), code).elements]


@pytest.mark.parametrize("code", ["nwchem", "gaussian", "psi4", "cp2k", "pyscf", "dalton", "openmolcas", "qcschema"])
def test_a_hostile_header_file_reads_the_same_in_the_host_and_second_readers(tmp_path, code):
    # the host code's reader (PySCF's path loaders where it has one) and the independent second
    # reader of test_formats read the whole file with the hostile header as the clean one
    from test_formats import _same, host_reader, second_reader, write_file

    clean, hostile = _hostile_basis()
    good, bad = write_file(tmp_path, clean, code, stem="clean"), write_file(tmp_path, hostile, code, stem="hostile")
    for reader in (lambda path: host_reader(code, path, ["H", "O"]), lambda path: second_reader(code, path)):
        want, got = reader(good), reader(bad)
        assert sorted(got) == sorted(want) == ["H", "O"]
        for symbol in want:
            _same(got[symbol], want[symbol], rel=0)


def test_a_structure_file_name_with_line_ends_and_terminators_builds_files_that_load(tmp_path, capsys):
    import shutil

    from pyscf import gto

    name = "w\nEND\n****\r.xyz"
    path = tmp_path / name
    write(path, molecule("H2O"), format="xyz")  # ASE G2 water
    out = tmp_path / "out"
    code = main(["build", str(path), "--out", str(out)])
    assert code == 0, capsys.readouterr().err
    (written,) = os.listdir(out)
    assert written == "w\nEND\n****\r.nw"
    plain = tmp_path / "plain.nw"  # PySCF takes a text with line ends for basis text, not a path
    shutil.copy(out / written, plain)
    mol = gto.M(atom="O 0 0 0; H 0 0.76 0.59; H 0 -0.76 0.59", basis=str(plain), verbose=0)
    assert sorted(mol._basis) == ["H", "O"]


# ---------------------------------------------------------------------------- limits.one_line itself

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


# ---------------------------------------------------------------------------- output locations
# Issue 21 §2: every door checks every output location before the first SCF, with one mechanism
# (files.check_targets / files.check_folder): the folder chain exists or can be made, a new file
# can be created there (a probe file, which is what catches root on a read-only location), an
# existing target needs force, an input is never a target. POSIX open(2)/mkdir(2) semantics
# (common practice, no source).


@pytest.mark.parametrize("where", ["read-only", "under a file"])
def test_build_check_refuses_a_bad_out_before_its_scf(tmp_path, capsys, two, no_scf, where):
    # the bug: build checked only the targets themselves; --check ran its SCF, then the write failed
    if where == "read-only":
        locked = read_only_folder(tmp_path)
        if locked is None:
            pytest.skip("no folder here refuses new files")
        out, needle = os.path.join(str(locked), "stobuilder-out"), "cannot be made in"
    else:
        (tmp_path / "afile").write_text("mine\n")
        out, needle = str(tmp_path / "afile" / "sub"), f"{tmp_path / 'afile'} is not a folder"
    before = sorted(os.listdir(tmp_path))
    code, _, err = run(["build", str(two[0]), "--check", "--out", out], capsys)
    assert_bad_input(code, err, out, out, needle)
    assert sorted(os.listdir(tmp_path)) == before and (where == "read-only" or (tmp_path / "afile").read_text() == "mine\n")


def test_the_python_door_says_force_true_and_the_cli_says_force(tmp_path, capsys, two):
    from stobuilder import InputError, build_structures

    out_dir = tmp_path / "o"
    build_structures([str(two[0])], out_dir=str(out_dir), codes=("nwchem",))
    with pytest.raises(InputError) as e:
        build_structures([str(two[0])], out_dir=str(out_dir), codes=("nwchem",))
    assert str(e.value) == f"{out_dir / 'a.nw'} exists; use force=True to overwrite it"
    code, _, err = run(["build", str(two[0]), "--code", "nwchem", "--out", str(out_dir)], capsys)
    assert code == 2 and err == f"stobuilder: error: {out_dir / 'a.nw'} exists; use --force to overwrite it\n"


def test_bench_refuses_a_folder_where_an_output_file_goes_before_any_calculation(tmp_path, capsys, two):
    # the bug: bench ran (and recorded) every calculation, then failed writing report.html
    out = tmp_path / "b"
    (out / "report.html").mkdir(parents=True)
    (out / "stobuilder-bench.jsonl").write_text("")  # the folder is a bench's
    code, _, err = run(["bench", str(two[0]), "--out", str(out), "--workers", "1", "--progress", "off"], capsys)
    assert code == 2 and err == f"stobuilder: error: {out / 'report.html'} is a folder\n"
    manifest = out / "stobuilder-bench.jsonl"
    assert not manifest.exists() or manifest.read_text() == ""  # no calculation ran


@pytest.mark.parametrize("command", ["batch", "bench"])
@pytest.mark.parametrize("where", ["read-only, new", "read-only, existing", "under a file"])
def test_batch_and_bench_refuse_a_bad_out_before_any_scf(tmp_path, capsys, two, command, where):
    """These doors refused already (they open their manifest before the first SCF); kept here so
    that the class stays closed with the one check they now share."""
    if where.startswith("read-only"):
        locked = read_only_folder(tmp_path)
        if locked is None:
            pytest.skip("no folder here refuses new files")
        out = str(locked) if where.endswith("existing") else os.path.join(str(locked), "stobuilder-out")
        needle = "cannot write there" if where.endswith("existing") else "cannot be made in"
    else:
        (tmp_path / "afile").write_text("mine\n")
        out, needle = str(tmp_path / "afile" / "sub"), "is not a folder"
    before = sorted(os.listdir(tmp_path))
    code, _, err = run([command, str(two[0]), "--out", out, "--force", "--workers", "1", "--progress", "off"], capsys)
    assert code == 2 and err.startswith(f"stobuilder: error: {out}: ") and needle in err and err.count("\n") == 1, err
    assert sorted(os.listdir(tmp_path)) == before and not os.path.exists(os.path.join(out, "stobuilder-bench.jsonl"))


def test_a_path_with_a_line_end_keeps_the_error_on_one_line(tmp_path, capsys, two):
    (tmp_path / "afile").write_text("mine\n")
    out = tmp_path / "afile" / "x\ny"
    code, _, err = run(["build", str(two[0]), "--out", str(out)], capsys)
    assert code == 2 and err.count("\n") == 1 and "x\\u000ay" in err, err


def test_fit_plot_is_checked_before_the_fit(tmp_path, capsys):
    # the bug: a missing folder for --plot was found only when the plot was written, after the fit
    code, _, err = run(["fit", "1s", "--gaussians", "2", "--plot", str(tmp_path / "nodir" / "f.png")], capsys)
    assert code == 2 and err == f"stobuilder: error: --plot {tmp_path / 'nodir' / 'f.png'}: its folder {tmp_path / 'nodir'} does not exist\n"
