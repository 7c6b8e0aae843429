"""The free atom or ion of a configuration in a Gaussian basis: the high-spin single determinant,
its electrons held per SO3 irrep through PySCF's atomic symmetry so that the SCF cannot drift to
another configuration."""

from __future__ import annotations

from stobuilder.model.elements import M_FILL_ORDER
from stobuilder.scf.mole import make_mole


def irrep_occupations(conf) -> dict[str, tuple[int, int]]:
    """(α, β) electrons per real spherical harmonic (PySCF's SO3 irreps "s+0", "p-1", ...) for the
    high-spin single determinant of a configuration: a closed subshell fills every m; an open one
    puts min(q, 2l+1) α electrons and the rest β into its m components in the order
    ``M_FILL_ORDER`` (the order of the exact-STO atomic SCF, stobuilder.exact.atoms)."""
    occ: dict[str, tuple[int, int]] = {}
    for sub in conf.subshells:
        n_alpha = min(sub.occupation, 2 * sub.l + 1)
        n_beta = sub.occupation - n_alpha
        for i, m in enumerate(M_FILL_ORDER[sub.l]):
            key = f"{'spdfg'[sub.l]}{m:+d}"
            a, b = occ.get(key, (0, 0))
            occ[key] = (a + (i < n_alpha), b + (i < n_beta))
    return occ


def irrep_configurer(occupations, method: str):
    """An SCF configurer for ``run.solve_scf`` (its ``configure``) that fixes the electrons per
    SO3 irrep (``occupations``: irrep → (α, β))."""

    def configure(mf):
        if method == "RHF":
            mf.irrep_nelec = {k: a + b for k, (a, b) in occupations.items()}
        else:
            mf.irrep_nelec = dict(occupations)
        return mf

    return configure


def free_atom_setup(symbol: str, conf, atom_basis, method: str):
    """(Mole, configurer for ``solve_scf``) of the free atom or ion of ``conf`` in ``atom_basis``
    (anything PySCF takes for one element: our ``ElementBasis.to_pyscf()`` or a stored basis name
    such as "cc-pvtz"), its electrons held per SO3 irrep (``irrep_occupations``) for ``method``
    ("RHF", "ROHF", "UHF"). The one free-atom setup of the checks and the bench."""
    mol = make_mole([(symbol, (0.0, 0.0, 0.0))], {symbol: atom_basis}, conf.charge, conf.unpaired, symmetry=True)
    return mol, irrep_configurer(irrep_occupations(conf), method)


__all__ = ["free_atom_setup", "irrep_configurer", "irrep_occupations"]
