"""Benchmarks of exponent choices over a set of molecules: ``stobuilder bench``.

The flow::

    structures (a named set, or files)  ×  variants (rule × N × norm, plus each zeta file)
        ──plan──▶ BenchTask per calculation: each molecule per variant, each free atom per
                  element and variant (never per molecule), and with a reference basis each
                  molecule and atom once more in that basis
        ──jobs.run_tasks (process pool or Dask; the bench manifest; resume)──▶ Calculation
        ──assemble──▶ BenchRow per structure × variant, VariantSummary per variant
        ──render (bench_report)──▶ bench.tsv, bench.json, report.html and its PNG plots

Every SCF goes through ``scf.solve_scf`` with the method ``build --check`` picks
(``methods.pick_method``: RHF for closed shells, ROHF for open ones). Free atoms are the
fixed-occupation ground-state atoms of ``checks.check_free_atom`` (``elements.ground_state``,
the high-spin determinant held by PySCF's SO3 symmetry): RHF for closed-shell atoms (Be here),
ROHF for the open-shell ones, so molecule and atoms are of the same restricted family. The
atomization energy is Σ E(atoms) − E(molecule), in kcal/mol.

The G2-1 set is the 55 molecules of Curtiss, Raghavachari, Redfern & Pople, J. Chem. Phys. 94,
7221 (1991) as ASE ships them: geometries ``ase.collections.g2``, spins from the magnetic moments
and experimental atomization energies ``ase.data.g2_1.get_atomization_energy`` (kcal/mol,
extrapolated to 0 K without zero-point energy from the heats of formation).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import socket
import time
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from itertools import product

from stobuilder.core.errors import InputError
from stobuilder.core.limits import one_line
from stobuilder.pipeline.options import BuildOptions
from stobuilder.model.structures import Structure

MANIFEST_NAME = "stobuilder-bench.jsonl"
OUTPUT_NAMES = {"tsv": "bench.tsv", "atoms_tsv": "free_atoms.tsv", "json": "bench.json", "report": "report.html",
                "energy_plot": "energy_error.png", "atomization_plot": "atomization.png"}
TASK_LAYOUT = 1  # bump when a change can move a calculation's result: finished records are then recomputed


def hartree_to_kcal_mol() -> float:
    """kcal/mol per hartree from PySCF's constants (CODATA 2014 in pyscf.data.nist) and the
    thermochemical calorie, 4.184 J (common practice)."""
    from pyscf.data import nist

    return nist.HARTREE2J * nist.AVOGADRO / 4184.0


# ---------------------------------------------------------------------------- sets


@dataclass(frozen=True)
class BenchSet:
    """A named molecule set: name (ours), what it is, where it comes from, how many molecules."""

    name: str
    description: str
    source: str
    size: int


@dataclass(frozen=True)
class BenchStructure:
    """One structure of a bench: its name, the structure (Å, charge, 2S) and the experimental
    atomization energy in kcal/mol where the set has one."""

    name: str
    structure: Structure
    experiment_kcal_mol: float | None = None


def _g2_1_names() -> tuple[str, ...]:
    from ase.data import g2_1

    return tuple(g2_1.molecule_names)


SETS = {
    "g2-1": lambda: BenchSet(
        "g2-1",
        "the 55 molecules of the G2-1 test set (first and second row, H to Cl)",
        "Curtiss, Raghavachari, Redfern & Pople, J. Chem. Phys. 94, 7221 (1991), as ASE ships it "
        "(ase.collections.g2, ase.data.g2_1)",
        len(_g2_1_names()),
    ),
}


def list_sets() -> tuple[BenchSet, ...]:
    """Every named set."""
    return tuple(make() for make in SETS.values())


def _spin_from_moments(moments, where: str) -> int:
    total = float(sum(moments)) if moments is not None else 0.0
    spin = round(total)
    if abs(total - spin) > 1e-6:
        raise InputError(f"{where}: magnetic moments sum to {total}, not a whole number of unpaired electrons")
    return int(spin)


def set_structures(name: str, select: Sequence[str] = ()) -> tuple[BenchStructure, ...]:
    """The structures of set ``name`` (``list_sets``), or only those named in ``select`` (in the
    order given). InputError for an unknown set, a name the set does not hold, or a name given
    twice (as for structure files: a structure is computed once, and a repeat is refused)."""
    if name not in SETS:
        raise InputError(f"--set {name!r}: unknown set; choose one of {', '.join(SETS)} (stobuilder bench --list-sets)")
    from ase.data import g2_1

    from stobuilder.model.structures import validate_charge_spin

    names = _g2_1_names()
    chosen = list(select) if select else list(names)
    for n in chosen:
        if n not in names:
            raise InputError(f"{n!r}: not a molecule of set {name} (its names: {', '.join(names)})")
        if chosen.count(n) > 1:
            raise InputError(f"{n!r}: molecule of set {name} given twice; give each once")
    out = []
    for n in chosen:
        entry = g2_1.data[n]  # the same geometries as ase.collections.g2 (tests/test_bench.py), read 5× faster
        where = f"{name}:{n}"
        spin = _spin_from_moments(entry.get("magmoms"), where)
        symbols = tuple(g2_1.string2symbols(entry["symbols"]))
        structure = Structure(where, 0, symbols, tuple(tuple(float(x) for x in p) for p in entry["positions"]),
                              0, spin, False)
        validate_charge_spin(where, structure.electrons, 0, spin)
        # Curtiss et al. 1991 via ASE: experimental D0 + ZPE (kcal/mol)
        out.append(BenchStructure(n, structure, float(g2_1.get_atomization_energy(n))))
    return tuple(out)


def file_structures(paths: Sequence[str]) -> tuple[BenchStructure, ...]:
    """Structures from files (``structures.read_structures``; every frame, named "PATH" or
    "PATH@FRAME"). No experimental value. A periodic structure is an InputError: the bench
    computes molecules. A file given twice (under any spelling of its path) is an InputError:
    each structure is computed once, and a repeat would count it twice in every mean."""
    from stobuilder.model.structures import check_geometry, read_structures

    seen: dict[str, str] = {}
    for path in paths:
        real = os.path.realpath(path)
        if real in seen:
            same = "" if seen[real] == path else f" (as {one_line(seen[real])})"
            raise InputError(f"{one_line(path)}: structure file given twice{same}; give each once")
        seen[real] = path
    out = []
    for path in paths:
        frames = read_structures(path)
        for frame in frames:
            label = path if len(frames) == 1 else f"{path}@{frame.frame}"
            if frame.periodic:
                raise InputError(f"{label}: a periodic structure; the bench computes molecules")
            check_geometry(frame)
            out.append(BenchStructure(label, frame))
    return tuple(out)


def select_structures(arguments: Sequence[str], set_name: str | None) -> tuple[BenchStructure, ...]:
    """The structures of the command line: with a set, ``arguments`` name molecules of it (none:
    the whole set); without, they are structure files."""
    if set_name is not None:
        return set_structures(set_name, arguments)
    if not arguments:
        raise InputError("no structures: give structure files or --set NAME (stobuilder bench --list-sets)")
    return file_structures(arguments)


# ---------------------------------------------------------------------------- variants


@dataclass(frozen=True)
class Variant:
    """One exponent choice: the build options it makes, and the zeta file on top of its rule."""

    options: BuildOptions
    zeta_file: str | None = None

    @property
    def rule(self) -> str:
        return self.options.basis.rule

    @property
    def gaussians(self) -> int:
        return self.options.basis.gaussians

    @property
    def norm(self) -> str:
        return self.options.basis.norm

    @property
    def label(self) -> str:
        base = f"{self.rule} N={self.gaussians} {self.norm}"
        return base if self.zeta_file is None else f"{base} +{os.path.basename(self.zeta_file)}"

    def to_json(self) -> dict:
        return {"label": self.label, "rule": self.rule, "gaussians": self.gaussians, "norm": self.norm,
                "zeta_file": self.zeta_file, "options": self.options.to_json()}


def make_variants(rules: Sequence[str], gaussians: Sequence[int], norms: Sequence[str],
                  zeta_files: Sequence[str] = ()) -> tuple[Variant, ...]:
    """The product rule × N × norm (repeats dropped), then the same product once more for each zeta
    file, its ζ on top of each rule. Every variant is validated (``BuildOptions``); a zeta file is
    read now."""
    from stobuilder.core.defaults import DEFAULTS
    from stobuilder.builder.spec import ZetaTable

    rules, gaussians, norms = (list(dict.fromkeys(x)) for x in (rules or [DEFAULTS["rule"]], gaussians or [DEFAULTS["gaussians"]],
                                                                 norms or [DEFAULTS["norm"]]))
    out = [Variant(BuildOptions(rule=r, gaussians=n, norm=f)) for r, n, f in product(rules, gaussians, norms)]
    for path in dict.fromkeys(zeta_files):
        library = ZetaTable.load(path)  # read once: the library of every variant of this file
        out += [Variant(BuildOptions(rule=r, gaussians=n, norm=f, zeta_file=path, zeta_library=library), path)
                for r, n, f in product(rules, gaussians, norms)]
    labels = [v.label for v in out]
    for a in set(labels):
        if labels.count(a) > 1:
            raise InputError(f"--zeta-file: two files named {a.rsplit('+', 1)[-1]!r} would give the same variant; rename one")
    return tuple(out)


# ---------------------------------------------------------------------------- calculations


@dataclass(frozen=True)
class BenchTask:
    """One SCF calculation of a bench.

    key        unique within the bench: "molecule|VARIANT|NAME", "atom|VARIANT|SYMBOL", with
               VARIANT the variant's label or "reference:BASIS"
    kind       "molecule" or "atom"
    structure  the molecule, or the free atom at the origin in its ground state's 2S
    options    the variant's options, or None for the reference basis ``reference``
    """

    key: str
    kind: str
    structure: Structure
    options: BuildOptions | None = None
    reference: str | None = None
    threads: int = 1

    def fingerprint(self) -> str:
        """SHA-256 of everything the result depends on (a resumed record must match it)."""
        from stobuilder.core.version import __version__

        options = None
        if self.options is not None:  # a zeta file's ζ of elements not in this structure do not count: the
            # ζ its basis takes (library and own ζ merged) stand for both, so resumed records keep their fingerprint
            options = self.options.to_json() | {"zeta": self.options.spec_for(self.structure.symbols).zeta.as_dict(),
                                                "zeta_library": {}}
        doc = {"layout": TASK_LAYOUT, "stobuilder": __version__, "kind": self.kind,
               "symbols": list(self.structure.symbols), "positions": [list(p) for p in self.structure.positions],
               "charge": self.structure.charge, "spin": self.structure.spin,
               "options": options, "reference": self.reference}
        return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()


@dataclass(frozen=True)
class Calculation:
    """The result of one BenchTask: method, energy (hartree; the last one where the SCF did not
    converge, None where it raised), iterations, wall time (s), and the error of a failure."""

    key: str
    method: str
    energy_hartree: float | None
    converged: bool
    iterations: int
    wall_seconds: float
    error: str | None = None
    worker: str = ""

    @property
    def ok(self) -> bool:
        return self.converged and self.error is None and self.energy_hartree is not None

    def to_json(self) -> dict:
        return {"method": self.method, "energy_hartree": self.energy_hartree, "converged": self.converged,
                "iterations": self.iterations, "wall_seconds": self.wall_seconds, "error": self.error,
                "worker": self.worker}

    @classmethod
    def from_json(cls, key: str, doc: Mapping) -> "Calculation":
        energy = doc["energy_hartree"]
        return cls(key, doc["method"], None if energy is None else float(energy), doc["converged"], doc["iterations"],
                   float(doc["wall_seconds"]), doc.get("error"), doc.get("worker", ""))


def free_atom(symbol: str) -> Structure:
    """The neutral free atom of ``symbol`` at the origin in its ground state's 2S
    (``elements.ground_state``: Hund's rule)."""
    from stobuilder.model.elements import ground_state

    return Structure(f"free atom {symbol}", 0, (symbol,), ((0.0, 0.0, 0.0),), 0, ground_state(symbol).unpaired, False)


def _basis(structure: Structure, options: BuildOptions):
    """The basis of ``structure`` (``pipeline.basis_for``: the one memoised constructor)."""
    from stobuilder.pipeline.path import basis_for

    return basis_for((structure,), options)


def _energy(mf) -> float | None:
    e = float(mf.e_tot)
    return e if math.isfinite(e) else None


def _compute(task: BenchTask) -> tuple[str, float | None, bool, int]:
    from stobuilder.checks.structure import check_free_atom
    from stobuilder.model.elements import ground_state
    from stobuilder.model.methods import pick_method
    from stobuilder.scf.free_atom import free_atom_setup
    from stobuilder.scf.mole import make_mole, structure_mole
    from stobuilder.scf.run import solve_scf

    s = task.structure
    if task.kind == "atom":
        (symbol,) = s.symbols
        if task.options is not None:  # the free atom of checks.check_free_atom, in the variant's basis
            r = check_free_atom(_basis(s, task.options), symbol, "auto", reference=False)
            energy = r.energy_hartree if math.isfinite(r.energy_hartree) else None
            return r.method, energy, r.converged, r.iterations
        conf = ground_state(symbol)
        method = pick_method("auto", conf.unpaired, f"(free atom {symbol})")
        mol, configure = free_atom_setup(symbol, conf, task.reference, method)
        mf, iterations = solve_scf(mol, method, configure=configure)
        return method, _energy(mf), bool(mf.converged), iterations
    method = pick_method("auto", s.spin, f"({s.formula})")
    if task.options is not None:
        mol = structure_mole(s, _basis(s, task.options))
    else:
        mol = make_mole(list(zip(s.symbols, s.positions)), task.reference, s.charge, s.spin)
    mf, iterations = solve_scf(mol, method)
    return method, _energy(mf), bool(mf.converged), iterations


def run_calculation(task: BenchTask) -> Calculation:
    """The worker function of the bench (top level, picklable, writes nothing, never raises for a
    failed SCF: the failure is in ``Calculation.error``)."""
    start = time.perf_counter()
    worker = f"{socket.gethostname()}:{os.getpid()}"
    try:
        from pyscf import lib

        with lib.with_omp_threads(task.threads):
            method, energy, converged, iterations = _compute(task)
        error = None if converged else "SCF not converged"
        if energy is None:
            converged, error = False, "the SCF energy is not finite"
    except Exception as exc:  # one failed calculation must not stop the bench
        method, energy, converged, iterations = "", None, False, 0
        error = f"{type(exc).__name__}: {' '.join(str(exc).split())}"
    return Calculation(task.key, method, energy, converged, iterations, round(time.perf_counter() - start, 4),
                       error, worker)


def _failure(task: BenchTask, exc: BaseException) -> Calculation:
    reason = " ".join(str(exc).split()) or type(exc).__name__
    return Calculation(task.key, "", None, False, 0, 0.0, f"the worker failed ({type(exc).__name__}: {reason})")


# ---------------------------------------------------------------------------- the plan


@dataclass(frozen=True)
class BenchPlan:
    """Every calculation of a bench, checked before any runs."""

    structures: tuple[BenchStructure, ...]
    variants: tuple[Variant, ...]
    reference: str | None
    tasks: tuple[BenchTask, ...]


def _variant_name(variant: Variant | None, reference: str | None) -> str:
    return variant.label if variant is not None else f"reference:{reference}"


def molecule_key(variant: Variant | None, name: str, reference: str | None = None) -> str:
    return f"molecule|{_variant_name(variant, reference)}|{name}"


def atom_key(variant: Variant | None, symbol: str, reference: str | None = None) -> str:
    return f"atom|{_variant_name(variant, reference)}|{symbol}"


def check_reference(reference: str, elements: Sequence[str]) -> str:
    """``reference`` when PySCF stores that basis for every element (``pyscf.gto.basis.load``);
    InputError naming the basis and the first element it lacks otherwise."""
    from pyscf.gto import basis as pyscf_basis

    if not isinstance(reference, str) or not reference.strip():
        raise InputError("--reference: give the name of a basis PySCF stores, e.g. cc-pvtz")
    for symbol in elements:
        try:
            with warnings.catch_warnings():  # PySCF's hint at another package for unknown names
                warnings.simplefilter("ignore")
                found = pyscf_basis.load(reference, symbol)
        except Exception:
            found = None
        if not found:
            raise InputError(f"--reference {reference}: PySCF stores no such basis for {symbol}")
    return reference


def plan(structures: Sequence[BenchStructure], variants: Sequence[Variant], reference: str | None = None,
         threads: int = 1) -> BenchPlan:
    """The calculations of a bench, every input checked first (InputError, before any SCF): two
    structures with one name, a reference basis PySCF lacks for an element, a variant whose basis
    cannot be built for an element (every basis is built here, which is cheap), a zeta file that
    names none of the structures' elements (its variant would repeat its rule's numbers; the rule
    of every door, ``pipeline.check_zeta_elements``), a molecule whose electrons do not fit its
    basis or whose SCF would not fit in memory, in a variant (``pipeline.check_electrons``) or in
    the reference basis (``scf.check_mole_size``). A zeta file is a library: its ζ apply to the
    elements it names wherever they occur, the rest of it is unused."""
    from stobuilder.model.elements import atomic_number
    from stobuilder.model.methods import pick_method
    from stobuilder.pipeline.path import basis_for, check_electrons, check_zeta_elements
    from stobuilder.scf.mole import make_mole
    from stobuilder.scf.size import check_mole_size

    if not structures:
        raise InputError("no structures: give structure files or --set NAME")
    if not variants:
        raise InputError("no variants: give --rule, --gaussians, --norm")
    names = [b.name for b in structures]
    for n in names:
        if names.count(n) > 1:
            raise InputError(f"{n}: given twice")
    elements = tuple(sorted({s for b in structures for s in b.structure.symbols}, key=atomic_number))
    if reference is not None:
        reference = check_reference(reference, elements)
    for v in variants:
        check_zeta_elements(v.options, [b.structure for b in structures])
    tasks: list[BenchTask] = []
    for v in variants:
        for b in structures:  # a bad variant or a molecule too big for memory fails here, before any SCF
            check_electrons(b.structure, basis_for((b.structure,), v.options), "auto")
        for symbol in elements:
            tasks.append(BenchTask(atom_key(v, symbol), "atom", free_atom(symbol), v.options, None, threads))
        for b in structures:
            tasks.append(BenchTask(molecule_key(v, b.name), "molecule", b.structure, v.options, None, threads))
    if reference is not None:
        for b in structures:
            s = b.structure
            mol = make_mole(list(zip(s.symbols, s.positions)), reference, s.charge, s.spin)
            check_mole_size(mol, pick_method("auto", s.spin, f"({s.formula})"), f"{b.name} in {reference}")
        for symbol in elements:
            tasks.append(BenchTask(atom_key(None, symbol, reference), "atom", free_atom(symbol), None, reference, threads))
        for b in structures:
            tasks.append(BenchTask(molecule_key(None, b.name, reference), "molecule", b.structure, None, reference, threads))
    return BenchPlan(tuple(structures), tuple(variants), reference, tuple(tasks))


# ---------------------------------------------------------------------------- rows and summary


ROW_FIELDS = ("structure", "formula", "variant", "rule", "gaussians", "norm", "zeta_file", "spin", "energy_hartree",
              "converged", "atomization_kcal_mol", "experiment_atomization_kcal_mol", "reference_energy_hartree",
              "wall_seconds")


@dataclass(frozen=True)
class BenchRow:
    """One structure in one variant. Energies in hartree, atomization energies in kcal/mol (None
    where a calculation it needs failed, or the set has no experiment / no reference was asked)."""

    structure: str
    formula: str
    variant: str
    rule: str
    gaussians: int
    norm: str
    zeta_file: str | None
    spin: int
    method: str
    energy_hartree: float | None
    converged: bool
    iterations: int
    wall_seconds: float
    atomization_kcal_mol: float | None
    experiment_atomization_kcal_mol: float | None
    reference_energy_hartree: float | None
    reference_atomization_kcal_mol: float | None
    error: str | None = None

    @property
    def failed(self) -> bool:
        return self.error is not None

    @property
    def energy_above_reference_hartree(self) -> float | None:
        if self.failed or self.energy_hartree is None or self.reference_energy_hartree is None:
            return None
        return self.energy_hartree - self.reference_energy_hartree

    @property
    def atomization_error_kcal_mol(self) -> float | None:
        if self.atomization_kcal_mol is None or self.experiment_atomization_kcal_mol is None:
            return None
        return self.atomization_kcal_mol - self.experiment_atomization_kcal_mol

    def to_json(self) -> dict:
        """The row of ``--json`` and bench.json: exactly ROW_FIELDS."""
        return {name: getattr(self, name) for name in ROW_FIELDS}


@dataclass(frozen=True)
class VariantSummary:
    """One variant over the structures: counts, and means over the rows that have the quantity."""

    variant: str
    structures: int
    failed: int
    mean_abs_atomization_error_kcal_mol: float | None
    max_abs_atomization_error_kcal_mol: float | None
    mean_energy_above_reference_hartree: float | None
    mean_abs_atomization_vs_reference_kcal_mol: float | None

    def to_json(self) -> dict:
        return dict(self.__dict__)


ATOM_FIELDS = ("variant", "element", "spin", "method", "energy_hartree", "converged", "iterations", "error")


@dataclass(frozen=True)
class FreeAtomRow:
    """One free atom in one variant (or in the reference basis: variant "reference:BASIS"): the
    neutral ground-state atom whose energy (hartree) enters every atomization energy with that
    element, Σ E(atoms) − E(molecule). ``spin`` is 2S (Hund's rule)."""

    variant: str
    element: str
    spin: int
    method: str
    energy_hartree: float | None
    converged: bool
    iterations: int
    error: str | None = None

    def to_json(self) -> dict:
        return {name: getattr(self, name) for name in ATOM_FIELDS}


def assemble_atoms(plan: "BenchPlan", results: Mapping[str, Calculation]) -> tuple[FreeAtomRow, ...]:
    """The free atoms behind the atomization energies: per variant (then the reference basis)
    per element by atomic number (a pure function of the results)."""
    out = []
    for v in [*plan.variants, *([None] if plan.reference is not None else [])]:
        name = _variant_name(v, plan.reference)
        for symbol in plan_elements(plan):
            c = results.get(atom_key(v, symbol, plan.reference))
            out.append(FreeAtomRow(name, symbol, free_atom(symbol).spin, c.method if c else "",
                                   c.energy_hartree if c and c.ok else None, bool(c and c.ok),
                                   c.iterations if c else 0, None if c and c.ok else (c.error if c else "not computed")))
    return tuple(out)


def _mean(values) -> float | None:
    values = [v for v in values if v is not None]
    return sum(values) / len(values) if values else None


def _atomization(molecule: Calculation | None, atoms: Mapping[str, Calculation], symbols) -> float | None:
    if molecule is None or not molecule.ok:
        return None
    total = 0.0
    for s in symbols:
        a = atoms.get(s)
        if a is None or not a.ok:
            return None
        total += a.energy_hartree
    return (total - molecule.energy_hartree) * hartree_to_kcal_mol()


def _failure_text(molecule: Calculation | None, atoms: Mapping[str, Calculation], symbols) -> str | None:
    if molecule is None:
        return "not computed"
    if not molecule.ok:
        return molecule.error or "SCF failed"
    bad = sorted({s for s in symbols if s in atoms and not atoms[s].ok})
    if bad:
        return f"free atom {', '.join(bad)}: {atoms[bad[0]].error or 'SCF failed'}"
    return None


def plan_elements(plan: BenchPlan) -> tuple[str, ...]:
    """The elements of the plan's structures, by atomic number."""
    from stobuilder.model.elements import atomic_number

    return tuple(sorted({s for b in plan.structures for s in b.structure.symbols}, key=atomic_number))


def _atoms_of(variant: Variant | None, plan: BenchPlan, results: Mapping[str, Calculation]) -> dict[str, Calculation]:
    """{symbol: the free atom's Calculation} of a variant (None: the reference basis), by key."""
    keys = {symbol: atom_key(variant, symbol, plan.reference) for symbol in plan_elements(plan)}
    return {symbol: results[k] for symbol, k in keys.items() if k in results}


def assemble(plan: BenchPlan, results: Mapping[str, Calculation]) -> tuple[BenchRow, ...]:
    """The rows, structures within variants in the order given (a pure function of the results)."""
    ref = plan.reference
    ref_atoms = {}
    if ref is not None:
        ref_atoms = _atoms_of(None, plan, results)
    rows = []
    for v in plan.variants:
        atoms = _atoms_of(v, plan, results)
        for b in plan.structures:
            s = b.structure
            mol = results.get(molecule_key(v, b.name))
            ref_mol = results.get(molecule_key(None, b.name, ref)) if ref is not None else None
            rows.append(BenchRow(
                structure=b.name, formula=s.formula, variant=v.label, rule=v.rule, gaussians=v.gaussians, norm=v.norm,
                zeta_file=v.zeta_file, spin=s.spin, method=mol.method if mol else "",
                energy_hartree=mol.energy_hartree if mol else None, converged=bool(mol and mol.ok),
                iterations=mol.iterations if mol else 0, wall_seconds=mol.wall_seconds if mol else 0.0,
                atomization_kcal_mol=_atomization(mol, atoms, s.symbols),
                experiment_atomization_kcal_mol=b.experiment_kcal_mol,
                reference_energy_hartree=ref_mol.energy_hartree if ref_mol is not None and ref_mol.ok else None,
                reference_atomization_kcal_mol=_atomization(ref_mol, ref_atoms, s.symbols) if ref is not None else None,
                error=_failure_text(mol, atoms, s.symbols),
            ))
    return tuple(rows)


def summarize(variants: Sequence[Variant], rows: Sequence[BenchRow]) -> tuple[VariantSummary, ...]:
    """One VariantSummary per variant (a pure function of the rows)."""
    out = []
    for v in variants:
        mine = [r for r in rows if r.variant == v.label]
        errors = [r.atomization_error_kcal_mol for r in mine if r.atomization_error_kcal_mol is not None]
        vs_ref = [abs(r.atomization_kcal_mol - r.reference_atomization_kcal_mol) for r in mine
                  if r.atomization_kcal_mol is not None and r.reference_atomization_kcal_mol is not None]
        out.append(VariantSummary(
            v.label, len(mine), sum(r.failed for r in mine),
            _mean(abs(e) for e in errors), max((abs(e) for e in errors), default=None),
            _mean(r.energy_above_reference_hartree for r in mine), _mean(vs_ref),
        ))
    return tuple(out)


# ---------------------------------------------------------------------------- running


@dataclass(frozen=True)
class BenchResult:
    """A finished bench: its plan, rows, summary, free atoms, files written (name → path), the
    calculations computed in this run and those taken from the manifest, the failed
    calculations, notes."""

    plan: BenchPlan
    rows: tuple[BenchRow, ...]
    summary: tuple[VariantSummary, ...]
    atoms: tuple[FreeAtomRow, ...]
    files: Mapping[str, str]
    computed: int
    resumed: int
    failed: tuple[str, ...]
    seconds: float
    notes: tuple[str, ...] = field(default=())

    @property
    def exit_status(self) -> int:
        """0 when every row has its numbers, 1 when any calculation failed."""
        return 1 if self.failed or any(r.failed for r in self.rows) else 0

    def to_json(self) -> dict:
        return bench_document(self.plan, self.rows, self.summary, self.atoms, self.files)


def bench_document(plan: BenchPlan, rows, summary, atoms, files: Mapping[str, str]) -> dict:
    """The JSON of ``--json`` and bench.json: {"variants", "rows", "summary", "free_atoms",
    "hartree_to_kcal_mol", "files"}. With the free atoms' energies and the factor, every
    atomization energy of the rows can be recomputed: (Σ E(atoms) − E(molecule)) × factor."""
    return {"variants": [v.to_json() for v in plan.variants], "rows": [r.to_json() for r in rows],
            "summary": [s.to_json() for s in summary], "free_atoms": [a.to_json() for a in atoms],
            "hartree_to_kcal_mol": hartree_to_kcal_mol(), "files": dict(files)}


@lru_cache(maxsize=1)
def _layouts():
    """The bench manifest record (jobs.manifest.layout_problem's form): task, fingerprint, status, the
    Calculation's fields with their types and ranges, the time it finished."""
    from stobuilder.jobs.manifest import is_count, is_finite, is_seconds, is_sha256, is_text, layout_problem, one_of, optional

    result = {
        "method": (is_text, "a text", True),
        "energy_hartree": (optional(is_finite), "a finite number or null", True),
        "converged": (lambda v: isinstance(v, bool), "true or false", True),
        "iterations": (is_count, "a whole number >= 0", True),
        "wall_seconds": (is_seconds, "a finite number >= 0", True),
        "error": (optional(is_text), "a text or null", True),
        "worker": (is_text, "a text", True),
    }
    record = {
        "task": (is_text, "a text", True),
        "fingerprint": (is_sha256, "a SHA-256 (64 hex digits)", True),
        "status": (one_of("done", "failed"), "done or failed", True),
        "result": (result, "", True),
        "finished_utc": (is_text, "a text", True),
    }
    return record, layout_problem


def _record_problem(record) -> str | None:
    """Why a decoded bench manifest line is not a record this version can use, or None: every
    field of its layout (``_layouts``) checked, and the status must match the result (done
    exactly when the calculation converged with a finite energy and no error)."""
    layout, layout_problem = _layouts()
    problem = layout_problem(record, layout)
    if problem:
        return problem
    calc = Calculation.from_json(record["task"], record["result"])
    if (record["status"] == "done") != calc.ok:
        return f"status {record['status']} does not match its result"
    return None


def _record(task: BenchTask, calc: Calculation) -> dict:
    from stobuilder.jobs.manifest import utc_now

    return {"task": task.key, "fingerprint": task.fingerprint(), "status": "done" if calc.ok else "failed",
            "result": calc.to_json(), "finished_utc": utc_now()}


def run_bench(
    plan: BenchPlan,
    out_dir: str,
    executor=None,
    workers: int | None = None,
    force: bool = False,
    progress=None,
) -> BenchResult:
    """Run a bench planned by ``plan`` into ``out_dir`` through the job engine
    (``jobs.run_tasks``): calculations the manifest ``MANIFEST_NAME`` records as done with the
    same fingerprint are taken from it, the rest computed (``executor``: any concurrent.futures
    Executor such as a Dask client's; else a local pool of ``workers`` processes), each recorded
    (appended, fsynced) as it ends. Then the outputs (``OUTPUT_NAMES``) are written all or none.
    ``force`` recomputes everything and starts a fresh manifest (the old one kept as a backup)."""
    from stobuilder.bench.report import render_outputs
    from stobuilder.core.files import check_targets, write_all
    from stobuilder.jobs.executors import run_tasks
    from stobuilder.jobs.manifest import Manifest, prepare_out_dir, read_manifest
    from stobuilder.jobs.progress import NoProgress

    start = time.perf_counter()
    prepare_out_dir(out_dir, force, MANIFEST_NAME, "bench")
    check_targets({os.path.join(out_dir, base): "" for base in OUTPUT_NAMES.values()}, force=True)  # before any SCF
    path = os.path.join(out_dir, MANIFEST_NAME)
    manifest = Manifest(path, fresh=force, what="bench")
    notes = list(manifest.notes)
    progress = progress or NoProgress()
    results: dict[str, Calculation] = {}
    computed = resumed = 0
    try:
        previous = {} if force else read_manifest(path, notes, key="task", problem=_record_problem)
        todo = []
        for task in plan.tasks:
            record = previous.get(task.key)
            if record and record["status"] == "done" and record["fingerprint"] == task.fingerprint():
                results[task.key] = Calculation.from_json(task.key, record["result"])
                resumed += 1
                progress.update("skipped")
            else:
                todo.append(task)
        by_key = {t.key: t for t in todo}

        def finish(calc: Calculation) -> None:
            nonlocal computed
            manifest.append([_record(by_key[calc.key], calc)])
            results[calc.key] = calc
            computed += 1
            progress.update("done" if calc.ok else "failed")

        run_tasks(todo, run_calculation, finish, _failure, executor=executor, workers=workers)
    finally:
        manifest.close()
        progress.close()
    rows = assemble(plan, results)
    summary = summarize(plan.variants, rows)
    atoms = assemble_atoms(plan, results)
    files = {name: os.path.join(out_dir, base) for name, base in OUTPUT_NAMES.items()}
    contents = render_outputs(plan, rows, summary, atoms, files,
                              lambda written: bench_document(plan, rows, summary, atoms, written))
    write_all(contents)
    files = {name: p for name, p in files.items() if p in contents}
    failed = tuple(sorted(k for k, c in results.items() if not c.ok))
    return BenchResult(plan, rows, summary, atoms, files, computed, resumed, failed, time.perf_counter() - start,
                       tuple(notes))


def summary_table(result: BenchResult) -> str:
    """The text the command prints: the summary per variant, the failures, the files, the counts."""

    def num(value, digits):
        return "-" if value is None else f"{value:.{digits}f}"

    width = max([len("variant")] + [len(one_line(s.variant)) for s in result.summary]) + 2
    lines = [f"{'variant':<{width}}{'structures':>11}{'failed':>8}{'MAE vs exp':>12}{'max |err|':>11}"
             f"{'E-E(ref)':>12}{'MAE vs ref':>12}", f"{'':<{width}}{'':>11}{'':>8}{'kcal/mol':>12}{'kcal/mol':>11}"
             f"{'hartree':>12}{'kcal/mol':>12}"]
    for s in result.summary:
        lines.append(f"{one_line(s.variant):<{width}}{s.structures:>11}{s.failed:>8}"
                     f"{num(s.mean_abs_atomization_error_kcal_mol, 2):>12}{num(s.max_abs_atomization_error_kcal_mol, 2):>11}"
                     f"{num(s.mean_energy_above_reference_hartree, 6):>12}"
                     f"{num(s.mean_abs_atomization_vs_reference_kcal_mol, 2):>12}")
    for r in result.rows:
        if r.failed:
            lines.append(f"failed: {one_line(r.structure)} ({one_line(r.variant)}): {one_line(r.error)}")
    for path in result.files.values():
        lines.append(f"wrote {one_line(path)}")
    lines.append(f"{len(result.plan.tasks)} calculations: {result.computed} computed, {result.resumed} taken from the "
                 f"manifest, {len(result.failed)} failed; {result.seconds:.1f} s")
    return "\n".join(lines)


__all__ = ["BenchPlan", "BenchResult", "BenchRow", "BenchSet", "BenchStructure", "BenchTask", "Calculation", "FreeAtomRow",
           "MANIFEST_NAME", "OUTPUT_NAMES", "ROW_FIELDS", "SETS", "Variant", "VariantSummary", "assemble",
           "assemble_atoms", "bench_document", "check_reference", "file_structures", "free_atom", "hartree_to_kcal_mol", "list_sets",
           "make_variants", "plan", "run_bench", "run_calculation", "select_structures", "set_structures", "summarize",
           "summary_table"]
