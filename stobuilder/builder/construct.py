"""From elements to a Basis: configuration → rule → shell families → scaled Gaussian expansions.

The input is a ``BasisSpec`` (stobuilder.builder.spec), the one value that decides a basis.

Shell families: all basis subshells with the same principal quantum number n share one set of
Gaussian exponents and are fitted jointly at ζ = 1 (1s; 2s2p; 3s3p, or 3s3p3d once 3d is
occupied; 4s4p(4d)(4f); ...). Each subshell's exponents are the family's ζ = 1 exponents times its
own ζ², so a transition metal's 3d uses the d part of the joint 3s3p3d expansion with its own ζ:
the construction of the published STO-3G (Hehre, Stewart & Pople 1969; Pietro & Hehre, J. Comput.
Chem. 4, 241, 1983).

Sharing (``spec.sharing``): "family" (the default, above); "shared": a family is fitted jointly at
the actual ratios of its ζ (fit_sto's zeta_ratio) and every subshell gets the very same exponents,
so s and p can be written as sp shells even when the rule gives them different ζ; "separate":
each subshell is fitted on its own and scaled by its own ζ². With ``radial="effective-n"`` the
STOs are r^(n*−1) e^(−ζr) with the rule's effective n* (Slater's 3.7, 4.0, 4.2 for n = 4, 5, 6)
instead of r^(n−1) e^(−ζr).

``basis_of`` is the one memoised basis constructor: every door that builds bases for many
structures (prepare, batch workers, bench, tune, the calculator) asks it, keyed by the element
set, the spec (its own equality) and a single atom's charge.
"""

from __future__ import annotations

import functools
import numbers
import warnings
from collections.abc import Iterable, Mapping
from itertools import groupby

from stobuilder.core.defaults import DEFAULTS
from stobuilder.builder.spec import BasisSpec, ZetaTable, deprecated_sharing, spec_notes
from stobuilder.core import arguments
from stobuilder.core.errors import InputError
from stobuilder.core.limits import EXPONENT_MAX, EXPONENT_MIN, ZETA_MAX, ZETA_MIN, exponent_value, zeta_value
from stobuilder.model.basis import Basis, ElementBasis, Shell
from stobuilder.model.elements import Configuration, atomic_number, looks_like_configuration, normalise_symbol, resolve
from stobuilder.model.shells import ShellExponent
from stobuilder.screening import shell_exponents

ZetaOverrides = Mapping[str, float]


def apply_zeta_overrides(
    stos: tuple[ShellExponent, ...], overrides: ZetaOverrides | None, where: str = ""
) -> tuple[ShellExponent, ...]:
    """Replace the ζ (bohr⁻¹) of the subshells named in ``overrides`` (label → ζ, validated where
    the ZetaTable was made); ``where`` is appended to messages (" for Fe"). InputError for a
    label that is no basis subshell."""
    if not overrides:
        return stos
    known = {s.label: s for s in stos}
    out = dict(known)
    for label, value in overrides.items():
        if label not in known:
            raise InputError(f"zeta override {label!r}{where}: not a basis subshell (basis: {', '.join(known)})")
        s = known[label]
        out[label] = ShellExponent(s.label, s.n, s.l, value * s.n_eff, s.n_eff, value)
    return tuple(out[s.label] for s in stos)


def sto_exponents(
    element: str | Configuration,
    rule: str = DEFAULTS["rule"],
    charge: int = 0,
    configuration: str | Configuration | None = None,
    zeta: ZetaOverrides | None = None,
) -> tuple[Configuration, tuple[ShellExponent, ...]]:
    """The configuration and the STO exponents of every basis subshell of one element: the
    rule's, with ``zeta`` ({label: ζ}, already validated) on top."""
    if isinstance(element, Configuration):
        configuration, element = element, element.symbol
    conf = resolve(element, charge, configuration)
    stos = shell_exponents(conf, rule)
    for s in stos:
        if not ZETA_MIN <= s.zeta <= ZETA_MAX:  # also True for NaN
            where = f"{conf.symbol}{f' (charge {conf.charge:+d})' if conf.charge else ''} {conf.label}"
            zeta_value(s.zeta, f"{where}: rule {rule}, subshell {s.label}")
    return conf, apply_zeta_overrides(stos, zeta, f" for {conf.symbol}")


def zeta_values(element, rule=DEFAULTS["rule"], charge=0, configuration=None) -> dict[str, float]:
    """ζ (bohr⁻¹) of every basis subshell of ``element``, e.g. {"1s": 6.7, "2s": 1.95, "2p": 1.95} for N."""
    return {s.label: s.zeta for s in sto_exponents(element, rule, charge, configuration)[1]}


def exponents(element, rule=DEFAULTS["rule"], charge=0, configuration=None) -> dict[str, float]:
    """Deprecated name of ``zeta_values`` (the ζ of the STOs, not Gaussian exponents)."""
    warnings.warn("stobuilder.exponents is deprecated; use stobuilder.zeta_values", DeprecationWarning, stacklevel=2)
    return zeta_values(element, rule, charge, configuration)


def zeff(element, rule=DEFAULTS["rule"], charge=0, configuration=None) -> dict[str, float]:
    """Effective nuclear charge Z − S of every basis subshell of ``element``."""
    return {s.label: s.zeff for s in sto_exponents(element, rule, charge, configuration)[1]}


def shell_families(stos: Iterable[ShellExponent]) -> list[tuple[ShellExponent, ...]]:
    """Group STOs by principal quantum number: the subshells that share Gaussian exponents."""
    ordered = sorted(stos, key=lambda s: (s.n, s.l))
    return [tuple(group) for _, group in groupby(ordered, key=lambda s: s.n)]


def expand(stos: tuple[ShellExponent, ...], spec: BasisSpec) -> tuple[Shell, ...]:
    """Contracted Gaussian shells for the STOs under ``spec`` (its gaussians, norm, sharing and
    radial form; see the module docstring). Every Shell carries ``fit_error``: ε of its subshell
    in the fit it comes from (in ``spec.norm``)."""
    from stobuilder.expansion import lookup  # here: ζ alone (zeta_values, zeff) needs no fits

    shells = []
    sharing = spec.sharing
    groups = [(s,) for s in sorted(stos, key=lambda s: (s.n, s.l))] if sharing == "separate" else shell_families(stos)
    for family in groups:
        labels = [s.label for s in family]
        n_eff = {s.label: s.n_eff for s in family if s.n_eff != s.n} if spec.radial == "effective-n" else None
        ratio = None
        if sharing == "shared":
            ratio = {s.label: s.zeta / family[0].zeta for s in family if s.zeta != family[0].zeta} or None
        try:
            fit = lookup(labels, spec.gaussians, spec.norm, n_eff=n_eff or None, zeta_ratio=ratio)
        except InputError as exc:
            raise InputError(f"subshells {', '.join(labels)}: {exc}") from None
        for s in family:
            scale = (family[0].zeta if sharing == "shared" else s.zeta) ** 2
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


def _element_basis(conf: Configuration, spec: BasisSpec) -> ElementBasis:
    """The basis of one resolved configuration under ``spec`` (its ζ table's entry for the element on top)."""
    conf, stos = sto_exponents(conf, spec.rule, zeta=spec.zeta.of_element(conf.symbol))
    try:
        shells = expand(stos, spec)
    except InputError as exc:
        raise InputError(f"{conf.symbol}: {exc}") from None
    return ElementBasis(conf.symbol, shells, conf, stos)


def element_basis(
    element: str | Configuration,
    spec: BasisSpec | None = None,
    charge: int = 0,
    configuration: str | Configuration | None = None,
    zeta: ZetaOverrides | None = None,
    **spec_fields,
) -> ElementBasis:
    """The STO-NG basis of one element (or ion, or explicit configuration).

    spec         a BasisSpec; or give its fields as keywords (rule, gaussians, norm, sharing, radial)
    charge       ionic charge (electrons removed) when no configuration is given
    zeta         {label: ζ in bohr⁻¹} for this element, on top of the spec's
    """
    if isinstance(element, Configuration):
        configuration, element = element, element.symbol
    arguments.text(element, "element")
    charge = arguments.whole_number(charge, "charge")
    spec = make_spec(spec, spec_fields, "element_basis")
    conf = resolve(element, charge, configuration)
    if zeta is not None:
        extra = ZetaTable.of({conf.symbol: arguments.mapping(zeta, "zeta")})
        spec = spec.with_zeta(extra.over(spec.zeta))
    return _element_basis(conf, spec)


def make_spec(spec: BasisSpec | None, fields: dict, where: str) -> BasisSpec:
    """``spec``, or the BasisSpec of ``fields`` (its own keywords; the deprecated ``exponents`` is
    read as ``sharing``). TypeError for a spec that is none, or for both."""
    deprecated_sharing(fields, f"{where}()", stacklevel=3)
    if spec is None:
        return BasisSpec(**fields)
    if not isinstance(spec, BasisSpec):
        raise TypeError(f"{where}(): spec must be a BasisSpec, got {type(spec).__name__} {spec!r}")
    if fields:
        raise TypeError(f"{where}(): give spec or its fields ({', '.join(fields)}), not both")
    return spec


def build_basis(
    elements: Iterable[str | Configuration],
    spec: BasisSpec | None = None,
    charge: int | Mapping[str, int] | None = None,
    **spec_fields,
) -> Basis:
    """Build the STO-NG basis for a set of elements.

    Parameters
    ----------
    elements : symbols ("Fe"), configuration strings ("Fe: [Ar] 3d7 4s1", "[Ar] 3d7 4s1") or
        Configuration objects; repeats are ignored. One string is one element ("Co" is cobalt).
    spec : a BasisSpec (stobuilder.builder.spec), or give its fields as keywords:
        rule (screening rule, ``stobuilder.screening.rules()``), gaussians (N primitives per STO),
        norm ("l2" least squares, Hehre, Stewart & Pople 1969; "h1" Sobolev, value and gradient),
        sharing ("family", "shared" or "separate"), radial ("integer" or "effective-n"),
        zeta ({symbol: {label: ζ}} overriding the rule's ζ, bohr⁻¹, for the subshells named).
    charge : None (neutral atoms), an int applied to every element, or {symbol: charge}.

    >>> build_basis(["O", "H"], rule="molecular").name
    'STO-3G[molecular]'
    """
    elements = _element_items(elements)
    spec = make_spec(spec, spec_fields, "build_basis")
    if isinstance(charge, Mapping):
        charge = {k: arguments.whole_number(v, f"charge[{k!r}]") for k, v in charge.items()}
    else:
        charge = arguments.whole_number(charge, "charge", allow_none=True)
    confs: dict[str, Configuration] = {}
    for item in elements:
        if isinstance(item, Configuration):
            conf = item
        elif looks_like_configuration(item):
            conf = resolve(item)
        else:
            symbol = normalise_symbol(item)
            q = charge.get(symbol, 0) if isinstance(charge, Mapping) else int(charge or 0)
            conf = resolve(symbol, q)
        confs.setdefault(conf.symbol, conf)
    missing = set(spec.zeta.symbols) - set(confs)
    if missing:
        raise InputError(f"zeta overrides name elements not in the basis: {', '.join(sorted(missing))}")
    if not confs:
        raise InputError("no elements to build a basis for")
    return Basis(
        tuple(_element_basis(c, spec) for c in confs.values()),
        rule=spec.rule, gaussians=spec.gaussians, norm=spec.norm, notes=spec_notes(spec), radial=spec.radial,
    )


@functools.lru_cache(maxsize=2048)
def _basis_of(symbols: tuple[str, ...], spec: BasisSpec, charge: int | None) -> Basis:
    return build_basis(symbols, spec, charge=charge)


def basis_of(symbols: Iterable[str], spec: BasisSpec, charge: int | None = None) -> Basis:
    """The basis of the elements ``symbols`` under ``spec`` (neutral atoms, or all at ``charge``),
    memoised: the one basis cache of the package, keyed by the element set, the spec restricted to
    those elements (its own equality: a field added to BasisSpec is part of the key) and the charge.
    Bases are immutable, so a cached one is the same value a new build gives."""
    symbols = tuple(sorted(set(symbols), key=atomic_number))
    return _basis_of(symbols, spec.restricted(symbols), charge)


basis_of.cache_clear = _basis_of.cache_clear  # type: ignore[attr-defined]
basis_of.cache_info = _basis_of.cache_info  # type: ignore[attr-defined]


def _element_items(value, name: str = "elements") -> tuple:
    """The items of ``value``: element symbols or configuration strings, or Configurations. One
    string is one item (``"Co"`` is cobalt, never C and O)."""
    if isinstance(value, (str, Configuration)):
        return (value,)
    if isinstance(value, (bytes, Mapping)) or not isinstance(value, Iterable):
        raise TypeError(f"{name} must be an element symbol or a list of them, got {arguments.kind(value)} {arguments.shown(value)}")
    items = tuple(value)
    for item in items:
        if not isinstance(item, (str, Configuration)):
            hint = " (give symbols such as 'Fe', not atomic numbers)" if isinstance(item, numbers.Integral) else ""
            raise TypeError(f"{name}: {item!r} is not an element symbol{hint}; got {arguments.kind(item)}")
    return items
