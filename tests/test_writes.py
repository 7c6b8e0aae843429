"""How files are written: a build writes all of its files or none, names the target (never the
temporary file) in every error, respects the umask, and a merged file keeps its mode.

One write path, stobuilder.core.files: stage every temporary file (flushed, fsynced, mode set), then
rename them all. Faults are injected where the operating system would raise them (a full disk
raises ENOSPC from write or fsync; os.replace can fail); the expected behaviour is that of
POSIX rename(2) and open(2) with the umask (common practice, no source).
"""

import errno
import os
import stat

import pytest

import stobuilder.core.files as files
from stobuilder.cli import main
from support import assert_bad_input, run_cli


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
    assert run_cli(["build", *map(str, two), "--code", "nwchem", "--code", "cp2k", "--out", str(out_dir)], capsys)[0] == 0
    written = sorted(os.listdir(out_dir))
    assert written == ["a.cp2k.basis", "a.nw", "b.cp2k.basis", "b.nw"]
    assert {stat.S_IMODE(os.stat(out_dir / f).st_mode) for f in written} == {mode}


def test_batch_files_respect_the_umask(tmp_path, capsys, two, umask):
    umask(0o027)
    out_dir = tmp_path / "o"
    assert run_cli(["batch", str(two[0]), "--out", str(out_dir), "--workers", "1", "--progress", "off"], capsys)[0] == 0
    assert stat.S_IMODE(os.stat(out_dir / "a.nw").st_mode) == 0o640


@pytest.mark.parametrize("mode", [0o600, 0o644, 0o664])
def test_a_merged_file_keeps_its_mode(tmp_path, capsys, two, umask, mode):
    umask(0o022)
    library = tmp_path / "lib" / "mine.nw"
    assert run_cli(["build", str(two[0]), "--out", str(tmp_path / "lib")], capsys)[0] == 0
    os.replace(tmp_path / "lib" / "a.nw", library)
    os.chmod(library, mode)
    code, _, err = run_cli(["build", str(two[1]), "--merge-into", str(library)], capsys)
    assert code == 0, err
    assert stat.S_IMODE(os.stat(library).st_mode) == mode
    assert "N" in library.read_text() and leftovers(library.parent) == []



# ---------------------------------------------------------------------------- all or none


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
    code, _, err = run_cli(["build", *map(str, two), "--code", "nwchem", "--code", "pyscf", "--out", str(out_dir)], capsys)
    assert code == 2 and err.count("\n") == 1
    assert "No space left on device" in err and str(out_dir / "b.nw") in err
    assert files.TEMP_PREFIX not in err and ".tmp" not in err
    assert os.listdir(out_dir) == []


def test_a_failed_rename_puts_everything_back(tmp_path, capsys, two, monkeypatch):
    """The third rename fails: the two files already renamed are undone (a new one removed, a
    replaced one restored byte for byte), and no temporary or backup file stays."""
    out_dir = tmp_path / "o"
    assert run_cli(["build", str(two[0]), "--out", str(out_dir)], capsys)[0] == 0
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
    code, _, err = run_cli(["build", *map(str, two), "--code", "nwchem", "--code", "psi4", "--gaussians", "6", "--force",
                        "--out", str(out_dir)], capsys)
    assert code == 2 and "Input/output error" in err and str(renames[2]) in err
    assert sorted(os.listdir(out_dir)) == ["a.nw"]
    assert (out_dir / "a.nw").read_bytes() == old_a


def test_one_target_that_cannot_be_written_stops_the_whole_build(tmp_path, capsys, two):
    out_dir = tmp_path / "o"
    (out_dir / "b.nw").mkdir(parents=True)  # a folder where a file should go
    code, _, err = run_cli(["build", *map(str, two), "--out", str(out_dir)], capsys)
    assert code == 2 and f"{out_dir / 'b.nw'} is a folder" in err
    assert sorted(os.listdir(out_dir)) == ["b.nw"]


def test_a_file_that_cannot_be_written_when_the_time_comes_is_named(tmp_path, capsys, two, monkeypatch):
    """The folder takes files when checked but the write itself fails (the disk filled up in
    between): the error names the target, never the temporary file."""

    def write_temp(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(files, "_write_temp", write_temp)
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(two[0]), "--out", str(out_dir)], capsys)
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



# ---------------------------------------------------------------------------- one write path


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

