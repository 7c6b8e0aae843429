"""Running the command line in-process for the tests, the bad-input contract they assert, a
folder nothing can be written in, and a command killed mid-run."""

from stobuilder.cli import main


def run_cli(argv, capsys):
    """(exit status, stdout, stderr) of ``stobuilder ARGV`` run in this process."""
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_line_error(code, err):
    """The contract for bad input: exit 2, one line ``stobuilder: error: ...``, no traceback."""
    assert code == 2, err
    assert err.startswith("stobuilder: error: ") and err.count("\n") == 1, err
    assert "Traceback" not in err


def read_only_folder(tmp_path):
    """A folder where nothing can be made (a Path): a 0o555 folder, or for root (who ignores
    permission bits) /sys, where the kernel refuses new files; None when neither is at hand."""
    import os
    from pathlib import Path

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
    import os
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
