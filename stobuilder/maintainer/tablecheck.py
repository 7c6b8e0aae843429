"""Compare a shipped data table with its regeneration, within tolerances derived from each quantity.

The shipped tables (the fit libraries, the optimised-ζ table, the molecular STO-3G ζ table) are
made on one machine. The same code on another CPU or numpy build differs in the last bits of its
double-precision results (vectorised exp/log, BLAS kernels, summation order), so a regeneration
elsewhere is equal to the shipped file only within a tolerance, never bit for bit. This module
walks two JSON documents side by side: keys, list lengths, strings, booleans and nulls must be
identical; numbers must agree within the tolerance the table assigns to the entry's path. It
reports the largest relative difference found and where, so a ``--check`` can say "equal within
TOL (largest relative difference D at ENTRY)" or "differs: ENTRY ...".

Bit-for-bit equality remains the contract for one machine: the same code on the same software
stack writes byte-identical tables and basis files (tests/test_data_tables.py).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class Tolerance:
    """|a − b| ≤ rel · max(|a|, |b|) + abs."""

    rel: float
    abs: float = 0.0

    def allows(self, a: float, b: float) -> bool:
        return abs(a - b) <= self.rel * max(abs(a), abs(b)) + self.abs

    def __str__(self) -> str:
        return f"{self.rel:.0e} relative" + (f" + {self.abs:.0e} absolute" if self.abs else "")


@dataclass(frozen=True)
class SquaredDistance:
    """For a squared distance ε = ‖φ − χ‖² whose χ is known to within ``delta`` (in the same norm):
    by the triangle inequality two such values differ by at most 2·δ·√ε + δ²."""

    delta: float

    def allows(self, a: float, b: float) -> bool:
        return abs(a - b) <= 2 * self.delta * math.sqrt(max(a, b, 0.0)) + self.delta**2

    def __str__(self) -> str:
        return f"2·{self.delta:.0e}·√ε + {self.delta:.0e}²"


@dataclass(frozen=True)
class Measure:
    """The largest value of one kind of difference and the entry where it was found."""

    name: str
    value: float
    at: str

    def __str__(self) -> str:
        return f"largest {self.name} {self.value:.2e}" + (f" at {self.at}" if self.at else "")


@dataclass(frozen=True)
class Comparison:
    """The outcome of ``compare``: ``equal`` is True when every entry agrees within its tolerance."""

    equal: bool
    numbers: int  # how many numbers were compared
    measures: tuple[Measure, ...]  # the largest relative difference of the numbers, and any table-specific ones
    differences: tuple[str, ...]  # the entries that disagree, each with the two values (at most MAX_LISTED listed)

    def summary(self, tolerances: str) -> str:
        """One line: "equal within TOL (largest relative difference D at ENTRY)" or "differs: ..."."""
        if self.equal:
            found = "; ".join(str(m) for m in self.measures)
            return f"equal within {tolerances} ({found}; {self.numbers} numbers)"
        return "differs: " + "; ".join(self.differences)

    def extended(self, measures: tuple[Measure, ...] = (), differences: tuple[str, ...] = ()) -> "Comparison":
        """This comparison with more measures and differences (found by a table's own checks)."""
        listed = self.differences + differences
        return Comparison(self.equal and not differences, self.numbers, self.measures + measures, listed)


MAX_LISTED = 5


def relative_difference(a: float, b: float) -> float:
    scale = max(abs(a), abs(b))
    return 0.0 if a == b else abs(a - b) / scale


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def compare(shipped, fresh, tolerance_for: Callable[[tuple[str, ...]], Tolerance | SquaredDistance | None]) -> Comparison:
    """Compare two parsed JSON documents entry by entry.

    ``tolerance_for(path)`` gives the tolerance of the number at ``path`` (a tuple of keys, list
    indices as strings), or None for a number the table checks in its own way (it still counts
    towards the largest relative difference). Non-finite numbers never agree with anything.
    """
    state = {"numbers": 0, "largest": 0.0, "at": "", "diffs": [], "count": 0}

    def differ(path, what):
        state["count"] += 1
        if len(state["diffs"]) < MAX_LISTED:
            state["diffs"].append(f"{'/'.join(path) or '(top)'} {what}")

    def walk(a, b, path):
        if isinstance(a, dict) and isinstance(b, dict):
            if list(a) != list(b):
                missing = [k for k in a if k not in b]
                extra = [k for k in b if k not in a]
                detail = "keys differ"
                if missing:
                    detail += f"; only in the shipped table: {', '.join(missing[:5])}"
                if extra:
                    detail += f"; only in the regenerated one: {', '.join(extra[:5])}"
                if not missing and not extra:
                    detail += " in order"
                differ(path, detail)
            for k in a:
                if k in b:
                    walk(a[k], b[k], path + (str(k),))
        elif isinstance(a, list) and isinstance(b, list):
            if len(a) != len(b):
                differ(path, f"has {len(a)} items shipped, {len(b)} regenerated")
            for i, (x, y) in enumerate(zip(a, b)):
                walk(x, y, path + (str(i),))
        elif _is_number(a) and _is_number(b):
            state["numbers"] += 1
            fa, fb = float(a), float(b)
            if not (math.isfinite(fa) and math.isfinite(fb)):
                differ(path, f"is not finite ({a!r} shipped, {b!r} regenerated)")
                return
            d = relative_difference(fa, fb)
            if d > state["largest"]:
                state["largest"], state["at"] = d, "/".join(path)
            tolerance = tolerance_for(path)
            if tolerance is not None and not tolerance.allows(fa, fb):
                differ(path, f"{a!r} shipped, {b!r} regenerated (relative difference {d:.2e})")
        elif type(a) is not type(b) or a != b:
            differ(path, f"{a!r} shipped, {b!r} regenerated")

    walk(shipped, fresh, ())
    diffs = tuple(state["diffs"])
    if state["count"] > len(diffs):
        diffs += (f"… {state['count'] - len(diffs)} more",)
    return Comparison(
        equal=state["count"] == 0,
        numbers=state["numbers"],
        measures=(Measure("relative difference", state["largest"], state["at"]),),
        differences=diffs,
    )


def report(name: str, comparison: Comparison, tolerances: str) -> tuple[str, int]:
    """The line a ``--check`` prints for the table ``name`` and its exit status (0 equal, 1 not)."""
    return f"{name}: {comparison.summary(tolerances)}", 0 if comparison.equal else 1


__all__ = ["Comparison", "Measure", "SquaredDistance", "Tolerance", "compare", "relative_difference", "report"]
