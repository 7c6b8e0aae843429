"""Timing of single fits, of library reads and of the library regeneration (plain script, not part
of the test run).

    python tests/benchmarks/bench_fits.py [--library]

Reports wall times of fresh fits (in-process caches cleared before each, so an N = 12 fit includes
its continuation chain N = 1 … 11) and, as the reference measured in the same run, the time of one
closed-form evaluation (ε, gradient and Hessian) for a batch of 8 exponent sets, so that figures
from different machines can be compared as ratios. Targets (issue 4): N = 12 fit < 0.5 s, N = 6 fit ~50 ms, library read in
microseconds, whole library (both norms, N ≤ 12) < 10 min on 2 cores.
"""

from __future__ import annotations

import sys
import time
import timeit

import numpy as np

from stobuilder.expansion import fit as F
from stobuilder.expansion import fit_sto, lookup
from stobuilder.expansion.analytic import Target


def main() -> None:
    x = np.log(np.array([10.0, 2.0, 0.6, 0.24, 0.1, 0.05]))[None, :] + np.linspace(-0.2, 0.2, 8)[:, None]
    problem = F._problem(tuple(Target(3.0, l, 1.0) for l in range(3)), "l2")
    ref = min(timeit.repeat(lambda: problem.evaluate_batch(x, 2), number=200, repeat=3)) / 200
    print(f"reference: one batched closed-form evaluation (8 sets, [3s,3p,3d], N=6): {ref * 1e6:.1f} us")
    fit_sto("2p", 6)  # imports (python-flint) and first calls out of the timings
    for fam in (["1s"], ["2s", "2p"], ["3s", "3p", "3d"], ["4s", "4p", "4d", "4f"], ["6s"]):
        for norm in ("l2", "h1"):
            for n in (3, 6, 12):
                times = []
                for _ in range(3):
                    F.clear_caches()
                    t = time.perf_counter()
                    fit_sto(fam, n, norm)
                    times.append(time.perf_counter() - t)
                dt = min(times)
                print(f"fit {','.join(fam):12s} {norm} N={n:2d}: {dt * 1e3:7.0f} ms  ({dt / ref:8.0f} references)")
    lookup("1s", 3)
    per = min(timeit.repeat(lambda: lookup(["4s", "4p", "4d", "4f"], 11, "h1"), number=2000, repeat=5)) / 2000
    print(f"library read (lookup of a shipped fit): {per * 1e6:.2f} us")
    if "--library" in sys.argv:
        from stobuilder.expansion.regenerate import build_texts

        t = time.perf_counter()
        build_texts(2)
        print(f"library regeneration, both norms, N <= 12 (2 processes): {time.perf_counter() - t:.1f} s")


if __name__ == "__main__":
    main()
