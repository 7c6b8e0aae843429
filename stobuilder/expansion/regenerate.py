"""Regenerate (or check) the shipped fit library: ``python -m stobuilder.expansion.regenerate [--check]``.

Both library files (data/fits_l2.json, data/fits_h1.json; every family of ``library_families``,
N = 1 … LIBRARY_MAX_GAUSSIANS) are fitted from scratch, families spread over worker processes.
Without options the files are rewritten atomically; with --check nothing is written and the exit
status is 1 when a regenerated text differs from the shipped file (0 when identical).
"""

from __future__ import annotations

import argparse
import os
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

from .fit import NORMS, fit_sto
from .library import LIBRARY_MAX_GAUSSIANS, library_families, library_path, render_library


def _fit_family(task: tuple[tuple[str, ...], str, int]) -> dict:
    labels, norm, top = task
    return {n: fit_sto(list(labels), n, norm) for n in range(1, top + 1)}


def build_texts(workers: int = 2, norms=NORMS, top: int = LIBRARY_MAX_GAUSSIANS, families=None) -> dict[str, str]:
    """norm → library text, fitted from scratch (family × norm tasks spread over ``workers`` processes)."""
    families = list(families or library_families())
    tasks = [(f, norm, top) for norm in norms for f in families]
    # the big families first: the pool then ends with short tasks
    order = sorted(range(len(tasks)), key=lambda i: (-len(tasks[i][0]), i))
    if workers > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            done = dict(zip(order, pool.map(_fit_family, [tasks[i] for i in order])))
    else:
        done = {i: _fit_family(tasks[i]) for i in order}
    out = {}
    for norm in norms:
        fits = {tasks[i][0]: done[i] for i in range(len(tasks)) if tasks[i][1] == norm}
        out[norm] = render_library(fits, norm)
    return out


def build_text(workers: int = 2, norm: str = "l2") -> str:
    """The text of one library file, fitted from scratch."""
    return build_texts(workers, (norm,))[norm]


def write_atomic(path: Path, text: str) -> None:
    from ..files import atomic_write

    atomic_write(path, text)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m stobuilder.expansion.regenerate", description=__doc__)
    parser.add_argument("--check", action="store_true", help="exit 1 if regenerating would change the file")
    parser.add_argument("--workers", type=int, default=2, help="processes to fit in (default 2)")
    parser.add_argument("--norm", choices=NORMS, action="append", help="only this norm's file (repeatable)")
    args = parser.parse_args(argv)
    texts = build_texts(args.workers, tuple(args.norm or NORMS))
    status = 0
    for norm, text in texts.items():
        path = Path(str(library_path(norm)))
        if args.check:
            current = path.read_text(encoding="ascii") if path.is_file() else ""
            if current != text:
                print(f"{path} is out of date; run python -m stobuilder.expansion.regenerate", file=sys.stderr)
                status = 1
            else:
                print(f"{path} is up to date")
            continue
        write_atomic(path, text)
        print(f"wrote {path}")
    return status


if __name__ == "__main__":
    sys.exit(main())
