"""STO exponents tuned in molecules: ζ that minimise the SCF energy of a training set.

The procedure of the published molecular exponents (Hehre, Stewart & Pople, J. Chem. Phys. 51,
2657, 1969: SCF energies of small molecules minimised over ζ), for any training set:

    objective(ζ) = Σ_s w_s E_s(ζ)       E_s the SCF energy (hartree) of structure s at its given
                                        geometry, with the method and 2S ``build --check`` uses

over the free ζ (``Variable``: one ζ per element and group of subshells, ``C:2s,2p``); every
other ζ keeps its start value (the rule's, or the options' own ζ). The weights are scaled to
mean 1 over the training structures once, where they come in (``_normalised``): a common factor
of the weights is no choice of the user's, and with it gone every stopping test (the absolute
gradient test, L-BFGS-B's change-of-objective test) and every printed number is independent of
it, while unit weights (the default) stay 1 (a sum of 1 would loosen the gradient test n-fold
for n structures). The search runs in x = ln ζ with scipy's bounded
quasi-Newton method (L-BFGS-B), each ζ kept within a factor ``BOUND_FACTOR`` of where the round
starts; a ζ that ends held by such a bound starts a new round with the range re-centred on it
(``limits``' [ZETA_MIN, ZETA_MAX] is the outer limit). A ζ still held by a bound at the end (a
global limit, or the iterations ran out) is reported (``at_bounds``) and the result is not
converged: converged means the full gradient, not the part the bounds let through, met the
test. Gradients by central differences in ln ζ (``STEP``, justified there).
Each SCF starts from the previous density of the same structure: changing ζ rescales the
exponents but keeps the number and order of the basis functions, so that density is a close
guess. Only the structures holding a variable's element are recomputed for its derivative.

The result (``TuneResult``) writes a zeta file (``toml_text``) that ``build --zeta-file`` reads
unchanged: the tuned ζ and the ζ the options held fixed (their zeta library and own ζ,
``fixed_zeta``), so the file alone reproduces the energies it reports. An SCF that does not converge at the start point is an InputError; one that stops
converging during the search ends the search at the best point so far (``converged`` False).
"""

from __future__ import annotations

import logging
import math
import os
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np

from stobuilder.core.errors import InputError
from stobuilder.core.limits import ZETA_MAX, ZETA_MIN
from stobuilder.builder.spec import ZetaTable
from stobuilder.pipeline.options import BuildOptions

__all__ = ["EnergyRow", "TuneResult", "Variable", "default_variables", "energy_gradient", "load_weights", "parse_vary",
           "tune"]

log = logging.getLogger(__name__)

# Central differences in x = ln ζ. The truncation error of the derivative is h²/6·E''' and the
# noise is about δE/h, where δE is the SCF energy error. E(x) of one shell behaves as
# T e^{2x} − |V| e^{x} (kinetic and potential parts of that shell), so |E'''| ≲ 8 T: a few
# hartree for a valence shell, up to ~500 hartree for the 1s of a second-row atom (T ≈ ζ²,
# ζ(O 1s) = 7.66; common practice, no source). With h = 1e-4 the truncation is ≲ 1e-6 hartree
# even there and ≲ 1e-8 for valence shells, and with SCF_CONV_TOL = 1e-11 hartree the noise
# is ≲ 1e-7 hartree; both are far below GRADIENT_TOL. (tests/test_tune.py checks the sum of
# the derivatives against the exact scaling identity of the molecular virial theorem; with
# h = 1e-3 the 1s terms were off by h²/6·E''' ≈ 7e-5 hartree, as this estimate says.)
STEP = 1e-4
SCF_CONV_TOL = 1e-11
# The search stops when the largest projected |dE/d ln ζ| is below this (hartree): at a
# curvature of ≳ 0.1 hartree that is ≲ 1e-4 in ln ζ.
GRADIENT_TOL = 1e-5
MAX_ITERATIONS = 100  # over all rounds of the search
BOUND_FACTOR = 2.0  # in one round ζ stays within [ζ₀ / 2, 2 ζ₀], ζ₀ its value at the round's start
MAX_ROUNDS = 64  # re-centred rounds: 2^20 > ZETA_MAX / ZETA_MIN, so ~20 per direction reach a limit
DIGITS = 6  # decimals of ζ (bohr⁻¹) in the result


# ---------------------------------------------------------------------------- the free ζ


@dataclass(frozen=True)
class Variable:
    """One free ζ: the element and the subshells that share it (e.g. C, ("2s", "2p"))."""

    element: str
    subshells: tuple[str, ...]

    @property
    def label(self) -> str:
        return f"{self.element}:{','.join(self.subshells)}"


def parse_vary(items: Sequence[str]) -> tuple[Variable, ...]:
    """``--vary`` items ("C:2s,2p", "H:1s") as Variables; a subshell may be free only once."""
    from stobuilder.model.elements import L_LETTERS, normalise_symbol, parse_subshell_label

    out: list[Variable] = []
    seen: dict[tuple[str, str], str] = {}
    for item in [items] if isinstance(items, str) else items:
        text = str(item)
        if ":" not in text:
            raise InputError(f"--vary {text!r}: expected ELEMENT:SUBSHELL[,SUBSHELL...], e.g. C:2s,2p")
        sym, rest = text.split(":", 1)
        try:
            symbol = normalise_symbol(sym.strip())
        except InputError as err:
            raise InputError(f"--vary {text!r}: {err}") from None
        labels = []
        for part in rest.split(","):
            try:
                n, l = parse_subshell_label(part.strip())
            except InputError as err:
                raise InputError(f"--vary {text!r}: {err}") from None
            label = f"{n}{L_LETTERS[l]}"
            if (symbol, label) in seen:
                raise InputError(f"--vary {text!r}: {symbol} {label} is already free in --vary {seen[symbol, label]!r}")
            seen[symbol, label] = text
            labels.append(label)
        out.append(Variable(symbol, tuple(labels)))
    return tuple(out)


def _d_block(z: int) -> bool:
    return 21 <= z <= 30 or 39 <= z <= 48 or 71 <= z <= 80 or z in (57, 89)


def default_variables(basis) -> tuple[Variable, ...]:
    """The valence shell of every element of ``basis``: the s and p subshells of the highest n
    share one ζ, and a d subshell of n − 1 of a d-block element has one of its own."""
    out = []
    for element in basis.elements:
        labels = [s.label for s in element.stos]
        if not labels:
            continue
        top = max(s.n for s in element.stos)
        out.append(Variable(element.symbol, tuple(s.label for s in element.stos if s.n == top and s.l <= 1)))
        d = [s.label for s in element.stos if s.l == 2 and s.n == top - 1]
        if d and _d_block(element.z):
            out.append(Variable(element.symbol, tuple(d)))
    return tuple(out)


# ---------------------------------------------------------------------------- weights


def load_weights(path, structures: Sequence[str]) -> tuple[float, ...]:
    """The weight of each training structure from a TOML file of ``structure = weight``: a key is
    a structure as given, its file name, or its name without extension (e.g. ``water = 2``);
    structures not named weigh 1. Every key must name a training structure and every weight
    be a positive finite number."""
    from stobuilder.core.files import read_toml

    doc, where = read_toml(path, "weights file")
    if not doc:
        raise InputError(f"{where}: no weights in it (expected lines such as water = 2.0)")
    return _mapped_weights(doc, structures, where)


def _mapped_weights(doc: Mapping, structures: Sequence[str], where: str) -> tuple[float, ...]:
    """The weights of {structure: weight} (a key: the structure as given, its file name, or that
    name without extension), 1 for structures not named; ``where`` names the source in errors."""
    from stobuilder.pipeline.naming import structure_name

    weights = [None] * len(structures)
    names = [{s, os.path.basename(s), structure_name(os.path.basename(s))} for s in structures]
    for key, value in doc.items():
        w = _weight(value, f"{where}: {key}")
        hits = [i for i, n in enumerate(names) if key in n]
        if not hits:
            raise InputError(f"{where}: {key!r} names no training structure")
        for i in hits:
            if weights[i] is not None:
                raise InputError(f"{where}: {structures[i]} is given a weight twice")
            weights[i] = w
    return tuple(1.0 if w is None else w for w in weights)


# ---------------------------------------------------------------------------- the result


@dataclass(frozen=True)
class EnergyRow:
    """One structure's SCF energy (hartree) at the start ζ and at the tuned ζ (None: no
    converged SCF)."""

    structure: str
    method: str
    weight: float
    start_hartree: float | None
    final_hartree: float | None

    def to_json(self) -> dict:
        return {"structure": self.structure, "weight": self.weight, "start_hartree": self.start_hartree,
                "final_hartree": self.final_hartree}


@dataclass(frozen=True)
class TuneResult:
    """What ``tune`` found.

    variables       the free ζ
    start, final    their values (bohr⁻¹) at the start and at the end (rounded to DIGITS)
    energies        the training structures (the objective is Σ weight · energy, the weights
                    scaled to mean 1)
    validation      the held-out structures (the tuned ζ need not lower their energies)
    iterations      quasi-Newton iterations (all rounds); scf_count the SCF calculations made
    converged       the full gradient met its test (no ζ held by a bound) and every SCF converged
    message         why the search stopped
    at_bounds       the labels of the variables held by a bound of the search (not converged)
    """

    variables: tuple[Variable, ...]
    start: tuple[float, ...]
    final: tuple[float, ...]
    options: BuildOptions
    energies: tuple[EnergyRow, ...]
    validation: tuple[EnergyRow, ...]
    iterations: int
    scf_count: int
    converged: bool
    message: str
    wall_seconds: float
    at_bounds: tuple[str, ...] = ()

    @staticmethod
    def _table(variables, values) -> dict[str, dict[str, float]]:
        out: dict[str, dict[str, float]] = {}
        for v, z in zip(variables, values):
            for label in v.subshells:
                out.setdefault(v.element, {})[label] = z
        return out

    @property
    def zeta(self) -> dict[str, dict[str, float]]:
        """The tuned ζ as {element: {subshell: ζ}}."""
        return self._table(self.variables, self.final)

    @property
    def start_zeta(self) -> dict[str, dict[str, float]]:
        return self._table(self.variables, self.start)

    @property
    def fixed_zeta(self) -> dict[str, dict[str, float]]:
        """The ζ the options held fixed that no variable frees, as {element: {subshell: ζ}}: the
        zeta file's library (every element of it), the options' own ζ on top. The zeta file
        writes them beside the tuned ζ, so that it alone gives the bases the energies were
        computed with."""
        tuned = {(v.element, label) for v in self.variables for label in v.subshells}
        out: dict[str, dict[str, float]] = {}
        for symbol, table in self.options.basis.zeta.over(self.options.library).as_dict().items():
            kept = {label: z for label, z in table.items() if (symbol, label) not in tuned}
            if kept:
                out[symbol] = kept
        return out

    def _origin(self, symbol: str, label: str) -> str:
        """Where a fixed ζ came from: "your own ζ" (the options' zeta) or "zeta file"."""
        return "your own ζ" if label in self.options.basis.zeta.of_element(symbol) else "zeta file"

    def objective(self, which: str) -> float | None:
        values = [(r.weight, getattr(r, which)) for r in self.energies]
        if any(e is None for _, e in values):
            return None
        return sum(w * e for w, e in values)

    def to_json(self, out: str | None = None) -> dict:
        doc = {
            "zeta": self.zeta,
            "start_zeta": self.start_zeta,
            "fixed_zeta": self.fixed_zeta,
            "energies": [r.to_json() for r in self.energies],
            "at_bound": self._table(self.variables, [v.label in self.at_bounds for v in self.variables]),
            "iterations": self.iterations,
            "converged": self.converged,
            "message": self.message,
            "wall_seconds": self.wall_seconds,
            "out": out,
        }
        if self.validation:
            doc["validation"] = [r.to_json() for r in self.validation]
        return doc

    def toml_text(self) -> str:
        """The zeta file: a comment block (training set, rule, N, fit, energies, whether the
        search converged), then one table per element: the tuned ζ (DIGITS decimals), then the
        fixed ζ of ``fixed_zeta`` as given (shortest exact form), each marked ``# fixed`` and
        where it came from. Deterministic: no times in it. Text from inputs (structure names,
        the zeta file's name, the message naming one) goes through ``limits.one_line``, so a
        file name cannot end its comment line and become a live entry."""
        from stobuilder.model.elements import atomic_number
        from stobuilder.core.limits import one_line

        o, b = self.options, self.options.basis
        notes = [
            "ζ (bohr^-1) tuned by stobuilder tune: minimised SCF energy of the training set",
            f"rule {b.rule}, N = {b.gaussians} Gaussians per STO, norm {b.norm}, sharing {b.sharing}, "
            f"radial {b.radial}",
            f"free ζ: {' '.join(v.label for v in self.variables)}; every other ζ as the rule, the zeta file or your own ζ gives",
            f"converged: {'yes' if self.converged else 'NO'} ({self.message}), {self.iterations} iterations, "
            f"{self.scf_count} SCF calculations",
        ]
        if self.at_bounds:
            notes.append(f"held by a bound of the search range (not an optimum): {', '.join(self.at_bounds)}")
        notes.append("training set: weight (scaled to mean 1), method, energy with the start ζ -> tuned ζ (hartree)")
        notes += [f"  {r.structure}  {r.weight:g}  {r.method}  {_energy(r.start_hartree)} -> {_energy(r.final_hartree)}"
                  for r in self.energies]
        if self.validation:
            notes.append("held-out structures (not tuned on): start ζ -> tuned ζ (hartree)")
            notes += [f"  {r.structure}  {r.method}  {_energy(r.start_hartree)} -> {_energy(r.final_hartree)}"
                      for r in self.validation]
        notes.append("start ζ: " + ", ".join(f"{v.label} = {z:.{DIGITS}f}" for v, z in zip(self.variables, self.start)))
        fixed = self.fixed_zeta
        if fixed:
            source = f"the zeta file {o.zeta_file}" if o.zeta_file else "the zeta library"
            notes.append(f"fixed ζ (not tuned, marked # fixed): as given by {source} and your own ζ on top; this "
                         "file alone gives the bases of the energies above")
        lines = [f"# {one_line(n)}" for n in notes]
        tuned = self.zeta
        for symbol in [*tuned, *sorted(set(fixed) - set(tuned), key=atomic_number)]:
            lines += ["", f"[{symbol}]"]
            lines += [f"{label} = {z:.{DIGITS}f}" for label, z in tuned.get(symbol, {}).items()]
            lines += [f"{label} = {float(z)!r}  # fixed: {self._origin(symbol, label)}"
                      for label, z in fixed.get(symbol, {}).items()]
        return "\n".join(lines) + "\n"


def _energy(e: float | None) -> str:
    return "not converged" if e is None else f"{e:.10f}"


# ---------------------------------------------------------------------------- the structures


@dataclass(frozen=True)
class _Item:
    """One structure of the objective: its SCF set-up."""

    label: str
    structure: object  # stobuilder.model.structures.Structure
    method: str
    weight: float
    atom: bool  # a free atom in its basis' configuration: fixed occupations, as build --check


def _items(paths: Sequence[str], options: BuildOptions, weights=None, role: str = "training") -> list[_Item]:
    from stobuilder.checks.structure import is_its_configuration
    from stobuilder.model.methods import pick_method
    from stobuilder.pipeline.path import check_electrons, basis_for
    from stobuilder.model.structures import check_geometry, read_structures

    items = []
    for i, path in enumerate(paths):
        frames = read_structures(path, charge=options.checks.charge, spin=options.checks.spin)
        for frame in frames:
            label = path if len(frames) == 1 else f"{path} (frame {frame.frame})"
            if frame.periodic:
                raise InputError(f"{label}: a periodic structure; tune needs the SCF energy of a molecule or atom")
            check_geometry(frame)
            try:
                basis = basis_for([frame], options)
            except InputError as exc:
                raise InputError(f"{label}: {exc}") from None
            check_electrons(frame, basis, options.checks.method)
            method = pick_method(options.checks.method, frame.spin, f"({label})")
            atom = len(frame.symbols) == 1 and is_its_configuration(basis, frame)
            items.append(_Item(label, frame, method, 1.0 if weights is None else weights[i], atom))
    if not items:
        raise InputError(f"no {role} structures")
    return items


def _scf(item: _Item, options: BuildOptions, zeta: dict, dm0):
    """(energy or None, density) of ``item`` with the ζ overrides ``zeta`` on top of the options'."""
    from stobuilder.checks.structure import atom_configuration
    from stobuilder.scf.free_atom import free_atom_setup
    from stobuilder.scf.mole import structure_mole
    from stobuilder.pipeline.path import basis_for
    from stobuilder.scf.run import solve_scf

    basis = basis_for([item.structure], options, ZetaTable.of(zeta))
    if item.atom:  # the fixed-occupation free atom of build --check (scf.free_atom_setup)
        symbol = item.structure.symbols[0]
        mol, configure = free_atom_setup(symbol, atom_configuration(basis, symbol), basis[symbol].to_pyscf(), item.method)
    else:
        mol, configure = structure_mole(item.structure, basis), None
    if dm0 is not None and np.shape(dm0)[-1] != mol.nao:
        dm0 = None
    try:
        mf, _ = solve_scf(mol, item.method, dm0=dm0, configure=configure, conv_tol=SCF_CONV_TOL)
    except Exception as exc:  # a numerical failure of the SCF counts as not converged
        log.info("tune: %s: the SCF failed (%s)", item.label, type(exc).__name__)
        return None, None
    if not mf.converged:
        return None, None
    return float(mf.e_tot), mf.make_rdm1()


class _ScfStopped(Exception):
    """An SCF did not converge during the search."""


# ---------------------------------------------------------------------------- the search


def _start_values(variables, items, options) -> list[float]:
    """The start ζ of each variable: its subshells' ζ in the start basis (the geometric mean when
    tied subshells start from different ζ). InputError for an element not in the structures or a
    subshell its basis lacks."""
    from stobuilder.pipeline.path import basis_for

    bases = {}
    for item in items:
        for symbol in item.structure.elements:
            if symbol not in bases:
                bases[symbol] = basis_for([item.structure], options)[symbol]
    values = []
    for v in variables:
        if v.element not in bases:
            raise InputError(
                f"--vary {v.label}: {v.element} is in none of the training structures "
                f"(they hold {', '.join(sorted(bases, key=list(bases).index))})"
            )
        stos = {s.label: s.zeta for s in bases[v.element].stos}
        for label in v.subshells:
            if label not in stos:
                have = ", ".join(stos) or "none: the basis was read from a file"
                raise InputError(f"--vary {v.label}: the {v.element} basis has no {label} subshell (its STOs: {have})")
        zs = [stos[label] for label in v.subshells]
        values.append(float(math.exp(sum(math.log(z) for z in zs) / len(zs))))
    return values


def tune(
    structures: Sequence[str],
    options: BuildOptions | None = None,
    vary: Sequence[Variable] | Sequence[str] | None = None,
    weights: Mapping[str, float] | Sequence[float] | str | os.PathLike | None = None,
    validate: Sequence[str] = (),
    max_iterations: int = MAX_ITERATIONS,
    threads: int | None = None,
) -> TuneResult:
    """Tune the free ζ (``vary``: Variables or ``--vary`` texts; default ``default_variables``)
    on the SCF energies of ``structures`` (paths, each file once), weighted by ``weights`` (a TOML
    file path, {structure: weight}, or one weight per structure; default 1 each; only their
    ratios matter, they are scaled to mean 1). ``validate``: held-out
    structures whose energies are reported with the start and the tuned ζ. Progress is logged
    per iteration on the ``stobuilder.tune`` logger. ``threads``: PySCF's OpenMP threads for the
    SCFs (default PySCF's own; 1 is fastest for small molecules on a busy machine)."""
    if threads is None:
        return _tune(structures, options, vary, weights, validate, max_iterations)
    from pyscf import lib

    from stobuilder.core.arguments import whole_number

    with lib.with_omp_threads(whole_number(threads, "threads", 1)):
        return _tune(structures, options, vary, weights, validate, max_iterations)


class _Objective:
    """Σ weight · E over the items as a function of x = ln ζ of the variables, with its
    central-difference gradient; keeps each item's last density (the warm start) and counts
    SCFs. ``evaluate`` raises _ScfStopped when an SCF does not converge."""

    def __init__(self, items, variables, options):
        self.items, self.variables, self.options = items, variables, options
        self.densities: dict[int, object] = {}
        self.scf_count = 0
        self.holders = [[k for k, it in enumerate(items) if v.element in it.structure.elements] for v in variables]
        self.known: dict[tuple, dict] = {}  # x → energies at x already computed (the start point)
        self.last: dict[tuple, tuple] = {}
        self.best = None  # (f, x, energies, gradient) of the lowest objective evaluated

    def overrides(self, x) -> dict:
        return TuneResult._table(self.variables, [float(math.exp(v)) for v in x])

    def energies_at(self, x, subset=None, keep: bool = True) -> dict:
        """{item index: energy or None} at x for the items in ``subset`` (default all)."""
        key = tuple(float(v) for v in x)
        if subset is None and key in self.known:
            return dict(self.known[key])
        out = {}
        zeta = self.overrides(x)
        for k in range(len(self.items)) if subset is None else subset:
            self.scf_count += 1
            e, dm = _scf(self.items[k], self.options, zeta, self.densities.get(k))
            out[k] = e
            if keep and dm is not None:
                self.densities[k] = dm
        if subset is None:
            self.known = {key: dict(out)}
        return out

    def _total(self, energies) -> float:
        failed = [self.items[k].label for k, e in energies.items() if e is None]
        if failed:
            raise _ScfStopped(failed[0])
        return sum(self.items[k].weight * e for k, e in energies.items())

    def evaluate(self, x):
        """(objective, gradient in ln ζ) at x, hartree."""
        key = tuple(float(v) for v in x)
        if key in self.last:
            return self.last[key]
        centre = self.energies_at(x)
        f = self._total(centre)
        g = np.zeros(len(x))
        for j, subset in enumerate(self.holders):
            pair = []
            for sign in (1.0, -1.0):
                xs = np.array(x, dtype=float)
                xs[j] += sign * STEP
                pair.append(self._total(self.energies_at(xs, subset, keep=False)))
            g[j] = (pair[0] - pair[1]) / (2 * STEP)
        if self.best is None or f < self.best[0]:
            self.best = (f, np.array(x, dtype=float), dict(centre), g)
        self.last = {key: (f, g)}
        return f, g


def _setup(structures, options, vary, weights, validate=()):
    """(options, items, variables, start ζ, held-out items) of a tuning job; every input checked
    before the first SCF, the ζ of the options too (``pipeline.check_zeta_elements``: every
    element ``zeta`` names is in a training or held-out structure, and a zeta file names one)."""
    from stobuilder.pipeline.path import check_zeta_elements

    options = options or BuildOptions()
    if not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    paths = [os.fspath(p) for p in ([structures] if isinstance(structures, (str, os.PathLike)) else structures)]
    if not paths:
        raise InputError("tune needs at least one training structure")
    _refuse_twice(paths, "training")
    items = _normalised(_items(paths, options, _weights(weights, paths)))
    validate = [os.fspath(p) for p in validate]
    _refuse_twice(validate, "held-out")
    held = _items(validate, options, role="held-out") if validate else []
    check_zeta_elements(options, [it.structure for it in items + held])
    if vary is None:
        from stobuilder.pipeline.path import basis_for

        variables = default_variables(basis_for([i.structure for i in items], options))
    else:
        variables = tuple(v if isinstance(v, Variable) else parse_vary([v])[0] for v in vary)
        parse_vary([v.label for v in variables])  # a subshell free twice is an error
    if not variables:
        raise InputError("no free ζ: the basis of the structures has no STOs to vary")
    return options, items, variables, _start_values(variables, items, options), held


def _refuse_twice(paths: Sequence[str], role: str) -> None:
    """InputError for a structure file given twice (the same file, by its real path), as bench
    and relax refuse one: counting it twice is what a weight of 2 is for."""
    from stobuilder.core.limits import one_line

    seen: dict[str, str] = {}
    for path in paths:
        real = os.path.realpath(path)
        if real in seen:
            again = one_line(path if path == seen[real] else f"{path} (the same file as {seen[real]})")
            raise InputError(f"{again}: given twice as a {role} structure; to count it twice, give it a weight of 2")
        seen[real] = path


def _normalised(items: list[_Item]) -> list[_Item]:
    """The items with their weights scaled to mean 1: the objective, its gradient, every stopping
    test and every printed number are then the same for weights w and c·w (unit weights stay 1)."""
    top = max(it.weight for it in items)  # relative to the largest first: no overflow, no division by 0
    ratios = [it.weight / top for it in items]
    scale = len(items) / math.fsum(ratios)
    return [replace(it, weight=r * scale) for it, r in zip(items, ratios)]


def energy_gradient(structures, options: BuildOptions | None = None, vary=None, weights=None):
    """(objective, {variable label: dE/d ln ζ}) at the start ζ, in hartree: what the search
    starts from (central differences, ``STEP``; the weights scaled to mean 1, as in the search)."""
    options, items, variables, start, _ = _setup(structures, options, vary, weights)
    objective = _Objective(items, variables, options)
    try:
        f, g = objective.evaluate(np.log(start))
    except _ScfStopped as exc:
        raise InputError(f"{exc}: the SCF does not converge") from None
    return f, {v.label: float(d) for v, d in zip(variables, g)}


def _round_bounds(x) -> tuple[list[float], list[float]]:
    """The search range of one round in ln ζ: a factor BOUND_FACTOR either side of x, inside
    [ZETA_MIN, ZETA_MAX]."""
    step = math.log(BOUND_FACTOR)
    lo = [max(float(v) - step, math.log(ZETA_MIN)) for v in x]
    hi = [min(float(v) + step, math.log(ZETA_MAX)) for v in x]
    return lo, hi


def _held(x, g, lo, hi) -> list[int]:
    """The variables a bound holds: on it, with the gradient pushing out beyond GRADIENT_TOL."""
    out = []
    for j, (xi, gi, a, b) in enumerate(zip(x, g, lo, hi)):
        if (xi <= a + 1e-9 and gi > GRADIENT_TOL) or (xi >= b - 1e-9 and gi < -GRADIENT_TOL):
            out.append(j)
    return out


def _tune(structures, options, vary, weights, validate, max_iterations) -> TuneResult:
    from scipy.optimize import minimize

    from stobuilder.core.arguments import whole_number

    t0 = time.perf_counter()
    max_iterations = whole_number(max_iterations, "max_iterations", 0)
    options, items, variables, start, held = _setup(structures, options, vary, weights, validate)
    x0 = np.log(start)
    objective = _Objective(items, variables, options)

    # the start point: every SCF must converge here
    start_energies = objective.energies_at(x0)
    for k, e in start_energies.items():
        if e is None:
            raise InputError(f"{items[k].label}: the {items[k].method} SCF does not converge with the start ζ; nothing to tune")
    evaluate = objective.evaluate
    state = {"n": 0, "bounds": _round_bounds(x0)}

    def report(x, it):
        f, g = evaluate(x)
        shown = "  ".join(f"{v.label}={math.exp(z):.5f}" for v, z in zip(variables, x))
        log.info("tune: iteration %d: objective %.10f hartree, largest |dE/dln ζ| %.2e hartree, ζ %s", it, f,
                 _projected(x, g, *state["bounds"]), shown)

    def callback(xk, *_):
        state["n"] += 1
        report(xk, state["n"])

    report(x0, 0)
    x_round, scipy_message, stopped = x0, "", None
    try:
        for _ in range(MAX_ROUNDS):
            lo, hi = state["bounds"]
            res = minimize(
                evaluate, x_round, jac=True, method="L-BFGS-B", bounds=list(zip(lo, hi)), callback=callback,
                options={"maxiter": max(max_iterations - state["n"], 0), "gtol": GRADIENT_TOL, "ftol": 1e-15},
            )
            scipy_message = str(res.message)
            x_end = np.array(res.x, dtype=float)
            _, g_end = evaluate(x_end)
            inner = [j for j in _held(x_end, g_end, lo, hi)
                     if math.log(ZETA_MIN) + 1e-9 < x_end[j] < math.log(ZETA_MAX) - 1e-9]
            if not inner or state["n"] >= max_iterations:
                break
            log.info("tune: %s on a bound of the search range; the range is re-centred there",
                     ", ".join(variables[j].label for j in inner))
            x_round, state["bounds"] = x_end, _round_bounds(x_end)
    except _ScfStopped as exc:
        stopped = str(exc)
        log.info("tune: the SCF of %s stopped converging; the best point so far is kept", stopped)
    if objective.best is not None:
        x_best, g_best = objective.best[1], objective.best[3]
    else:  # the SCF stopped converging within the first gradient
        x_best, g_best = x0, np.full(len(x0), np.inf)
    at_bounds = tuple(variables[j].label for j in _held(x_best, g_best, *state["bounds"]))
    ok = stopped is None and float(np.max(np.abs(g_best))) <= GRADIENT_TOL
    if stopped is not None:
        message = f"the SCF of {stopped} stopped converging; the best point so far is kept"
    elif ok:
        message = "gradient test met"
    elif at_bounds:
        limit = "the iteration limit was reached" if state["n"] >= max_iterations else \
            f"ζ is limited to {ZETA_MIN:g}–{ZETA_MAX:g} bohr^-1"
        message = f"{', '.join(at_bounds)} held by a bound of the search range ({limit})"
    else:
        message = f"search stopped: {scipy_message}"
    final = [round(float(math.exp(v)), DIGITS) for v in x_best]
    # the energies at the rounded ζ that are written out (the ones ``build --zeta-file`` gets)
    final_e = objective.energies_at(np.log(final))
    if any(e is None for e in final_e.values()):
        final_e = objective.best[2] if objective.best is not None else start_energies
        ok = False
    rows = tuple(
        EnergyRow(it.label, it.method, it.weight, start_energies[k], final_e[k]) for k, it in enumerate(items)
    )
    validation = tuple(_held_out(it, options, objective.overrides(x0), TuneResult._table(variables, final)) for it in held)
    return TuneResult(
        variables, tuple(round(z, DIGITS) for z in start), tuple(final), options, rows, validation, state["n"],
        objective.scf_count, ok, message, time.perf_counter() - t0, at_bounds,
    )


def _projected(x, g, lo, hi) -> float:
    """The largest gradient component that could still lower the objective inside the bounds."""
    out = 0.0
    for xi, gi, a, b in zip(x, g, lo, hi):
        if (xi <= a + 1e-12 and gi > 0) or (xi >= b - 1e-12 and gi < 0):
            continue
        out = max(out, abs(float(gi)))
    return out


def _held_out(item: _Item, options: BuildOptions, start: dict, final: dict) -> EnergyRow:
    present = set(item.structure.elements)
    e0, dm = _scf(item, options, {s: t for s, t in start.items() if s in present}, None)
    e1, _ = _scf(item, options, {s: t for s, t in final.items() if s in present}, dm)
    return EnergyRow(item.label, item.method, 1.0, e0, e1)


def _weights(weights, paths) -> tuple[float, ...] | None:
    if weights is None:
        return None
    if isinstance(weights, (str, os.PathLike)):
        return load_weights(weights, paths)
    if isinstance(weights, Mapping):
        return _mapped_weights(weights, paths, "weights")
    values = list(weights)
    if len(values) != len(paths):
        raise InputError(f"weights: {len(values)} weights for {len(paths)} structures")
    return tuple(_weight(v, f"weights: {p}") for v, p in zip(values, paths))


def _weight(value, where: str) -> float:
    """A weight: a positive finite number (``where`` = "SOURCE: KEY" names it in errors)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{where} = {value!r} is not a number")
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{where} = {value!r} must be a positive finite number")
    return float(value)
