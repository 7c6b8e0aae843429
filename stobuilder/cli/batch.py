"""``stobuilder batch``: many structures on a process pool or a Dask cluster, with a manifest."""

from __future__ import annotations

import sys

from stobuilder.cli.common import add_json, print_json
from stobuilder.cli.options import add_basis, add_output, add_parallel, add_scf, build_options, executor, workers

HELP = "many structures: a process pool or a Dask cluster, a manifest, resume"


def add_arguments(p) -> None:
    p.add_argument(
        "inputs", nargs="+", metavar="INPUT",
        help="structure files, folders (searched recursively by the extensions ASE reads) or @LIST files (one path a line)",
    )
    p.add_argument("--out", required=True, metavar="DIR", help="output folder; holds the files and the manifest")
    add_parallel(p, "progress on stderr: a bar on a terminal, plain lines otherwise (default auto)")
    add_basis(p)
    add_output(p)
    add_scf(p)
    p.add_argument("--force", action="store_true", help="recompute every item, whatever the manifest says")
    add_json(p, "print the summary as JSON")


def run(args) -> int:
    from stobuilder import batch, jobs
    from stobuilder.core.limits import one_line  # a path with a line end in a note stays one line

    count, note = workers(args)
    notes: list[str] = [note] if note else []
    options = build_options(args)
    items = batch.discover(args.inputs, exclude=args.out, notes=notes)
    for note in notes:
        print(f"stobuilder: note: {one_line(note)}", file=sys.stderr)
    with executor(args) as pool:
        summary = batch.run_batch(
            items, options, args.out, executor=pool, workers=count, force=args.force,
            progress=jobs.make_progress(len(items), args.progress),
        )
    for note in summary.notes:
        print(f"stobuilder: note: {one_line(note)}", file=sys.stderr)
    if args.json:
        print_json(summary.to_json())
    else:
        for path, error in summary.failures:
            print(f"failed: {one_line(error)}")
        print(
            f"{summary.total} structures: {summary.done} done, {summary.skipped} skipped (up to date), "
            f"{summary.failed} failed, {summary.seconds:.1f} s; manifest {summary.manifest}"
        )
    return summary.exit_status
