"""Benchmark of atoms in several STOs per subshell (plain script:
python tests/benchmarks/bench_manyzeta.py [--last Ar] [--k 2]).

Prints, for every neutral ground state H … --last, the time of the optimisation of all ζ with K STOs
per subshell (stobuilder.exact.manyzeta), its energy and −V/T − 2, beside the single-ζ optimum of
the same atom (the time of one exact SCF of it, same run, as the reference of the ratio).
"""

import argparse
import time

from stobuilder.exact.manyzeta import optimize_stos, starting_stos
from stobuilder.exact.solver import RadialSTO, solve_sto_scf
from stobuilder.model.elements import atomic_number, element_symbol, ground_state
from stobuilder.model.methods import pick_method
from stobuilder.screening.optimized import occupied_zeta


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--last", default="Ar")
    parser.add_argument("--k", type=int, default=2)
    args = parser.parse_args()
    total = 0.0
    for z in range(1, atomic_number(args.last) + 1):
        symbol = element_symbol(z)
        conf = ground_state(symbol)
        method = pick_method("auto", conf.unpaired).lower()
        zeta = occupied_zeta(conf)
        t = time.perf_counter()
        single = solve_sto_scf(conf, tuple(RadialSTO(s.label, s.n, s.l, zeta[s.label]) for s in conf.subshells), method)
        t_one = time.perf_counter() - t
        t = time.perf_counter()
        r = optimize_stos(conf, starting_stos(conf, zeta, args.k), method)
        t_opt = time.perf_counter() - t
        total += t_opt
        print(f"{symbol:2s} K={args.k}: E = {r.energy:.9f} hartree (single-ζ {single.result.energy:.9f}), "
              f"-V/T-2 = {r.virial_ratio - 2:+.1e}, {t_opt:.2f} s = {t_opt / t_one:.0f} single SCFs"
              + (f"; {'; '.join(r.notes)}" if r.notes else ""), flush=True)
    print(f"all H–{args.last} at K={args.k}: {total:.1f} s")


if __name__ == "__main__":
    main()
