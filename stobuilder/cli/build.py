"""``stobuilder build``: basis files (and SCF checks) for structure files."""

from __future__ import annotations

from stobuilder.cli.common import add_json, fmt_energy, print_json
from stobuilder.cli.options import add_basis, add_output, add_scf, build_options

HELP = "basis files (and SCF checks) for structure files"


def add_arguments(p) -> None:
    p.add_argument("structures", nargs="+", metavar="STRUCTURE", help="structure files ASE reads")
    add_basis(p)
    add_output(p)
    add_scf(p)
    p.add_argument("--out", default="basis", metavar="DIR", help="output folder (default ./basis)")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument(
        "--split-elements", action="store_true", help="one file per element: <structure>.<Symbol><extension>"
    )
    p.add_argument(
        "--merge-into",
        metavar="FILE",
        help="add or replace our elements in this existing basis file (one format; the old file is kept as FILE.bak)",
    )
    add_json(p, "print one JSON document instead of the table")


def run(args) -> int:
    from stobuilder.pipeline.path import build_structures

    options = build_options(args)
    if args.merge_into and not args.code:
        import dataclasses

        from stobuilder.formats import format_for_path
        from stobuilder.pipeline.options import OutputOptions

        output = OutputOptions(codes=(format_for_path(args.merge_into),), sp_shells=options.output.sp_shells)
        options = dataclasses.replace(options, output=output)
    reports = build_structures(
        args.structures, options, out_dir=args.out, force=args.force, split_elements=args.split_elements,
        merge_into=args.merge_into,
    )
    if args.json:
        print_json({"structures": [r.to_json() for r in reports]})
    else:
        for r in reports:
            print(table(r))
    return 0


def table(report) -> str:
    """The printed summary of one structure's build."""
    first = report.frames[0]
    lines = [
        f"{report.path}: {first.formula}, charge {first.charge}, spin {first.spin}, "
        f"{len(first.symbols)} atoms{', periodic' if first.periodic else ''}"
        + (f", {len(report.frames)} frames" if len(report.frames) > 1 else "")
    ]
    lines.append(f"  basis {report.basis.name}")
    lines.append(f"  {'element':<8}{'configuration':<24}STOs: subshell zeta/bohr^-1")
    for e in report.basis.elements:
        stos = "  ".join(f"{s.label} {s.zeta:.4f}" for s in e.stos)
        lines.append(f"  {e.symbol:<8}{e.configuration_label:<24}{stos}")
        errors = "  ".join(f"{s.label} {s.fit_error:.2e}" for s in e.shells if s.fit_error is not None)
        if errors:
            lines.append(f"  {'':<8}{'fit error (' + report.basis.norm + ')':<24}{errors}")
    for code, path in report.files.items():
        lines.append(f"  wrote {path} ({code})")
    for check in report.checks:
        if check.target != "structure":
            lines.append(f"  check on free atoms: {check.reason}")
        for r in check.results:
            state = "converged" if r.converged else "NOT CONVERGED"
            lines.append(
                f"  {r.method:<5}{r.label:<20}E = {fmt_energy(r.energy_hartree)} hartree  {state}, "
                f"{r.iterations} iterations, {r.wall_seconds:.2f} s"
            )
            if r.reference_basis:
                lines.append(
                    f"       PySCF {r.reference_basis:<13}E = {fmt_energy(r.reference_energy_hartree)} hartree  "
                    f"dE = {r.delta_hartree:+.2e} hartree"
                )
        for a in check.exact_atoms:
            lines.append(
                f"  exact-STO free atom {a.symbol:<3}E = {a.energy_exact_hartree:.8f} hartree; "
                f"its Gaussian expansion lies {a.expansion_error_hartree:+.2e} above"
            )
    for note in report.notes:
        lines.append(f"  note: {note}")
    return "\n".join(lines)
