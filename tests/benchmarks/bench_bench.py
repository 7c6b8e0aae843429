"""Benchmark: the whole G2-1 bench against a bare loop of the same PySCF calculations.

1. ``stobuilder bench --set g2-1 --rule molecular --rule slater --gaussians 3 --workers 2``: 55
   molecules × 2 variants and 12 free atoms × 2 variants (134 SCF calculations), the command's
   wall time from process start to exit (interpreter, pool, basis construction, manifest,
   report and plots included).
2. The reference, in the same run: a bare script (its own interpreter, also timed from start
   to exit) that runs the same 134 SCF calculations with PySCF only, on a spawn pool of 2
   processes: the same molecules and spins, the same basis sets (our bases as PySCF basis
   dictionaries, made beforehand and not timed), RHF/ROHF, the atoms' electrons fixed per SO3
   irrep, a second-order retry where the first SCF does not converge (what scf.solve_scf does).
Each runs twice, interleaved, and the faster run counts. Target: bench ≤ 1.5 × the bare loop.
The energies of the two are compared (they are the same calculations) and the bench's summary
table is printed.
Run: python tests/benchmarks/bench_bench.py [--keep DIR]

Measured 2026-12-02 on the shared 2-core machine (OMP_NUM_THREADS=1): bare loop 7.9 s and
10.3 s, bench 11.1 s and 12.0 s: ratio 1.40 (faster runs; a first run before the report was drawn
without pyplot and the set read from ase.data.g2_1: 1.60). The bench's energies equal the bare
loop's to the last bit. Summary (kcal/mol, mean and largest |D_e − D_e(experiment)|):
molecular N=3 l2 73.21 / 329.48, slater N=3 l2 127.88 / 427.99 (SO2 the largest for both).
On the quiet machine (no other jobs): bare loop 3.1 s and 3.2 s, bench 4.1 s and 4.0 s: ratio 1.29.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
ENV = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""), OMP_NUM_THREADS="1")
RULES = ("molecular", "slater")

BARE = r'''
import json, multiprocessing, sys

def run(task):
    from pyscf import gto, scf
    key, atoms, basis, spin, method, irreps = task
    mol = gto.M(atom=atoms, basis=basis, spin=spin, unit="Angstrom", symmetry=irreps is not None, verbose=0)
    def make():
        mf = (scf.RHF if method == "RHF" else scf.ROHF)(mol)
        if irreps is not None:
            mf.irrep_nelec = {k: (sum(v) if method == "RHF" else tuple(v)) for k, v in irreps.items()}
        mf.verbose = 0
        mf.max_cycle = 100
        return mf
    mf = make()
    mf.kernel()
    if not mf.converged:
        mf2 = make().newton()
        mf2.kernel(mf.make_rdm1())
        if mf2.converged:
            mf = mf2
    return key, float(mf.e_tot), bool(mf.converged)

if __name__ == "__main__":
    tasks = json.load(open(sys.argv[1]))
    with multiprocessing.get_context("spawn").Pool(2) as pool:
        out = dict((k, (e, c)) for k, e, c in pool.imap_unordered(run, tasks))
    json.dump(out, open(sys.argv[2], "w"))
'''


def bare_tasks() -> list:
    """The bench's calculations as plain PySCF inputs (made with stobuilder, not timed)."""
    from stobuilder.bench import run as bench
    from stobuilder.scf.free_atom import irrep_occupations
    from stobuilder.model.elements import ground_state
    from stobuilder.model.methods import pick_method
    from stobuilder.pipeline.path import basis_for

    structures = bench.set_structures("g2-1")
    variants = bench.make_variants(list(RULES), [3], ["l2"])
    plan = bench.plan(structures, variants)
    tasks = []
    for t in plan.tasks:
        s = t.structure
        basis = basis_for((s,), t.options)
        pyscf_basis = {e: basis[e].to_pyscf() for e in s.elements}
        atoms = [[sym, list(p)] for sym, p in zip(s.symbols, s.positions)]
        if t.kind == "atom":
            conf = ground_state(s.symbols[0])
            tasks.append([t.key, atoms, pyscf_basis, conf.unpaired, pick_method("auto", conf.unpaired),
                          {k: list(v) for k, v in irrep_occupations(conf).items()}])
        else:
            tasks.append([t.key, atoms, pyscf_basis, s.spin, pick_method("auto", s.spin), None])
    return tasks


def time_bench(out: Path) -> tuple[float, dict]:
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "stobuilder.cli", "bench", "--set", "g2-1",
                           *[x for r in RULES for x in ("--rule", r)], "--gaussians", "3", "--out", str(out),
                           "--workers", "2", "--force", "--progress", "off", "--json"],
                          env=ENV, capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if done.returncode not in (0, 1):
        raise SystemExit(f"bench failed ({done.returncode}):\n{done.stderr}")
    return seconds, json.loads(done.stdout)


def time_bare(folder: Path, tasks_file: Path) -> tuple[float, dict]:
    script = folder / "bare.py"
    script.write_text(BARE)
    result = folder / "bare.json"
    start = time.perf_counter()
    done = subprocess.run([sys.executable, str(script), str(tasks_file), str(result)], env=ENV,
                          capture_output=True, text=True)
    seconds = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"bare loop failed:\n{done.stderr}")
    return seconds, json.loads(result.read_text())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keep", metavar="DIR", help="keep the bench outputs in DIR")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(args.keep or tmp)
        folder.mkdir(parents=True, exist_ok=True)
        tasks = bare_tasks()
        tasks_file = folder / "tasks.json"
        tasks_file.write_text(json.dumps(tasks))
        print(f"G2-1, variants {', '.join(f'{r} N=3 l2' for r in RULES)}: {len(tasks)} SCF calculations, 2 processes")
        bench_times, bare_times = [], []
        for attempt in range(2):
            t, bare = time_bare(folder, tasks_file)
            bare_times.append(t)
            print(f"  bare PySCF loop, run {attempt + 1}: {t:.1f} s")
            t, doc = time_bench(folder / "bench")
            bench_times.append(t)
            print(f"  stobuilder bench, run {attempt + 1}: {t:.1f} s")
        ratio = min(bench_times) / min(bare_times)
        print(f"ratio bench / bare = {min(bench_times):.1f} s / {min(bare_times):.1f} s = {ratio:.2f} (target <= 1.5)")
        # the same calculations: molecule energies of the bench and the bare loop
        diffs = []
        for row in doc["rows"]:
            key = f"molecule|{row['variant']}|{row['structure']}"
            if row["energy_hartree"] is not None and key in bare:
                diffs.append(abs(row["energy_hartree"] - bare[key][0]))
        print(f"molecule energies bench vs bare: {len(diffs)} compared, largest difference {max(diffs):.1e} hartree")
        print("summary:")
        print(f"  {'variant':<20}{'structures':>11}{'failed':>8}{'MAE vs exp':>12}{'max |err|':>11}  (kcal/mol)")
        for s in doc["summary"]:
            print(f"  {s['variant']:<20}{s['structures']:>11}{s['failed']:>8}"
                  f"{s['mean_abs_atomization_error_kcal_mol']:>12.2f}{s['max_abs_atomization_error_kcal_mol']:>11.2f}")


if __name__ == "__main__":
    main()
