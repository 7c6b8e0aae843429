"""Regenerate (or check) the optimised-exponent table:
``python -m stobuilder.screening.regenerate_optimized [--last Kr] [--workers 2] [--check]``.

Every neutral ground state from H to ``--last`` is optimised with stobuilder.atomic.optimize_zeta
(process pool). The file holds no timestamps and repr floats, so regeneration is byte-identical;
--check writes nothing and exits 1 when the regenerated text differs from the shipped file.
"""

from __future__ import annotations

import argparse
import json
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

from ..elements import atomic_number, element_symbol, ground_state
from ..files import atomic_write

DEFAULT_LAST = "Kr"


def optimise_entry(symbol: str) -> dict:
    """The table entry of one neutral ground state."""
    from ..atomic import optimize_zeta

    r = optimize_zeta(symbol)
    return {
        "configuration": r.configuration,
        "state": r.state,
        "method": r.method,
        "energy_hartree": r.energy,
        "virial_ratio": r.virial_ratio,
        "zeta": r.zeta,
    }


def build_text(last: str = DEFAULT_LAST, workers: int = 2) -> str:
    """The table text for H … ``last``."""
    symbols = [element_symbol(z) for z in range(1, atomic_number(last) + 1)]
    for s in symbols:
        ground_state(s)
    if workers > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            entries = list(pool.map(optimise_entry, symbols, chunksize=1))
    else:
        entries = [optimise_entry(s) for s in symbols]
    doc = {
        "provenance": {
            "method": "exact one-centre STO integrals (stobuilder.sto); SCF with PySCF drivers, RHF for closed "
            "shells, ROHF high-spin determinants otherwise, orbitals pure in (l, m); ζ of every occupied "
            "subshell minimised with analytic gradients (stobuilder.atomic.optimize_zeta) until "
            "|ζ dE/dζ| < 1e-10 hartree",
            "reference": "E. Clementi and D. L. Raimondi, J. Chem. Phys. 38, 2686 (1963) (same quantity)",
            "states": "neutral ground-state configurations of stobuilder.elements.ground_state",
            "units": {"zeta": "bohr^-1", "energy_hartree": "hartree"},
            "empty_subshells": "not in the table; the optimized rule gives an empty p partner the zeta of the s of its n",
            "regenerate": "python -m stobuilder.screening.regenerate_optimized",
        },
        "elements": dict(zip(symbols, entries)),
    }
    return json.dumps(doc, indent=1, ensure_ascii=False) + "\n"


def table_path() -> Path:
    return Path(__file__).resolve().parent / "data" / "optimized_zeta.json"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m stobuilder.screening.regenerate_optimized", description=__doc__)
    parser.add_argument("--last", default=DEFAULT_LAST, help="last element of the table (default Kr)")
    parser.add_argument("--workers", type=int, default=2, help="processes (default 2)")
    parser.add_argument("--check", action="store_true", help="exit 1 if regenerating would change the file")
    args = parser.parse_args(argv)
    text = build_text(args.last, args.workers)
    path = table_path()
    if args.check:
        current = path.read_text(encoding="utf-8") if path.is_file() else ""
        if current != text:
            print(f"{path} is out of date; run python -m stobuilder.screening.regenerate_optimized", file=sys.stderr)
            return 1
        print(f"{path} is up to date")
        return 0
    atomic_write(str(path), text)
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
