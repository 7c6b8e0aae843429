"""From elements to a Basis: configuration → rule → shell families → scaled Gaussian expansions.

Shell families: all basis subshells with the same principal quantum number n share one set of
Gaussian exponents and are fitted jointly at ζ = 1 (1s; 2s2p; 3s3p, or 3s3p3d once 3d is
occupied; 4s4p(4d)(4f); ...). Each subshell's exponents are the family's ζ = 1 exponents times its
own ζ², so a transition metal's 3d uses the d part of the joint 3s3p3d expansion with its own ζ:
the construction of the published STO-3G (Hehre, Stewart & Pople 1969; Pietro & Hehre, J. Comput.
Chem. 4, 241, 1983).

Options (``exponents``): "family" (the default, above); "shared": a family is fitted jointly at the
actual ratios of its ζ (fit_sto's zeta_ratio) and every subshell gets the very same exponents, so
s and p can be written as sp shells even when the rule gives them different ζ; "separate": each
subshell is fitted on its own and scaled by its own ζ². With ``radial="effective-n"`` the STOs are
r^(n*−1) e^(−ζr) with the rule's effective n* (Slater's 3.7, 4.0, 4.2 for n = 4, 5, 6) instead
of r^(n−1) e^(−ζr).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping
from itertools import groupby

from stobuilder.core import arguments
from stobuilder.model.basis import Basis, ElementBasis, Shell
from stobuilder.model.elements import Configuration, looks_like_configuration, normalise_symbol, resolve
from stobuilder.core.errors import InputError
from stobuilder.expansion import lookup
from stobuilder.core.limits import EXPONENT_MAX, EXPONENT_MIN, ZETA_MAX, ZETA_MIN, exponent_value, zeta_value
from stobuilder.rules import ShellExponent, shell_exponents

ZetaOverrides = Mapping[str, float]
EXPONENT_MODES = ("family", "shared", "separate")
RADIAL_FORMS = ("integer", "effective-n")


def apply_zeta_overrides(
    stos: tuple[ShellExponent, ...], overrides: ZetaOverrides | None, where: str = ""
) -> tuple[ShellExponent, ...]:
    """Replace the ζ (bohr⁻¹) of the subshells named in ``overrides`` (label → ζ); ``where`` is
    appended to messages (" for Fe"). InputError for an unknown label, a non-numeric or a
    non-positive value."""
    if not overrides:
        return stos
    if not isinstance(overrides, Mapping):
        raise InputError(f"zeta overrides{where} must be a mapping label → value, got {type(overrides).__name__}")
    known = {s.label: s for s in stos}
    out = dict(known)
    for label, value in overrides.items():
        key = str(label).strip()
        if key not in known:
            raise InputError(f"zeta override {label!r}{where}: not a basis subshell (basis: {', '.join(known)})")
        v = zeta_value(value, f"zeta override {key}={value!r}{where}")
        s = known[key]
        out[key] = ShellExponent(s.label, s.n, s.l, v * s.n_eff, s.n_eff, v)
    return tuple(out[s.label] for s in stos)


def sto_exponents(
    element: str,
    rule: str = "slater",
    charge: int = 0,
    configuration: str | Configuration | None = None,
    zeta: ZetaOverrides | None = None,
) -> tuple[Configuration, tuple[ShellExponent, ...]]:
    """The configuration and the STO exponents of every basis subshell of one element."""
    conf = resolve(element, charge, configuration)
    stos = shell_exponents(conf, rule)
    for s in stos:
        if ZETA_MIN <= s.zeta <= ZETA_MAX:  # also False for NaN
            continue
        where = f"{conf.symbol}{f' (charge {conf.charge:+d})' if conf.charge else ''} {conf.label}"
        if not (math.isfinite(s.zeta) and s.zeta > 0):
            raise InputError(
                f"{where}: rule {rule} gives subshell {s.label} ζ = {s.zeta:.6g} (Zeff = {s.zeff:.6g}); "
                "the screening leaves it no positive effective charge"
            )
        zeta_value(s.zeta, f"{where}: rule {rule}, subshell {s.label}")
    stos = apply_zeta_overrides(stos, zeta, f" for {conf.symbol}")
    return conf, stos


def exponents(element, rule="slater", charge=0, configuration=None) -> dict[str, float]:
    """ζ (bohr⁻¹) of every basis subshell of ``element``, e.g. {"1s": 6.7, "2s": 1.95, "2p": 1.95} for N."""
    return {s.label: s.zeta for s in sto_exponents(element, rule, charge, configuration)[1]}


def zeff(element, rule="slater", charge=0, configuration=None) -> dict[str, float]:
    """Effective nuclear charge Z − S of every basis subshell of ``element``."""
    return {s.label: s.zeff for s in sto_exponents(element, rule, charge, configuration)[1]}


def shell_families(stos: Iterable[ShellExponent]) -> list[tuple[ShellExponent, ...]]:
    """Group STOs by principal quantum number: the subshells that share Gaussian exponents."""
    ordered = sorted(stos, key=lambda s: (s.n, s.l))
    return [tuple(group) for _, group in groupby(ordered, key=lambda s: s.n)]


def check_options(exponents: str, radial: str) -> None:
    if exponents not in EXPONENT_MODES:
        raise InputError(f"exponents {exponents!r}: choose one of {', '.join(EXPONENT_MODES)}")
    if radial not in RADIAL_FORMS:
        raise InputError(f"radial {radial!r}: choose one of {', '.join(RADIAL_FORMS)}")


def expand(
    stos: tuple[ShellExponent, ...],
    gaussians: int,
    norm: str = "l2",
    exponents: str = "family",
    radial: str = "integer",
) -> tuple[Shell, ...]:
    """Contracted Gaussian shells for the STOs (see the module docstring for ``exponents``, ``radial``).

    Every Shell carries ``fit_error``: ε of its subshell in the fit it comes from (in ``norm``).
    """
    check_options(exponents, radial)
    shells = []
    groups = [(s,) for s in sorted(stos, key=lambda s: (s.n, s.l))] if exponents == "separate" else shell_families(stos)
    for family in groups:
        labels = [s.label for s in family]
        n_eff = {s.label: s.n_eff for s in family if s.n_eff != s.n} if radial == "effective-n" else None
        ratio = None
        if exponents == "shared":
            ratio = {s.label: s.zeta / family[0].zeta for s in family if s.zeta != family[0].zeta} or None
        try:
            fit = lookup(labels, gaussians, norm, n_eff=n_eff or None, zeta_ratio=ratio)
        except InputError as exc:
            raise InputError(f"subshells {', '.join(labels)}: {exc}") from None
        for s in family:
            scale = (family[0].zeta if exponents == "shared" else s.zeta) ** 2
            for a in (min(fit.exponents), max(fit.exponents)):
                if not EXPONENT_MIN <= a * scale <= EXPONENT_MAX:
                    exponent_value(a * scale, f"subshell {s.label} (ζ = {s.zeta:g})")
            shells.append(
                Shell(
                    l=s.l,
                    exponents=tuple(a * scale for a in fit.exponents),
                    coefficients=tuple(fit.coefficients[s.label]),
                    label=s.label,
                    zeta=s.zeta,
                    fit_error=fit.error[s.label],
                )
            )
    return tuple(shells)


def option_notes(exponents: str, radial: str) -> tuple[str, ...]:
    """Provenance lines for non-default expansion options (none for the defaults)."""
    notes = []
    if exponents == "shared":
        notes.append("Gaussian exponents: shared within each n, fitted jointly at the rule's zeta ratios")
    elif exponents == "separate":
        notes.append("Gaussian exponents: each subshell fitted on its own")
    if radial == "effective-n":
        notes.append("radial form: r^(n*-1) exp(-zeta r) with the rule's effective n*")
    return tuple(notes)


def element_basis(
    element: str | Configuration,
    rule: str = "slater",
    gaussians: int = 3,
    charge: int = 0,
    configuration: str | Configuration | None = None,
    zeta: ZetaOverrides | None = None,
    norm: str = "l2",
    exponents: str = "family",
    radial: str = "integer",
) -> ElementBasis:
    """The STO-NG basis of one element (or ion, or explicit configuration); options as ``build_basis``."""
    if isinstance(element, Configuration):
        configuration, element = element, element.symbol
    arguments.text(element, "element")
    arguments.mapping(zeta, "zeta")
    conf, stos = sto_exponents(element, rule, charge, configuration, zeta)
    try:
        shells = expand(stos, gaussians, norm, exponents, radial)
    except InputError as exc:
        raise InputError(f"{conf.symbol}: {exc}") from None
    return ElementBasis(conf.symbol, shells, conf.label, stos)


def build_basis(
    elements: Iterable[str | Configuration],
    rule: str = "slater",
    gaussians: int = 3,
    charge: int | Mapping[str, int] | None = None,
    zeta: Mapping[str, ZetaOverrides] | None = None,
    norm: str = "l2",
    exponents: str = "family",
    radial: str = "integer",
) -> Basis:
    """Build the STO-NG basis for a set of elements.

    Parameters
    ----------
    elements : symbols ("Fe"), configuration strings ("Fe: [Ar] 3d7 4s1", "[Ar] 3d7 4s1") or
        Configuration objects; repeats are ignored. One string is one element ("Co" is cobalt).
    rule : screening rule name (see ``stobuilder.rules.rules()``).
    gaussians : N, the number of primitive Gaussians per STO.
    charge : None (neutral atoms), an int applied to every element, or {symbol: charge}.
    zeta : {symbol: {label: ζ}} overriding the rule's ζ (bohr⁻¹) for the subshells named.
    norm : fitting norm of the expansion: "l2" (least squares, Hehre, Stewart & Pople 1969) or
        "h1" (Sobolev norm, value and gradient; contractions renormalised in L²).
    exponents : "family" (default: joint ζ = 1 fit per n, each subshell scaled by its own ζ²),
        "shared" (joint fit at the actual ζ ratios, exponents exactly shared) or "separate"
        (one fit per subshell).
    radial : "integer" (r^(n−1) e^(−ζr)) or "effective-n" (r^(n*−1) e^(−ζr), the rule's n*).
    """
    elements = _element_items(elements)
    if isinstance(charge, Mapping):
        charge = {k: arguments.whole_number(v, f"charge[{k!r}]", allow_none=False) for k, v in charge.items()}
    else:
        charge = arguments.whole_number(charge, "charge")
    for symbol, table in (arguments.mapping(zeta, "zeta") or {}).items():
        arguments.mapping(table, f"zeta[{symbol!r}]")
    check_options(exponents, radial)
    built: dict[str, ElementBasis] = {}
    zeta = dict(zeta or {})
    for item in elements:
        if isinstance(item, Configuration):
            conf = item
        else:
            conf = resolve(item) if looks_like_configuration(item) else None
        symbol = conf.symbol if conf is not None else normalise_symbol(item)
        if symbol in built:
            continue
        q = charge.get(symbol, 0) if isinstance(charge, Mapping) else int(charge or 0)
        built[symbol] = element_basis(symbol, rule, gaussians, q, conf, zeta.pop(symbol, None), norm, exponents, radial)
    if zeta:
        raise InputError(f"zeta overrides name elements not in the basis: {', '.join(sorted(zeta))}")
    if not built:
        raise InputError("no elements to build a basis for")
    return Basis(
        tuple(built.values()), rule=rule, gaussians=gaussians, norm=norm, notes=option_notes(exponents, radial), radial=radial
    )


def _element_items(value, name: str = "elements") -> tuple:
    """The items of ``value``: element symbols or configuration strings, or Configurations. One
    string is one item (``"Co"`` is cobalt, never C and O)."""
    if isinstance(value, (str, Configuration)):
        return (value,)
    if isinstance(value, (bytes, Mapping)) or not isinstance(value, Iterable):
        raise TypeError(f"{name} must be an element symbol or a list of them, got {arguments._kind(value)} {arguments._shown(value)}")
    items = tuple(value)
    for item in items:
        if not isinstance(item, (str, Configuration)):
            hint = " (give symbols such as 'Fe', not atomic numbers)" if isinstance(item, numbers.Integral) else ""
            raise TypeError(f"{name}: {item!r} is not an element symbol{hint}; got {arguments._kind(item)}")
    return items
