"""Helpers shared by the test modules (not a test module): the command line run in this process
or in a fresh one, the bad-input contract the tests assert, strict JSON, small structure files,
a folder nothing can be written in, and a command killed mid-run."""

import os
from pathlib import Path

from stobuilder.cli import main
from stobuilder.jobs import executors

ROOT = Path(__file__).resolve().parents[1]  # the checkout whose code the tests run


def run_cli(argv, capsys):
    """(exit status, stdout, stderr) of ``stobuilder ARGV`` run in this process."""
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def run_in_threads(argv):
    """(exit status, stderr) of ``stobuilder ARGV`` in this process, stdout discarded; the batch
    engine's process pool replaced by threads (for property tests, where it is not under test and
    threads keep each example fast)."""
    import concurrent.futures as cf
    import contextlib
    import io
    from unittest import mock

    from stobuilder import batch

    err, out = io.StringIO(), io.StringIO()
    threads = mock.patch.object(executors, "local_executor", lambda workers: cf.ThreadPoolExecutor(workers))
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out), threads:
        code = main(argv)
    return code, err.getvalue()


def child_env(**extra) -> dict:
    """The environment of a command run in a fresh process: this checkout first on PYTHONPATH, one
    OpenMP thread, and ``extra``."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["OMP_NUM_THREADS"] = "1"
    env.update(extra)
    return env


def assert_one_line_error(code, err):
    """The contract for bad input: exit 2, one line ``stobuilder: error: ...``, no traceback."""
    assert code == 2, err
    assert err.startswith("stobuilder: error: ") and err.count("\n") == 1, err
    assert "Traceback" not in err


def assert_bad_input(code, err, out_dir, *words):
    """Exit 2, one line `stobuilder: error: ...` naming the problem (each of ``words``), nothing
    written in ``out_dir``."""
    assert code == 2
    assert err.startswith("stobuilder: error: ") and err.count("\n") == 1, err
    for word in words:
        assert word in err, err
    assert not os.path.exists(out_dir) or os.listdir(out_dir) == []


def strict_json(text):
    """json.loads that refuses NaN and Infinity (RFC 8259 has neither)."""
    import json

    def refuse(name):
        raise ValueError(f"not strict JSON: {name}")

    return json.loads(text, parse_constant=refuse)


def xyz(path, lines):
    """An XYZ file at ``path`` (a Path) of the atom ``lines`` ("H 0 0 0"), in Å; returns the path."""
    path.write_text(f"{len(lines)}\n\n" + "\n".join(lines) + "\n")
    return path


def h_lattice(path, count, spacing=1.5):
    """``count`` H atoms on a simple cubic lattice of ``spacing`` Å (built with numpy)."""
    import numpy as np

    side = int(np.ceil(count ** (1 / 3)))
    grid = np.stack(np.meshgrid(*[np.arange(side)] * 3, indexing="ij"), -1).reshape(-1, 3)[:count] * spacing
    path.write_text(f"{count}\n\n" + "\n".join(f"H {x:.3f} {y:.3f} {z:.3f}" for x, y, z in grid) + "\n")
    return path


def read_only_folder(tmp_path):
    """A folder where nothing can be made (a Path): a 0o555 folder, or for root (who ignores
    permission bits) /sys, where the kernel refuses new files; None when neither is at hand."""
    if os.geteuid() != 0:
        folder = tmp_path / "locked"
        folder.mkdir()
        folder.chmod(0o555)
        return folder
    if os.path.isdir("/sys"):
        try:
            open("/sys/stobuilder-probe", "w").close()
        except OSError:
            return Path("/sys")
        os.unlink("/sys/stobuilder-probe")
    return None


def kill_when_done(command, cwd, env, manifest, done: int, timeout: float = 120) -> None:
    """Start ``command`` in its own process group and SIGKILL the whole group (the main process
    and its workers at once) as soon as ``manifest`` records ``done`` finished items; fails when
    the command ends before that."""
    import signal
    import subprocess
    import time

    proc = subprocess.Popen(command, cwd=str(cwd), env=env, start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline and proc.poll() is None:
            if manifest.exists() and manifest.read_text().count('"status": "done"') >= done:
                break
            time.sleep(0.01)
        assert proc.poll() is None, "the command finished before it could be killed"
        os.killpg(proc.pid, signal.SIGKILL)
    finally:
        proc.wait(timeout=30)


def zeta_file(tmp_path, text, name="lib.toml"):
    """A zeta file (TOML) of ``text`` at tmp_path/``name``; returns its path as a str."""
    path = tmp_path / name
    path.write_text(text)
    return str(path)
