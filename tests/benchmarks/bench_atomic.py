"""Benchmark of the exact-STO atomic reference (plain script: python tests/benchmarks/bench_atomic.py [--table]).

Prints: one exact SCF of a first-row atom; optimising all ζ of C; exact SCF of Kr beside PySCF's SCF
of Kr in its stored STO-6G (ratio, same run); with --table, regenerating the optimized table H–Kr
on 2 processes (text only, nothing written).
"""

import sys
import time

from pyscf import gto, scf

from stobuilder.checks.atom import atom_energy, optimize_zeta


def timed(fn, repeat=1):
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main() -> None:
    atom_energy("He")  # warm-up (imports)
    t, r = timed(lambda: atom_energy("O"), 5)
    print(f"exact SCF of O (Slater exponents): {t * 1e3:.1f} ms, E = {r.energy:.6f} hartree")
    t, r = timed(lambda: optimize_zeta("C"))
    print(f"optimise all zeta of C: {t:.2f} s, E = {r.energy:.6f} hartree, virial {r.virial_ratio:.12f}")
    t_sto, r = timed(lambda: atom_energy("Kr"), 3)
    mol = gto.M(atom="Kr 0 0 0", basis="sto-6g", verbose=0)
    t_g, e = timed(lambda: scf.RHF(mol).kernel(), 3)
    print(f"Kr exact STO SCF {t_sto:.3f} s (E = {r.energy:.4f}); PySCF RHF/STO-6G {t_g:.3f} s (E = {e:.4f}); "
          f"ratio exact/PySCF = {t_sto / t_g:.2f}")
    if "--table" in sys.argv:
        from stobuilder.maintainer.optimized import build_text

        t, _ = timed(lambda: build_text("Kr", 2))
        print(f"optimized table H–Kr on 2 processes: {t:.1f} s")


if __name__ == "__main__":
    main()
