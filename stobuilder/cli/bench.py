"""``stobuilder bench``: compare exponent choices over a molecule set."""

from __future__ import annotations

import sys

from stobuilder.cli.common import add_json, print_json
from stobuilder.cli.options import add_gaussians, add_norm, add_parallel, executor, workers
from stobuilder.core.errors import InputError

HELP = "compare exponent choices over a molecule set: table, JSON, an HTML report"


def add_arguments(p) -> None:
    from stobuilder.screening import rules

    p.add_argument("structures", nargs="*", metavar="STRUCTURE",
                   help="structure files; with --set, names of the set's molecules (default: all of them)")
    p.add_argument("--set", dest="set_name", metavar="NAME", help="a named molecule set, e.g. g2-1 (see --list-sets)")
    p.add_argument("--list-sets", action="store_true", help="print the named sets and exit")
    g = p.add_argument_group("variants (their product)")
    g.add_argument("--rule", action="append", metavar="RULE",
                   help=f"screening rule, repeatable: {', '.join(rules())} (default slater)")
    add_gaussians(g, several=True)
    add_norm(g, several=True)
    g.add_argument("--zeta-file", action="append", metavar="FILE.toml",
                   help="one more variant per rule, N and norm, with these ζ on top of the rule (repeatable)")
    p.add_argument("--reference", metavar="PYSCF_BASIS", help="also every calculation in this PySCF stored basis, e.g. cc-pvtz")
    p.add_argument("--out", metavar="DIR", help="output folder: bench.tsv, bench.json, report.html, plots, manifest")
    add_parallel(p, "progress on stderr (default auto)")
    p.add_argument("--force", action="store_true", help="recompute every calculation, whatever the manifest says")
    add_json(p, "print the result as JSON")


def run(args) -> int:
    from stobuilder import jobs
    from stobuilder.bench import run as bench
    from stobuilder.core.limits import one_line

    if args.list_sets:
        for info in bench.list_sets():
            print(f"{info.name:<8}{info.size:>4} molecules  {info.description}; {info.source}")
        return 0
    if not args.out:
        raise InputError("bench: --out DIR is required")
    count, note = workers(args)
    if note:
        print(f"stobuilder: note: {note}", file=sys.stderr)
    structures = bench.select_structures(args.structures, args.set_name)
    variants = bench.make_variants(args.rule, args.gaussians, args.norm, args.zeta_file or ())
    plan = bench.plan(structures, variants, args.reference)
    with executor(args) as pool:
        result = bench.run_bench(plan, args.out, executor=pool, workers=count, force=args.force,
                                 progress=jobs.make_progress(len(plan.tasks), args.progress, label="stobuilder bench",
                                                              unit="calculations"))
    for note in result.notes:
        print(f"stobuilder: note: {one_line(note)}", file=sys.stderr)
    if args.json:
        print_json(result.to_json())
    else:
        print(bench.summary_table(result))
    return result.exit_status
