"""``stobuilder relax``: relax molecules with the basis (ASE optimizer, PySCF SCF)."""

from __future__ import annotations

import argparse
import sys

from stobuilder.cli.common import add_json, print_json, refuse, whole_in
from stobuilder.cli.options import add_basis, add_output, add_scf, build_options

HELP = "relax molecules with the basis (ASE optimizer, PySCF SCF); relaxed extxyz and basis files"


def fmax(text: str) -> float:
    """``--fmax``: a finite positive number (eV/Å)."""
    from stobuilder.relax import fmax_ok

    try:
        value = float(text)
    except ValueError:
        value = None
    if value is None or not fmax_ok(value):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number (eV/Å)")
    return value


def add_arguments(p) -> None:
    from stobuilder import relax  # its constants; PySCF and ASE's optimizers load inside its functions

    p.add_argument("structures", nargs="+", metavar="STRUCTURE", help="molecule files ASE reads (a file's last frame)")
    add_basis(p)
    add_output(p)  # relax writes the basis files of --code beside the relaxed structure
    add_scf(p, check=False)
    refuse(p, ["--check"], "relax runs an SCF at every step already")
    p.add_argument("--fmax", type=fmax, default=relax.DEFAULT_FMAX, metavar="EV_PER_A",
                   help=f"largest force on an atom at convergence (default {relax.DEFAULT_FMAX} eV/Å)")
    p.add_argument("--steps", type=whole_in(0, relax.MAX_STEPS, "steps"), default=relax.DEFAULT_STEPS, metavar="N",
                   help=f"optimizer steps at most, 0 to {relax.MAX_STEPS} (default {relax.DEFAULT_STEPS})")
    p.add_argument("--optimizer", choices=relax.OPTIMIZERS, default=relax.OPTIMIZERS[0],
                   help=f"ASE optimizer (default {relax.OPTIMIZERS[0]})")
    p.add_argument("--out", default="relaxed", metavar="DIR", help="output folder (default ./relaxed)")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    add_json(p, "print one JSON document instead of the summary")


def run(args) -> int:
    from stobuilder.core.limits import one_line
    from stobuilder.relax import RelaxInterrupted, relax_structures

    try:
        results = relax_structures(args.structures, build_options(args), fmax=args.fmax, steps=args.steps,
                                   optimizer=args.optimizer, out_dir=args.out, force=args.force)
    except RelaxInterrupted as stop:  # say what was kept; main reports the interrupt (exit 130)
        for r in stop.finished:
            files = ", ".join(one_line(p) for p in (r.relaxed_path, *r.files.values()))
            print(f"stobuilder: kept {one_line(r.path)} ({'relaxed' if r.converged else 'NOT CONVERGED'}, "
                  f"{r.steps} steps): {files}", file=sys.stderr)
        running = f"; {one_line(stop.running)} was running, nothing of it written" if stop.running else ""
        print(f"stobuilder: relax stopped: {len(stop.finished)} of {len(args.structures)} structures written"
              f"{running}", file=sys.stderr)
        raise
    if args.json:
        print_json({"structures": [r.to_json() for r in results]})
    else:
        for r in results:
            state = f"relaxed in {r.steps} step{'' if r.steps == 1 else 's'}" if r.converged else f"NOT CONVERGED after {r.steps} steps"
            print(f"{r.path}: {r.formula} {state}, E = {r.energy_hartree:.10f} hartree, "
                  f"max force {r.max_force_ev_per_a:.5f} eV/Å")
            for path in (r.relaxed_path, *r.files.values()):
                print(f"  wrote {path}")
    return 0 if all(r.converged for r in results) else 1
