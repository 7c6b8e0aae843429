"""Relaxing molecules with our basis: ``stobuilder relax`` and its Python door.

Each structure file walks build's path first (``pipeline.prepare``: read, geometry checked, basis
built, basis texts made) and is then relaxed with ``STOCalculator`` and an ASE optimizer (BFGS
or FIRE), with the basis built by ``prepare`` handed to the calculator, so no fit is repeated.
A file of several frames is relaxed from its last frame (what ``ase.io.read`` gives). Every
structure is prepared, and every output location checked (the folder can be made or written
into, no target exists unless ``force``), before the first SCF; a bad input found then writes
nothing. Each structure's files are written as soon as it is relaxed, together
(``files.write_all``: all of that structure's files or none):

    <out>/<name>.relaxed.extxyz   the relaxed molecule: energy (eV) and forces (eV/Å) as ASE's
                                  extxyz writer stores them, plus charge, spin (2S),
                                  energy_hartree, relax_steps, relax_converged (no text taken
                                  from the input goes into its comment line)
    <out>/<name><extension>       its basis file for every code of the options

A relaxation that runs out of steps is written all the same (``relax_converged=F``, so it can
be continued from the file) and reported as not converged. An SCF that fails at any step is an
InputError naming the file and the step; that structure writes nothing, the ones relaxed before
it keep their files. An interrupt (KeyboardInterrupt, SIGINT) raises ``RelaxInterrupted`` (a
KeyboardInterrupt) holding the results whose files were written; the running structure writes
nothing.

The relaxations run in a worker thread while the calling thread waits: a long call into PySCF's
C code (integrals, BLAS) cannot hold up a KeyboardInterrupt, which Python delivers only to the
main thread between bytecodes. On an interrupt the worker writes nothing more (a write in
progress is finished first) and stops at its next optimizer step.

Progress goes to the ``stobuilder.relax`` logger: one line per optimizer step (energy, largest
force on an atom).
"""

from __future__ import annotations

import io
import logging
import math
import os
import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from stobuilder.core.errors import InputError
from stobuilder.pipeline.options import BuildOptions

OPTIMIZERS = ("bfgs", "fire")
DEFAULT_FMAX = 0.05  # eV/Å, ASE's own default for its optimizers
DEFAULT_STEPS = 200
MAX_STEPS = 100000
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


class RelaxInterrupted(KeyboardInterrupt):
    """A relaxation job interrupted: ``finished`` holds the RelaxResults whose files were written
    (in the order of the paths), ``running`` the structure file that was being relaxed (None
    between structures); it wrote nothing."""

    def __init__(self, finished, running):
        super().__init__("relaxation interrupted")
        self.finished = tuple(finished)
        self.running = running


def fmax_ok(fmax) -> bool:
    """A usable force limit (eV/Å): a finite positive number."""
    return not isinstance(fmax, bool) and isinstance(fmax, (int, float)) and math.isfinite(fmax) and fmax > 0


def _check_settings(fmax, steps, optimizer) -> tuple[float, int, str]:
    """The Python arguments checked; messages name them as Python names them (the command line
    checks its flags itself, in its own words)."""
    from stobuilder.core.arguments import whole_number

    if not fmax_ok(fmax):
        raise InputError(f"fmax={fmax!r}: must be a positive number (eV/Å)")
    steps = whole_number(steps, "steps", 0, MAX_STEPS)
    name = str(optimizer).lower()
    if name not in OPTIMIZERS:
        raise InputError(f"optimizer={optimizer!r}: choose one of {', '.join(OPTIMIZERS)}")
    return float(fmax), steps, name


def _calculator(frame, basis, options: BuildOptions, conv_tol, max_cycle):
    from stobuilder.calculator import DEFAULT_CONV_TOL, DEFAULT_MAX_CYCLE, STOCalculator

    calc = STOCalculator(
        **options.spec_for(frame.symbols).to_json(), charge=frame.charge, spin=frame.spin,
        method=options.checks.method, conv_tol=DEFAULT_CONV_TOL if conv_tol is None else conv_tol,
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
    module docstring). Existing files are kept unless ``force``; bad input (settings, structures,
    output locations) is an InputError before anything is computed or written. Each structure's
    files are written when it is relaxed; an interrupt raises ``RelaxInterrupted``."""
    from stobuilder.core.files import check_targets
    from stobuilder.core.limits import one_line
    from stobuilder.pipeline.naming import structure_name
    from stobuilder.pipeline.path import check_electrons, check_zeta_elements, claim_target, prepare

    if isinstance(paths, (str, os.PathLike)):
        raise TypeError("paths must be a list of structure files, not one path")
    options = BuildOptions() if options is None else options
    if not isinstance(options, BuildOptions):
        raise TypeError(f"options must be a BuildOptions, got {type(options).__name__}")
    fmax, steps, optimizer = _check_settings(fmax, steps, optimizer)
    if options.checks.run:
        raise InputError("options.checks.run is build's; relax runs an SCF at every step already")
    if not paths:
        raise InputError("no structure files given")
    jobs, sources = [], {}
    for path in paths:
        item = prepare(path, options)
        frame = item.frames[-1]
        if frame.periodic:
            raise InputError(
                f"{one_line(item.path)}: periodic structure; relax does molecules (stobuilder build writes the "
                "basis files for periodic codes)"
            )
        check_electrons(frame, item.basis, options.checks.method)  # the method suits it, its electrons fit the basis
        relaxed = os.path.join(out_dir, *(structure_name(os.path.basename(path)) + RELAXED_SUFFIX).split("/"))
        targets = {code: os.path.join(out_dir, *rel.split("/")) for code, rel, _ in item.texts}
        for target in (relaxed, *targets.values()):
            claim_target(sources, target, path)
        jobs.append((item, frame, relaxed, targets))
    check_zeta_elements(options, (frame for _, frame, _, _ in jobs))
    if write:  # every file and folder can be written (files.check_targets), before the first SCF
        check_targets(sources, force)
    run = _Run()
    return _in_worker(lambda: _relax_jobs(run, jobs, options, fmax, steps, optimizer, out_dir, write,
                                          conv_tol, max_cycle), run)


class _Stop(Exception):
    """Raised in the worker at its next optimizer step once the caller was interrupted."""


class _Run:
    """What the worker thread and the waiting thread share: the interrupt flag, the lock held
    while a structure's files are written, the finished results, the structure running."""

    def __init__(self):
        self.stop = threading.Event()
        self.writing = threading.Lock()
        self.finished: list[RelaxResult] = []
        self.running: str | None = None


def _in_worker(job, run: _Run):
    """Run ``job`` in a worker thread (with the caller's PySCF thread count) and wait for it.
    An interrupt while waiting stops the worker's writes (one in progress is finished first) and
    raises RelaxInterrupted; the worker's own exception is raised here."""
    from pyscf import lib

    threads = lib.num_threads()  # OpenMP's count is per thread: hand the caller's on
    outcome: dict = {}

    def work():
        try:
            with lib.with_omp_threads(threads):
                outcome["value"] = job()
        except _Stop:
            pass
        except BaseException as exc:  # noqa: BLE001 — raised again in the waiting thread
            outcome["error"] = exc

    worker = threading.Thread(target=work, name="stobuilder-relax", daemon=True)
    try:
        worker.start()
        while worker.is_alive():
            worker.join(0.1)
    except KeyboardInterrupt:
        run.stop.set()
        with run.writing:  # a structure's files being written are finished; no write starts after
            finished, running = tuple(run.finished), run.running
        raise RelaxInterrupted(finished, running) from None
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]


def _relax_jobs(run: _Run, jobs, options, fmax, steps, optimizer, out_dir, write, conv_tol, max_cycle):
    import numpy as np
    from ase import Atoms
    from ase.calculators.calculator import CalculationFailed
    from ase.optimize import BFGS, FIRE
    from ase.units import Hartree

    from stobuilder.core.files import write_all
    from stobuilder.core.limits import one_line

    kinds = {"bfgs": BFGS, "fire": FIRE}
    for item, frame, relaxed, targets in jobs:
        if run.stop.is_set():
            raise _Stop
        run.running = item.path
        name = one_line(item.path)
        atoms = Atoms(frame.symbols, positions=frame.positions)
        atoms.calc = _calculator(frame, item.basis, options, conv_tol, max_cycle)
        opt = kinds[optimizer](atoms, logfile=None)

        def report(atoms=atoms, opt=opt, name=name):
            if run.stop.is_set():
                raise _Stop
            e = atoms.get_potential_energy() / Hartree
            _log.info(f"{name} step {opt.nsteps}: E = {e:.10f} hartree, max force "
                      f"{max_force(atoms.get_forces()):.5f} eV/Å")

        opt.attach(report, interval=1)
        try:
            converged = bool(opt.run(fmax=fmax, steps=steps))
        except (CalculationFailed, InputError) as exc:
            reason = " ".join(str(exc).split())
            kept = [one_line(r.path) for r in run.finished] if write else []
            tail = (f"nothing of it written; kept the files of {len(kept)} relaxed before it ({', '.join(kept)})"
                    if kept else "nothing written")
            raise InputError(f"{name}: step {opt.nsteps}: {reason}; {tail}") from None
        energy = float(atoms.get_potential_energy())
        forces = np.array(atoms.get_forces())
        contents = {relaxed: relaxed_text(atoms, energy, forces, frame.charge, frame.spin, opt.nsteps, converged)}
        for code, rel, text in item.texts:
            contents[targets[code]] = text
        result = RelaxResult(item.path, relaxed, frame.formula, energy / Hartree, int(opt.nsteps), converged,
                             max_force(forces), targets)
        with run.writing:
            if run.stop.is_set():
                raise _Stop
            if write:
                write_all(contents, out_dir)
            run.finished.append(result)
            run.running = None
    return tuple(run.finished)


__all__ = ["DEFAULT_FMAX", "DEFAULT_STEPS", "MAX_STEPS", "OPTIMIZERS", "RELAXED_SUFFIX", "RelaxInterrupted",
           "RelaxResult", "fmax_ok", "max_force", "relax_structures", "relaxed_text"]
