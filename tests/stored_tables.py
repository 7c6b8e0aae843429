"""PySCF's transcriptions of the published STO-3G and STO-6G tables (pyscf/gto/basis/sto-3g.dat,
sto-6g.dat), read block by block with PySCF's own NWChem parser and set beside our fits: each
block's shell family, its ζ², its deviations, and its error ε stored vs ours under the published
objective (Hehre, Stewart & Pople, J. Chem. Phys. 51, 2657 (1969); Stewart, J. Chem. Phys. 52,
431 (1970)); the numbers that differ from ours by more than their printed precision.

Shared by test_expansion.py and test_fits_extended.py; not a test module.
"""

from __future__ import annotations

import math
import os
import warnings

import numpy as np
import pyscf
from pyscf.gto.basis import parse_nwchem

from scalar_integrals import sto_gaussian_overlap
from stobuilder.expansion import library_families, lookup
from stobuilder.expansion.analytic import gaussian_overlap

BASIS_DIR = os.path.join(os.path.dirname(pyscf.__file__), "gto", "basis")


def printed_unit(token: str) -> float:
    """One unit in the last printed digit of a number as the file prints it ("0.3775056000D-02":
    trailing zeros are padding of the fixed-width columns, so 1e-9 here; common practice, no source)."""
    mantissa, _, exponent = token.upper().replace("D", "E").partition("E")
    decimals = len(mantissa.partition(".")[2].rstrip("0"))
    return 10.0 ** (int(exponent or 0) - decimals)


def allowed(token: str, zeta2: float | None = None) -> float:
    """|stored − ours| allowed for one printed number: half a unit in its last digit (its own
    rounding), plus, where the file itself carries a rounding of an earlier rounded number, that
    one's half unit (common practice, no source):
    - an exponent (``zeta2`` given) is ζ² × a ζ = 1 value the papers printed with as many
      significant digits (Hehre, Stewart & Pople 1969; Stewart 1970; Pietro et al. 1980/83
      tabulate ζ = 1 sets and the scaling ζ² with 2-decimal ζ), so it may be off by that value's
      half unit × ζ² too;
    - coefficients printed with 10 decimals (Pietro et al., K–I) carry the published fit's own
      convergence, ~1e-11 (measured ≤ 0.75 units): one unit; with fewer decimals half a unit.
    """
    unit = printed_unit(token)
    mantissa = token.upper().replace("D", "E").partition("E")[0].lstrip("-")
    if zeta2 is not None:
        value = abs(float(token.upper().replace("D", "E")))
        digits = len(mantissa.replace(".", "").rstrip("0").lstrip("0"))
        source = value / zeta2
        source_unit = 10.0 ** (math.floor(math.log10(source)) - digits + 1)
        return 0.5 * unit + 0.5 * source_unit * zeta2
    return (1.0 if len(mantissa.partition(".")[2]) >= 10 else 0.5) * unit


def printed_tokens(fname, symbol):
    """{exponents tuple: {"ex": tokens, l: tokens}} of one element as printed in the file."""
    out, rows, kind = {}, None, None

    def close():
        if rows:
            ex = tuple(float(r[0].upper().replace("D", "E")) for r in rows)
            entry = out.setdefault(ex, {"ex": [r[0] for r in rows]})
            for j, l in enumerate({"S": [0], "P": [1], "D": [2], "F": [3], "SP": [0, 1]}[kind]):
                entry[l] = [r[1 + j] for r in rows]

    for line in open(os.path.join(BASIS_DIR, fname)):
        parts = line.split()
        if len(parts) == 2 and parts[1] in ("S", "SP", "P", "D", "F"):
            close()
            rows, kind = ([] if parts[0] == symbol else None), parts[1]
            continue
        if rows is not None and parts and parts[0][0] in "0123456789.-":
            rows.append(parts)
        elif rows is not None:
            close()
            rows = None
    close()
    return out


def element_symbols(fname):
    out = []
    for line in open(os.path.join(BASIS_DIR, fname)):
        parts = line.split()
        if len(parts) == 2 and parts[1] in ("S", "SP", "P", "D", "F") and parts[0] not in out:
            out.append(parts[0])
    return out


def blocks(fname, symbol):
    """Shells of one element grouped by identical exponents: an SP line gives s and p, a D sharing them joins."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        shells = parse_nwchem.load(os.path.join(BASIS_DIR, fname), symbol)
    out = []
    for shell in shells:
        l, ex, co = shell[0], tuple(p[0] for p in shell[1:]), tuple(p[1] for p in shell[1:])
        for b in out:
            if b["ex"] == ex and l not in b["c"]:
                b["c"][l] = co
                break
        else:
            out.append({"ex": ex, "c": {l: co}})
    return out


def label_of(fam, l):
    return next(x for x in fam if "spdf".index(x[1]) == l)


def classify(block, n_gauss):
    """The library family whose coefficients match best (median deviation: robust to one typo)."""
    best = None
    ls = sorted(block["c"])
    for fam in library_families():
        if not set(ls) <= {"spdf".index(x[1]) for x in fam}:
            continue
        fit = lookup(list(fam), n_gauss)
        dev = np.median([abs(a - b) for l in ls for a, b in zip(fit.coefficients[label_of(fam, l)], block["c"][l])])
        if best is None or dev < best[0]:
            best = (dev, fam, fit)
    return best[1], best[2]


def eps_of(ex, n, l, c=None):
    """‖φ − χ‖² = ∫(φ − χ)² of a contraction χ of normalised primitives, χ normalised first (the
    published objective, [HSP69]; a stored contraction is normalised only to its printed
    digits); c = None gives the best normalised contraction at these exponents, 2(1 − √q) with
    q = sᵀG⁻¹s."""
    ex = np.asarray(ex)
    g = gaussian_overlap(l, ex)
    s, _ = sto_gaussian_overlap(n, l, ex)
    if c is None:
        return 2.0 * (1.0 - math.sqrt(s @ np.linalg.solve(g, s)))
    c = np.asarray(c)
    return 2.0 * (1.0 - c @ s / math.sqrt(c @ g @ c))


def analyse(fname, n_gauss):
    """One record per block: family, ζ² (of ζ rounded to the two decimals of the published
    values), exponent and coefficient deviations, ε stored vs ours, and ``items``: the numbers
    that differ from ours by more than ``allowed`` (their printed precision)."""
    records = []
    for symbol in element_symbols(fname):
        tokens = printed_tokens(fname, symbol)
        for b in blocks(fname, symbol):
            fam, fit = classify(b, n_gauss)
            ratio = np.array(b["ex"]) / np.array(fit.exponents)
            zeta2 = float(np.median(ratio))
            zeta2_published = round(math.sqrt(zeta2), 2) ** 2  # every ζ of both files has 2 decimals
            exp_dev = ratio / zeta2 - 1.0
            coef_dev = {
                label_of(fam, l): np.array(b["c"][l]) - np.array(fit.coefficients[label_of(fam, l)]) for l in b["c"]
            }
            scaled = np.array(b["ex"]) / zeta2
            eps_stored = sum(
                eps_of(scaled, int(label_of(fam, l)[0]), l, b["c"][l]) for l in b["c"]
            )
            eps_ours = sum(fit.error[label_of(fam, l)] for l in b["c"])
            ls = "".join("spdf"[l] for l in sorted(b["c"]))
            printed = tokens[b["ex"]]
            items = {f"exp{k}" for k in range(n_gauss)
                     if abs(b["ex"][k] - fit.exponents[k] * zeta2_published) > allowed(printed["ex"][k], zeta2_published)}
            items |= {f"c{label_of(fam, l)}{k}" for l in b["c"] for k in range(n_gauss)
                      if abs(coef_dev[label_of(fam, l)][k]) > allowed(printed[l][k])}
            records.append(
                dict(symbol=symbol, fam=",".join(fam), ls=ls, block=b, fit=fit, zeta2=zeta2, exp_dev=exp_dev,
                     coef_dev=coef_dev, eps_stored=eps_stored, eps_ours=eps_ours, items=items)
            )
    return records
