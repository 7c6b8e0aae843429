"""stobuilder inside the hosts people already script: an ASE calculator and a PySCF Mole.

``STOCalculator`` is an ASE calculator (ASE's conventions: eV, Å, e·Å; ``implemented_properties``;
results dropped when the atoms change) that builds our basis for the atoms it is given and runs
PySCF's SCF through ``scf.solve_scf``, the one SCF driver:

    energy, free_energy   the SCF total energy (eV; the two are equal, there is no smearing)
    forces                −∇E from PySCF's analytic SCF gradients (eV/Å)
    dipole                PySCF's ``dip_moment`` about the origin of the coordinates (e·Å)
    charges               Mulliken charges (e)

The basis comes from ``pipeline.basis_for`` (``builder.basis_of``, the one memoised basis
constructor, keyed by the element set and the basis spec) and is reused at every geometry step; each SCF starts from the density of
the previous one. The last PySCF SCF object is ``calc.scf`` (orbitals, energies, ...).

What decides whether to recompute is ASE's ``check_state`` (positions, numbers, cell, ...) plus
the charge and 2S the calculator would use: from its parameters, else the atoms' info
(``charge``, ``spin``, ``multiplicity``), so changing ``atoms.info`` drops the old results.
One calculator may be shared by threads: a lock serialises its calls (``get_property``,
``calculate``, ``set``), so each call computes and returns the result of its own atoms.

``pyscf_mole(atoms_or_path, **options)`` gives the PySCF ``Mole`` with the same basis, for
PySCF scripts. Units: hartree and bohr inside PySCF, eV and Å on ASE's side (``ase.units``).
"""

from __future__ import annotations

import os
import threading
from dataclasses import fields

import numpy as np
from ase.calculators.calculator import Calculator, SCFError, all_changes

from stobuilder.core.defaults import DEFAULTS
from stobuilder.builder.spec import BasisSpec
from stobuilder.core.errors import InputError

#: basis options (BuildOptions' keywords), then the SCF's
BASIS_PARAMETERS = (*(f.name for f in fields(BasisSpec)), "zeta_file", "charge", "spin")
#: parameter names of earlier versions, still taken (with a DeprecationWarning)
DEPRECATED_PARAMETERS = {"fit": "norm", "exponents": "sharing"}
SCF_PARAMETERS = ("method", "conv_tol", "max_cycle")

# An SCF converged to PySCF's default 1e-9 hartree leaves gradient errors near 1e-4 eV/Å; the
# calculator's forces drive optimizers, so its default is tighter (common practice, no source).
DEFAULT_CONV_TOL = 1e-10
DEFAULT_MAX_CYCLE = 100


def _check_names(given, allowed, what: str) -> None:
    unknown = [k for k in given if k not in allowed]
    if unknown:
        raise InputError(f"{what}: unknown option {', '.join(map(repr, unknown))}; options are {', '.join(allowed)}")


def renamed_parameters(given: dict, where: str) -> dict:
    """``given`` with the deprecated names (``fit``, ``exponents``) as today's (``norm``,
    ``sharing``), each with a DeprecationWarning; TypeError when both names of one are given."""
    import warnings

    out = dict(given)
    for old, new in DEPRECATED_PARAMETERS.items():
        if old in out:
            if new in out:
                raise TypeError(f"{where}: give {new}, not both {new} and the deprecated {old}")
            warnings.warn(f"{where}: the parameter {old} is deprecated; use {new}", DeprecationWarning, stacklevel=4)
            out[new] = out.pop(old)
    return out


def build_options(**parameters):
    """The ``BuildOptions`` of the calculator's basis parameters and method (``zeta_file`` is a
    library, applied to the elements the atoms have; ``zeta`` {symbol: {label: ζ}} goes on top of
    it, as on the command line); the defaults are BuildOptions' own."""
    from stobuilder.pipeline.options import BuildOptions

    parameters = renamed_parameters(parameters, "build_options")
    if parameters.get("zeta") is None:
        parameters.pop("zeta", None)
    return BuildOptions(**parameters)


def _structure(atoms, options, where: str | None = None):
    """The Structure of an ASE Atoms (charge and spin from the options, else the atoms' info),
    its geometry checked. Molecules only: periodic or empty atoms are an InputError."""
    from stobuilder.model.structures import check_geometry, structure_from_atoms

    if len(atoms) == 0:
        raise InputError("the Atoms object holds no atoms")
    label = where or atoms.get_chemical_formula()
    if any(atoms.get_pbc()):
        raise InputError(
            f"{label}: periodic structure; the calculator does molecules (for periodic codes, "
            "write basis files with stobuilder build)"
        )
    if "X" in atoms.get_chemical_symbols():
        raise InputError(f"{label}: ghost/dummy atoms (symbol X) are not supported by the calculator")
    structure = structure_from_atoms(atoms, label, options.checks.charge, options.checks.spin)
    check_geometry(structure)
    return structure


def basis_key(structure, options) -> tuple:
    """What decides the basis of ``structure`` under ``options``: its element set, the basis spec
    of those elements and a single atom's charge (the key of ``builder.basis_of``)."""
    elements = structure.elements
    charge = structure.charge if len(structure.symbols) == 1 else None
    return elements, options.spec_for(elements), charge


def _basis(structure, options):
    """(key, basis) of ``structure`` under ``options`` (``pipeline.basis_for``, memoised). The
    options' ζ are checked against the structure by the rule of every door
    (``pipeline.check_zeta_elements``): each element ``zeta`` names is in it, and a
    ``zeta_file`` names one of its elements."""
    from stobuilder.core.errors import OptionError
    from stobuilder.pipeline import path as pipeline

    try:
        pipeline.check_zeta_elements(options, (structure,))
    except OptionError as exc:
        raise exc.within(f"{structure.path}: ") from None
    try:
        basis = pipeline.basis_for((structure,), options)
    except InputError as exc:
        raise InputError(f"{structure.path}: {' '.join(str(exc).split())}") from None
    return basis_key(structure, options), basis


def pyscf_mole(atoms_or_path, **options):
    """The built PySCF ``Mole`` (spherical, Å) of an ASE Atoms or a structure file (its first
    frame) with our basis. ``options``: rule, gaussians, norm, sharing, radial, zeta, zeta_file,
    charge, spin, as for ``STOCalculator``; charge and spin default to the atoms' info (``charge``,
    ``spin`` = 2S, ``multiplicity``) or the file's. Molecules only; InputError for bad input.
    The options' ζ are checked as the calculator checks them; no size guard (no SCF runs here:
    what the caller runs on the Mole, and with what memory, is the caller's)."""
    from stobuilder.model.structures import check_geometry, read_structures
    from stobuilder.scf.mole import structure_mole

    options = renamed_parameters(options, "pyscf_mole")
    _check_names(options, BASIS_PARAMETERS, "pyscf_mole")
    opts = build_options(**options)
    if isinstance(atoms_or_path, (str, os.PathLike)):
        structure = read_structures(atoms_or_path, charge=opts.checks.charge, spin=opts.checks.spin)[0]
        if structure.periodic:
            raise InputError(f"{structure.path}: periodic structure; pyscf_mole makes molecules (Mole), "
                             "for periodic codes write basis files with stobuilder build")
        check_geometry(structure)
    else:
        from ase import Atoms

        if not isinstance(atoms_or_path, Atoms):
            raise TypeError(f"atoms_or_path must be an ase.Atoms or a path, got {type(atoms_or_path).__name__}")
        structure = _structure(atoms_or_path, opts)
    _, basis = _basis(structure, opts)
    return structure_mole(structure, basis)


class STOCalculator(Calculator):
    """An ASE calculator: SCF with a stobuilder basis in PySCF.

    Parameters (keywords; unknown ones are an InputError):
        rule, gaussians, norm ("l2"/"h1"), sharing ("family"/"shared"/"separate"),
        radial ("integer"/"effective-n"), zeta ({"Fe": {"3d": 2.1}}), zeta_file (TOML)
                      the basis, as ``stobuilder build`` makes it
        method        "auto" (RHF closed shell, ROHF open shell), "rhf", "rohf", "uhf"
        charge, spin  total charge (e) and 2S; default the atoms' info ``charge``, ``spin``,
                      ``multiplicity`` as ``build`` reads them, else neutral and the lowest spin
        (fit and exponents, the names of earlier versions for norm and sharing, still work
        with a DeprecationWarning)
        conv_tol      SCF energy convergence (hartree), default 1e-10
        max_cycle     SCF iterations before PySCF's second-order solver takes over (default 100)

    After a calculation: ``scf`` (PySCF's SCF object), ``mol`` (its Mole), ``basis`` (our
    Basis), ``iterations`` (SCF cycles of the last call), ``builds`` (bases built so far).
    An SCF that does not converge raises ``ase.calculators.calculator.SCFError``.

    A change of the charge or 2S the calculator would use (``atoms.info`` ``charge``, ``spin``,
    ``multiplicity`` when the parameters leave them open) is a system change, reported by
    ``check_state`` as ``"info"``: the results are dropped and the SCF rerun.

    Threads: one calculator may be shared. Its calls are serialised by a lock (one SCF at a
    time), so each ``get_property`` (``atoms.get_potential_energy()``, ...) returns the result
    for the atoms it was given, never another thread's. ``scf``, ``mol``, ``results`` are those
    of the last call of any thread; for parallel SCFs give each thread its own calculator.
    """

    implemented_properties = ["energy", "free_energy", "forces", "dipole", "charges"]
    default_parameters = {
        **DEFAULTS, "zeta": None,
        "zeta_file": None, "charge": None, "spin": None, "method": "auto", "conv_tol": DEFAULT_CONV_TOL,
        "max_cycle": DEFAULT_MAX_CYCLE,
    }

    def __init__(self, **kwargs):
        self._lock = threading.RLock()  # before Calculator.__init__, which calls set()
        self._options = None
        self._key = None  # the basis key of the last basis used (``builds`` counts changes)
        self._density = None  # (signature, density) of the last SCF
        self.scf = self.mol = self.basis = None
        self.iterations = 0
        self.builds = 0
        super().__init__(**kwargs)
        if self._options is None:
            self._options = build_options()

    def __getstate__(self):  # copy.deepcopy and pickle: a lock is not copied, a new one is made
        state = dict(self.__dict__)
        state.pop("_lock", None)
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._lock = threading.RLock()

    def get_property(self, name, atoms=None, allow_calculation=True):
        with self._lock:  # check_state, calculate and the read of the result as one step
            return super().get_property(name, atoms, allow_calculation)

    def calculation_required(self, atoms, properties):
        with self._lock:
            return super().calculation_required(atoms, properties)

    def check_state(self, atoms, tol=1e-15):
        """ASE's system changes, plus ``"info"`` when the charge or 2S this calculator would use
        for ``atoms`` differs from that of the atoms of the last calculation."""
        changes = super().check_state(atoms, tol)
        if self.atoms is not None and "info" not in changes \
                and self._charge_spin(atoms) != self._charge_spin(self.atoms):
            changes = [*changes, "info"]
        return changes

    def _charge_spin(self, atoms):
        """(charge, 2S) the calculator would use for ``atoms``: its parameters, else the atoms'
        info keys; for info it cannot read, the error text (so bad info is a change, and the
        calculation that follows raises the error)."""
        from stobuilder.model.structures import INFO_KEYS, structure_from_atoms

        options = self._options or build_options()
        checks = options.checks
        if checks.charge is not None and checks.spin is not None:
            return checks.charge, checks.spin
        try:
            structure = structure_from_atoms(atoms, atoms.get_chemical_formula(), checks.charge, checks.spin)
        except InputError as exc:
            return ("error", str(exc), tuple(repr(atoms.info.get(k)) for k in INFO_KEYS))
        return structure.charge, structure.spin

    def set(self, **kwargs):
        with self._lock:
            return self._set(**kwargs)

    def _set(self, **kwargs):
        kwargs = renamed_parameters(kwargs, "STOCalculator")
        own = {k: v for k, v in kwargs.items() if k not in ("parameters",)}
        _check_names(own, BASIS_PARAMETERS + SCF_PARAMETERS, "STOCalculator")
        merged = {**dict(self.parameters or self.get_default_parameters()), **own}
        options = build_options(**{k: merged[k] for k in BASIS_PARAMETERS}, method=merged["method"])
        from stobuilder.core.arguments import whole_number

        if not isinstance(merged["conv_tol"], (int, float)) or isinstance(merged["conv_tol"], bool) \
                or not 0 < float(merged["conv_tol"]) < 1:
            raise InputError(f"STOCalculator: conv_tol {merged['conv_tol']!r} must be a number between 0 and 1 (hartree)")
        whole_number(merged["max_cycle"], "STOCalculator: max_cycle", 1, 100000)
        changed = super().set(**kwargs)
        self._options = options
        if changed:  # every parameter shapes the basis or the SCF: the results no longer hold
            self.reset()
        return changed

    def calculate(self, atoms=None, properties=("energy",), system_changes=all_changes):
        with self._lock:
            self._calculate(atoms, properties, system_changes)

    def _calculate(self, atoms, properties, system_changes):
        from ase.units import Bohr, Hartree

        from stobuilder.model.methods import pick_method
        from stobuilder.pipeline.path import check_electrons
        from stobuilder.scf.mole import structure_mole
        from stobuilder.scf.run import solve_scf

        if not system_changes and self.scf is not None and "energy" in self.results:
            # same atoms and parameters (ASE keeps the results): only the forces are missing
            self.results["forces"] = self._forces(self.scf)
            return
        super().calculate(atoms, properties, system_changes)
        options = self._options
        structure = _structure(self.atoms, options)
        key, basis = self._basis_for(structure, options)
        check_electrons(structure, basis, options.checks.method)
        method = pick_method(options.checks.method, structure.spin, f"({structure.formula})")
        mol = structure_mole(structure, basis)
        signature = (key, structure.symbols, structure.charge, structure.spin, method)
        dm0 = self._density[1] if self._density is not None and self._density[0] == signature else None
        p = self.parameters
        mf, iterations = solve_scf(mol, method, int(p["max_cycle"]), dm0=dm0, conv_tol=float(p["conv_tol"]))
        self.scf, self.mol, self.basis, self.iterations = mf, mol, basis, iterations
        if not mf.converged:
            self._density = None
            raise SCFError(
                f"{structure.formula}: the {method} SCF did not converge in {iterations} iterations "
                f"(last energy {mf.e_tot:.10f} hartree); no energy returned"
            )
        self._density = (signature, mf.make_rdm1())
        energy = float(mf.e_tot) * Hartree
        self.results["energy"] = self.results["free_energy"] = energy
        if "forces" in properties:
            self.results["forces"] = self._forces(mf)
        self.results["dipole"] = np.asarray(mf.dip_moment(unit="AU", verbose=0), dtype=float) * Bohr
        self.results["charges"] = np.asarray(mf.mulliken_pop(verbose=0)[1], dtype=float)

    def adopt_basis(self, structure, basis) -> None:
        """Use ``basis`` (one already built for ``structure``'s elements under this calculator's
        options, e.g. by ``pipeline.prepare``) instead of building it again."""
        names = set(structure.symbols)
        if set(basis.symbols) < names:
            raise InputError(f"{structure.path}: the basis lacks {', '.join(sorted(names - set(basis.symbols)))}")
        self._key = basis_key(structure, self._options)

    @staticmethod
    def _forces(mf):
        """−∇E (eV/Å) from PySCF's analytic gradient (hartree/bohr) of the converged SCF."""
        from ase.units import Bohr, Hartree

        grad = mf.nuc_grad_method()
        grad.verbose = 0
        return -np.asarray(grad.kernel(), dtype=float) * (Hartree / Bohr)

    def _basis_for(self, structure, options):
        key, basis = _basis(structure, options)
        if key != self._key:
            self.builds += 1
            self._key = key
        return key, basis


__all__ = ["STOCalculator", "build_options", "pyscf_mole"]
