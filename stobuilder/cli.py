"""The command line: argparse subcommands over the Python API, nothing else.

A bad input prints one line ``stobuilder: error: ...`` to stderr and exits with status 2.
"""

from __future__ import annotations

import argparse
import contextlib
import sys

from stobuilder.core.version import __version__
from stobuilder.core.errors import InputError

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (no usage dump) and exit status 2."""

    def error(self, message):
        raise InputError(f"{self.prog}: {message}")


WHOLE_NUMBER_LIMIT = 10**100  # far beyond any flag's own range (which the options check); refused before int()


def _whole_in(low: int | None = None, high: int | None = None, what: str = ""):
    """The argparse type of every whole-number flag: digits with an optional sign and exponent
    (``200``, ``+3``, ``2e2``), no decimal point (``2.0`` is refused, as the Python door refuses
    the float 2.0), else "is not a whole number"; one outside
    [``low``, ``high``] (default: within ±WHOLE_NUMBER_LIMIT; the options check their own range
    after) is "out of range", saying the range (``what`` names the values: "steps")."""
    from decimal import Decimal, InvalidOperation

    lo = -WHOLE_NUMBER_LIMIT if low is None else low
    hi = WHOLE_NUMBER_LIMIT if high is None else high

    def parse(text: str) -> int:
        try:
            value = Decimal(text.strip())
        except InvalidOperation:
            value = None
        if value is None or not value.is_finite() or value != value.to_integral_value() or "." in text:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number")
        if not lo <= value <= hi:
            span = f"{what} go from {lo} to {hi}" if what else f"no flag takes a whole number beyond ±1e{len(str(hi)) - 1}"
            raise argparse.ArgumentTypeError(f"{text} is out of range: {span}")
        return int(value)

    return parse


_whole_number = _whole_in()


def _add_rule(p, default="slater"):
    from stobuilder.screening import rules

    p.add_argument("--rule", default=default, help=f"screening rule: {', '.join(rules())} (default {default})")


def _print_json(doc) -> None:
    """Print strict JSON (no NaN or Infinity)."""
    from stobuilder.core.limits import strict_json

    print(strict_json(doc, "the result holds a number that is not finite; nothing printed"))


def _parser() -> argparse.ArgumentParser:
    from stobuilder import relax
    from stobuilder.jobs.progress import PROGRESS_MODES
    from stobuilder.expansion.fit import NORMS
    from stobuilder.model.methods import METHODS
    from stobuilder.pipeline.options import add_arguments

    parser = _Parser(prog="stobuilder", description="Slater-type-orbital minimal bases expanded in Gaussians.")
    parser.add_argument("--version", action="version", version=f"stobuilder {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    b = sub.add_parser("build", help="basis files (and SCF checks) for structure files")
    b.add_argument("structures", nargs="+", metavar="STRUCTURE", help="structure files ASE reads")
    add_arguments(b, _whole_number)
    b.add_argument("--out", default="basis", metavar="DIR", help="output folder (default ./basis)")
    b.add_argument("--force", action="store_true", help="overwrite existing output files")
    b.add_argument(
        "--split-elements", action="store_true", help="one file per element: <structure>.<Symbol><extension>"
    )
    b.add_argument(
        "--merge-into",
        metavar="FILE",
        help="add or replace our elements in this existing basis file (one format; the old file is kept as FILE.bak)",
    )
    b.add_argument("--json", action="store_true", help="print one JSON document instead of the table")

    r = sub.add_parser("relax", help="relax molecules with the basis (ASE optimizer, PySCF SCF); relaxed extxyz and basis files")
    r.add_argument("structures", nargs="+", metavar="STRUCTURE", help="molecule files ASE reads (a file's last frame)")
    add_arguments(r, _whole_number)
    r.add_argument("--fmax", type=_relax_fmax, default=relax.DEFAULT_FMAX, metavar="EV_PER_A",
                   help=f"largest force on an atom at convergence (default {relax.DEFAULT_FMAX} eV/Å)")
    r.add_argument("--steps", type=_whole_in(0, relax.MAX_STEPS, "steps"), default=relax.DEFAULT_STEPS, metavar="N",
                   help=f"optimizer steps at most, 0 to {relax.MAX_STEPS} (default {relax.DEFAULT_STEPS})")
    r.add_argument("--optimizer", choices=relax.OPTIMIZERS, default=relax.OPTIMIZERS[0],
                   help=f"ASE optimizer (default {relax.OPTIMIZERS[0]})")
    r.add_argument("--out", default="relaxed", metavar="DIR", help="output folder (default ./relaxed)")
    r.add_argument("--force", action="store_true", help="overwrite existing output files")
    r.add_argument("--json", action="store_true", help="print one JSON document instead of the summary")

    t = sub.add_parser("atom", help="one atom with exact STOs: energy, ζ, virial ratio, Gaussian-expansion error")
    t.add_argument("element", metavar="ELEMENT", help='element symbol, or a configuration such as "[Ar] 3d7 4s1"')
    _add_rule(t)
    t.add_argument("--configuration", metavar="CONFIG", help='explicit configuration, e.g. "1s2 2s1 2p3"')
    t.add_argument("--charge", type=_whole_number, default=0, help="ion charge (default 0)")
    t.add_argument("--zeta", action="append", metavar="LABEL=VALUE", help="your own ζ for one subshell, e.g. 1s=1.6875")
    t.add_argument("--optimize", action="store_true", help="optimise every ζ variationally (from the rule's values)")
    t.add_argument(
        "--gaussians", type=_whole_number, nargs="+", default=[], metavar="N",
        help="also the energy with N-Gaussian expansions of the same STOs, e.g. --gaussians 3 6 12",
    )
    t.add_argument("--method", choices=METHODS, default="auto", help="SCF method (default: RHF/ROHF)")
    t.add_argument(
        "--fit", choices=("l2", "h1"), default="l2", help="fitting norm of the Gaussian expansions (default l2)"
    )
    t.add_argument("--json", action="store_true", help="print JSON")

    f = sub.add_parser("formats", help="the basis-file formats: name, file extension, description")
    f.add_argument("--json", action="store_true", help="print JSON")

    a = sub.add_parser("batch", help="many structures: a process pool or a Dask cluster, a manifest, resume")
    a.add_argument(
        "inputs", nargs="+", metavar="INPUT",
        help="structure files, folders (searched recursively by the extensions ASE reads) or @LIST files (one path a line)",
    )
    a.add_argument("--out", required=True, metavar="DIR", help="output folder; holds the files and the manifest")
    a.add_argument("--workers", type=_whole_number, metavar="N", help="local worker processes (default: the usable cores)")
    a.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask cluster, e.g. tcp://host:8786 (needs stobuilder[cluster])")
    add_arguments(a, _whole_number)
    a.add_argument("--force", action="store_true", help="recompute every item, whatever the manifest says")
    a.add_argument(
        "--progress", choices=PROGRESS_MODES, default="auto",
        help="progress on stderr: a bar on a terminal, plain lines otherwise (default auto)",
    )
    a.add_argument("--json", action="store_true", help="print the summary as JSON")

    c = sub.add_parser("bench", help="compare exponent choices over a molecule set: table, JSON, an HTML report")
    c.add_argument("structures", nargs="*", metavar="STRUCTURE",
                   help="structure files; with --set, names of the set's molecules (default: all of them)")
    c.add_argument("--set", dest="set_name", metavar="NAME", help="a named molecule set, e.g. g2-1 (see --list-sets)")
    c.add_argument("--list-sets", action="store_true", help="print the named sets and exit")
    c.add_argument("--rule", action="append", metavar="RULE", help="screening rule, repeatable (default slater)")
    c.add_argument("--gaussians", type=_whole_number, action="append", metavar="N", help="Gaussians per STO, repeatable (default 3)")
    c.add_argument("--fit", choices=NORMS, action="append", help="fitting norm, repeatable (default l2)")
    c.add_argument("--zeta-file", action="append", metavar="FILE.toml",
                   help="one more variant per rule, N and fit, with these ζ on top of the rule (repeatable)")
    c.add_argument("--reference", metavar="PYSCF_BASIS", help="also every calculation in this PySCF stored basis, e.g. cc-pvtz")
    c.add_argument("--out", metavar="DIR", help="output folder: bench.tsv, bench.json, report.html, plots, manifest")
    c.add_argument("--workers", type=_whole_number, metavar="N", help="local worker processes (default: the usable cores)")
    c.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask cluster, e.g. tcp://host:8786")
    c.add_argument("--force", action="store_true", help="recompute every calculation, whatever the manifest says")
    c.add_argument("--progress", choices=PROGRESS_MODES, default="auto", help="progress on stderr (default auto)")
    c.add_argument("--json", action="store_true", help="print the result as JSON")

    t = sub.add_parser("fit", help="fit Gaussians to STOs: exponents, coefficients, error; optionally a plot")
    t.add_argument("subshells", nargs="+", metavar="SUBSHELL", help="e.g. 1s, or 2s 2p (or 2s,2p) sharing exponents")
    t.add_argument("--gaussians", type=_whole_number, default=3, metavar="N", help="Gaussians per STO (default 3)")
    t.add_argument("--fit", choices=NORMS, default="l2", help="fitting norm: l2 least squares, h1 Sobolev (default l2)")
    t.add_argument("--zeta", type=float, default=1.0, metavar="Z", help="zeta of the (first) STO in bohr^-1 (default 1)")
    t.add_argument("--plot", metavar="FILE.png", help="draw the STO, its expansion, the residual and epsilon against N")
    t.add_argument("--force", action="store_true", help="overwrite an existing --plot file")
    t.add_argument("--json", action="store_true", help="print JSON")

    u = sub.add_parser("tune", help="ζ that minimise the SCF energies of a training set of structures")
    u.add_argument("structures", nargs="+", metavar="STRUCTURE", help="training structures (molecules or atoms)")
    add_arguments(u, _whole_number)
    u.add_argument(
        "--vary", action="append", metavar="ELEMENT:SUBSHELL[,SUBSHELL...]",
        help="one free ζ, shared by the subshells given (repeatable; default the valence shell of every element)",
    )
    u.add_argument("--weights", metavar="FILE.toml", help="weights of the structures: lines such as water = 2.0")
    u.add_argument("--validate", nargs="+", default=[], metavar="STRUCTURE", help="held-out structures to report")
    u.add_argument("--out", default="tuned-zeta.toml", metavar="FILE.toml", help="the zeta file (default tuned-zeta.toml)")
    u.add_argument("--force", action="store_true", help="overwrite an existing --out file")
    u.add_argument("--threads", type=_whole_number, metavar="N", help="PySCF OpenMP threads (default PySCF's)")
    u.add_argument("--json", action="store_true", help="print JSON")

    z = sub.add_parser("zeta", help="Zeff, n* and zeta of every subshell")
    z.add_argument("elements", nargs="+", metavar="ELEMENT-OR-CONFIG", help='e.g. Fe, or "[Ar] 3d7 4s1"')
    _add_rule(z)
    z.add_argument("--charge", type=_whole_number, default=0, help="ion charge (default 0)")
    z.add_argument("--json", action="store_true", help="print JSON")
    return parser


# ---------------------------------------------------------------------------- build


def _cmd_build(args) -> int:
    from stobuilder.formats import format_for_path
    from stobuilder.pipeline.options import from_args
    from stobuilder.pipeline.path import build_structures

    options = from_args(args)
    if args.merge_into and not args.code:
        import dataclasses

        from stobuilder.pipeline.options import OutputOptions

        output = OutputOptions(codes=(format_for_path(args.merge_into),), sp_shells=options.output.sp_shells)
        options = dataclasses.replace(options, output=output)
    reports = build_structures(
        args.structures, options, out_dir=args.out, force=args.force, split_elements=args.split_elements,
        merge_into=args.merge_into,
    )
    if args.json:
        _print_json({"structures": [r.to_json() for r in reports]})
    else:
        for r in reports:
            print(_build_table(r))
    return 0


def _fmt_energy(e):
    return "n/a" if e is None else f"{e:.8f}"


def _build_table(report) -> str:
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
                f"  {r.method:<5}{r.label:<20}E = {_fmt_energy(r.energy_hartree)} hartree  {state}, "
                f"{r.iterations} iterations, {r.wall_seconds:.2f} s"
            )
            if r.reference_basis:
                lines.append(
                    f"       PySCF {r.reference_basis:<13}E = {_fmt_energy(r.reference_energy_hartree)} hartree  "
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


# ---------------------------------------------------------------------------- relax


def _relax_fmax(text: str) -> float:
    """``--fmax``: a finite positive number (eV/Å)."""
    from stobuilder.relax import fmax_ok

    try:
        value = float(text)
    except ValueError:
        value = None
    if value is None or not fmax_ok(value):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number (eV/Å)")
    return value


def _cmd_relax(args) -> int:
    from stobuilder.core.limits import one_line
    from stobuilder.pipeline.options import from_args
    from stobuilder.relax import RelaxInterrupted, relax_structures

    if args.check:
        raise InputError("--check is build's; relax runs an SCF at every step already")
    try:
        results = relax_structures(args.structures, from_args(args), fmax=args.fmax, steps=args.steps,
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
        _print_json({"structures": [r.to_json() for r in results]})
    else:
        for r in results:
            state = f"relaxed in {r.steps} step{'' if r.steps == 1 else 's'}" if r.converged else f"NOT CONVERGED after {r.steps} steps"
            print(f"{r.path}: {r.formula} {state}, E = {r.energy_hartree:.10f} hartree, "
                  f"max force {r.max_force_ev_per_a:.5f} eV/Å")
            for path in (r.relaxed_path, *r.files.values()):
                print(f"  wrote {path}")
    return 0 if all(r.converged for r in results) else 1


# ---------------------------------------------------------------------------- batch


def _workers(args) -> tuple[int | None, str | None]:
    """``--workers`` / ``--scheduler`` checked (batch and bench): (local worker count, or None on
    a Dask cluster; a note when the count was capped)."""
    from stobuilder import jobs

    if args.scheduler is not None and args.workers is not None:
        raise InputError("--workers is for local runs; a Dask cluster brings its own workers")
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers must be >= 1, got {args.workers}")
    if args.scheduler is not None:
        jobs.check_scheduler_address(args.scheduler)
        return None, None
    return jobs.worker_count(args.workers)


@contextlib.contextmanager
def _executor(args):
    """The Dask cluster's executor for ``--scheduler`` (its client closed afterwards), else None:
    the engine's own process pool."""
    from stobuilder import jobs

    if args.scheduler is None:
        yield None
        return
    client, executor = jobs.dask_executor(args.scheduler)
    try:
        yield executor
    finally:
        client.close()


def _cmd_batch(args) -> int:
    from stobuilder import batch, jobs
    from stobuilder.core.limits import one_line  # a path with a line end in a note stays one line

    workers, note = _workers(args)
    notes: list[str] = [note] if note else []
    from stobuilder.pipeline.options import from_args

    options = from_args(args)
    items = batch.discover(args.inputs, exclude=args.out, notes=notes)
    for note in notes:
        print(f"stobuilder: note: {one_line(note)}", file=sys.stderr)
    with _executor(args) as executor:
        summary = batch.run_batch(
            items, options, args.out, executor=executor, workers=workers, force=args.force,
            progress=jobs.make_progress(len(items), args.progress),
        )
    for note in summary.notes:
        print(f"stobuilder: note: {one_line(note)}", file=sys.stderr)
    if args.json:
        _print_json(summary.to_json())
    else:
        for path, error in summary.failures:
            print(f"failed: {one_line(error)}")
        print(
            f"{summary.total} structures: {summary.done} done, {summary.skipped} skipped (up to date), "
            f"{summary.failed} failed, {summary.seconds:.1f} s; manifest {summary.manifest}"
        )
    return summary.exit_status


# ---------------------------------------------------------------------------- bench


def _cmd_bench(args) -> int:
    from stobuilder import jobs
    from stobuilder.bench import run as bench
    from stobuilder.core.limits import one_line

    if args.list_sets:
        for info in bench.list_sets():
            print(f"{info.name:<8}{info.size:>4} molecules  {info.description}; {info.source}")
        return 0
    if not args.out:
        raise InputError("bench: --out DIR is required")
    workers, note = _workers(args)
    if note:
        print(f"stobuilder: note: {note}", file=sys.stderr)
    structures = bench.select_structures(args.structures, args.set_name)
    variants = bench.make_variants(args.rule, args.gaussians, args.fit, args.zeta_file or ())
    plan = bench.plan(structures, variants, args.reference)
    with _executor(args) as executor:
        result = bench.run_bench(plan, args.out, executor=executor, workers=workers, force=args.force,
                                 progress=jobs.make_progress(len(plan.tasks), args.progress, label="stobuilder bench",
                                                              unit="calculations"))
    for note in result.notes:
        print(f"stobuilder: note: {one_line(note)}", file=sys.stderr)
    if args.json:
        _print_json(result.to_json())
    else:
        print(bench.summary_table(result))
    return result.exit_status


# ---------------------------------------------------------------------------- atom


def _cmd_atom(args) -> int:
    from stobuilder.checks.atom import atom_report
    from stobuilder.builder.spec import ZetaTable
    from stobuilder.model.elements import resolve

    symbol = resolve(args.element, args.charge or 0, args.configuration).symbol
    doc = atom_report(
        args.element,
        rule=args.rule,
        configuration=args.configuration,
        charge=args.charge,
        zeta=ZetaTable.parse(args.zeta or [], element=symbol).of_element(symbol) or None,
        optimize=args.optimize,
        gaussians=args.gaussians,
        method=args.method,
        norm=args.fit,
    )
    if args.json:
        _print_json(doc)
        return 0
    print(doc["state"])  # names the element, its configuration and the determinant computed
    source = "optimised" if args.optimize else f"rule {args.rule}" + (", your own ζ" if args.zeta else "")
    print(f"  STOs ({source}): " + "  ".join(f"{k} {v:.6f}" for k, v in doc["zeta"].items()))
    print(f"  exact-STO {doc['method']}: E = {doc['energy_exact_hartree']:.10f} hartree, -V/T = {doc['virial_ratio']:.10f}"
          + ("" if doc["converged"] else "  NOT CONVERGED"))
    for row in doc["gaussian"]:
        diff = row["energy_hartree"] - doc["energy_exact_hartree"]
        print(
            f"  STO-{row['gaussians']}G ({row['fit']} fit): E = {row['energy_hartree']:.10f} hartree, "
            f"E - E(exact) = {diff:+.3e}" + ("" if row["converged"] else "  NOT CONVERGED")
        )
    print("  orbital energies/hartree: " + "  ".join(
        f"{o['label']}{'' if o['spin'] == 'both' else '(' + o['spin'][0] + ')'} {o['energy_hartree']:.5f}"
        for o in doc["orbital_energies"] if o["occupation"] > 0
    ))
    return 0


# ---------------------------------------------------------------------------- fit


def _cmd_fit(args) -> int:
    from stobuilder.expansion import lookup
    from stobuilder.expansion.report import fit_document, fit_table

    from stobuilder.core.limits import zeta_value

    labels = [x for item in args.subshells for x in item.split(",") if x]
    zeta_value(args.zeta, "--zeta")
    if args.plot:  # before any fit: the plot may be written (atomic_write makes no folder)
        from stobuilder.core.files import check_targets

        check_targets({args.plot: ""}, args.force, make_folders=False, name="--plot")
    fit = lookup(labels, args.gaussians, args.fit)
    doc = fit_document(fit, args.zeta)  # validates --zeta
    if args.plot:
        from stobuilder.expansion.plot import plot_fit

        doc["plot"] = plot_fit(fit, args.plot, args.zeta)
    if args.json:
        _print_json(doc)
    else:
        print(fit_table(fit, args.zeta))
        if args.plot:
            print(f"  wrote {args.plot}")
    return 0


# ---------------------------------------------------------------------------- zeta


def _cmd_zeta(args) -> int:
    from stobuilder.builder.construct import sto_exponents

    entries = []
    for item in args.elements:
        conf, stos = sto_exponents(item, rule=args.rule, charge=args.charge)
        entries.append((conf, stos))
    if args.json:
        doc = {
            "rule": args.rule,
            "elements": [
                {
                    "symbol": conf.symbol,
                    "charge": conf.charge,
                    "configuration": conf.label,
                    "shells": [{"label": s.label, "zeff": s.zeff, "n_eff": s.n_eff, "zeta": s.zeta} for s in stos],
                }
                for conf, stos in entries
            ],
        }
        _print_json(doc)
        return 0
    for conf, stos in entries:
        charge = f", charge {conf.charge:+d}" if conf.charge else ""
        print(f"{conf.symbol} {conf.label}{charge}  (rule {args.rule})")
        print(f"  {'subshell':<10}{'Zeff':>10}{'n*':>6}{'zeta/bohr^-1':>14}")
        for s in stos:
            print(f"  {s.label:<10}{s.zeff:>10.4f}{s.n_eff:>6.1f}{s.zeta:>14.4f}")
    return 0


# ---------------------------------------------------------------------------- tune


def _cmd_tune(args) -> int:
    from stobuilder.core.files import atomic_write
    from stobuilder.pipeline.options import from_args
    from stobuilder.tune import parse_vary, tune

    for given, name in ((args.code, "--code"), (args.check, "--check"), (args.sp_shells, "--sp-shells")):
        if given:
            raise InputError(f"tune: {name} is for build; tune writes a zeta file only")
    _check_tune_out(args.out, args.force, [*args.structures, *args.validate, *([args.weights] if args.weights else [])])
    options = from_args(args)
    vary = parse_vary(args.vary) if args.vary else None
    result = tune(args.structures, options, vary, args.weights, args.validate, threads=args.threads)
    atomic_write(args.out, result.toml_text())
    if args.json:
        _print_json(result.to_json(args.out))
    else:
        print(_tune_table(result, args.out))
    return 0 if result.converged else 1


def _check_tune_out(out: str, force: bool, inputs) -> None:
    """Before the first SCF: ``--out`` may be written (``files.check_targets``: not a folder, not
    one of the ``inputs`` even with --force, not an existing file without --force, its folder
    exists — tune makes none — and takes a new file)."""
    from stobuilder.core.files import check_targets

    check_targets({out: ""}, force, inputs, make_folders=False, name="--out")


def _tune_table(result, out: str) -> str:
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
        return (f"  {one_line(r.structure):<{width}}{r.method:<7}{_fmt_energy(r.start_hartree):>18}"
                f"{_fmt_energy(r.final_hartree):>18}")

    lines.append(f"  {'structure':<{width}}{'method':<7}{'start':>18}{'tuned':>18}  hartree")
    lines += [row(r) for r in result.energies]
    if result.validation:
        lines.append("  held out (not tuned on; the tuned zeta need not lower these):")
        lines += [row(r) for r in result.validation]
    lines.append(f"  wrote {one_line(out)}")
    return "\n".join(lines)


# ---------------------------------------------------------------------------- formats


def _cmd_formats(args) -> int:
    from stobuilder.formats import formats

    table = formats().values()
    if args.json:
        doc = {"formats": [{"name": f.name, "extension": f.extension, "description": f.description} for f in table]}
        _print_json(doc)
        return 0
    width = max(len(f.extension) for f in table) + 2
    print(f"{'name':<12}{'extension':<{width}}description")
    for f in table:
        print(f"{f.name:<12}{f.extension:<{width}}{f.description}")
    return 0


COMMANDS = {
    "build": _cmd_build,
    "batch": _cmd_batch,
    "relax": _cmd_relax,
    "bench": _cmd_bench,
    "atom": _cmd_atom,
    "fit": _cmd_fit,
    "zeta": _cmd_zeta,
    "formats": _cmd_formats,
    "tune": _cmd_tune,
}


EXIT_BROKEN_PIPE = 141  # 128 + SIGPIPE, what a shell reports for a command killed by a closed pipe


class _StderrHandler:
    """Log records of the stobuilder loggers (progress of long computations) as
    ``stobuilder: message`` lines on whatever sys.stderr is at the time."""

    @staticmethod
    def install() -> None:
        import logging

        logger = logging.getLogger("stobuilder")
        if any(getattr(h, "_stobuilder_cli", False) for h in logger.handlers):
            return

        class Handler(logging.Handler):
            _stobuilder_cli = True

            def emit(self, record):
                try:
                    print(f"stobuilder: {record.getMessage()}", file=sys.stderr, flush=True)
                except (OSError, ValueError):
                    pass

        logger.addHandler(Handler(logging.INFO))
        logger.setLevel(logging.INFO)
        logger.propagate = False


def _quiet_broken_pipe() -> int:
    """stdout's reader has gone (``stobuilder formats | head -1``): stop quietly, as command-line
    tools do, with no message and no second error when Python flushes stdout at exit."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass
    return EXIT_BROKEN_PIPE


def _flag_text(exc: InputError) -> str:
    """The message of ``exc`` in the command line's words, on one line: an error that names
    Python arguments (``options.OptionError``, ``files.OverwriteError``: anything with
    ``render``) names their flags instead; a message that a path with a line end would break
    gets the line end escaped (``limits.one_line``)."""
    from stobuilder.core.limits import one_line
    from stobuilder.pipeline.options import CLI_FLAGS

    text = exc.render({**CLI_FLAGS, "force": "--force"}) if hasattr(exc, "render") else str(exc)
    return one_line(text) if len(text.splitlines()) > 1 else text


def main(argv=None) -> int:
    try:
        _StderrHandler.install()
        args = _parser().parse_args(argv)
        status = COMMANDS[args.command](args)
        sys.stdout.flush()  # a closed pipe shows here, inside the handlers, not at exit
        return status
    except BrokenPipeError:
        return _quiet_broken_pipe()
    except InputError as exc:
        print(f"stobuilder: error: {_flag_text(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"stobuilder: error: {where}{exc.strerror or exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("stobuilder: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
