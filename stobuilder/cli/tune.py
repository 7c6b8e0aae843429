"""``stobuilder tune``: ζ that minimise the SCF energies of a training set (a zeta file)."""

from __future__ import annotations

from stobuilder.cli.common import add_json, fmt_energy, print_json, refuse, whole_arg
from stobuilder.cli.options import add_basis, add_scf, build_options

HELP = "ζ that minimise the SCF energies of a training set of structures"


def add_arguments(p) -> None:
    p.add_argument("structures", nargs="+", metavar="STRUCTURE", help="training structures (molecules or atoms)")
    add_basis(p)
    add_scf(p, check=False)
    refuse(p, ["--code", "--check", "--sp-shells"], "tune writes a zeta file only")
    p.add_argument(
        "--vary", action="append", metavar="ELEMENT:SUBSHELL[,SUBSHELL...]",
        help="one free ζ, shared by the subshells given (repeatable; default the valence shell of every element)",
    )
    p.add_argument("--weights", metavar="FILE.toml", help="weights of the structures: lines such as water = 2.0")
    p.add_argument("--validate", nargs="+", default=[], metavar="STRUCTURE", help="held-out structures to report")
    p.add_argument("--out", default="tuned-zeta.toml", metavar="FILE.toml", help="the zeta file (default tuned-zeta.toml)")
    p.add_argument("--force", action="store_true", help="overwrite an existing --out file")
    p.add_argument("--threads", type=whole_arg, metavar="N", help="PySCF OpenMP threads (default PySCF's)")
    add_json(p)


def run(args) -> int:
    from stobuilder.core.files import atomic_write
    from stobuilder.tune import parse_vary, tune

    check_out(args.out, args.force, [*args.structures, *args.validate, *([args.weights] if args.weights else [])])
    options = build_options(args)
    vary = parse_vary(args.vary) if args.vary else None
    result = tune(args.structures, options, vary, args.weights, args.validate, threads=args.threads)
    atomic_write(args.out, result.toml_text())
    if args.json:
        print_json(result.to_json(args.out))
    else:
        print(table(result, args.out))
    return 0 if result.converged else 1


def check_out(out: str, force: bool, inputs) -> None:
    """Before the first SCF: ``--out`` may be written (``files.check_targets``: not a folder, not
    one of the ``inputs`` even with --force, not an existing file without --force, its folder
    exists — tune makes none — and takes a new file)."""
    from stobuilder.core.files import check_targets

    check_targets({out: ""}, force, inputs, make_folders=False, name="--out")


def table(result, out: str) -> str:
    """The printed summary of a tune run."""
    from stobuilder.core.limits import one_line

    state = "converged" if result.converged else "NOT CONVERGED"
    lines = [f"tune: {state} ({one_line(result.message)}), {result.iterations} iterations, "
             f"{result.scf_count} SCF calculations, {result.wall_seconds:.1f} s"]
    lines.append(f"  {'free zeta':<16}{'start':>12}{'tuned':>12}  bohr^-1")
    for v, a, b in zip(result.variables, result.start, result.final):
        held = "  (held by a bound of the search: not an optimum)" if v.label in result.at_bounds else ""
        lines.append(f"  {v.label:<16}{a:>12.6f}{b:>12.6f}{held}")
    width = max([30] + [len(one_line(r.structure)) for r in result.energies + result.validation]) + 2

    def row(r):
        return (f"  {one_line(r.structure):<{width}}{r.method:<7}{fmt_energy(r.start_hartree):>18}"
                f"{fmt_energy(r.final_hartree):>18}")

    lines.append(f"  {'structure':<{width}}{'method':<7}{'start':>18}{'tuned':>18}  hartree")
    lines += [row(r) for r in result.energies]
    if result.validation:
        lines.append("  held out (not tuned on; the tuned zeta need not lower these):")
        lines += [row(r) for r in result.validation]
    lines.append(f"  wrote {one_line(out)}")
    return "\n".join(lines)
