"""Exact Slater-orbital atomic reference: atomic SCF over STOs and variational exponents.

The entry points by element and screening rule (``atom_energy``, ``optimize_zeta``); the engine
on given exponents is stobuilder.exact.solver, and the ``atom`` command's document stobuilder.checks.atom.

The method (exact one-centre STO integrals, PySCF's drivers with the occupations held to the
configuration, analytic ζ gradients, the virial theorem at the optimum) and its sources are in
stobuilder.exact.solver's docstring. Reference values: E. Clementi and D. L. Raimondi, J. Chem. Phys.
38, 2686 (1963).
"""

from __future__ import annotations

import math

import numpy as np

from stobuilder.builder.construct import sto_exponents
from stobuilder.model.elements import Configuration, resolve
from stobuilder.core.errors import InputError
from stobuilder.exact.solver import AtomResult, OrbitalEnergy, describe_state, optimize_exponents, pick_method, solve_sto_scf

# ---------------------------------------------------------------- inputs
def _conf(element, charge, configuration) -> Configuration:
    conf = resolve(element, charge, configuration)
    for s in conf.subshells:
        if s.n > 6:
            raise InputError(f"{conf.symbol} {conf.label}: subshell {s.label} beyond n = 6 is not supported by the STO integrals")
    return conf


def atom_energy(element: str, rule: str = "slater", charge: int = 0, configuration=None, zeta=None,
                method: str = "auto") -> AtomResult:
    """Exact-STO SCF energy of one atom or ion with the exponents of a screening rule.

    Parameters
    ----------
    element : element symbol (or a configuration string naming it).
    rule : screening rule giving ζ of every basis subshell (see stobuilder.rules.rules()).
    charge : ionic charge (electrons removed), used when no configuration is given.
    configuration : configuration string or Configuration; the ground state when None.
    zeta : {label: ζ in bohr⁻¹} overriding the rule for those subshells.
    method : "auto" (RHF closed shell, ROHF open shell), "rhf", "rohf" or "uhf".

    Returns
    -------
    AtomResult with E, T, V in hartree. Method: Roothaan (1951) SCF over exact STO integrals.
    """
    conf = _conf(element, charge, configuration)
    m = pick_method(conf, method)
    exps = sto_exponents(conf.symbol, rule, configuration=conf, zeta=zeta)[1]
    return solve_atom(conf, exps, m)


def numerical_guard(conf, what: str, run, hint: str = ""):
    """``run()``, with a numerical failure (overflow, a singular matrix, NaN) turned into an
    InputError naming the atom and ``what`` failed (``hint`` appended to the message)."""
    try:
        return run()
    except InputError:
        raise
    except (ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(
            f"{conf.symbol} {conf.label}: the {what} failed numerically ({type(exc).__name__}: {reason}){hint}"
        ) from None


def _numerically(conf, what: str, run):
    """``numerical_guard`` for the exact-STO engine, which also refuses a non-finite energy: both
    come from ζ far from any physical value."""
    result = numerical_guard(conf, f"exact-STO {what}", run, "; are the ζ physical?")
    if not math.isfinite(result.energy):
        raise InputError(f"{conf.symbol} {conf.label}: the exact-STO {what} gave a non-finite energy; are the ζ physical?")
    return result


def solve_atom(conf: Configuration, exps, method: str) -> AtomResult:
    """The exact-STO SCF of the atom ``conf`` on the STOs ``exps`` (``solver.solve_sto_scf``),
    numerical failures as InputError."""
    return _numerically(conf, "SCF", lambda: solve_sto_scf(conf, exps, method).result)


def optimize_zeta(element: str, charge: int = 0, configuration=None, method: str = "auto", rule: str = "slater",
                  zeta=None, progress=None) -> AtomResult:
    """Variationally optimal single-ζ exponents: minimum of the SCF energy over every occupied ζ.

    Only occupied subshells enter (basis and result). Starts from ``rule`` (with ``zeta`` overrides),
    BFGS in ln ζ with analytic gradients, then
    Newton steps on the analytic gradient until |ζ·dE/dζ| < 1e-10 hartree; the returned result
    satisfies the virial theorem −V/T = 2 to about 1e-9. Energies in hartree, ζ in bohr⁻¹.
    ``progress``, if given, is called with one line of text after every BFGS iteration and Newton
    step (step count, energy, largest |ζ dE/dζ|).
    """
    conf = _conf(element, charge, configuration)
    m = pick_method(conf, method)
    exps = [e for e in sto_exponents(conf.symbol, rule, configuration=conf, zeta=zeta)[1] if conf.occupation(e.n, e.l)]
    return _numerically(conf, "ζ optimisation", lambda: optimize_exponents(conf, tuple(exps), m))


__all__ = ["AtomResult", "OrbitalEnergy", "atom_energy", "describe_state", "optimize_zeta", "pick_method"]
