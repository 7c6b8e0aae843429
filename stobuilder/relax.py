"""Relaxing molecules with our basis: ``stobuilder relax`` and its Python door.

Each structure file walks build's path first (``pipeline.prepare``: read, geometry checked, basis
built, basis texts made) and is then relaxed with ``STOCalculator`` and an ASE optimizer (BFGS
or FIRE), with the basis built by ``prepare`` handed to the calculator, so no fit is repeated.
A file of several frames is relaxed from its last frame (what ``ase.io.read`` gives). Every
structure is prepared, and every target checked, before the first relaxation; the files of the
whole job are written at the end, all or none (``files.write_all``):

    <out>/<name>.relaxed.extxyz   the relaxed molecule: energy (eV) and forces (eV/Å) as ASE's
                                  extxyz writer stores them, plus charge, spin (2S),
                                  energy_hartree, relax_steps, relax_converged
    <out>/<name><extension>       its basis file for every code of the options

A relaxation that runs out of steps is written all the same (``relax_converged=F``, so it can
be continued from the file) and reported as not converged. An SCF that fails at any step is an
InputError naming the file and the step; then nothing is written.

Progress goes to the ``stobuilder.relax`` logger: one line per optimizer step (energy, largest
force on an atom).
"""

from __future__ import annotations

import io
import logging
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from .errors import InputError
from .options import BuildOptions

OPTIMIZERS = ("bfgs", "fire")
DEFAULT_FMAX = 0.05  # eV/Å, ASE's own default for its optimizers
DEFAULT_STEPS = 200
RELAXED_SUFFIX = ".relaxed.extxyz"

_log = logging.getLogger("stobuilder.relax")


@dataclass(frozen=True)
class RelaxResult:
    """One relaxed structure file. Energies in hartree, forces in eV/Å."""

    path: str
    relaxed_path: str
    formula: str
    energy_hartree: float
    steps: int
    converged: bool
    max_force_ev_per_a: float
    files: Mapping[str, str]  # code → basis file

    def to_json(self) -> dict:
        return {
            "path": self.path,
            "relaxed_path": self.relaxed_path,
            "energy_hartree": self.energy_hartree,
            "steps": self.steps,
            "converged": self.converged,
            "max_force_ev_per_a": self.max_force_ev_per_a,
            "files": dict(self.files),
        }


def max_force(forces) -> float:
    """The largest force on one atom, |F_i| (eV/Å), as ASE's optimizers measure convergence."""
    import numpy as np

    f = np.asarray(forces, dtype=float).reshape(-1, 3)
    return float(np.sqrt((f * f).sum(axis=1)).max(initial=0.0))


def _check_settings(fmax, steps, optimizer) -> tuple[float, int, str]:
    from .limits import whole_number

    if isinstance(fmax, bool) or not isinstance(fmax, (int, float)) or not math.isfinite(fmax) or fmax <= 0:
        raise InputError(f"--fmax {fmax!r}: must be a positive number (eV/Å)")
    steps = whole_number(steps, "--steps", 0, 100000)
    name = str(optimizer).lower()
    if name not in OPTIMIZERS:
        raise InputError(f"--optimizer {optimizer!r}: choose one of {', '.join(OPTIMIZERS)}")
    return float(fmax), steps, name


def _calculator(frame, basis, options: BuildOptions, conv_tol, max_cycle):
    from .calculator import DEFAULT_CONV_TOL, DEFAULT_MAX_CYCLE, STOCalculator

    calc = STOCalculator(
        rule=options.rule, gaussians=options.gaussians, fit=options.norm, exponents=options.exponents,
        radial=options.radial, zeta=options.zeta_for(frame.symbols), charge=frame.charge, spin=frame.spin,
        method=options.method, conv_tol=DEFAULT_CONV_TOL if conv_tol is None else conv_tol,
        max_cycle=DEFAULT_MAX_CYCLE if max_cycle is None else max_cycle,
    )
    calc.adopt_basis(frame, basis)
    return calc


def relaxed_text(atoms, energy_ev: float, forces, charge: int, spin: int, steps: int, converged: bool) -> str:
    """The extxyz text of a relaxed molecule: positions (Å), energy (eV), forces (eV/Å), charge,
    spin (2S), energy_hartree, relax_steps and relax_converged in the comment line."""
    import ase.io
    from ase import Atoms
    from ase.calculators.singlepoint import SinglePointCalculator
    from ase.units import Hartree

    out = Atoms(atoms.get_chemical_symbols(), positions=atoms.get_positions())
    out.info.update({"charge": int(charge), "spin": int(spin), "energy_hartree": float(energy_ev / Hartree),
                     "relax_steps": int(steps), "relax_converged": bool(converged)})
    out.calc = SinglePointCalculator(out, energy=float(energy_ev), forces=forces)
    buffer = io.StringIO()
    ase.io.write(buffer, out, format="extxyz")
    return buffer.getvalue()


def relax_structures(
    paths: Sequence[str],
    options: BuildOptions | None = None,
    fmax: float = DEFAULT_FMAX,
    steps: int = DEFAULT_STEPS,
    optimizer: str = "bfgs",
    out_dir: str = "relaxed",
    force: bool = False,
    write: bool = True,
    conv_tol: float | None = None,
    max_cycle: int | None = None,
) -> tuple[RelaxResult, ...]:
    """Relax every molecule in ``paths`` (``fmax`` eV/Å on every atom, at most ``steps``
    optimizer steps) and write its relaxed structure and basis files to ``out_dir`` (see the
    module docstring). Existing files are kept unless ``force``; bad input is an InputError
    before anything is computed or written."""
    import numpy as np
    from ase import Atoms
    from ase.calculators.calculator import CalculationFailed
    from ase.optimize import BFGS, FIRE
    from ase.units import Hartree

    from .files import check_targets, write_all
    from .naming import structure_name
    from .pipeline import check_electrons, check_zeta_elements, claim_target, prepare

    if isinstance(paths, (str, os.PathLike)):
        raise TypeError("paths must be a list of structure files, not one path")
    options = BuildOptions() if options is None else options
    if not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    fmax, steps, optimizer = _check_settings(fmax, steps, optimizer)
    if options.check:
        raise InputError("--check is build's; relax runs an SCF at every step already")
    if not paths:
        raise InputError("no structure files given")
    jobs, sources = [], {}
    for path in paths:
        item = prepare(path, options)
        frame = item.frames[-1]
        if frame.periodic:
            raise InputError(
                f"{item.path}: periodic structure; relax does molecules (stobuilder build writes the "
                "basis files for periodic codes)"
            )
        check_electrons(frame, item.basis, options.method)  # the method suits it, its electrons fit the basis
        relaxed = os.path.join(out_dir, *(structure_name(os.path.basename(path)) + RELAXED_SUFFIX).split("/"))
        targets = {code: os.path.join(out_dir, *rel.split("/")) for code, rel, _ in item.texts}
        for target in (relaxed, *targets.values()):
            claim_target(sources, target, path)
        jobs.append((item, frame, relaxed, targets))
    check_zeta_elements(options, (frame for _, frame, _, _ in jobs))
    if write:
        check_targets(sources, force)
    contents: dict[str, str] = {}
    results = []
    kinds = {"bfgs": BFGS, "fire": FIRE}
    for item, frame, relaxed, targets in jobs:
        atoms = Atoms(frame.symbols, positions=frame.positions)
        atoms.calc = _calculator(frame, item.basis, options, conv_tol, max_cycle)
        opt = kinds[optimizer](atoms, logfile=None)

        def report(atoms=atoms, opt=opt, item=item):
            e = atoms.get_potential_energy() / Hartree
            _log.info(f"{item.path} step {opt.nsteps}: E = {e:.10f} hartree, max force "
                      f"{max_force(atoms.get_forces()):.5f} eV/Å")

        opt.attach(report, interval=1)
        try:
            converged = bool(opt.run(fmax=fmax, steps=steps))
        except (CalculationFailed, InputError) as exc:
            reason = " ".join(str(exc).split())
            raise InputError(f"{item.path}: step {opt.nsteps}: {reason}; nothing written") from None
        energy = float(atoms.get_potential_energy())
        forces = np.array(atoms.get_forces())
        contents[relaxed] = relaxed_text(atoms, energy, forces, frame.charge, frame.spin, opt.nsteps, converged)
        for code, rel, text in item.texts:
            contents[targets[code]] = text
        results.append(RelaxResult(item.path, relaxed, frame.formula, energy / Hartree, int(opt.nsteps), converged,
                                   max_force(forces), targets))
    if write:
        write_all(contents, out_dir)
    return tuple(results)


__all__ = ["DEFAULT_FMAX", "DEFAULT_STEPS", "OPTIMIZERS", "RELAXED_SUFFIX", "RelaxResult", "max_force",
           "relax_structures", "relaxed_text"]
