"""The basis specification: one frozen value that decides every element's basis.

``BasisSpec`` is what ``build_basis`` takes, the key of the one basis cache (``basis_of``: the
value's own equality and hash, so a field added here changes the key with no further edit) and
what every door (build, batch, bench, tune, relax, the calculator, the Python API) passes down
unchanged. It is validated once, when it is made; inside, the path trusts it.

``ZetaTable`` is the one shape of user ζ (bohr⁻¹): {symbol: {label: ζ}} held as sorted tuples,
symbols normalised, labels canonical ("3d"), every ζ in the supported range. ``--zeta`` items,
zeta files, tune's results and Python mappings all become a ZetaTable at the edge.

The defaults are stobuilder.core.defaults.DEFAULTS (one table for every door).

>>> spec = BasisSpec(rule="molecular", gaussians=6)
>>> spec.norm, spec.sharing
('l2', 'family')
>>> BasisSpec(zeta={"fe": {"3D": 2.1}}).zeta.as_dict()
{'Fe': {'3d': 2.1}}
"""

from __future__ import annotations

from stobuilder.core.defaults import DEFAULTS

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, fields

from stobuilder.core.errors import InputError, OptionError
from stobuilder.core.arguments import whole_number
from stobuilder.core.limits import zeta_value

SHARING_MODES = ("family", "shared", "separate")
RADIAL_FORMS = ("integer", "effective-n")

# DEFAULTS (stobuilder.core.defaults) hold the defaults of every field.


def _label(text) -> str:
    from stobuilder.model.elements import L_LETTERS, parse_subshell_label

    n, l = parse_subshell_label(str(text).strip())
    return f"{n}{L_LETTERS[l]}"


@dataclass(frozen=True)
class ZetaTable:
    """User ζ (bohr⁻¹) per element and subshell: ((symbol, ((label, ζ), ...)), ...), sorted.

    Make one with ``ZetaTable.of(mapping)``, ``ZetaTable.parse(items)`` (the ``--zeta`` grammar)
    or ``ZetaTable.load(path)`` (a zeta file); the constructor itself trusts its input.
    """

    entries: tuple[tuple[str, tuple[tuple[str, float], ...]], ...] = ()

    # -- making one (the only places that validate ζ)

    @classmethod
    def of(cls, value, option: str = "zeta") -> "ZetaTable":
        """A ZetaTable of ``value``: a ZetaTable, None, or a mapping {symbol: {label: ζ}}.
        TypeError for a value of the wrong type; OptionError of ``option`` for a bad symbol,
        label or ζ."""
        if value is None:
            return cls()
        if isinstance(value, ZetaTable):
            return value
        if not isinstance(value, Mapping):
            raise TypeError(f"{option} must be a mapping {{symbol: {{label: zeta}}}}, got {type(value).__name__}")
        from stobuilder.model.elements import normalise_symbol

        out: dict[str, dict[str, float]] = {}
        for symbol, table in value.items():
            if not isinstance(symbol, str):
                raise TypeError(f"{option}: element {symbol!r} must be a symbol such as 'Fe', got {type(symbol).__name__}")
            try:
                sym = normalise_symbol(symbol)
            except InputError as err:
                raise OptionError(option, f": {err}") from None
            if not isinstance(table, Mapping):
                raise TypeError(f"{option}[{symbol!r}] must be a mapping label → zeta, got {type(table).__name__}")
            if sym in out and symbol != sym:
                raise OptionError(option, f": {symbol!r} and another key are both element {sym}; give one")
            entry = out.setdefault(sym, {})
            for label, zeta in table.items():
                try:
                    entry[_label(label)] = zeta_value(zeta, f"{option} {sym}:{label}")
                except InputError as err:
                    raise OptionError.of(option, err) from None
        return cls._frozen(out)

    @classmethod
    def parse(cls, items: Iterable[str] | str | None, element: str | None = None, option: str = "zeta") -> "ZetaTable":
        """The ``--zeta`` grammar ``[ELEMENT:]LABEL=VALUE``: "Fe:3d=2.1"; the element may be left
        out only where ``element`` names the one element of the command ("1s=1.6875" with
        element="He"). A subshell given twice is an error. OptionError of ``option``."""
        from stobuilder.model.elements import normalise_symbol

        out: dict[str, dict[str, float]] = {}
        if isinstance(items, str):
            items = [items]  # one item, never its characters
        for text in items or ():
            if not isinstance(text, str):
                raise TypeError(f"{option}: {text!r} is not a text such as 'Fe:3d=2.1'")
            form = "ELEMENT:LABEL=VALUE" if element is None else "[ELEMENT:]LABEL=VALUE"
            if "=" not in text:
                raise OptionError(option, f" {text!r}: expected {form}, e.g. Fe:3d=2.1")
            key, value = text.split("=", 1)
            if ":" in key:
                sym, label = key.split(":", 1)
                try:
                    sym = normalise_symbol(sym)
                except InputError as err:
                    raise OptionError(option, f" {text!r}: {err}") from None
                if element is not None and sym != element:
                    raise OptionError(option, f" {text!r}: {sym} is not the element of this command ({element})")
            elif element is None:
                raise OptionError(option, f" {text!r}: expected {form}, e.g. Fe:3d=2.1")
            else:
                sym, label = element, key
            try:
                label = _label(label)
            except InputError as err:
                raise OptionError(option, f" {text!r}: {err}") from None
            try:
                number = float(value)
            except ValueError:
                raise OptionError(option, f" {text!r}: {value.strip()!r} is not a number") from None
            try:
                zeta = zeta_value(number, f"{option} {text!r}")
            except InputError as err:
                raise OptionError.of(option, err) from None
            target = out.setdefault(sym, {})
            if label in target:
                raise OptionError(option, f" {text!r}: {sym} {label} is given twice")
            target[label] = zeta
        return cls._frozen(out)

    @classmethod
    def load(cls, path) -> "ZetaTable":
        """A zeta file: TOML with one table per element, ``[Fe]`` then ``3d = 2.1``. InputError
        naming the file for a file that cannot be read, is not TOML or holds a bad entry."""
        from stobuilder.core.files import read_toml
        from stobuilder.model.elements import normalise_symbol

        doc, where = read_toml(path, "zeta file")
        out: dict[str, dict[str, float]] = {}
        seen: dict[str, str] = {}
        for sym, table in doc.items():
            try:
                symbol = normalise_symbol(sym)
            except InputError as err:
                raise InputError(f"{where}: {err}") from None
            if not isinstance(table, dict):
                raise InputError(f"{where}: {sym} must be a table of LABEL = VALUE")
            if symbol in seen:  # TOML keys are case-sensitive, element symbols are not: [H] and [h]
                raise InputError(f"{where}: [{seen[symbol]}] and [{sym}] are both element {symbol}; give one table")
            seen[symbol] = sym
            entry = out[symbol] = {}
            for label, value in table.items():
                try:
                    key = _label(label)
                except InputError as err:
                    raise InputError(f"{where}: [{sym}] {err}") from None
                if key in entry:
                    raise InputError(f"{where}: [{sym}] gives {key} twice")
                entry[key] = zeta_value(value, f"{where}: [{sym}] {label}")
        return cls._frozen(out)

    @classmethod
    def _frozen(cls, table: Mapping[str, Mapping[str, float]]) -> "ZetaTable":
        return cls(tuple((s, tuple(sorted(t.items()))) for s, t in sorted(table.items()) if t))

    # -- views

    def __bool__(self) -> bool:
        return bool(self.entries)

    @property
    def symbols(self) -> tuple[str, ...]:
        return tuple(s for s, _ in self.entries)

    def as_dict(self) -> dict[str, dict[str, float]]:
        """{symbol: {label: ζ}} (a new dict)."""
        return {s: dict(t) for s, t in self.entries}

    def of_element(self, symbol: str) -> dict[str, float]:
        """{label: ζ} of one element (empty when the table does not name it)."""
        for s, t in self.entries:
            if s == symbol:
                return dict(t)
        return {}

    def restricted(self, symbols: Iterable[str]) -> "ZetaTable":
        """The entries of the elements in ``symbols`` only."""
        present = set(symbols)
        return ZetaTable(tuple(e for e in self.entries if e[0] in present))

    def over(self, base: "ZetaTable") -> "ZetaTable":
        """This table on top of ``base`` (this one's ζ win, subshell by subshell)."""
        if not base:
            return self
        merged = base.as_dict()
        for symbol, table in self.entries:
            merged.setdefault(symbol, {}).update(table)
        return ZetaTable._frozen(merged)


def _choice(spec, name: str, choices) -> None:
    value = getattr(spec, name)
    if not isinstance(value, str):
        raise TypeError(f"{name} must be one of {', '.join(choices)}, got {type(value).__name__} {value!r}")
    if value not in choices:
        raise OptionError(name, f" {value!r}: choose one of {', '.join(choices)}")


@dataclass(frozen=True)
class BasisSpec:
    """Everything that decides the basis of a set of elements (validated when made).

    rule       screening rule (``stobuilder.screening.rules()``)
    gaussians  N, primitive Gaussians per STO (1–``expansion.MAX_GAUSSIANS``)
    norm       fitting norm of the expansions: "l2" (least squares) or "h1" (Sobolev)
    sharing    which STOs share Gaussian exponents: "family" (one joint ζ = 1 fit per n, each
               subshell scaled by its own ζ²), "shared" (joint fit at the actual ζ ratios, exactly
               shared exponents) or "separate" (one fit per subshell); see stobuilder.builder.construct
    radial     "integer" (r^(n−1) e^(−ζr)) or "effective-n" (r^(n*−1) e^(−ζr), the rule's n*)
    zeta       your own ζ (bohr⁻¹) on top of the rule's: a ZetaTable (any mapping
               {symbol: {label: ζ}} is converted when the spec is made)

    Errors: TypeError for a value of the wrong type, OptionError (an InputError) naming the field
    for a wrong value.
    """

    rule: str = DEFAULTS["rule"]
    gaussians: int = DEFAULTS["gaussians"]
    norm: str = DEFAULTS["norm"]
    sharing: str = DEFAULTS["sharing"]
    radial: str = DEFAULTS["radial"]
    zeta: ZetaTable = field(default_factory=ZetaTable)

    def __post_init__(self):
        from stobuilder.expansion.fit import MAX_GAUSSIANS, NORMS
        from stobuilder.screening import rules

        set_ = object.__setattr__
        _choice(self, "rule", tuple(rules()))
        try:
            set_(self, "gaussians", whole_number(self.gaussians, "gaussians", 1, MAX_GAUSSIANS))
        except InputError as err:
            raise OptionError.of("gaussians", err) from None
        _choice(self, "norm", NORMS)
        _choice(self, "sharing", SHARING_MODES)
        _choice(self, "radial", RADIAL_FORMS)
        set_(self, "zeta", ZetaTable.of(self.zeta))

    def with_zeta(self, zeta: ZetaTable) -> "BasisSpec":
        """This spec with ``zeta`` as its ζ table; the other fields are not validated again (tune's
        step, where only ζ changes)."""
        if not isinstance(zeta, ZetaTable):
            raise TypeError(f"zeta must be a ZetaTable, got {type(zeta).__name__}")
        out = object.__new__(BasisSpec)
        for f in fields(self):
            object.__setattr__(out, f.name, getattr(self, f.name))
        object.__setattr__(out, "zeta", zeta)
        return out

    def restricted(self, symbols: Iterable[str]) -> "BasisSpec":
        """This spec with its ζ table cut to the elements in ``symbols`` (the cache key of a basis
        of those elements: a ζ of an absent element changes nothing)."""
        zeta = self.zeta.restricted(symbols)
        return self if zeta == self.zeta else self.with_zeta(zeta)

    def to_json(self) -> dict:
        """Plain JSON: the fields, ``zeta`` as {symbol: {label: ζ}}."""
        return {f.name: (self.zeta.as_dict() if f.name == "zeta" else getattr(self, f.name)) for f in fields(self)}


def deprecated_sharing(values: dict, where: str, stacklevel: int = 3) -> None:
    """Rename the deprecated keyword ``exponents`` (the sharing mode) in ``values`` to ``sharing``
    with a DeprecationWarning; TypeError when both are given."""
    import warnings

    if "exponents" in values:
        if "sharing" in values:
            raise TypeError(f"{where}: give sharing, not both sharing and the deprecated exponents")
        warnings.warn(f"{where}: the keyword exponents is deprecated; use sharing", DeprecationWarning, stacklevel=stacklevel + 1)
        values["sharing"] = values.pop("exponents")


def spec_notes(spec: BasisSpec) -> tuple[str, ...]:
    """Provenance lines for the non-default expansion choices (none for the defaults)."""
    notes = []
    if spec.sharing == "shared":
        notes.append("Gaussian exponents: shared within each n, fitted jointly at the rule's zeta ratios")
    elif spec.sharing == "separate":
        notes.append("Gaussian exponents: each subshell fitted on its own")
    if spec.radial == "effective-n":
        notes.append("radial form: r^(n*-1) exp(-zeta r) with the rule's effective n*")
    return tuple(notes)


__all__ = ["RADIAL_FORMS", "SHARING_MODES", "BasisSpec", "ZetaTable", "spec_notes"]
