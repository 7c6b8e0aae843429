"""What every screening rule returns: one exponent per basis subshell."""

from __future__ import annotations

from dataclasses import dataclass

from stobuilder.model.elements import Configuration, capacity


@dataclass(frozen=True)
class ShellExponent:
    """The Slater exponent of one basis subshell.

    zeff   effective nuclear charge Z − S (dimensionless)
    n_eff  effective principal quantum number n* used in ζ = Zeff / n*
    zeta   orbital exponent ζ of r^(n−1) e^(−ζ r), in bohr⁻¹
    """

    label: str
    n: int
    l: int
    zeff: float
    n_eff: float
    zeta: float


def basis_subshells(conf: Configuration) -> list[tuple[int, int]]:
    """The subshells a minimal basis of ``conf`` carries, sorted by (n, l).

    Every occupied subshell, plus the empty p partner of an occupied s subshell with n ≥ 2
    (Li 2p, K 4p, Zn 4p), as in the published minimal bases (Hehre, Stewart & Pople 1969).
    """
    present = {(s.n, s.l) for s in conf.subshells}
    for s in conf.subshells:
        if s.l == 0 and s.n >= 2:
            present.add((s.n, 1))
    return sorted(present)


__all__ = ["ShellExponent", "basis_subshells", "capacity"]
