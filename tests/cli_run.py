"""Running the command line in-process for the tests, and the bad-input contract they assert."""

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
