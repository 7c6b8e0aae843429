"""Exact Slater-orbital atomic reference: atomic SCF over STOs and variational exponents.

The entry points on a configuration and its STOs (``solve_atom``, ``optimize``); the engine under them
is stobuilder.exact.solver. By element and screening rule (``atom_energy``, ``optimize_zeta``) and
the ``atom`` command's document: stobuilder.checks.atom.

The method (exact one-centre STO integrals, PySCF's drivers with the occupations held to the
configuration, analytic ζ gradients, the virial theorem at the optimum) and its sources are in
stobuilder.exact.solver's docstring. Reference values: E. Clementi and D. L. Raimondi, J. Chem. Phys.
38, 2686 (1963).
"""

from __future__ import annotations

import math

import numpy as np

from stobuilder.model.elements import Configuration
from stobuilder.core.errors import InputError
from stobuilder.exact.solver import AtomResult, OrbitalEnergy, describe_state, optimize_exponents, solve_sto_scf

# ---------------------------------------------------------------- inputs
def supported(conf: Configuration) -> Configuration:
    """``conf`` when the STO integrals cover it (no subshell beyond n = 6); InputError otherwise."""
    for s in conf.subshells:
        if s.n > 6:
            raise InputError(f"{conf.symbol} {conf.label}: subshell {s.label} beyond n = 6 is not supported by the STO integrals")
    return conf


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


def optimize(conf: Configuration, stos, method: str) -> AtomResult:
    """Variationally optimal single-ζ exponents of ``conf``, starting from the STOs ``stos`` (the
    occupied subshells among them enter): BFGS in ln ζ with analytic gradients, then Newton steps
    on the analytic gradient until |ζ·dE/dζ| < 1e-10 hartree; the result satisfies the virial
    theorem −V/T = 2 to about 1e-9. Energies in hartree, ζ in bohr⁻¹. Numerical failures as
    InputError."""
    exps = tuple(e for e in stos if conf.occupation(e.n, e.l))
    return _numerically(conf, "ζ optimisation", lambda: optimize_exponents(conf, exps, method))


__all__ = ["AtomResult", "OrbitalEnergy", "describe_state", "numerical_guard", "optimize", "solve_atom", "supported"]
