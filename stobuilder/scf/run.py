"""Running an SCF with PySCF: the one SCF driver of the checks, the calculator, bench and tune.

RHF for closed shells, ROHF for open shells, UHF on request; PySCF's SCF drivers (Sun et al.,
J. Chem. Phys. 153, 024109, 2020) with the DIIS of ``core.diis``. ``solve_scf`` runs one SCF
(warm start from a density, a second-order retry where the first run does not converge) and
returns PySCF's object; ``solve_scf_energy`` the same as plain values; ``run_scf`` an
``ScfResult``. An SCF that runs longer than PROGRESS_SECONDS logs a line per cycle.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass

PROGRESS_SECONDS = 5.0  # an SCF running longer than this logs a line per cycle

log = logging.getLogger(__name__)


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


def solve_scf(mol, method: str, max_cycle: int = 100, dm0=None, configure=None, conv_tol: float | None = None):
    """One SCF run of ``mol`` ("RHF", "ROHF" or "UHF"), from ``dm0`` (a density of the same
    basis, e.g. the previous geometry step's) or PySCF's default guess. A first run that does not
    converge is retried with PySCF's second-order solver from where it stopped. Returns
    (PySCF SCF object, iterations); the object's ``converged``, ``e_tot`` and orbitals are
    PySCF's own. The one SCF driver of the checks, the calculator, bench and tune. An SCF that
    runs longer than PROGRESS_SECONDS logs a line per cycle (logger ``stobuilder.scf.run``; the
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


def solve_scf_energy(mol, method: str, max_cycle: int, dm0=None, configure=None):
    """``solve_scf`` as (energy, converged, iterations, density)."""
    mf, iterations = solve_scf(mol, method, max_cycle, dm0, configure)
    return float(mf.e_tot), bool(mf.converged), iterations, mf.make_rdm1()


def run_scf(mol, method: str, label: str = "", max_cycle: int = 100, configure=None) -> ScfResult:
    """Run one SCF calculation (method "RHF", "ROHF" or "UHF") from PySCF's default guess.
    ``converged`` reports what PySCF reports."""
    start = time.perf_counter()
    energy, converged, iterations, _ = solve_scf_energy(mol, method, max_cycle, configure=configure)
    return ScfResult(label, method, energy, converged, iterations, time.perf_counter() - start)


__all__ = ["PROGRESS_SECONDS", "ScfResult", "run_scf", "solve_scf", "solve_scf_energy"]
