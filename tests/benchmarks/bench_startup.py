"""Benchmark: the start-up cost of the library and of short commands, as ratios to a reference
measured in the same run (wall time of a fresh interpreter, the minimum of several repeats).

    import stobuilder                       vs  python -c "import numpy"
    from stobuilder.builder.construct import zeta_values; zeta_values("C")
                                            vs  python -c "import numpy"
    python -m stobuilder zeta C             vs  python -c "import numpy"   (target ≤ 2, issue 24)
    python -m stobuilder formats, fit 1s, build --help   vs  python -c "import numpy"
    python -m stobuilder build <example> --out <tmp>   (no --check)
                                            vs  python -c "import ase.io"  (target ≤ 1.1, issue 24)

Each child runs with this checkout first on PYTHONPATH and one OpenMP thread; the build writes
into a fresh temporary folder each time. Bytecode is cached as an installed package's would be
(in a temporary PYTHONPYCACHEPREFIX, even where PYTHONDONTWRITEBYTECODE is set, so that the
figures measure importing, not compiling), and each command runs once untimed first. The figures
are printed; nothing is asserted.

    python tests/benchmarks/bench_startup.py [--repeat N]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "examples" / "structures" / "methanethiol.xyz"


PYCACHE = tempfile.mkdtemp(prefix="stobuilder-bench-pycache-")


def child_env() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["OMP_NUM_THREADS"] = "1"
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPYCACHEPREFIX"] = PYCACHE
    return env


def wall(argv_of, repeat: int) -> float:
    """The least wall time (s) of ``repeat`` runs of the command ``argv_of(folder)`` (a fresh
    temporary folder per run); a run that fails stops the benchmark with its stderr."""
    best = float("inf")
    for attempt in range(repeat + 1):  # the first run writes the bytecode and is not counted
        with tempfile.TemporaryDirectory() as folder:
            argv = argv_of(folder)
            t0 = time.perf_counter()
            run = subprocess.run(argv, capture_output=True, text=True, env=child_env(), cwd=folder)
            elapsed = time.perf_counter() - t0
        if run.returncode != 0:
            sys.exit(f"failed: {' '.join(argv)}\n{run.stderr}")
        if attempt:
            best = min(best, elapsed)
    return best


def python(code: str):
    return lambda folder: [sys.executable, "-c", code]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7, help="runs per command; the least time counts (default 7)")
    args = parser.parse_args(argv)
    r = args.repeat
    numpy = wall(python("import numpy"), r)
    ase_io = wall(python("import ase.io"), r)
    bare = wall(python("pass"), r)
    rows = [
        ("import stobuilder", wall(python("import stobuilder"), r), numpy, "numpy", None),
        ("stobuilder.zeta_values('C') (import stobuilder)",
         wall(python("import stobuilder; stobuilder.zeta_values('C')"), r), numpy, "numpy", None),
        ("from stobuilder.builder.construct import zeta_values; zeta_values('C')",
         wall(python("from stobuilder.builder.construct import zeta_values; zeta_values('C')"), r), numpy, "numpy", None),
        ("python -m stobuilder zeta C",
         wall(lambda folder: [sys.executable, "-m", "stobuilder", "zeta", "C"], r), numpy, "numpy", 2.0),
        ("python -m stobuilder formats",
         wall(lambda folder: [sys.executable, "-m", "stobuilder", "formats"], r), numpy, "numpy", None),
        ("python -m stobuilder fit 1s (a stored fit)",
         wall(lambda folder: [sys.executable, "-m", "stobuilder", "fit", "1s"], r), numpy, "numpy", None),
        ("python -m stobuilder build --help",
         wall(lambda folder: [sys.executable, "-m", "stobuilder", "build", "--help"], r), numpy, "numpy", None),
        (f"python -m stobuilder build {EXAMPLE.name} --out DIR",
         wall(lambda folder: [sys.executable, "-m", "stobuilder", "build", str(EXAMPLE), "--out", os.path.join(folder, "b")], r),
         ase_io, "ase.io", 1.1),
    ]
    print(f"references (s, least of {r}): python -c pass {bare:.3f}, import numpy {numpy:.3f}, import ase.io {ase_io:.3f}")
    print(f"{'command':<76}{'s':>7}{'ratio':>8}  reference  target")
    for label, seconds, ref, ref_name, target in rows:
        goal = f"≤ {target:g}" if target is not None else ""
        print(f"{label:<76}{seconds:>7.3f}{seconds / ref:>8.2f}  {ref_name:<9}  {goal}")
    shutil.rmtree(PYCACHE, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
