"""PySCF Moles of our structures and bases: spherical functions, no output, the memory limit of
``size.memory_limit_mb`` (so PySCF's in-core choice and the size guard agree)."""

from __future__ import annotations

from stobuilder.model.basis import Basis
from stobuilder.model.structures import Structure
from stobuilder.scf.size import memory_limit_mb


def make_mole(atoms, basis, charge: int, spin: int, unit: str = "Angstrom", symmetry: bool = False):
    """A built PySCF Mole (spherical functions) for ``atoms`` = [(symbol, (x, y, z)), ...]."""
    from pyscf import gto

    mol = gto.Mole()
    mol.atom = [[s, tuple(p)] for s, p in atoms]
    mol.unit = unit
    mol.basis = basis
    mol.charge = charge
    mol.spin = spin
    mol.cart = False
    mol.symmetry = symmetry
    mol.verbose = 0
    mol.max_memory = memory_limit_mb()  # PySCF's in-core choice against our limit (``scf_size``)
    mol.build()
    return mol


def structure_mole(structure: Structure, basis: Basis, symmetry: bool = False):
    """The PySCF Mole of a (molecular) structure with ``basis``: its atoms (Å), charge and 2S."""
    atoms = list(zip(structure.symbols, structure.positions))
    return make_mole(atoms, {s: basis[s].to_pyscf() for s in structure.elements}, structure.charge,
                     structure.spin, symmetry=symmetry)


__all__ = ["make_mole", "structure_mole"]
