"""Batch robustness (issue 16, class 5): only regular files are inputs, the manifest reader skips
and reports bad lines, ``--force`` starts a fresh manifest and keeps the old one, our own outputs
are never inputs, workers are capped at the cores and die with their parent, and scheduler
addresses are checked before anything starts.

Facts relied on: opening a FIFO for reading blocks until a writer opens it (POSIX open(2));
an orphaned process is re-parented, so its getppid() changes (POSIX _exit(2)); a SIGKILLed
process runs no clean-up code (signal(7)): common practice, no source. Structures are ASE G2
molecules (ase.collections.g2: Curtiss et al., J. Chem. Phys. 106, 1063, 1997).
"""

from __future__ import annotations

import concurrent.futures as cf
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from ase.build import molecule
from ase.io import write

from stobuilder import batch
from stobuilder.pipeline.options import BuildOptions
from stobuilder.batch import discover, read_manifest, run_batch
from stobuilder.cli import main
from stobuilder.jobs import executors
from stobuilder.core.errors import InputError

ROOT = Path(__file__).resolve().parents[1]


def child_env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["OMP_NUM_THREADS"] = "1"
    return env


def _cli(args, timeout=120):
    """The command line in a fresh process (a hang fails the test instead of stalling it)."""
    return subprocess.run([sys.executable, "-m", "stobuilder.cli", *args], capture_output=True, text=True,
                          env=child_env(), timeout=timeout)


def _one_line_error(run):
    assert run.returncode == 2, (run.returncode, run.stderr)
    assert run.stderr.startswith("stobuilder: error: ") and run.stderr.count("\n") == 1, run.stderr
    assert "Traceback" not in run.stderr


@pytest.fixture()
def library(tmp_path):
    folder = tmp_path / "src"
    folder.mkdir()
    for name in ("H2O", "NH3", "CH4"):
        write(folder / f"{name}.xyz", molecule(name))
    return folder


def _threads():
    return cf.ThreadPoolExecutor(2)


# ---------------------------------------------------------------------------- only regular files


def test_fifo_and_dangling_link_in_a_folder_are_skipped_with_a_note(library, tmp_path):
    os.mkfifo(library / "stuck.xyz")
    (library / "gone.xyz").symlink_to(tmp_path / "nowhere.xyz")
    notes = []
    items = discover([str(library)], notes=notes)
    assert sorted(i.name for i in items) == ["CH4", "H2O", "NH3"]
    assert any("stuck.xyz" in n and "FIFO" in n for n in notes)
    assert any("gone.xyz" in n and "dangling" in n for n in notes)
    run = _cli(["batch", str(library), "--out", str(tmp_path / "out"), "--workers", "1"])
    assert run.returncode == 0, run.stderr
    assert "3 structures: 3 done" in run.stdout
    assert "note:" in run.stderr and "stuck.xyz" in run.stderr


@pytest.mark.parametrize("kind", ["fifo", "device", "listed-fifo", "listed-device"])
def test_an_explicit_input_that_is_not_a_regular_file_is_an_error(library, tmp_path, kind):
    fifo = tmp_path / "pipe.xyz"
    os.mkfifo(fifo)
    target = str(fifo) if "fifo" in kind else os.devnull
    arg = target
    if kind.startswith("listed"):
        listing = tmp_path / "inputs.txt"
        listing.write_text(f"{library / 'H2O.xyz'}\n{target}\n")
        arg = f"@{listing}"
    run = _cli(["batch", arg, "--out", str(tmp_path / "out")])
    _one_line_error(run)
    assert target in run.stderr and "not a regular file" in run.stderr
    assert not (tmp_path / "out").exists()


def test_build_of_a_fifo_or_device_is_an_error_not_a_hang(tmp_path):
    fifo = tmp_path / "pipe.xyz"
    os.mkfifo(fifo)
    for target in (str(fifo), os.devnull):
        run = _cli(["build", target, "--out", str(tmp_path / "out")])
        _one_line_error(run)
        assert "not a regular file" in run.stderr
    assert not (tmp_path / "out").exists()


def test_a_manifest_that_is_a_fifo_is_an_error_not_a_hang(library, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    os.mkfifo(out / batch.MANIFEST_NAME)
    run = _cli(["batch", str(library), "--out", str(out)])
    _one_line_error(run)
    assert "not a regular file" in run.stderr


# ---------------------------------------------------------------------------- the manifest


def _records(out):
    with open(out / batch.MANIFEST_NAME, "rb") as handle:
        return handle.read().split(b"\n")


BAD_LINES = [
    b"\xff\xfe not utf-8 \x80",
    b"{not json",
    b"[1, 2, 3]",
    b'{"status": "done"}',
    b'{"input": 5, "status": "done"}',
    b'{"input": "/x.xyz", "status": "finished"}',
    b'{"input": "/x.xyz", "status": "done", "files": ["a.nw"]}',
    b'{"input": "/x.xyz", "status": "done", "files": {"nwchem": {"path": 3}}}',
    b'{"input": "/x.xyz", "status": "done", "options": "slater"}',
    b"[" * 100000 + b"]" * 100000,
]


def test_bad_manifest_lines_are_skipped_and_reported_and_later_runs_work(library, tmp_path):
    out = tmp_path / "out"
    items = discover([str(library)])
    first = run_batch(items, BuildOptions(), str(out), executor=_threads())
    assert first.done == 3
    lines = _records(out)
    good = [line for line in lines if line]
    # corrupt the middle: the second record becomes garbage, bad lines in between
    corrupted = [good[0], *BAD_LINES, good[2], b""]
    (out / batch.MANIFEST_NAME).write_bytes(b"\n".join(corrupted))
    notes = []
    previous = read_manifest(str(out / batch.MANIFEST_NAME), notes)
    assert len(previous) == 2 and len(notes) == 1
    assert f"skipped {len(BAD_LINES)} unusable line(s)" in notes[0] and "line 2: not UTF-8" in notes[0]
    second = run_batch(items, BuildOptions(), str(out), executor=_threads())
    assert (second.done, second.skipped, second.failed) == (1, 2, 0)  # only the lost record is recomputed
    assert second.notes and "unusable" in second.notes[0]
    # and through the command line, twice: exit 0 each time, the note on stderr, no traceback
    for _ in range(2):
        run = _cli(["batch", str(library), "--out", str(out), "--workers", "1"])
        assert run.returncode == 0, run.stderr
        assert "3 skipped" in run.stdout and "unusable line" in run.stderr and "Traceback" not in run.stderr


def test_force_starts_a_fresh_manifest_and_keeps_the_old_one(library, tmp_path):
    out = tmp_path / "out"
    items = discover([str(library)])
    run_batch(items, BuildOptions(), str(out), executor=_threads())
    path = out / batch.MANIFEST_NAME
    with open(path, "ab") as handle:
        handle.write(b"\xff garbage line\n")
    old = path.read_bytes()
    summary = run_batch(items, BuildOptions(), str(out), executor=_threads(), force=True)
    assert summary.done == 3
    assert (out / (batch.MANIFEST_NAME + ".bak")).read_bytes() == old
    fresh = [json.loads(line) for line in path.read_text().splitlines()]
    assert len(fresh) == 3 and all(r["status"] == "done" for r in fresh)
    assert any("kept as" in n for n in summary.notes)
    before = path.read_bytes()
    run = _cli(["batch", str(library), "--out", str(out), "--force", "--workers", "1"])
    assert run.returncode == 0, run.stderr
    assert "kept as" in run.stderr
    assert (out / (batch.MANIFEST_NAME + ".bak2")).read_bytes() == before  # a second backup, the first kept
    assert (out / (batch.MANIFEST_NAME + ".bak")).read_bytes() == old


# ---------------------------------------------------------------------------- our own outputs


def test_our_own_outputs_are_never_inputs(library, tmp_path):
    out = library / "previous"  # an earlier run's folder inside the inputs
    run = _cli(["build", str(library / "H2O.xyz"), "--code", "all", "--out", str(out)])
    assert run.returncode == 0, run.stderr
    first = _cli(["batch", str(library / "NH3.xyz"), "--out", str(library / "batch1"), "--code", "qcschema"])
    assert first.returncode == 0, first.stderr
    (library / "lib.nw.bak2").write_text("backup of a merge\n")
    (library / "lib.qcschema.json.bak").write_text("{}\n")
    names = sorted(i.name for i in discover([str(library)]))
    assert names == ["CH4", "H2O", "NH3"], names
    assert batch.own_output_name("x.qcschema.json") and batch.own_output_name(batch.MANIFEST_NAME + ".bak3")
    assert not batch.own_output_name("water.xyz") and not batch.own_output_name("structure.json")
    # named explicitly, a file is read whatever its name (the user means it)
    assert len(discover([str(library / "previous" / "H2O.qcschema.json")])) == 1


# ---------------------------------------------------------------------------- workers


def test_workers_are_capped_at_the_usable_cores_with_a_note(library, tmp_path):
    cores = executors.default_workers()
    assert executors.worker_count(None) == (cores, None)
    assert executors.worker_count(1) == (1, None)
    count, note = executors.worker_count(1000)
    assert count == cores and "1000" in note
    with pytest.raises(InputError):
        executors.worker_count(0)
    run = _cli(["batch", str(library), "--out", str(tmp_path / "out"), "--workers", "1000"])
    assert run.returncode == 0, run.stderr
    assert f"using {cores}" in run.stderr
    workers = {json.loads(line)["worker"] for line in (tmp_path / "out" / batch.MANIFEST_NAME).read_text().splitlines()}
    assert 1 <= len(workers) <= cores
    run = _cli(["batch", str(library), "--out", str(tmp_path / "o2"), "--workers", "0"])
    _one_line_error(run)


def _children(pid: int) -> set[int]:
    out = set()
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                with open(f"/proc/{entry}/stat") as handle:
                    fields = handle.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                out.add(int(entry))
    return out


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as handle:
            state = handle.read().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state not in ("Z", "X")  # a zombie runs no code


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_workers_exit_when_the_batch_process_is_killed(tmp_path):
    src = tmp_path / "src"
    src.mkdir()
    for i, name in enumerate(["C6H6", "C5H5N", "C4H4O", "C4H4S", "C3H9N", "C2H6SO"] * 2):
        write(src / f"m{i:02d}.xyz", molecule(name))
    command = [sys.executable, "-m", "stobuilder.cli", "batch", str(src), "--out", str(tmp_path / "out"),
               "--check", "--gaussians", "6", "--workers", "2", "--progress", "off"]
    proc = subprocess.Popen(command, env=child_env(), start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    workers: set[int] = set()
    try:
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline and proc.poll() is None:
            workers = {c for c in _children(proc.pid) if "spawn_main" in Path(f"/proc/{c}/cmdline").read_text()}
            if len(workers) >= 1 and (tmp_path / "out" / batch.MANIFEST_NAME).exists():
                break
            time.sleep(0.05)
        assert proc.poll() is None and workers, "the batch ended before its workers could be seen"
        time.sleep(0.5)
        workers |= {c for c in _children(proc.pid) if "spawn_main" in Path(f"/proc/{c}/cmdline").read_text()}
        os.kill(proc.pid, signal.SIGKILL)  # the main process only: its workers must notice by themselves
        proc.wait(timeout=30)
        # an item takes seconds here (benzene, STO-6G, SCF checks); without the watch a busy
        # worker would finish its item first. The watch polls every PARENT_POLL_SECONDS.
        deadline = time.monotonic() + 4 * executors.PARENT_POLL_SECONDS + 1.0
        while time.monotonic() < deadline and any(_alive(w) for w in workers):
            time.sleep(0.1)
        survivors = [w for w in workers if _alive(w)]
    finally:
        for w in workers:
            if _alive(w):
                os.kill(w, signal.SIGKILL)
    assert not survivors, f"workers {survivors} outlived the batch"


# ---------------------------------------------------------------------------- the scheduler


@pytest.mark.parametrize("address", ["not a url", "", "http://host:8786", "tcp://host", "tcp://:8786",
                                     "tcp://host:99999", "tcp://host:port", "tcp://host:8786/path", "host"])
def test_bad_scheduler_addresses_are_errors_before_anything_starts(library, tmp_path, address, capsys):
    code = main(["batch", str(library), "--out", str(tmp_path / "out"), "--scheduler", address])
    err = capsys.readouterr().err
    _one_line_error(subprocess.CompletedProcess([], code, "", err))
    assert "--scheduler" in err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:8786", "127.0.0.1:8786", "tls://scheduler.example:8786",
                                     "tcp://[::1]:8786", "ws://h:1", "inproc://10.0.0.1/1/2"])
def test_scheduler_addresses_of_dask_form_pass_the_check(address):
    # forms of distributed's comm addresses (distributed docs, "Communications"; value from memory)
    assert executors.check_scheduler_address(address) == address


# ---------------------------------------------------------------------------- ζ of the options (issue 21)


@pytest.mark.parametrize("argv, words", [
    (["--zeta-file", "LIB"], "--zeta-file LIB: it names none of the structures' elements (it names Fe, Co; the "
                             "structures have H, C, N, O)"),
    (["--zeta-file", "EMPTY"], "--zeta-file EMPTY: it gives no ζ"),
    (["--zeta", "Fe:3d=2.1"], "--zeta names elements in no structure: Fe"),
])
def test_zeta_that_applies_to_no_item_is_refused_before_any_work(library, tmp_path, capsys, monkeypatch, argv, words):
    """The rule of build, relax, tune and bench (``pipeline.check_zeta_elements``) over all the
    batch's items: a zeta file naming none of their elements would be a silent no-op. An item
    that cannot be read (here an empty file) does not hide the others' elements."""
    (library / "empty.xyz").write_text("")
    lib = tmp_path / "lib.toml"
    lib.write_text("[Fe]\n3d = 2.1\n[Co]\n3d = 2.2\n")
    empty = tmp_path / "empty.toml"
    empty.write_text("[Fe]\n")
    names = {"LIB": str(lib), "EMPTY": str(empty)}
    argv = [names.get(a, a) for a in argv]
    monkeypatch.setattr(batch, "run_tasks", lambda *a, **k: pytest.fail("the batch started"))
    code = main(["batch", str(library), "--out", str(tmp_path / "out"), *argv, "--progress", "off"])
    err = capsys.readouterr().err
    _one_line_error(subprocess.CompletedProcess([], code, "", err))
    for key, value in names.items():
        words = words.replace(key, value)
    assert words in err, err
    assert not (tmp_path / "out").exists()


def test_a_zeta_file_applies_where_its_elements_occur_in_a_batch(library, tmp_path):
    lib = tmp_path / "lib.toml"
    lib.write_text("[C]\n2p = 1.7\n[Fe]\n3d = 2.1\n")  # C occurs in CH4 only, Fe nowhere
    with _threads() as pool:
        summary = run_batch(discover([str(library)]), BuildOptions(zeta_file=str(lib)), str(tmp_path / "out"),
                            executor=pool)
    assert summary.done == 3 and summary.failed == 0
    plain = BuildOptions()
    with _threads() as pool:
        run_batch(discover([str(library)]), plain, str(tmp_path / "plain"), executor=pool)
    same = {n: (tmp_path / "out" / n).read_bytes() == (tmp_path / "plain" / n).read_bytes()
            for n in ("CH4.nw", "H2O.nw", "NH3.nw")}
    assert same == {"CH4.nw": False, "H2O.nw": True, "NH3.nw": True}
