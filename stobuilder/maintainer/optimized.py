"""Regenerate (or check) the optimised-exponent table:
``python -m stobuilder.maintainer.optimized [--last Rn] [--workers 2] [--keep DIR] [--check]``.

Every neutral ground state from H to ``--last`` is optimised with stobuilder.checks.atom.optimize_zeta
(process pool). The file holds no timestamps and repr floats, so regeneration on the machine
that made it is byte-identical. The heavy atoms take minutes each (hours for H–Rn on two cores):
--keep DIR stores each finished entry as DIR/<Symbol>.json and reuses the entries already there,
so an interrupted regeneration goes on where it stopped. --check writes nothing and compares the regenerated table with
the shipped one within ``TOLERANCES`` (stobuilder.maintainer.tablecheck): one line "equal within ..." with the
largest relative difference and its entry, or "differs: ..."; exit 1 when they differ.
"""

from __future__ import annotations

import argparse
import json
import sys
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path

from stobuilder.model.elements import atomic_number, element_symbol, ground_state
from stobuilder.core.files import atomic_write
from stobuilder.maintainer.tablecheck import Comparison, Tolerance, compare, report

DEFAULT_LAST = "Rn"

# Tolerances of a regeneration on another machine. The energy is stationary in ζ and the virial
# ratio −V/T is fixed at 2 by the optimum: both agree to rounding (measured across machines, H–Kr:
# 8e-16 and 2.5e-14 relative). ζ itself is refined by Newton steps until |ζ dE/dζ| < 1e-10 hartree,
# and two machines follow the same steps to within rounding (measured: 8.8e-12 relative, Cr 4s);
# 1e-10 leaves a margin and still tells any real change (1e-9 and more).
TOLERANCES = {"zeta": Tolerance(1e-10), "energy_hartree": Tolerance(1e-12), "virial_ratio": Tolerance(1e-12)}
TOLERANCE_TEXT = ", ".join(f"{k} {v}" for k, v in TOLERANCES.items())


def optimise_entry(symbol: str) -> dict:
    """The table entry of one neutral ground state."""
    from stobuilder.checks.atom import optimize_zeta

    r = optimize_zeta(symbol)
    return {
        "configuration": r.configuration,
        "state": r.state,
        "method": r.method,
        "energy_hartree": r.energy,
        "virial_ratio": r.virial_ratio,
        "zeta": r.zeta,
    }


def _kept(keep: Path | None, symbol: str) -> dict | None:
    if keep is None:
        return None
    try:
        return json.loads((keep / f"{symbol}.json").read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None


def _store(keep: Path | None, symbol: str, entry: dict) -> None:
    if keep is not None:
        atomic_write(str(keep / f"{symbol}.json"), json.dumps(entry) + "\n")
        print(f"{symbol}: done", file=sys.stderr, flush=True)


def build_text(last: str = DEFAULT_LAST, workers: int = 2, keep: str | None = None) -> str:
    """The table text for H … ``last`` (entries stored in and reused from the folder ``keep``)."""
    symbols = [element_symbol(z) for z in range(1, atomic_number(last) + 1)]
    for s in symbols:
        ground_state(s)
    folder = Path(keep) if keep else None
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
    found = {s: e for s in symbols if (e := _kept(folder, s)) is not None}
    todo = sorted((s for s in symbols if s not in found), key=atomic_number, reverse=True)  # heaviest first
    if workers > 1 and len(todo) > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            futures = {pool.submit(optimise_entry, s): s for s in todo}
            for future in as_completed(futures):
                found[futures[future]] = future.result()
                _store(folder, futures[future], found[futures[future]])
    else:
        for symbol in todo:
            found[symbol] = optimise_entry(symbol)
            _store(folder, symbol, found[symbol])
    entries = [found[s] for s in symbols]
    doc = {
        "provenance": {
            "method": "exact one-centre STO integrals (stobuilder.exact.sto); SCF with PySCF drivers, RHF for closed "
            "shells, ROHF high-spin determinants otherwise, orbitals pure in (l, m); ζ of every occupied "
            "subshell minimised with analytic gradients (stobuilder.checks.atom.optimize_zeta) until "
            "|ζ dE/dζ| < 1e-10 hartree",
            "reference": "E. Clementi and D. L. Raimondi, J. Chem. Phys. 38, 2686 (1963) (same quantity)",
            "states": "neutral ground-state configurations of stobuilder.model.elements.ground_state",
            "units": {"zeta": "bohr^-1", "energy_hartree": "hartree"},
            "empty_subshells": "not in the table; the optimized rule gives an empty p partner the zeta of the s of its n",
            "regenerate": "python -m stobuilder.maintainer.optimized",
        },
        "elements": dict(zip(symbols, entries)),
    }
    return json.dumps(doc, indent=1, ensure_ascii=False) + "\n"


def compare_table(shipped: dict, fresh: dict) -> Comparison:
    """Compare two parsed tables (``build_text``'s layout) within TOLERANCES; texts exactly."""

    def tolerance_for(path):
        for key, tolerance in TOLERANCES.items():
            if key in path:
                return tolerance
        return Tolerance(1e-12)

    return compare(shipped, fresh, tolerance_for)


def table_path() -> Path:
    return Path(__file__).resolve().parent.parent / "screening" / "data" / "optimized_zeta.json"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m stobuilder.maintainer.optimized", description=__doc__)
    parser.add_argument("--last", default=DEFAULT_LAST, help="last element of the table (default Rn)")
    parser.add_argument("--workers", type=int, default=2, help="processes (default 2)")
    parser.add_argument("--keep", metavar="DIR", help="store each finished entry in DIR and reuse those already there")
    parser.add_argument("--check", action="store_true",
                        help="write nothing; compare with the shipped table within tolerance (exit 1 if they differ)")
    args = parser.parse_args(argv)
    text = build_text(args.last, args.workers, args.keep)
    path = table_path()
    if args.check:
        try:
            shipped = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            print(f"{path}: differs: cannot read the shipped table ({exc})")
            return 1
        line, status = report(str(path), compare_table(shipped, json.loads(text)), TOLERANCE_TEXT)
        print(line)
        return status
    atomic_write(str(path), text)
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
