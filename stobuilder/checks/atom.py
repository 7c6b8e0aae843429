"""The ``atom`` command's document: one atom with exact STOs, and the Gaussian bases ``build`` writes.

The exact-STO energy comes from stobuilder.exact.atoms; each N-Gaussian row is the very basis
``build`` writes for that element (``build.element_basis``: the family fits, each subshell scaled
by its own ζ²) in the same determinant, computed by the free-atom SCF of the checks
(``checks.check_free_atom``). A free-atom structure through ``build --check`` and ``atom
--gaussians N`` therefore give the same energy.
"""

from __future__ import annotations

import numbers
from collections.abc import Iterable


from stobuilder.exact.atoms import _conf, numerical_guard, optimize_zeta, pick_method, solve_atom
from stobuilder.model.basis import Basis
from stobuilder.builder.construct import element_basis, sto_exponents
from stobuilder.checks.structure import check_free_atom
from stobuilder.core.limits import whole_number


def gaussian_row(conf, zeta, method: str, gaussians: int, norm: str = "l2", rule: str = "slater") -> dict:
    """{gaussians, fit, energy_hartree, converged}: the SCF of ``conf`` with the N-Gaussian basis
    ``build`` writes for it (rule ``rule``, ζ overrides ``zeta``) in the determinant of the checks."""
    element = element_basis(conf, rule, gaussians, zeta=zeta, norm=norm)
    basis = Basis((element,), rule=rule, gaussians=gaussians, norm=norm)
    r = numerical_guard(conf, f"SCF with STO-{gaussians}G", lambda: check_free_atom(basis, conf.symbol, method, reference=False))
    return {"gaussians": gaussians, "fit": norm, "energy_hartree": r.energy_hartree, "converged": r.converged}


def atom_report(element: str, rule: str = "slater", configuration=None, charge: int = 0, zeta=None,
                optimize: bool = False, gaussians=(), method: str = "auto", norm: str = "l2") -> dict:
    """The exact-STO atom and the N-Gaussian bases of ``build`` for it, as a JSON-ready dict.

    Keys: element, configuration, state, method, zeta {label: bohr⁻¹}, energy_exact_hartree,
    virial_ratio, gaussian [{gaussians, fit, energy_hartree, converged}],
    orbital_energies [{label, spin, energy_hartree, occupation}]. With ``optimize`` the ζ of the
    occupied subshells are optimised first (from ``rule`` and ``zeta``) and only those subshells
    form the exact-STO basis; the Gaussian bases take the optimised ζ (empty subshells, which do
    not change an atom's energy, keep the rule's).
    """
    conf = _conf(element, charge, configuration)
    m = pick_method(conf, method)
    if isinstance(gaussians, numbers.Real):
        counts = [gaussians]
    elif isinstance(gaussians, Iterable) and not isinstance(gaussians, (str, bytes)):
        counts = list(gaussians)
    elif gaussians is None:
        counts = []
    else:
        raise TypeError(f"gaussians must be a number of Gaussians or a list of them, got {type(gaussians).__name__}")
    counts = [whole_number(n, "number of Gaussians", 1) for n in counts]
    if optimize:
        result = optimize_zeta(conf.symbol, configuration=conf, method=m, rule=rule, zeta=zeta)
        used = dict(result.zeta)
    else:
        exps = sto_exponents(conf.symbol, rule, configuration=conf, zeta=zeta)[1]
        result = solve_atom(conf, exps, m)
        used = dict(zeta or {})
    rows = [gaussian_row(conf, used or None, m, n, norm, rule) for n in counts]
    return {
        "element": result.element,
        "configuration": result.configuration,
        "state": result.state,
        "method": result.method,
        "zeta": dict(result.zeta),
        "energy_exact_hartree": result.energy,
        "converged": result.converged,
        "virial_ratio": result.virial_ratio,
        "gaussian": rows,
        "orbital_energies": [
            {"label": o.label, "spin": o.spin, "energy_hartree": o.energy, "occupation": o.occupation}
            for o in result.orbital_energies
        ],
    }


__all__ = ["atom_report", "gaussian_row"]
