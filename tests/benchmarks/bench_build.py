"""Benchmark: building the basis for a molecule in process vs PySCF's gto.M(basis="sto-3g").

Ours: build the Basis for the molecule's elements (configurations, rule, fits from the library,
scaling). Reference: PySCF's gto.M with its stored STO-3G for the same molecule. Ratio ≤ 1 is the
target. Run: python tests/benchmarks/bench_build.py
"""

import time
import warnings

from ase.collections import g2

warnings.filterwarnings("ignore")

from pyscf import gto  # noqa: E402

import stobuilder  # noqa: E402


def best_of(fn, repeat=50):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main():
    print(f"{'molecule':<10}{'stobuilder ms':>15}{'gto.M ms':>12}{'ratio':>8}")
    for name in ("CH3SH", "CH3SCH3", "C3H9N", "NO2", "SiCl4"):
        atoms = g2[name]
        geom = [(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)]
        spin = int(sum(atoms.numbers)) % 2
        elements = sorted(set(atoms.get_chemical_symbols()))

        def ours():
            return stobuilder.build_basis(elements, rule="slater", gaussians=3)

        def ref():
            return gto.M(atom=geom, basis="sto-3g", spin=spin, verbose=0)

        ours()  # the first call loads the fit library, once per process
        t_ours, t_ref = best_of(ours), best_of(ref)
        print(f"{name:<10}{t_ours * 1e3:>15.3f}{t_ref * 1e3:>12.3f}{t_ours / t_ref:>8.3f}")


if __name__ == "__main__":
    main()
