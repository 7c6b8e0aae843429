"""Regenerate (or check) the shipped fit library: ``python -m stobuilder.expansion.regenerate [--check]``.

Without options the library file is rewritten atomically; with --check nothing is written and the
exit status is 1 when the regenerated text differs from the shipped file (0 when identical).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

from .fit import fit_sto
from .library import LIBRARY_MAX_GAUSSIANS, library_families, library_path, render_library


def _fit_family(labels: tuple[str, ...]) -> dict:
    return {n: fit_sto(list(labels), n) for n in range(1, LIBRARY_MAX_GAUSSIANS + 1)}


def build_text(workers: int = 2) -> str:
    """The library text, fitted from scratch (families spread over ``workers`` processes)."""
    families = library_families()
    if workers > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            results = list(pool.map(_fit_family, families))
    else:
        results = [_fit_family(f) for f in families]
    return render_library(dict(zip(families, results)))


def write_atomic(path: Path, text: str) -> None:
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=path.name + ".", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="ascii") as fh:
            fh.write(text)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        os.unlink(tmp)
        raise


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m stobuilder.expansion.regenerate", description=__doc__)
    parser.add_argument("--check", action="store_true", help="exit 1 if regenerating would change the file")
    parser.add_argument("--workers", type=int, default=2, help="processes to fit in (default 2)")
    args = parser.parse_args(argv)
    text = build_text(args.workers)
    path = Path(str(library_path("l2")))
    if args.check:
        current = path.read_text(encoding="ascii") if path.is_file() else ""
        if current != text:
            print(f"{path} is out of date; run python -m stobuilder.expansion.regenerate", file=sys.stderr)
            return 1
        print(f"{path} is up to date")
        return 0
    write_atomic(path, text)
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
