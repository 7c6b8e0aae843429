"""SCF checks of a basis with PySCF: the structure itself, or its free atoms.

RHF for closed shells, ROHF for open shells, UHF on request; PySCF's SCF drivers (Sun et al.,
J. Chem. Phys. 153, 024109, 2020). Where the rule is ``molecular`` and N is 3 or 6, the same
calculation is repeated with PySCF's stored STO-3G/STO-6G and the difference reported.
A calculation that does not converge is reported as not converged, with its last energy.
"""

from __future__ import annotations

import logging
import math
import os
import time
from dataclasses import dataclass, field, replace

from stobuilder.model.basis import Basis
from stobuilder.model.elements import M_FILL_ORDER, ground_state
from stobuilder.model.methods import METHODS, free_atom_method, pick_method  # noqa: F401 (METHODS re-exported)
from stobuilder.model.structures import Structure

MAX_BASIS_FUNCTIONS = 400  # beyond this a structure is checked on its free atoms
STORED_SETS = {3: "sto-3g", 6: "sto-6g"}

log = logging.getLogger(__name__)

# ---------------------------------------------------------------------------- size guard and progress
#
# The memory of one PySCF SCF of nao basis functions (PySCF 2.14, pyscf/scf/hf.py): the in-core
# two-electron integrals, nao⁴/8 doubles with 8-fold symmetry (``mol.intor("int2e", aosym="s8")``),
# which PySCF keeps only where nao⁴/1e6 MB (its own measure) fits in 0.95 of ``max_memory``
# (``SCF._is_mem_enough``), else it recomputes them every cycle (direct SCF); beside them some
# tens of nao × nao matrices (core Hamiltonian, overlap, density, Fock, orbitals, the DIIS
# history of 8 Fock and 8 error matrices, eigensolver work space), twice as many for the two spin
# densities of ROHF and UHF. MATRICES_PER_SPIN is that count with room for the gradient of a
# relax step: an estimate (common practice, no source) that the 6.7 GB seen for a 5000-function
# RHF after 30 s (issue 21) lies below. Direct SCF adds the work buffers of PySCF's J/K driver,
# DIRECT_BUFFER_MB (measured here: 235 MB above the start for 300 H atoms in STO-3G, 3 cycles,
# one thread). The limit is STOBUILDER_MAX_MEMORY (MB), else PySCF's own
# default ``max_memory`` (pyscf.__config__.MAX_MEMORY: 4000 MB, or PYSCF_MAX_MEMORY); every Mole
# we make is told the same limit, so PySCF's in-core choice and ours agree.

MEMORY_VARIABLE = "STOBUILDER_MAX_MEMORY"
MATRICES_PER_SPIN = 40
DIRECT_BUFFER_MB = 250.0
PROGRESS_SECONDS = 5.0  # an SCF running longer than this logs a line per cycle


def memory_limit_mb() -> float:
    """The memory (MB) one SCF may take: ``STOBUILDER_MAX_MEMORY`` when set, else PySCF's default
    ``max_memory``. InputError for a value that is not a positive number."""
    from stobuilder.core.errors import InputError

    text = os.environ.get(MEMORY_VARIABLE)
    if text is None or not text.strip():
        from pyscf import __config__

        return float(getattr(__config__, "MAX_MEMORY", 4000))
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{MEMORY_VARIABLE}={text.strip()!r}: expected the memory in MB, a positive number")
    return value


@dataclass(frozen=True)
class ScfSize:
    """The estimated memory of one SCF (``scf_size``), in MB."""

    functions: int
    method: str
    incore: bool  # PySCF keeps the two-electron integrals in memory
    memory_mb: float
    limit_mb: float

    @property
    def fits(self) -> bool:
        return self.memory_mb <= self.limit_mb

    def describe(self) -> str:
        kind = "integrals in memory" if self.incore else "direct SCF"
        return (f"its {self.method} SCF would need about {self.memory_mb:,.0f} MB ({self.functions} basis functions, "
                f"{kind}), more than the limit of {self.limit_mb:,.0f} MB; set {MEMORY_VARIABLE} to the MB this "
                "machine can give one SCF to raise it")


def scf_size(functions: int, method: str, limit_mb: float | None = None) -> ScfSize:
    """The memory estimate of one SCF of ``functions`` basis functions with ``method`` ("RHF",
    "ROHF", "UHF") against ``limit_mb`` (default ``memory_limit_mb()``); see the comment above."""
    limit = memory_limit_mb() if limit_mb is None else float(limit_mb)
    eri_mb = float(functions) ** 4 / 1e6
    incore = eri_mb < 0.95 * limit
    spins = 1 if method.upper() == "RHF" else 2
    matrices_mb = MATRICES_PER_SPIN * spins * 8.0 * float(functions) ** 2 / 1e6
    return ScfSize(int(functions), method.upper(), incore, (eri_mb if incore else DIRECT_BUFFER_MB) + matrices_mb, limit)


def check_scf_size(functions: int, method: str, where: str) -> None:
    """InputError naming ``where`` when one SCF of ``functions`` basis functions would need more
    memory than the limit (``scf_size``): before the first SCF, not when memory runs out."""
    from stobuilder.core.errors import InputError

    size = scf_size(functions, method)
    if not size.fits:
        raise InputError(f"{where}: {size.describe()}")


def check_mole_size(mol, method: str, where: str) -> None:
    """``check_scf_size`` for a built PySCF Mole (its spherical functions ``mol.nao``), e.g. one
    in a stored basis that no ``Basis`` of ours describes."""
    check_scf_size(mol.nao, method, where)


def _progress(mol, method: str):
    """A PySCF SCF callback that logs cycle, energy and elapsed time once the SCF has run longer
    than PROGRESS_SECONDS (the cycle is PySCF's ``cycle``, or ``imacro`` of its second-order solver)."""
    start = time.perf_counter()

    def callback(envs):
        elapsed = time.perf_counter() - start
        if elapsed < PROGRESS_SECONDS:
            return
        cycle = envs.get("cycle", envs.get("imacro"))
        energy = envs.get("e_tot")
        shown = f"{float(energy):.10f}" if energy is not None else "n/a"
        log.info("SCF (%s, %d basis functions): cycle %s, E = %s hartree, %.1f s elapsed",
                 method, mol.nao, "?" if cycle is None else int(cycle) + 1, shown, elapsed)

    return callback


@dataclass(frozen=True)
class ScfResult:
    """One SCF calculation: energy in hartree, wall time in seconds."""

    label: str
    method: str
    energy_hartree: float
    converged: bool
    iterations: int
    wall_seconds: float
    reference_basis: str | None = None
    reference_energy_hartree: float | None = None
    reference_converged: bool | None = None

    @property
    def delta_hartree(self) -> float | None:
        if self.reference_energy_hartree is None:
            return None
        return self.energy_hartree - self.reference_energy_hartree

    def to_json(self) -> dict:
        return {
            "label": self.label,
            "method": self.method,
            "energy_hartree": self.energy_hartree,
            "converged": self.converged,
            "iterations": self.iterations,
            "wall_seconds": round(self.wall_seconds, 4),
            "reference_basis": self.reference_basis,
            "reference_energy_hartree": self.reference_energy_hartree,
            "reference_converged": self.reference_converged,
            "delta_hartree": self.delta_hartree,
        }


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


def solve(mol, method: str, max_cycle: int = 100, dm0=None, configure=None, conv_tol: float | None = None):
    """One SCF run of ``mol`` ("RHF", "ROHF" or "UHF"), from ``dm0`` (a density of the same
    basis, e.g. the previous geometry step's) or PySCF's default guess. A first run that does not
    converge is retried with PySCF's second-order solver from where it stopped. Returns
    (PySCF SCF object, iterations); the object's ``converged``, ``e_tot`` and orbitals are
    PySCF's own. The one SCF driver of the checks, the calculator, bench and tune. An SCF that
    runs longer than PROGRESS_SECONDS logs a line per cycle (logger ``stobuilder.checks.structure``; the
    command line prints it on stderr)."""
    from pyscf import scf

    from stobuilder.core.diis import use_robust_diis

    driver = {"RHF": scf.RHF, "ROHF": scf.ROHF, "UHF": scf.UHF}[method]

    def make():
        mf = use_robust_diis(driver(mol))
        mf.chkfile = None  # no checkpoint file: nothing on disk, and about 30% less time per small SCF
        if configure is not None:
            mf = configure(mf)
        if conv_tol is not None:
            mf.conv_tol = conv_tol
        mf.max_cycle = max_cycle
        mf.verbose = 0
        if mf.callback is None:
            mf.callback = _progress(mol, method)
        return mf

    mf = make()
    mf.kernel(dm0)
    iterations = int(getattr(mf, "cycles", 0))
    if not mf.converged:
        mf2 = make().newton()  # PySCF's second-order object takes the settings of make()'s
        mf2.kernel(mf.make_rdm1())
        iterations += int(getattr(mf2, "cycles", 0))
        if mf2.converged:
            mf = mf2
    return mf, iterations


def _solve(mol, method: str, max_cycle: int, dm0=None, configure=None):
    """``solve`` as (energy, converged, iterations, density)."""
    mf, iterations = solve(mol, method, max_cycle, dm0, configure)
    return float(mf.e_tot), bool(mf.converged), iterations, mf.make_rdm1()


def run_scf(mol, method: str, label: str = "", max_cycle: int = 100, configure=None) -> ScfResult:
    """Run one SCF calculation (method "RHF", "ROHF" or "UHF") from PySCF's default guess.
    ``converged`` reports what PySCF reports."""
    start = time.perf_counter()
    energy, converged, iterations, _ = _solve(mol, method, max_cycle, configure=configure)
    return ScfResult(label, method, energy, converged, iterations, time.perf_counter() - start)


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
    e1, ok1, it1, dm1 = _solve(mol, method, max_cycle, configure=configure)
    ref_name = stored_reference(basis, symbols)
    if ref_name is None:
        return ScfResult(label, method, e1, ok1, it1, time.perf_counter() - start)
    mol_ref = make_mole(atoms, ref_name, charge, spin, symmetry=bool(mol.symmetry))
    e2, ok2, _, dm2 = _solve(mol_ref, method, max_cycle, configure=configure)
    if abs(e1 - e2) > STATE_TOLERANCE:
        e1b, ok1b, it1b, _ = _solve(mol, method, max_cycle, project_dm_nr2nr(mol_ref, dm2, mol), configure)
        e2b, ok2b, _, _ = _solve(mol_ref, method, max_cycle, project_dm_nr2nr(mol, dm1, mol_ref), configure)
        if ok1b and (not ok1 or e1b < e1):
            e1, ok1, it1 = e1b, ok1b, it1b
        if ok2b and (not ok2 or e2b < e2):
            e2, ok2 = e2b, ok2b
    return ScfResult(label, method, e1, ok1, it1, time.perf_counter() - start, ref_name, e2, ok2)


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


def _atom_solver(occupations, method: str):
    """A ``_solve``-compatible SCF configurer that fixes the electrons per SO3 irrep."""

    def configure(mf):
        if method == "RHF":
            mf.irrep_nelec = {k: a + b for k, (a, b) in occupations.items()}
        else:
            mf.irrep_nelec = dict(occupations)
        return mf

    return configure


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


def free_atom_setup(symbol: str, conf, atom_basis, method: str):
    """(Mole, configurer for ``solve``) of the free atom or ion of ``conf`` in ``atom_basis``
    (anything PySCF takes for one element: our ``ElementBasis.to_pyscf()`` or a stored basis name
    such as "cc-pvtz"), its electrons held per SO3 irrep (``irrep_occupations``) for ``method``
    ("RHF", "ROHF", "UHF"). The one free-atom setup of the checks and the bench."""
    mol = make_mole([(symbol, (0.0, 0.0, 0.0))], {symbol: atom_basis}, conf.charge, conf.unpaired, symmetry=True)
    return mol, _atom_solver(irrep_occupations(conf), method)


def check_free_atom(basis: Basis, symbol: str, method: str = "auto", reference: bool = True) -> ScfResult:
    """SCF of the free atom (or ion) of ``symbol`` in the configuration its basis was built for:
    the high-spin single determinant of ``irrep_occupations``, held fixed through PySCF's atomic
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
    from stobuilder.exact.atoms import pick_method as exact_method
    from stobuilder.exact.atoms import solve, supported

    methods, _ = _atom_methods(basis, symbols, method)
    out = []
    for symbol in symbols:
        element = basis[symbol]
        if not element.stos or element.configuration is None:
            continue
        if basis.radial == "effective-n" and any(s.n_eff != s.n for s in element.stos):
            continue
        conf = supported(element.configuration)  # the very STOs the basis expands, in its configuration
        exact = solve(conf, element.stos, exact_method(conf, methods[symbol].lower()))
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
