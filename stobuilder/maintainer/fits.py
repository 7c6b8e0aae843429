"""Regenerate (or check) the shipped fit library: ``python -m stobuilder.maintainer.fits [--check]``.

Both library files (data/fits_l2.json, data/fits_h1.json; every family of ``library_families``,
N = 1 … LIBRARY_MAX_GAUSSIANS) are fitted from scratch, families spread over worker processes.
Without options the files are rewritten atomically (byte-identical on the machine that made
them). With --check nothing is written: the regenerated fits are compared with the shipped ones
within the tolerances of ``compare_library`` (another CPU or numpy build moves the last bits),
one line per file says "equal within ..." with the largest differences found, or "differs: ..."
with the entries, and the exit status is 0 when every file is equal within them, else 1.
"""

from __future__ import annotations

from stobuilder.core.defaults import DEFAULTS

import argparse
import json
import math
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

from stobuilder.model.basis import L_LETTERS
from stobuilder.maintainer.tablecheck import Comparison, Measure, SquaredDistance, Tolerance, compare, report
from stobuilder.expansion.fit import NORMS, fit_sto
from stobuilder.expansion.library import LIBRARY_MAX_GAUSSIANS, library_families, library_path, render_library

# How far a regenerated fit may lie from the shipped one. The quantity a fit entry stands for is a
# contraction, a function: two entries agree when their contractions of each subshell are within
# CONTRACTION_TOL of each other in the L2 norm (both are normalised to 1). The exponents and
# coefficients one by one are no measure of that: beyond N ≈ 8 the residual ε is flat along some
# combinations of them, and a regeneration on another machine moved single exponents by up to
# 1.3e-10 and coefficients by up to 9e-10 relative while the contractions moved by at most 1.1e-15
# (measured on this project's machines, 2026-12). ε is a squared distance from the STO, so its
# tolerance follows from the contraction's (tablecheck.SquaredDistance); the few other numbers
# (n*, ζ ratios, the MIN_RATIO bound) are inputs and must agree to 1e-12 relative.
CONTRACTION_TOL = 1e-12
LINEAR_LIMIT = 1e-6  # parameter changes above this relative size are too large for the first-order distance
TOLERANCES = f"contractions {CONTRACTION_TOL:.0e} (L2 distance), ε {SquaredDistance(CONTRACTION_TOL)}, inputs 1e-12 relative"


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


def build_text(workers: int = 2, norm: str = DEFAULTS["norm"]) -> str:
    """The text of one library file, fitted from scratch."""
    return build_texts(workers, (norm,))[norm]


def contraction_distance(l: int, exponents_a, coefficients_a, exponents_b, coefficients_b) -> float:
    """L2 distance ‖χ_a − χ_b‖ of two nearby contractions of normalised Gaussians r^l e^(−α r²) of one l.

    To first order in the differences δc and δ(ln α): χ_b − χ_a = Σ δc_i g_i + c_i δ(ln α_i) ∂g_i/∂ln α_i,
    whose squared norm is a quadratic form in the Gram matrix of {g_i, ∂g_i/∂ln α_i} (closed forms:
    ⟨g_i, r^(2k) g_j⟩ = S_ij Γ(l + 3/2 + k) / (Γ(l + 3/2) p^k), p = α_i + α_j). Formed this way the
    distance keeps its relative accuracy down to 1e-16 and below, where ‖χ_a‖² + ‖χ_b‖² − 2⟨χ_a, χ_b⟩
    would cancel to nothing. Valid for parameter changes below LINEAR_LIMIT relative.
    """
    a, b = np.asarray(exponents_a, float), np.asarray(exponents_b, float)
    ca, cb = np.asarray(coefficients_a, float), np.asarray(coefficients_b, float)
    k = l + 1.5
    q = k / 2  # d ln N / d ln α of the normalisation N ∝ α^((2l+3)/4)
    ai, aj = a[:, None], a[None, :]
    p = ai + aj
    s = (2 * np.sqrt(ai * aj) / p) ** k
    r2 = s * k / p  # ⟨g_i, r² g_j⟩
    r4 = s * k * (k + 1) / p**2  # ⟨r² g_i, r² g_j⟩
    g_d = q * s - aj * r2  # ⟨g_i, ∂g_j⟩
    d_d = q * q * s - q * (ai + aj) * r2 + ai * aj * r4  # ⟨∂g_i, ∂g_j⟩
    u = cb - ca
    v = ca * np.log1p((b - a) / a)
    d2 = u @ s @ u + 2 * (u @ g_d @ v) + v @ d_d @ v
    return math.sqrt(max(float(d2), 0.0))


def compare_library(shipped: dict, fresh: dict) -> Comparison:
    """Compare two parsed library documents (``render_library``'s layout) within the tolerances above."""

    def tolerance_for(path):
        if len(path) >= 4 and path[0] == "fits" and path[3] in ("exponents", "coefficients"):
            return None  # compared as contractions below
        if len(path) >= 4 and path[0] == "fits" and path[3] == "error":
            return SquaredDistance(CONTRACTION_TOL)
        return Tolerance(1e-12)

    base = compare(shipped, fresh, tolerance_for)
    worst, worst_at, differences = 0.0, "", []
    fits_a, fits_b = shipped.get("fits", {}), fresh.get("fits", {})
    for family in fits_a:
        for n, ea in fits_a[family].items():
            eb = fits_b.get(family, {}).get(n)
            if not isinstance(eb, dict) or len(ea["exponents"]) != len(eb.get("exponents", ())):
                continue  # already reported by compare
            for label, ca in ea["coefficients"].items():
                cb = eb["coefficients"].get(label)
                if cb is None or len(cb) != len(ca):
                    continue
                where = f"fits/{family}/{n}/{label}"
                params = [(x, y) for x, y in zip(ea["exponents"] + ca, eb["exponents"] + cb)]
                if any(abs(y - x) > LINEAR_LIMIT * max(abs(x), abs(y)) for x, y in params):
                    differences.append(f"{where}: exponents or coefficients differ by more than {LINEAR_LIMIT:.0e} relative")
                    continue
                d = contraction_distance(L_LETTERS.index(label[1].upper()), ea["exponents"], ca, eb["exponents"], cb)
                if d > worst:
                    worst, worst_at = d, where
                if not d <= CONTRACTION_TOL:
                    differences.append(f"{where}: contractions {d:.2e} apart (L2)")
    return base.extended((Measure("contraction distance", worst, worst_at),), tuple(differences))


def check_texts(texts: dict[str, str]) -> tuple[list[str], int]:
    """The --check lines for the regenerated ``texts`` (norm → text) against the shipped files, and the exit status."""
    lines, status = [], 0
    for norm, text in texts.items():
        path = Path(str(library_path(norm)))
        try:
            shipped = json.loads(path.read_text(encoding="ascii"))
        except (OSError, ValueError) as exc:
            lines.append(f"{path}: differs: cannot read the shipped file ({exc})")
            status = 1
            continue
        line, code = report(str(path), compare_library(shipped, json.loads(text)), TOLERANCES)
        lines.append(line)
        status = max(status, code)
    return lines, status


def write_atomic(path: Path, text: str) -> None:
    from stobuilder.core.files import atomic_write

    atomic_write(path, text)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m stobuilder.maintainer.fits", description=__doc__)
    parser.add_argument("--check", action="store_true",
                        help="write nothing; compare with the shipped files within tolerance (exit 1 if they differ)")
    parser.add_argument("--workers", type=int, default=2, help="processes to fit in (default 2)")
    parser.add_argument("--norm", choices=NORMS, action="append", help="only this norm's file (repeatable)")
    args = parser.parse_args(argv)
    texts = build_texts(args.workers, tuple(args.norm or NORMS))
    if args.check:
        lines, status = check_texts(texts)
        for line in lines:
            print(line)
        return status
    for norm, text in texts.items():
        path = Path(str(library_path(norm)))
        write_atomic(path, text)
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
