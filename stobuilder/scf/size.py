"""The size guard of an SCF: the memory one PySCF SCF of a basis would take, checked against the
limit before the first SCF starts (not when memory runs out).

``scf_size(functions, method)`` → ``ScfSize`` (MB, integrals in memory or direct SCF, the limit);
``check_scf_size`` raises InputError naming the structure when it does not fit,
``check_mole_size`` does the same for a built Mole (a stored basis no ``Basis`` of ours
describes); ``memory_limit_mb`` is the limit every Mole we make is told (``mole.make_mole``).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

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


__all__ = ["MEMORY_VARIABLE", "ScfSize", "check_mole_size", "check_scf_size", "memory_limit_mb", "scf_size"]
