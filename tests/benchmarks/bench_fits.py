"""Timing of single fits and of the library regeneration (plain script, not part of the test run).

    python tests/benchmarks/bench_fits.py [--library]

Reports wall times of fresh fits (in-process caches cleared before each) and, as the reference
measured in the same run, the time of one double-precision objective evaluation, so that results
from different machines can be compared as ratios.
"""

from __future__ import annotations

import sys
import time
import timeit

import numpy as np

from stobuilder.expansion import fit as F
from stobuilder.expansion import fit_sto


def main() -> None:
    x = np.log(np.array([10.0, 2.0, 0.6, 0.24, 0.1, 0.05]))
    nls = ((3, 0), (3, 1), (3, 2))
    ref = min(timeit.repeat(lambda: F.objective(x, nls), number=200, repeat=3)) / 200
    print(f"reference: one objective evaluation ([3s,3p,3d], N=6): {ref * 1e6:.1f} us")
    for fam in (["1s"], ["2s", "2p"], ["3s", "3p", "3d"], ["4s", "4p", "4d", "4f"], ["6s"]):
        for n in (3, 6):
            F._fit_log_alpha.cache_clear()
            t = time.perf_counter()
            fit_sto(fam, n)
            dt = time.perf_counter() - t
            print(f"fit {','.join(fam):12s} N={n}: {dt * 1e3:7.0f} ms  ({dt / ref:8.0f} objective evaluations)")
    if "--library" in sys.argv:
        from stobuilder.expansion.regenerate import build_text

        t = time.perf_counter()
        build_text(2)
        print(f"library regeneration (2 processes): {time.perf_counter() - t:.1f} s")


if __name__ == "__main__":
    main()
