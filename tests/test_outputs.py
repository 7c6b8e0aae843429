"""Output locations: every door checks every output location before the first SCF, with one
mechanism (files.check_targets / files.check_folder): the folder chain exists or can be made, a
new file can be created there (a probe file, which is what catches root on a read-only
location), an existing target or a dangling symbolic link at a target needs force, an input is
never a target; the error names the location, on one line. POSIX open(2)/mkdir(2) semantics
(common practice, no source).
"""

import errno
import os

import pytest

from support import assert_bad_input, assert_one_line_error, read_only_folder, run_cli


# ---------------------------------------------------------------------------- nothing replaced without --force


def test_fit_plot_refuses_an_existing_file_and_a_dangling_link(tmp_path, capsys):
    pytest.importorskip("matplotlib")
    existing = tmp_path / "fit.png"
    existing.write_bytes(b"mine")
    code, _, err = run_cli(["fit", "1s", "--plot", str(existing)], capsys)
    assert_one_line_error(code, err)
    assert "--force" in err and existing.read_bytes() == b"mine"
    dangling = tmp_path / "link.png"
    dangling.symlink_to(tmp_path / "elsewhere" / "x.png")
    code, _, err = run_cli(["fit", "1s", "--plot", str(dangling)], capsys)
    assert_one_line_error(code, err)
    assert "dangling" in err and dangling.is_symlink()
    code, _, err = run_cli(["fit", "1s", "--plot", str(existing), "--force"], capsys)
    assert code == 0, err
    assert existing.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG specification, W3C 2003)


def test_a_dangling_link_at_a_build_target_is_not_replaced_without_force(hydrogen, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    link = out / "h.nw"
    link.symlink_to(tmp_path / "nowhere.nw")
    code, _, err = run_cli(["build", hydrogen, "--out", str(out)], capsys)
    assert_one_line_error(code, err)
    assert "h.nw" in err and "dangling" in err
    assert link.is_symlink() and not (tmp_path / "nowhere.nw").exists()
    split = out / "h.H.gbs"
    split.symlink_to(tmp_path / "nowhere.gbs")
    code, _, err = run_cli(["build", hydrogen, "--out", str(out), "--code", "gaussian", "--split-elements"], capsys)
    assert_one_line_error(code, err)
    code, _, err = run_cli(["build", hydrogen, "--out", str(out), "--force"], capsys)
    assert code == 0, err
    assert link.is_file() and not link.is_symlink() and "basis" in link.read_text().lower()



def test_the_python_door_says_force_true_and_the_cli_says_force(tmp_path, capsys, two):
    from stobuilder import InputError, build_structures

    out_dir = tmp_path / "o"
    build_structures([str(two[0])], out_dir=str(out_dir), codes=("nwchem",))
    with pytest.raises(InputError) as e:
        build_structures([str(two[0])], out_dir=str(out_dir), codes=("nwchem",))
    assert str(e.value) == f"{out_dir / 'a.nw'} exists; use force=True to overwrite it"
    code, _, err = run_cli(["build", str(two[0]), "--code", "nwchem", "--out", str(out_dir)], capsys)
    assert code == 2 and err == f"stobuilder: error: {out_dir / 'a.nw'} exists; use --force to overwrite it\n"



# ---------------------------------------------------------------------------- output locations checked before any work


def test_an_unwritable_output_folder_is_named_before_any_work(tmp_path, capsys, two, monkeypatch, no_scf):
    """No file can be created where the output folder is to be made (EACCES from the probe,
    files.check_targets): refused before the SCF of --check, naming the folder."""
    import tempfile

    def mkstemp(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(tempfile, "mkstemp", mkstemp)
    out_dir = tmp_path / "o"
    code, _, err = run_cli(["build", str(two[0]), "--check", "--out", str(out_dir)], capsys)
    assert_bad_input(code, err, out_dir, f"{out_dir}: cannot be made in {tmp_path} (Permission denied)")


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
    code, _, err = run_cli(["build", str(two[0]), "--check", "--out", out], capsys)
    assert_bad_input(code, err, out, out, needle)
    assert sorted(os.listdir(tmp_path)) == before and (where == "read-only" or (tmp_path / "afile").read_text() == "mine\n")


def test_bench_refuses_a_folder_where_an_output_file_goes_before_any_calculation(tmp_path, capsys, two):
    # the bug: bench ran (and recorded) every calculation, then failed writing report.html
    out = tmp_path / "b"
    (out / "report.html").mkdir(parents=True)
    (out / "stobuilder-bench.jsonl").write_text("")  # the folder is a bench's
    code, _, err = run_cli(["bench", str(two[0]), "--out", str(out), "--workers", "1", "--progress", "off"], capsys)
    assert code == 2 and err == f"stobuilder: error: {out / 'report.html'} is a folder\n"
    manifest = out / "stobuilder-bench.jsonl"
    assert not manifest.exists() or manifest.read_text() == ""  # no calculation ran


@pytest.mark.parametrize("command", ["batch", "bench"])
@pytest.mark.parametrize("where", ["read-only, new", "read-only, existing", "under a file"])
def test_batch_and_bench_refuse_a_bad_out_before_any_scf(tmp_path, capsys, two, command, where):
    """batch and bench open their manifest before the first SCF; a bad --out is refused by the
    one check every door shares, before any of it."""
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
    code, _, err = run_cli([command, str(two[0]), "--out", out, "--force", "--workers", "1", "--progress", "off"], capsys)
    assert code == 2 and err.startswith(f"stobuilder: error: {out}: ") and needle in err and err.count("\n") == 1, err
    assert sorted(os.listdir(tmp_path)) == before and not os.path.exists(os.path.join(out, "stobuilder-bench.jsonl"))


def test_a_path_with_a_line_end_keeps_the_error_on_one_line(tmp_path, capsys, two):
    (tmp_path / "afile").write_text("mine\n")
    out = tmp_path / "afile" / "x\ny"
    code, _, err = run_cli(["build", str(two[0]), "--out", str(out)], capsys)
    assert code == 2 and err.count("\n") == 1 and "x\\u000ay" in err, err


def test_fit_plot_is_checked_before_the_fit(tmp_path, capsys):
    # the bug: a missing folder for --plot was found only when the plot was written, after the fit
    code, _, err = run_cli(["fit", "1s", "--gaussians", "2", "--plot", str(tmp_path / "nodir" / "f.png")], capsys)
    assert code == 2 and err == f"stobuilder: error: --plot {tmp_path / 'nodir' / 'f.png'}: its folder {tmp_path / 'nodir'} does not exist\n"

