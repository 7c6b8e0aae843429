"""The ``atom`` command's document: one atom with exact STOs, and the Gaussian bases ``build`` writes.

The exact-STO energy comes from stobuilder.exact.atoms; each N-Gaussian row is the very basis
``build`` writes for that element (``builder.construct.element_basis``: the family fits, each subshell scaled
by its own ζ²) in the same determinant, computed by the free-atom SCF of the checks
(``checks.structure.check_free_atom``). A free-atom structure through ``build --check`` and ``atom
--gaussians N`` therefore give the same energy.
"""

from __future__ import annotations

import numbers
from collections.abc import Iterable


from stobuilder.builder.construct import element_basis, sto_exponents
from stobuilder.core.defaults import DEFAULTS
from stobuilder.checks.structure import check_free_atom
from stobuilder.core.arguments import whole_number
from stobuilder.exact.atoms import AtomResult, numerical_guard, solve_atom, supported
from stobuilder.model.methods import pick_method
from stobuilder.exact.atoms import optimize as optimize_stos  # atom_report's own optimize is a flag
from stobuilder.model.basis import Basis
from stobuilder.core.errors import InputError
from stobuilder.model.elements import Configuration, resolve


def atom_energy(element: str, rule: str = DEFAULTS["rule"], charge: int = 0, configuration=None, zeta=None,
                method: str = "auto") -> AtomResult:
    """Exact-STO SCF energy of one atom or ion with the exponents of a screening rule.

    Parameters
    ----------
    element : element symbol (or a configuration string naming it).
    rule : screening rule giving ζ of every basis subshell (see stobuilder.screening.rules()).
    charge : ionic charge (electrons removed), used when no configuration is given.
    configuration : configuration string or Configuration; the ground state when None.
    zeta : {label: ζ in bohr⁻¹} overriding the rule for those subshells.
    method : "auto" (RHF closed shell, ROHF open shell), "rhf", "rohf" or "uhf".

    Returns
    -------
    AtomResult with E, T, V in hartree. Method: Roothaan (1951) SCF over exact STO integrals
    (stobuilder.exact).
    """
    conf, stos = _stos(element, rule, charge, configuration, zeta)
    return solve_atom(conf, stos, _method(conf, method))


def optimize_zeta(element: str, charge: int = 0, configuration=None, method: str = "auto", rule: str = DEFAULTS["rule"],
                  zeta=None) -> AtomResult:
    """Variationally optimal single-ζ exponents: minimum of the exact-STO SCF energy over every
    occupied ζ, starting from ``rule`` (with ``zeta`` overrides); see stobuilder.exact.atoms.optimize.
    Only occupied subshells enter (basis and result). Energies in hartree, ζ in bohr⁻¹."""
    conf, stos = _stos(element, rule, charge, configuration, zeta)
    return optimize_stos(conf, stos, _method(conf, method))


def _method(conf: Configuration, method: str) -> str:
    """The exact-STO engine's name ("rhf", "rohf", "uhf") of ``methods.pick_method``'s choice for ``conf``."""
    return pick_method(method, conf.unpaired, f"({conf.symbol} {conf.label})").lower()


def _stos(element, rule, charge, configuration, zeta):
    """(configuration, the rule's STOs with ``zeta`` {label: ζ} on top) of one atom or ion."""
    from stobuilder.builder.spec import ZetaTable

    conf = supported(resolve(element, charge, configuration))
    table = ZetaTable.of({conf.symbol: zeta}).of_element(conf.symbol) if zeta else None
    return conf, sto_exponents(conf, rule, zeta=table)[1]


def gaussian_row(conf, zeta, method: str, gaussians: int, norm: str = DEFAULTS["norm"], rule: str = DEFAULTS["rule"]) -> dict:
    """{gaussians, norm, energy_hartree, converged}: the SCF of ``conf`` with the N-Gaussian basis
    ``build`` writes for it (rule ``rule``, ζ overrides ``zeta``) in the determinant of the checks."""
    element = element_basis(conf, rule=rule, gaussians=gaussians, zeta=zeta, norm=norm)
    basis = Basis((element,), rule=rule, gaussians=gaussians, norm=norm)
    r = numerical_guard(conf, f"SCF with STO-{gaussians}G", lambda: check_free_atom(basis, conf.symbol, method, reference=False))
    return {"gaussians": gaussians, "norm": norm, "energy_hartree": r.energy_hartree, "converged": r.converged}


def atom_report(element: str, rule: str = DEFAULTS["rule"], configuration=None, charge: int = 0, zeta=None,
                optimize: bool = False, gaussians=(), method: str = "auto", norm: str = DEFAULTS["norm"],
                stos: int = 1, sto_n: str = "same") -> dict:
    """The exact-STO atom and the N-Gaussian bases of ``build`` for it, as a JSON-ready dict.

    Keys: element, configuration, state, method, zeta {label: bohr⁻¹}, energy_exact_hartree,
    virial_ratio, gaussian [{gaussians, norm, energy_hartree, converged}],
    orbital_energies [{label, spin, energy_hartree, occupation}], stos_per_subshell,
    stos [{subshell, n, zeta}], expansions {orbital: [coefficients over the STOs of its l]},
    hartree_fock_limit {energy_hartree, above_hartree, source} or None, notes [text]. With
    ``optimize`` the ζ of the occupied subshells are optimised first (from ``rule`` and ``zeta``)
    and only those subshells form the exact-STO basis; the Gaussian bases take the optimised ζ
    (empty subshells, which do not change an atom's energy, keep the rule's). With ``stos`` = K > 1
    every occupied subshell is carried by K STOs (n by ``sto_n``, stobuilder.exact.manyzeta.N_RULES),
    all ζ optimised from the single-ζ optimum; the rule and ``zeta`` do not apply then.
    """
    from stobuilder.exact.manyzeta import check_count

    k = check_count(stos)
    if k > 1:
        if zeta:
            raise InputError(f"{element}: --zeta sets one ζ per subshell; with {k} STOs per subshell all ζ are optimised")
        if rule != DEFAULTS["rule"]:
            raise InputError(f"{element}: --rule {rule} gives one ζ per subshell; with {k} STOs per subshell all ζ "
                             "are optimised from the single-ζ optimum (leave out --rule)")
        if gaussians:
            raise InputError(f"{element}: --gaussians expands one STO per subshell; with {k} STOs per subshell only "
                             "the exact-STO atom is computed")
        return _document(_several(element, charge, configuration, method, k, sto_n), [], k)
    conf, stos = _stos(element, rule, charge, configuration, zeta)
    m = _method(conf, method)
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
        result = optimize_stos(conf, stos, m)
        used = dict(result.zeta)
    else:
        result = solve_atom(conf, stos, m)
        used = dict(zeta or {})
    rows = [gaussian_row(conf, used or None, m, n, norm, rule) for n in counts]
    return _document(result, rows, 1)


def _several(element, charge, configuration, method, k, sto_n) -> AtomResult:
    """The optimum with ``k`` STOs per occupied subshell, progress lines on the module's logger
    (at most one per PROGRESS_SECONDS)."""
    import logging
    import time

    from stobuilder.exact.manyzeta import optimize_stos, starting_stos
    from stobuilder.screening.optimized import occupied_zeta

    conf = supported(resolve(element, charge, configuration))
    m = _method(conf, method)
    start = starting_stos(conf, occupied_zeta(conf), k, sto_n)
    log = logging.getLogger(__name__)
    t0 = last = time.monotonic()

    def progress(line):
        nonlocal last
        now = time.monotonic()
        if now - last >= PROGRESS_SECONDS:
            last = now
            log.info(f"{conf.symbol}, {k} STOs per subshell: {line}, {now - t0:.0f} s")

    return numerical_guard(conf, f"optimisation of {k} STOs per subshell", lambda: optimize_stos(conf, start, m, progress))


PROGRESS_SECONDS = 2.0


def _document(result: AtomResult, rows: list, k: int) -> dict:
    from stobuilder.exact.limits import SOURCE, limit_of
    from stobuilder.model.elements import ground_state

    try:
        ground = ground_state(result.element).label
    except Exception:  # an element without a stored ground state has no limit here
        ground = None
    limit = limit_of(result.element, result.configuration, result.state, ground)
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
        "stos_per_subshell": k,
        "stos": [{"subshell": f.subshell, "n": f.n, "zeta": f.zeta} for f in result.stos],
        "expansions": {name: list(c) for name, c in result.expansions},
        "hartree_fock_limit": None if limit is None else {
            "energy_hartree": limit, "above_hartree": result.energy - limit, "source": SOURCE},
        "notes": list(result.notes),
    }


__all__ = ["atom_energy", "atom_report", "gaussian_row", "optimize_zeta"]
