"""Numerical Hartree–Fock limits of neutral ground-state atoms (hartree), for the distance of a
basis from the limit.

Source: C. Froese Fischer, The Hartree–Fock Method for Atoms (Wiley 1977); the same to about 1e-6
in C. F. Bunge, J. A. Barrientos and A. V. Bunge, At. Data Nucl. Data Tables 53, 113 (1993).
Values from memory. They are the LS-term energies with one radial function per subshell, so they
apply only where the determinant computed is a pure LS term (the state text says so). Each is
bounded from above by the optimised expansions of stobuilder.exact.manyzeta (tests/test_manyzeta.py).
"""

from __future__ import annotations

HF_LIMITS = {
    "He": -2.8616800, "Li": -7.4327269, "Be": -14.5730232, "B": -24.5290607, "C": -37.6886190,
    "N": -54.4009342, "O": -74.8093984, "F": -99.4093494, "Ne": -128.5470981, "Na": -161.8589116,
    "Mg": -199.6146364, "Ar": -526.8175128, "Kr": -2752.0549772,
}
SOURCE = "Froese Fischer 1977 (numerical Hartree–Fock), values from memory"


def limit_of(symbol: str, configuration: str, state: str, ground_configuration: str) -> float | None:
    """The limit of ``symbol`` when the computed determinant is its ground configuration in a pure
    LS term (``state`` does not say "not a pure LS term"), else None."""
    if symbol not in HF_LIMITS or configuration != ground_configuration or "not a pure LS term" in state:
        return None
    return HF_LIMITS[symbol]


__all__ = ["HF_LIMITS", "SOURCE", "limit_of"]
