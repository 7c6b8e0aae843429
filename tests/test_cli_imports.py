"""The light command line: `stobuilder formats`, `zeta`, a fit the library holds and the --help
of every command import neither PySCF nor scipy.optimize nor ASE's calculators. Each case runs
in a fresh interpreter (this process has long imported everything) and lists sys.modules after
``stobuilder.cli.main``. Pipelines that run one command per structure pay the import each time.
"""

import json
import subprocess
import sys

import pytest

from stobuilder.cli import COMMANDS
from support import child_env

HEAVY = ("pyscf", "scipy.optimize", "ase.calculators")

CHILD = """
import contextlib, io, json, sys
from stobuilder.cli import main
with contextlib.redirect_stdout(io.StringIO()) as out:
    try:
        status = main(sys.argv[1:])
    except SystemExit as stop:  # --help exits through argparse
        status = stop.code
print(json.dumps({"status": status, "modules": sorted(sys.modules), "out": out.getvalue()}))
"""

LIGHT = [["formats"], ["formats", "--json"], ["zeta", "C"], ["zeta", "Fe", "--rule", "clementi", "--json"],
         ["fit", "1s"], ["fit", "2s,2p", "--gaussians", "6", "--norm", "h1", "--json"], ["--help"]]
LIGHT += [[name, "--help"] for name in COMMANDS]


def _modules(argv):
    done = subprocess.run([sys.executable, "-c", CHILD, *argv], capture_output=True, text=True, env=child_env(),
                          timeout=300)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.splitlines()[-1])


@pytest.mark.parametrize("argv", LIGHT, ids=" ".join)
def test_light_commands_import_no_heavy_module(argv):
    doc = _modules(argv)
    assert doc["status"] == 0
    assert doc["out"]  # the command did its work (a table, JSON or the help)
    heavy = [m for m in doc["modules"] if any(m == h or m.startswith(h + ".") for h in HEAVY)]
    assert heavy == [], f"stobuilder {' '.join(argv)} imported {heavy[:5]}"


def test_the_check_sees_a_heavy_import():
    # the same child, on a command that needs PySCF: the test above can fail
    doc = _modules(["atom", "He", "--json"])
    assert doc["status"] == 0 and "pyscf" in doc["modules"]
