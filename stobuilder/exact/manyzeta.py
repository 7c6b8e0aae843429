"""Atoms in several STOs per subshell: the bases, their variational optimisation, and the
distance to the numerical Hartree–Fock limit.

Each occupied subshell (n, l) is carried by K STOs (K = 1 single-ζ, 2 double-ζ, 3 triple-ζ; larger
K towards the Hartree–Fock limit); the radial orbitals of one l are expanded in all the STOs of that
l, as in the Roothaan–Hartree–Fock expansions of Clementi & Roetti (At. Data Nucl. Data Tables 14,
177, 1974) and Bunge, Barrientos & Bunge (At. Data Nucl. Data Tables 53, 113, 1993). The principal
quantum numbers of the K functions follow one of two rules (``N_RULES``): "same" (all K have the
subshell's n) or "alternate" (n, n + 1, n, n + 1, …; the published expansions mix n in this way).

All ζ are optimised together with the analytic gradient of stobuilder.exact.solver (L-BFGS-B in
logarithmic variables). STOs of one (n, l) are ordered by ζ and held at least ``MIN_RATIO`` apart, so
that two of them can never collapse onto one another (their overlap would make the basis singular);
where the optimum presses against that bound, the result's notes say so. A final uniform scaling
step ζ → λζ with λ = −V/(2T) (the exact optimum of E(λ) = λ²T + λV at fixed orbitals) places the
energy on the virial theorem −V/T = 2 (Löwdin, J. Mol. Spectrosc. 3, 46, 1959), which the full
optimum satisfies.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import scipy.optimize

from stobuilder.core.errors import InputError
from stobuilder.exact.solver import AtomResult, RadialSTO, radial_stos, solve_sto_scf
from stobuilder.model.elements import Configuration, subshell_label

N_RULES = {
    "same": "all K STOs of a subshell have its principal quantum number n",
    "alternate": "the K STOs of subshell n have n, n + 1, n, n + 1, … (n + 1 only up to n = 6)",
}
DEFAULT_N_RULE = "same"
MIN_RATIO = 1.15  # smallest ratio between the ζ of two STOs of the same (n, l)
MAX_N = 6  # principal quantum numbers of basis STOs (the integrals go to 7 for the ζ derivatives)
GRADIENT_TOLERANCE = 1e-9  # |ζ dE/dζ| (hartree) of the free ζ at which the search stops
# The K starting ζ of one subshell: the single-ζ optimum times SPREAD[K] ** (m − (K − 1)/2),
# m = K − 1 … 0 (even-tempered about it); common practice, no source.
SPREAD = {1: 1.0, 2: 2.0, 3: 1.9, 4: 1.8}
WIDE_SPREAD = 1.7


def check_count(k) -> int:
    """K as a whole number ≥ 1; InputError otherwise."""
    from stobuilder.core.arguments import whole_number

    return whole_number(k, "number of STOs per subshell", 1)


def starting_stos(conf: Configuration, zeta: dict[str, float], k: int, n_rule: str = DEFAULT_N_RULE) -> tuple[RadialSTO, ...]:
    """K STOs for every occupied subshell of ``conf`` about its single-ζ exponent ``zeta[label]``
    (bohr⁻¹): even-tempered, largest first, principal quantum numbers by ``n_rule``."""
    k = check_count(k)
    if n_rule not in N_RULES:
        raise InputError(f"rule for the n of extra STOs {n_rule!r}: not one of {', '.join(N_RULES)}")
    spread = SPREAD.get(k, WIDE_SPREAD)
    out = []
    for s in conf.subshells:
        z0 = zeta[s.label]
        for m in range(k):
            n = s.n
            if n_rule == "alternate" and m % 2 == 1 and s.n < MAX_N:
                n = s.n + 1
            out.append(RadialSTO(s.label, n, s.l, z0 * spread ** ((k - 1) / 2 - m)))
    return radial_stos(out)


def _groups(functions: tuple[RadialSTO, ...]) -> list[list[int]]:
    """Indices of the STOs of each (n, l), ordered by descending ζ."""
    by = {}
    for i, f in enumerate(functions):
        by.setdefault((f.l, f.n), []).append(i)
    return [sorted(idx, key=lambda i: -functions[i].zeta) for _, idx in sorted(by.items())]


def _describe(functions, group: list[int], position: int) -> str:
    f = functions[group[position]]
    return f"{subshell_label(f.n, f.l)}-type STOs {position} and {position + 1} (by falling ζ)"


def optimize_stos(conf: Configuration, functions, method: str, progress=None, min_ratio: float = MIN_RATIO) -> AtomResult:
    """The energy minimum over every ζ of ``functions`` (RadialSTO, the starting values), method
    "rhf", "rohf" or "uhf"; STOs of one (n, l) kept ``min_ratio`` apart. The result's ``notes`` name
    the pairs held at that bound. Energies in hartree, ζ in bohr⁻¹."""
    functions = radial_stos(functions)
    groups = _groups(functions)
    for g in groups:  # the start itself must respect the bound
        for a, b in zip(g, g[1:]):
            if functions[a].zeta < min_ratio * functions[b].zeta:
                functions = tuple(replace(f, zeta=functions[a].zeta / min_ratio) if i == b else f
                                  for i, f in enumerate(functions))
    order = [i for g in groups for i in g]
    gap = math.log(min_ratio)

    def to_zeta(y):
        zeta = np.zeros(len(functions))
        pos = 0
        for g in groups:
            log = y[pos]
            zeta[g[0]] = math.exp(log)
            for j in range(1, len(g)):
                log -= y[pos + j]
                zeta[g[j]] = math.exp(log)
            pos += len(g)
        return zeta

    def to_y(zeta):
        y = []
        for g in groups:
            y.append(math.log(zeta[g[0]]))
            for a, b in zip(g, g[1:]):
                y.append(math.log(zeta[a] / zeta[b]))
        return np.array(y)

    bounds = []
    for g in groups:
        bounds.append((math.log(1e-3), math.log(1e4)))
        bounds.extend([(gap, None)] * (len(g) - 1))

    warm = {"dm": None, "radial": None}
    cache: dict = {}
    calls = [0]

    def evaluate_zeta(zeta):
        key = tuple(float(z) for z in zeta)
        if key not in cache:
            stos = tuple(replace(f, zeta=float(z)) for f, z in zip(functions, zeta))
            solved = solve_sto_scf(conf, stos, method, dm0=warm["dm"], gradient=True, optimized=True,
                                   radial0=warm["radial"])
            warm["dm"], warm["radial"] = solved.dm, solved.radial
            calls[0] += 1
            cache.clear()
            cache[key] = solved.result
        return cache[key]

    def fun(y):
        zeta = to_zeta(y)
        r = evaluate_zeta(zeta)
        zg = np.array(r.sto_gradient) * zeta  # dE/d ln ζ, basis order
        grad = []
        for g in groups:
            tail = np.cumsum([zg[i] for i in g][::-1])[::-1]  # Σ over this STO and the smaller ones
            grad.append(tail[0])
            grad.extend(-tail[1:])
        return r.energy, np.array(grad)

    def report(y):
        if progress is not None:
            r = cache.get(tuple(float(z) for z in to_zeta(y)))
            if r is not None:
                progress(f"step {calls[0]}: E = {r.energy:.10f} hartree")

    y = to_y(np.array([f.zeta for f in functions]))
    for _ in range(3):
        opt = scipy.optimize.minimize(fun, y, jac=True, method="L-BFGS-B", bounds=bounds, callback=report,
                                      options={"maxiter": 3000, "maxcor": 30, "ftol": 1e-16, "gtol": GRADIENT_TOLERANCE})
        y = opt.x
        if _free_gradient(fun(y)[1], y, bounds) < GRADIENT_TOLERANCE:
            break
    zeta = to_zeta(y)
    result = evaluate_zeta(zeta)
    for _ in range(3):  # uniform scaling onto the virial theorem
        lam = -result.potential / (2.0 * result.kinetic)
        if abs(lam - 1.0) < 1e-13:
            break
        trial = evaluate_zeta(zeta * lam)
        if trial.energy > result.energy:
            break
        zeta, result = zeta * lam, trial
    y = to_y(zeta)
    notes = []
    pos = 0
    for g in groups:
        for j in range(1, len(g)):
            if y[pos + j] <= gap * (1 + 1e-9):
                notes.append(f"{_describe(functions, g, j - 1)} held at the minimum ζ ratio {min_ratio:g}")
        pos += len(g)
    del order
    return replace(result, notes=tuple(notes))


def _free_gradient(grad, y, bounds) -> float:
    """Largest gradient component not pressing against its bound."""
    worst = 0.0
    for gi, yi, (lo, hi) in zip(grad, y, bounds):
        if lo is not None and yi <= lo * (1 + 1e-12) + 1e-12 and gi > 0:
            continue
        if hi is not None and yi >= hi - 1e-12 and gi < 0:
            continue
        worst = max(worst, abs(gi))
    return worst


__all__ = ["DEFAULT_N_RULE", "MIN_RATIO", "N_RULES", "optimize_stos", "starting_stos"]
