"""Benchmark: tuning four valence ζ (C, N, O, F: 2s,2p each) over CH4, NH3, H2O and HF.

Ours: ``stobuilder.tune`` with the molecular rule (H kept at 1.24), N = 3, at ASE's G2
geometries, on 1 and on 2 PySCF OpenMP threads: wall time, SCF count, time per SCF.
Reference in the same run: a bare PySCF RHF of each molecule with its stored sto-3g from the
default guess (conv_tol 1e-11, as tune's SCFs), best of 5. Target: the whole tuning < 30 s on
2 cores. Run: python tests/benchmarks/bench_tune.py

Measured on the quiet 2-core machine: 1 thread 0.71 s, 124 SCFs, 5.7 ms per SCF (warm-started,
basis and Mole included) against 34 ms for a bare cold-start PySCF SCF; 2 threads 1.11 s.
"""

import os
import tempfile
import time
import warnings

warnings.filterwarnings("ignore")

import ase.build  # noqa: E402
import ase.io  # noqa: E402
from pyscf import gto, lib, scf  # noqa: E402

from stobuilder.pipeline.options import BuildOptions  # noqa: E402
from stobuilder.tune import tune  # noqa: E402

MOLECULES = {"C": "CH4", "N": "NH3", "O": "H2O", "F": "HF"}


def bare_scf(atoms) -> float:
    best = float("inf")
    for _ in range(5):
        t0 = time.perf_counter()
        mol = gto.M(atom=[[s, tuple(p)] for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)],
                    basis="sto-3g", verbose=0)
        mf = scf.RHF(mol)
        mf.conv_tol = 1e-11
        mf.kernel()
        best = min(best, time.perf_counter() - t0)
    return best


def main():
    folder = tempfile.mkdtemp(prefix="bench-tune-")
    paths = []
    for name in MOLECULES.values():
        path = os.path.join(folder, f"{name.lower()}.xyz")
        ase.io.write(path, ase.build.molecule(name))
        paths.append(path)
    vary = [f"{e}:2s,2p" for e in MOLECULES]
    print(f"load average {os.getloadavg()[0]:.2f} (the machine is shared)")
    for threads in (1, 2):
        with lib.with_omp_threads(threads):
            bare = {name: bare_scf(ase.build.molecule(name)) for name in MOLECULES.values()}
        t0 = time.perf_counter()
        result = tune(paths, BuildOptions(rule="molecular"), vary, threads=threads)
        wall = time.perf_counter() - t0
        print(f"\n{threads} thread(s): {wall:.2f} s, {result.scf_count} SCFs, {wall / result.scf_count * 1e3:.1f} ms per SCF "
              f"(all included: basis build, Mole, SCF), {result.iterations} iterations, converged {result.converged}")
        print(f"  bare PySCF RHF/sto-3g from the default guess, best of 5: "
              + ", ".join(f"{n} {t * 1e3:.1f} ms" for n, t in bare.items())
              + f"; mean {sum(bare.values()) / len(bare) * 1e3:.1f} ms")
        print("  tuned: " + ", ".join(f"{v.label} {z:.4f}" for v, z in zip(result.variables, result.final)))


if __name__ == "__main__":
    main()
