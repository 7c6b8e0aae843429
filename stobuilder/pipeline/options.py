"""The build options: one frozen value, validated once, that every door passes down the path.

``BuildOptions`` holds everything that decides a structure's basis, its files and its checks.
It is validated when it is made (every bad value is a one-line InputError naming the option and
the problem), so the rest of the path trusts it; it converts to and from plain JSON for the
batch manifest (resume compares it) and for tasks sent to other processes or a Dask cluster.
The command line makes it from one argparse group (``add_arguments`` / ``from_args``), shared
by ``build`` and ``batch``. ζ overrides are parsed here (``--zeta`` items and zeta files) and
held in the options as plain numbers; a zeta file is read once, when the options are made.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field, fields

from stobuilder.core.errors import InputError
from stobuilder.core.limits import MAX_CHARGE, whole_number, zeta_value

MAX_CHECK_FRAMES = 3


class OptionError(InputError):
    """A bad value of one build option (or of two that exclude each other). Its text names each
    option as the door that took it calls it: the Python argument (``charge``) by default, and
    the command line's flag (``--charge``) where ``cli.main`` prints it (``render(CLI_FLAGS)``).

    option   the BuildOptions field (or the Python argument) the value was given for
    rest     the message after the name, e.g. " must be a whole number, got 0.5"
    prefix   text before the name, e.g. a structure file's path and ": "
    other    a second option named after ``rest`` (then ``tail`` follows it)
    """

    def __init__(self, option: str, rest: str, prefix: str = "", other: str | None = None, tail: str = ""):
        self.option, self.rest, self.prefix, self.other, self.tail = option, rest, prefix, other, tail
        super().__init__(self.render({}))

    def render(self, names: Mapping[str, str]) -> str:
        """The message with every option called by its name in ``names`` (its own name when absent)."""
        second = "" if self.other is None else names.get(self.other, self.other) + self.tail
        return f"{self.prefix}{names.get(self.option, self.option)}{self.rest}{second}"

    def renamed(self, names: Mapping[str, str]) -> "OptionError":
        """This error with its options called by ``names`` from now on: for a Python door whose
        argument is not the BuildOptions field (the calculator's ``fit`` is ``norm``)."""
        other = None if self.other is None else names.get(self.other, self.other)
        return OptionError(names.get(self.option, self.option), self.rest, self.prefix, other, self.tail)

    def within(self, prefix: str) -> "OptionError":
        """This error with ``prefix`` (e.g. a structure's name and ": ") before its text."""
        return OptionError(self.option, self.rest, prefix + self.prefix, self.other, self.tail)

    @classmethod
    def of(cls, option: str, exc: InputError) -> "OptionError":
        """``exc`` (a message that begins with ``option``, as ``limits`` writes them) as an
        OptionError of ``option``."""
        message = str(exc)
        return cls(option, message[len(option):] if message.startswith(option) else f": {message}")


# The flag of each option on the command line (``add_arguments``, build's own), for ``OptionError.render``.
CLI_FLAGS = {
    "rule": "--rule", "gaussians": "--gaussians", "norm": "--fit", "exponents": "--shared-exponents/--separate-fits",
    "radial": "--radial", "zeta": "--zeta", "zeta_library": "--zeta-file", "zeta_file": "--zeta-file",
    "sp_shells": "--sp-shells", "codes": "--code", "check": "--check", "method": "--method", "charge": "--charge",
    "spin": "--spin", "merge_into": "--merge-into", "split_elements": "--split-elements", "out_dir": "--out",
}


# ---------------------------------------------------------------------------- ζ overrides


def parse_zeta_overrides(items, per_element: bool = False) -> dict:
    """Parse ``--zeta`` items: "1s=1.6875" → {"1s": 1.6875}; per element "Fe:3d=2.1" → {"Fe": {"3d": 2.1}}.

    Errors are OptionErrors of ``zeta`` (``--zeta`` on the command line). Labels are checked to
    be subshell labels (whether the basis has them is checked where the
    overrides are applied); values must be numbers in the range of ``limits.zeta_value`` (bohr⁻¹).
    """
    from stobuilder.model.elements import L_LETTERS, normalise_symbol, parse_subshell_label

    out: dict = {}
    if isinstance(items, str):
        items = [items]  # one item, never its characters
    for item in items or ():
        if not isinstance(item, str):
            raise TypeError(f"zeta overrides: {item!r} is not a text such as '1s=1.6875'")
        text = item
        if "=" not in text:
            raise OptionError("zeta", f" {text!r}: expected {'ELEMENT:' if per_element else ''}LABEL=VALUE")
        key, value = text.split("=", 1)
        if per_element:
            if ":" not in key:
                raise OptionError("zeta", f" {text!r}: expected ELEMENT:LABEL=VALUE, e.g. Fe:3d=2.1")
            sym, label = key.split(":", 1)
            try:
                sym = normalise_symbol(sym)
            except InputError as err:
                raise OptionError("zeta", f" {text!r}: {err}") from None
        else:
            sym, label = None, key
        try:
            n, l = parse_subshell_label(label)
        except InputError as err:
            raise OptionError("zeta", f" {text!r}: {err}") from None
        label = f"{n}{L_LETTERS[l]}"
        try:
            number = float(value)
        except ValueError:
            raise OptionError("zeta", f" {text!r}: {value.strip()!r} is not a number") from None
        try:
            v = zeta_value(number, f"zeta {text!r}")
        except InputError as err:
            raise OptionError.of("zeta", err) from None
        target = out.setdefault(sym, {}) if per_element else out
        if label in target:
            raise OptionError("zeta", f" {text!r}: {label} is given twice")
        target[label] = v
    return out


def _normalised_or_none(text: str):
    from stobuilder.model.elements import normalise_symbol

    try:
        return normalise_symbol(text)
    except InputError:
        return None


def read_toml(path, what: str) -> tuple[dict, str]:
    """(document, "WHAT 'path'") of a TOML file; InputError naming ``what`` and the path for a
    file that cannot be read or is not TOML. The one TOML reader (zeta files, tune's weights)."""
    import sys

    from stobuilder.core import arguments

    path = arguments.path(path, "path")
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # pragma: no cover - Python 3.10
        import tomli as tomllib
    where = f"{what} {str(path)!r}"
    try:
        with open(path, "rb") as fh:
            data = fh.read()
        if data.startswith(b"\xef\xbb\xbf"):  # a UTF-8 byte-order mark, as some editors write
            data = data[3:]
        return tomllib.loads(data.decode("utf-8")), where
    except OSError as err:
        raise InputError(f"{where}: cannot read it ({err.strerror})") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputError(f"{where}: not valid TOML ({' '.join(str(err).split())})") from None


def load_zeta_file(path) -> dict[str, dict[str, float]]:
    """Read a TOML file with one table per element, e.g. ``[Fe]\n3d = 2.1``, into {symbol: {label: ζ}}."""
    from stobuilder.model.elements import L_LETTERS, normalise_symbol, parse_subshell_label

    doc, where = read_toml(path, "zeta file")
    out: dict[str, dict[str, float]] = {}
    for sym, table in doc.items():
        try:
            symbol = normalise_symbol(sym)
        except InputError as err:
            raise InputError(f"{where}: {err}") from None
        if not isinstance(table, dict):
            raise InputError(f"{where}: {sym} must be a table of LABEL = VALUE")
        if symbol in out:  # TOML keys are case-sensitive, element symbols are not: [H] and [h]
            first = next(k for k in doc if k != sym and _normalised_or_none(k) == symbol)
            raise InputError(f"{where}: [{first}] and [{sym}] are both element {symbol}; give one table")
        entry = out[symbol] = {}
        for label, value in table.items():
            try:
                n, l = parse_subshell_label(str(label))
            except InputError as err:
                raise InputError(f"{where}: [{sym}] {err}") from None
            key = f"{n}{L_LETTERS[l]}"
            if key in entry:
                raise InputError(f"{where}: [{sym}] gives {key} twice")
            entry[key] = zeta_value(value, f"{where}: [{sym}] {label}")
    return out


def merge_zeta(*tables: Mapping | None) -> dict[str, dict[str, float]]:
    """Later tables on top of earlier ones: {symbol: {label: ζ}}."""
    out: dict[str, dict[str, float]] = {}
    for table in tables:
        for symbol, entries in (table or {}).items():
            out.setdefault(symbol, {}).update(entries)
    return out


def _frozen_zeta(zeta, option: str = "zeta") -> tuple[tuple[str, tuple[tuple[str, float], ...]], ...]:
    """{symbol: {label: ζ}} (validated, symbols normalised) as a sorted tuple of tuples; errors are
    OptionErrors of ``option``."""
    from stobuilder.model.elements import L_LETTERS, normalise_symbol, parse_subshell_label

    if not zeta:
        return ()
    if isinstance(zeta, tuple):
        zeta = {s: dict(t) for s, t in zeta}
    if not isinstance(zeta, Mapping):
        raise OptionError(option, f" must be a mapping {{symbol: {{label: value}}}}, got {type(zeta).__name__}")
    out: dict[str, dict[str, float]] = {}
    for symbol, table in zeta.items():
        try:
            sym = normalise_symbol(str(symbol))
        except InputError as err:
            raise OptionError(option, f": {err}") from None
        if not isinstance(table, Mapping):
            raise OptionError(option, f" for {sym} must be a mapping label → value, got {type(table).__name__}")
        entry = out.setdefault(sym, {})
        for label, value in table.items():
            try:
                n, l = parse_subshell_label(str(label).strip())
                entry[f"{n}{L_LETTERS[l]}"] = zeta_value(value, f"{option} {sym}:{label}")
            except InputError as err:
                raise OptionError.of(option, err) from None
    return tuple((s, tuple(sorted(t.items()))) for s, t in sorted(out.items()) if t)


def _merged(*tables) -> dict[str, dict[str, float]] | None:
    """Frozen ζ tables (``_frozen_zeta``), later on top of earlier, as {symbol: {label: ζ}}."""
    return merge_zeta(*({s: dict(t) for s, t in table} for table in tables)) or None


# ---------------------------------------------------------------------------- the options


def _whole(value, option: str, minimum: int | None = None, maximum: int | None = None) -> int:
    """``limits.whole_number`` with its error as an OptionError of ``option``."""
    try:
        return whole_number(value, option, minimum, maximum)
    except InputError as err:
        raise OptionError.of(option, err) from None



@dataclass(frozen=True)
class BuildOptions:
    """Everything that decides a structure's basis, files and checks (validated when made).

    rule              screening rule (``stobuilder.rules.rules()``)
    gaussians         N, primitive Gaussians per STO (1–12)
    norm              fitting norm of the expansions: "l2" or "h1"
    exponents         "family", "shared" or "separate" (see ``stobuilder.builder.construct``)
    radial            "integer" or "effective-n"
    zeta              your own ζ (bohr⁻¹): {symbol: {label: ζ}}; held as a sorted tuple, see ``zeta_map``.
                      Every element it names must occur in the structures (``pipeline.check_zeta_elements``)
    zeta_library      ζ from a zeta file (a library, e.g. ``tune``'s for a whole training set):
                      {symbol: {label: ζ}}, applied to the elements a structure has; ``zeta`` goes on top.
                      It must name at least one element of the structures
    zeta_file         the TOML zeta file to read ``zeta_library`` from (read once, when the options
                      are made, unless ``zeta_library`` is given too); only named in messages: it is
                      no part of the options' equality or JSON
    sp_shells         write s and p shells that share exponents as sp shells
    codes             output formats ("all" expands to every one); default nwchem
    check             run the SCF checks (the first ``max_check_frames`` frames of a file)
    method            SCF method of the checks: "auto", "rhf", "rohf", "uhf"
    charge, spin      override the files' charge (e) and 2S; None keeps the file's
    """

    rule: str = "slater"
    gaussians: int = 3
    norm: str = "l2"
    exponents: str = "family"
    radial: str = "integer"
    zeta: tuple = ()
    zeta_library: tuple = ()
    zeta_file: str | None = field(default=None, compare=False)
    sp_shells: bool = False
    codes: tuple[str, ...] = ("nwchem",)
    check: bool = False
    method: str = "auto"
    charge: int | None = None
    spin: int | None = None
    max_check_frames: int = MAX_CHECK_FRAMES

    def __post_init__(self):
        from stobuilder.builder.construct import EXPONENT_MODES, RADIAL_FORMS
        from stobuilder.expansion.fit import MAX_GAUSSIANS, NORMS
        from stobuilder.formats import formats, get_format
        from stobuilder.model.methods import check_method
        from stobuilder.rules import get_rule

        set_ = object.__setattr__
        if not isinstance(self.rule, str):
            raise OptionError("rule", f" must be a rule name, got {self.rule!r}")
        get_rule(self.rule)
        set_(self, "gaussians", _whole(self.gaussians, "gaussians", 1, MAX_GAUSSIANS))
        if self.norm not in NORMS:
            raise OptionError("norm", f" {self.norm!r}: unknown fitting norm; choose one of {', '.join(NORMS)}")
        if self.exponents not in EXPONENT_MODES:
            raise OptionError("exponents", f" {self.exponents!r}: choose one of {', '.join(EXPONENT_MODES)}")
        if self.radial not in RADIAL_FORMS:
            raise OptionError("radial", f" {self.radial!r}: choose one of {', '.join(RADIAL_FORMS)}")
        set_(self, "zeta", _frozen_zeta(self.zeta))
        if self.zeta_file is not None:
            from stobuilder.core import arguments

            set_(self, "zeta_file", arguments.path(self.zeta_file, "zeta_file"))
            if not self.zeta_library:
                set_(self, "zeta_library", load_zeta_file(self.zeta_file))
        set_(self, "zeta_library", _frozen_zeta(self.zeta_library, "zeta_library"))
        codes = (self.codes,) if isinstance(self.codes, str) else tuple(self.codes or ("nwchem",))
        expanded: list[str] = []
        for code in codes:
            if not isinstance(code, str):
                raise OptionError("codes", f" must be format names, got {code!r}")
            expanded.extend(formats() if code == "all" else [get_format(code).name])
        set_(self, "codes", tuple(dict.fromkeys(expanded)))
        for name in ("sp_shells", "check"):
            if not isinstance(getattr(self, name), bool):
                raise OptionError(name, f" must be True or False, got {getattr(self, name)!r}")
        set_(self, "method", check_method(self.method))
        if self.charge is not None:
            set_(self, "charge", _whole(self.charge, "charge", -MAX_CHARGE, MAX_CHARGE))
        if self.spin is not None:
            set_(self, "spin", _whole(self.spin, "spin", 0, MAX_CHARGE))
        set_(self, "max_check_frames", _whole(self.max_check_frames, "max_check_frames", 1))

    # -- views

    @property
    def zeta_map(self) -> dict[str, dict[str, float]] | None:
        """The ζ overrides given as ``zeta`` (not the library) as {symbol: {label: ζ}}, or None."""
        return {s: dict(t) for s, t in self.zeta} or None

    def zeta_for(self, symbols) -> dict[str, dict[str, float]] | None:
        """The ζ overrides of the elements in ``symbols`` only: the library's, ``zeta`` on top."""
        present = set(symbols)
        return _merged(*(tuple(e for e in table if e[0] in present) for table in (self.zeta_library, self.zeta)))

    def replace(self, **changes) -> "BuildOptions":
        """A copy with ``changes`` (validated again)."""
        values = {f.name: getattr(self, f.name) for f in fields(self)} | changes
        return BuildOptions(**values)

    # -- JSON

    def to_json(self) -> dict:
        """Plain JSON (the manifest's ``options`` record), with the stobuilder version."""
        from stobuilder.core.version import __version__

        doc = asdict(self)
        doc.pop("zeta_file")  # a name, not a value: the library's numbers are in zeta_library
        doc["codes"] = list(self.codes)
        doc["zeta"] = self.zeta_map or {}
        doc["zeta_library"] = _merged(self.zeta_library) or {}
        doc["stobuilder"] = __version__
        return doc

    @classmethod
    def from_json(cls, doc: Mapping | str) -> "BuildOptions":
        """The options of ``to_json`` (a dict or its text); unknown keys are an InputError."""
        if isinstance(doc, str):
            try:
                doc = json.loads(doc)
            except json.JSONDecodeError as exc:
                raise InputError(f"build options: not JSON ({exc})") from None
        if not isinstance(doc, Mapping):
            raise InputError("build options: expected a JSON object")
        doc = dict(doc)
        doc.pop("stobuilder", None)
        names = {f.name for f in fields(cls)}
        unknown = set(doc) - names
        if unknown:
            raise InputError(f"build options: unknown option {', '.join(sorted(unknown))}")
        if "codes" in doc and isinstance(doc["codes"], list):
            doc["codes"] = tuple(doc["codes"])
        return cls(**doc)


# ---------------------------------------------------------------------------- the command line


def add_arguments(parser, whole_number_type) -> None:
    """The build options as one argparse group (``build`` and ``batch`` share it)."""
    from stobuilder.builder.construct import RADIAL_FORMS
    from stobuilder.expansion.fit import NORMS
    from stobuilder.formats import formats
    from stobuilder.model.methods import METHODS
    from stobuilder.rules import rules

    g = parser.add_argument_group("build options")
    g.add_argument("--rule", default="slater", help=f"screening rule: {', '.join(rules())} (default slater)")
    g.add_argument("--gaussians", type=whole_number_type, default=3, metavar="N", help="Gaussians per STO, 1–12 (default 3)")
    g.add_argument(
        "--code", action="append", metavar="CODE",
        help=f"output format, repeatable: {', '.join(formats())}, or all (default nwchem)",
    )
    g.add_argument("--check", action="store_true", help="run PySCF SCF checks with the basis before writing")
    g.add_argument("--method", choices=METHODS, default="auto", help="SCF method for --check (default: RHF/ROHF)")
    g.add_argument("--charge", type=whole_number_type, help="total charge (overrides the files)")
    g.add_argument("--spin", type=whole_number_type, help="2S, the number of unpaired electrons (overrides the files)")
    g.add_argument("--sp-shells", action="store_true", help="write s and p shells that share exponents as sp shells")
    g.add_argument(
        "--zeta", action="append", metavar="ELEMENT:LABEL=VALUE",
        help="your own ζ for one subshell, e.g. Fe:3d=2.1 (repeatable; on top of --zeta-file)",
    )
    g.add_argument("--zeta-file", metavar="FILE.toml", help="your own ζ: a TOML table per element, e.g. [Fe] 3d = 2.1")
    g.add_argument("--fit", choices=NORMS, default="l2", help="fitting norm: l2 least squares, h1 Sobolev (default l2)")
    mode = g.add_mutually_exclusive_group()
    mode.add_argument(
        "--shared-exponents", action="store_true",
        help="one exponent set per n, fitted jointly at the rule's zeta ratios (allows sp shells)",
    )
    mode.add_argument("--separate-fits", action="store_true", help="fit every subshell on its own")
    g.add_argument(
        "--radial", choices=RADIAL_FORMS, default="integer",
        help="STO radial form: integer n, or the rule's effective n* (default integer)",
    )


def from_args(args) -> BuildOptions:
    """The BuildOptions of parsed ``add_arguments`` options (the zeta file read now, as the
    options' library: ``--zeta`` on top)."""
    return BuildOptions(
        rule=args.rule,
        gaussians=args.gaussians,
        norm=args.fit,
        exponents="shared" if args.shared_exponents else "separate" if args.separate_fits else "family",
        radial=args.radial,
        zeta=parse_zeta_overrides(args.zeta or [], per_element=True),
        zeta_file=args.zeta_file or None,
        sp_shells=args.sp_shells,
        codes=tuple(args.code or ("nwchem",)),
        check=args.check,
        method=args.method,
        charge=args.charge,
        spin=args.spin,
    )


__all__ = ["BuildOptions", "CLI_FLAGS", "MAX_CHECK_FRAMES", "OptionError", "add_arguments", "from_args", "load_zeta_file", "merge_zeta",
           "parse_zeta_overrides"]
