"""The basis-set model: contracted Gaussian shells per element, with their provenance.

Units: exponents in bohr⁻²; contraction coefficients refer to normalised primitives
N_k r^l exp(−α_k r²) and give a normalised contraction (the convention of the published STO-nG
tables, Hehre, Stewart & Pople, J. Chem. Phys. 51, 2657, 1969).
"""

from __future__ import annotations

from stobuilder.core.defaults import DEFAULTS

from dataclasses import dataclass, field

from stobuilder.model.elements import Configuration, atomic_number
from stobuilder.core.errors import InputError
from stobuilder.model.shells import ShellExponent

L_LETTERS = "SPDFGHI"


@dataclass(frozen=True)
class Shell:
    """One contracted Gaussian shell.

    l             angular momentum
    exponents     primitive exponents α_k in bohr⁻², descending
    coefficients  contraction coefficients for normalised primitives
    label         the STO subshell this shell expands ("2p"), or "" for a shell read from a file
    zeta          the STO exponent ζ in bohr⁻¹ this shell expands, or None
    fit_error     ε of the fit the shell comes from, in the basis' fit norm (dimensionless), or
                  None; provenance only, not part of equality
    """

    l: int
    exponents: tuple[float, ...]
    coefficients: tuple[float, ...]
    label: str = ""
    zeta: float | None = None
    fit_error: float | None = field(default=None, compare=False)

    def __post_init__(self):
        if len(self.exponents) != len(self.coefficients) or not self.exponents:
            raise InputError(f"shell {self.label or self.l}: exponents and coefficients differ in number or are empty")
        if any(not a > 0 for a in self.exponents):
            raise InputError(f"shell {self.label or self.l}: exponents must be positive")

    @property
    def letter(self) -> str:
        return L_LETTERS[self.l]

    def to_pyscf(self) -> list:
        return [self.l, *([a, c] for a, c in zip(self.exponents, self.coefficients))]


@dataclass(frozen=True)
class ElementBasis:
    """The basis of one element: its shells in (n, l) order and the STOs they expand.

    configuration  the electron configuration the exponents were derived from (None if read from
                   a file); ``configuration_label`` is its text ("[Ar] 3d6 4s2", "" if None)
    stos           the ShellExponent of every STO expanded (empty if read from a file)
    """

    symbol: str
    shells: tuple[Shell, ...]
    configuration: Configuration | None = None
    stos: tuple[ShellExponent, ...] = ()

    @property
    def configuration_label(self) -> str:
        return self.configuration.label if self.configuration is not None else ""

    @property
    def z(self) -> int:
        return atomic_number(self.symbol)

    def to_pyscf(self) -> list:
        """PySCF's internal format, shells sorted by l as PySCF's own parsers sort them."""
        return [s.to_pyscf() for s in sorted(self.shells, key=lambda s: s.l)]


@dataclass(frozen=True)
class Basis:
    """A basis set: one ElementBasis per element, sorted by atomic number, plus its provenance.

    rule       the screening rule that gave the ζ ("file" for a basis read from a file)
    gaussians  primitives per STO (N of STO-NG); 0 where the shells differ in length
    norm       the fitting norm of the Gaussian expansion ("l2": least squares)
    """

    elements: tuple[ElementBasis, ...]
    rule: str = DEFAULTS["rule"]
    gaussians: int = DEFAULTS["gaussians"]
    norm: str = DEFAULTS["norm"]
    notes: tuple[str, ...] = field(default=())
    radial: str = DEFAULTS["radial"]  # "effective-n" where the STOs are r^(n*−1) e^(−ζr)

    def __post_init__(self):
        symbols = [e.symbol for e in self.elements]
        if len(set(symbols)) != len(symbols):
            raise InputError(f"basis lists an element twice: {symbols}")
        object.__setattr__(self, "elements", tuple(sorted(self.elements, key=lambda e: e.z)))

    @property
    def name(self) -> str:
        return f"STO-{self.gaussians}G[{self.rule}]"

    @property
    def symbols(self) -> tuple[str, ...]:
        return tuple(e.symbol for e in self.elements)

    def __getitem__(self, symbol: str) -> ElementBasis:
        for e in self.elements:
            if e.symbol == symbol:
                return e
        raise KeyError(symbol)

    def __contains__(self, symbol: str) -> bool:
        return symbol in self.symbols

    def to_pyscf(self) -> dict[str, list]:
        """The basis as PySCF's ``mol.basis`` takes it: {symbol: [[l, [α, c], ...], ...]}."""
        return {e.symbol: e.to_pyscf() for e in self.elements}
