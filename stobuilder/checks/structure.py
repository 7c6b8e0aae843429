"""SCF checks of a basis with PySCF: the structure itself, or its free atoms.

RHF for closed shells, ROHF for open shells, UHF on request, run by the SCF driver
``stobuilder.scf`` (Mole construction, ``solve_scf``, the free-atom setup). Where the rule is
``molecular`` and N is 3 or 6, the same calculation is repeated with PySCF's stored
STO-3G/STO-6G and the difference reported. A calculation that does not converge is reported as
not converged, with its last energy.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field, replace

from stobuilder.model.basis import Basis
from stobuilder.model.elements import ground_state
from stobuilder.model.methods import METHODS, free_atom_method, pick_method  # noqa: F401 (METHODS re-exported)
from stobuilder.model.structures import Structure
from stobuilder.scf.free_atom import free_atom_setup
from stobuilder.scf.mole import make_mole, structure_mole
from stobuilder.scf.run import ScfResult, run_scf, solve_scf_energy

MAX_BASIS_FUNCTIONS = 400  # beyond this a structure is checked on its free atoms
STORED_SETS = {3: "sto-3g", 6: "sto-6g"}


@dataclass(frozen=True)
class ExactAtom:
    """A free atom computed with the exact STOs of its basis and with their Gaussian expansion
    (same configuration, same determinant), energies in hartree."""

    symbol: str
    state: str
    energy_exact_hartree: float
    energy_gaussian_hartree: float

    @property
    def expansion_error_hartree(self) -> float:
        return self.energy_gaussian_hartree - self.energy_exact_hartree

    def to_json(self) -> dict:
        return {
            "symbol": self.symbol,
            "state": self.state,
            "energy_exact_hartree": self.energy_exact_hartree,
            "energy_gaussian_hartree": self.energy_gaussian_hartree,
            "expansion_error_hartree": self.expansion_error_hartree,
        }


@dataclass(frozen=True)
class Check:
    """The check of one structure frame: either the structure itself or its free atoms, plus the
    exact-STO free atoms of its elements."""

    target: str  # "structure" or "free atoms"
    reason: str  # why free atoms were checked instead, "" otherwise
    results: tuple[ScfResult, ...] = field(default=())
    exact_atoms: tuple[ExactAtom, ...] = field(default=())
    notes: tuple[str, ...] = field(default=())  # e.g. the method free atoms took instead of the one asked

    @property
    def converged(self) -> bool:
        return all(r.converged for r in self.results)

    def to_json(self) -> dict:
        exact = [a.to_json() for a in self.exact_atoms]
        if self.target == "structure":
            (r,) = self.results
            out = {"target": self.target, **r.to_json(), "exact_sto_atoms": exact}
            out.pop("label")
            return out
        return {
            "target": self.target,
            "reason": self.reason,
            "method": "/".join(sorted({r.method for r in self.results})),
            "energy_hartree": None,
            "converged": self.converged,
            "iterations": max(r.iterations for r in self.results),
            "reference_energy_hartree": None,
            "atoms": [r.to_json() for r in self.results],
            "exact_sto_atoms": exact,
        }


def stored_reference(basis: Basis, symbols) -> str | None:
    """PySCF's stored STO-nG name if the rule is ``molecular``, N is 3 or 6 and it covers every symbol."""
    from pyscf.gto import basis as pyscf_basis

    name = STORED_SETS.get(basis.gaussians)
    if basis.rule != "molecular" or name is None or basis.norm != "l2":
        return None
    for symbol in set(symbols):
        try:
            if not pyscf_basis.load(name, symbol):
                return None
        except Exception:
            return None
    return name


STATE_TOLERANCE = 1e-4  # hartree: beyond this two nearly equal bases have landed in different states


def compare_with_stored(
    mol, atoms, basis: Basis, symbols, charge, spin, method, label, max_cycle=100, configure=None
) -> ScfResult:
    """SCF with our basis and, where ``stored_reference`` names one, with PySCF's stored STO-nG.

    Open-shell atoms have many SCF solutions; where the two energies differ by more than
    STATE_TOLERANCE, each calculation is repeated from the other's converged density (projected
    onto its basis) and the lower converged energy of each is kept, so that both describe the
    same state and ΔE measures the basis, not the state.
    """
    from pyscf.scf.addons import project_dm_nr2nr

    start = time.perf_counter()
    e1, ok1, it1, dm1 = solve_scf_energy(mol, method, max_cycle, configure=configure)
    ref_name = stored_reference(basis, symbols)
    if ref_name is None:
        return ScfResult(label, method, e1, ok1, it1, time.perf_counter() - start)
    mol_ref = make_mole(atoms, ref_name, charge, spin, symmetry=bool(mol.symmetry))
    e2, ok2, _, dm2 = solve_scf_energy(mol_ref, method, max_cycle, configure=configure)
    if abs(e1 - e2) > STATE_TOLERANCE:
        e1b, ok1b, it1b, _ = solve_scf_energy(mol, method, max_cycle, project_dm_nr2nr(mol_ref, dm2, mol), configure)
        e2b, ok2b, _, _ = solve_scf_energy(mol_ref, method, max_cycle, project_dm_nr2nr(mol, dm1, mol_ref), configure)
        if ok1b and (not ok1 or e1b < e1):
            e1, ok1, it1 = e1b, ok1b, it1b
        if ok2b and (not ok2 or e2b < e2):
            e2, ok2 = e2b, ok2b
    return ScfResult(label, method, e1, ok1, it1, time.perf_counter() - start, ref_name, e2, ok2)


def atom_configuration(basis: Basis, symbol: str):
    """The configuration ``basis`` was built for at ``symbol`` (the ground state for a basis read
    from a file, which carries none)."""
    conf = basis[symbol].configuration
    return conf if conf is not None else ground_state(symbol)


def _atom_methods(basis: Basis, symbols, method: str) -> tuple[dict[str, str], tuple[str, ...]]:
    """The method each free atom takes beside a structure (``methods.free_atom_method``), and the
    notes that say where it is not the one asked for."""
    chosen, notes = {}, []
    for symbol in symbols:
        conf = atom_configuration(basis, symbol)
        chosen[symbol], note = free_atom_method(method, conf.unpaired, f"free atom {symbol} {conf.label}")
        if note:
            notes.append(note)
    return chosen, tuple(notes)


def check_free_atom(basis: Basis, symbol: str, method: str = "auto", reference: bool = True) -> ScfResult:
    """SCF of the free atom (or ion) of ``symbol`` in the configuration its basis was built for:
    the high-spin single determinant of ``scf.free_atom.irrep_occupations``, held fixed through PySCF's atomic
    (SO3) symmetry so that the SCF cannot drift to another configuration."""
    conf = atom_configuration(basis, symbol)
    spin = conf.unpaired
    m = pick_method(method, spin, f"({symbol} {conf.label})")
    atoms = [(symbol, (0.0, 0.0, 0.0))]
    mol, configure = free_atom_setup(symbol, conf, basis[symbol].to_pyscf(), m)
    label = f"{symbol} {conf.label}"
    if not reference:
        return run_scf(mol, m, label, configure=configure)
    return compare_with_stored(mol, atoms, basis, [symbol], conf.charge, spin, m, label, configure=configure)


def check_structure(
    structure: Structure,
    basis: Basis,
    method: str = "auto",
    max_basis_functions: int = MAX_BASIS_FUNCTIONS,
    reference: bool = True,
) -> Check:
    """Check ``basis`` on ``structure``: SCF of the structure itself, or of its free atoms when the
    structure is periodic or has more than ``max_basis_functions`` basis functions."""
    atoms = list(zip(structure.symbols, structure.positions))
    methods, notes = _atom_methods(basis, structure.elements, method)
    reason = ""
    if structure.periodic:
        reason = "periodic structure: checked on the free atoms of each element"
    elif len(structure.symbols) == 1 and is_its_configuration(basis, structure):
        # a free atom or ion in the state its basis was built for: the same fixed-occupation SCF
        # as ``stobuilder atom`` (check_free_atom), so both give the same energy
        symbol = structure.symbols[0]
        m = pick_method(method, structure.spin, f"({structure.formula})")
        result = replace(check_free_atom(basis, symbol, m.lower(), reference), label=structure.formula)
        return Check("structure", "", (result,), exact_sto_atoms(basis, structure.elements, method), notes)
    else:
        m = pick_method(method, structure.spin, f"({structure.formula})")
        mol = structure_mole(structure, basis)
        if mol.nao > max_basis_functions:
            reason = (
                f"{mol.nao} basis functions exceed the quick-check limit of {max_basis_functions}: "
                "checked on the free atoms of each element"
            )
        else:
            if reference:
                result = compare_with_stored(
                    mol, atoms, basis, structure.symbols, structure.charge, structure.spin, m, structure.formula
                )
            else:
                result = run_scf(mol, m, structure.formula)
            return Check("structure", "", (result,), exact_sto_atoms(basis, structure.elements, method), notes)
    results = tuple(check_free_atom(basis, s, methods[s].lower(), reference) for s in structure.elements)
    gaussian = {s: r.energy_hartree for s, r in zip(structure.elements, results) if r.converged}
    return Check("free atoms", reason, results, exact_sto_atoms(basis, structure.elements, method, gaussian), notes)


def is_its_configuration(basis: Basis, structure: Structure) -> bool:
    """True when the one atom of ``structure`` is in the state its basis was built for (same
    charge, the high-spin number of unpaired electrons)."""
    conf = atom_configuration(basis, structure.symbols[0])
    return conf.charge == structure.charge and conf.unpaired == structure.spin


def exact_sto_atoms(basis: Basis, symbols, method: str = "auto", gaussian=None) -> tuple[ExactAtom, ...]:
    """Each element's free atom with the exact STOs its basis expands (stobuilder.exact.atoms) beside
    the same atom with the Gaussian basis. ``gaussian`` holds Gaussian free-atom energies already
    computed. Elements without STO provenance (read from a file) are left out, and so are STOs of
    non-integer n* (``radial="effective-n"``), which the exact-STO integrals do not cover."""
    from stobuilder.exact.atoms import solve_atom, supported

    methods, _ = _atom_methods(basis, symbols, method)
    out = []
    for symbol in symbols:
        element = basis[symbol]
        if not element.stos or element.configuration is None:
            continue
        if basis.radial == "effective-n" and any(s.n_eff != s.n for s in element.stos):
            continue
        conf = supported(element.configuration)  # the very STOs the basis expands, in its configuration
        exact = solve_atom(conf, element.stos, pick_method(methods[symbol], conf.unpaired, f"({conf.symbol} {conf.label})").lower())
        if gaussian is not None and symbol in gaussian:
            e_gauss = gaussian[symbol]
        else:
            r = check_free_atom(basis, symbol, methods[symbol].lower(), reference=False)
            if not r.converged:
                continue
            e_gauss = r.energy_hartree
        if exact.converged:
            out.append(ExactAtom(symbol, exact.state, exact.energy, e_gauss))
    return tuple(out)
