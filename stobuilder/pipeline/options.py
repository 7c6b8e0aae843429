"""The build options: what a door asks for, as three values made and validated once.

``BuildOptions`` is one structure job's request: the basis (a ``BasisSpec``, the one value that
decides a basis, with the ζ library of a zeta file beside it), the output (``OutputOptions``:
the codes and how each file is written) and the checks (``CheckOptions``: whether to run the SCF
checks, their method, the charge and spin that override the files'). Each part is validated
when it is made, so the rest of the path trusts it; the whole converts to and from plain JSON for
the batch manifest (resume compares it) and for tasks sent to other processes or a Dask cluster.
``BuildOptions(rule="molecular", check=True, ...)`` takes the parts' fields as keywords.

Where files go (out_dir, force, merge_into, split_elements) is no option of the content: it
belongs to the call that writes (``build_structures``, ``run_batch``).
"""

from __future__ import annotations

import json
import warnings
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

from stobuilder.builder.spec import BasisSpec, ZetaTable, deprecated_sharing
from stobuilder.core.errors import InputError, OptionError
from stobuilder.core.arguments import whole_number
from stobuilder.core.limits import MAX_CHARGE

MAX_CHECK_FRAMES = 3


def _whole(value, option: str, minimum: int | None = None, maximum: int | None = None) -> int:
    """``arguments.whole_number`` with its InputError as an OptionError of ``option``."""
    try:
        return whole_number(value, option, minimum, maximum)
    except InputError as err:
        raise OptionError.of(option, err) from None


@dataclass(frozen=True)
class OutputOptions:
    """What the basis files hold and how they are written.

    codes      output formats ("all" expands to every one); default nwchem
    sp_shells  write s and p shells that share exponents as sp shells
    """

    codes: tuple[str, ...] = ("nwchem",)
    sp_shells: bool = False

    def __post_init__(self):
        from stobuilder.formats import formats, get_format

        codes = (self.codes,) if isinstance(self.codes, str) else self.codes
        if codes is None:
            codes = ("nwchem",)
        if not isinstance(codes, Iterable):
            raise TypeError(f"codes must be format names, got {type(codes).__name__}")
        expanded: list[str] = []
        for code in codes:
            if not isinstance(code, str):
                raise TypeError(f"codes must be format names, got {type(code).__name__} {code!r}")
            try:
                expanded.extend(formats() if code == "all" else [get_format(code, "codes").name])
            except InputError as err:
                raise OptionError.of("codes", err) from None
        object.__setattr__(self, "codes", tuple(dict.fromkeys(expanded)) or ("nwchem",))
        if not isinstance(self.sp_shells, bool):
            raise TypeError(f"sp_shells must be True or False, got {self.sp_shells!r}")


@dataclass(frozen=True)
class CheckOptions:
    """The SCF checks of a structure.

    run           run them (the first ``max_frames`` frames of a file)
    method        "auto", "rhf", "rohf", "uhf"
    charge, spin  override the files' charge (e) and 2S; None keeps the file's (a structure of
                  one atom is an ion: its charge also decides its configuration, hence its basis)
    """

    run: bool = False
    method: str = "auto"
    charge: int | None = None
    spin: int | None = None
    max_frames: int = MAX_CHECK_FRAMES

    def __post_init__(self):
        from stobuilder.model.methods import check_method

        set_ = object.__setattr__
        if not isinstance(self.run, bool):
            raise TypeError(f"check must be True or False, got {self.run!r}")
        try:
            set_(self, "method", check_method(self.method))
        except InputError as err:
            raise OptionError.of("method", err) from None
        if self.charge is not None:
            set_(self, "charge", _whole(self.charge, "charge", -MAX_CHARGE, MAX_CHARGE))
        if self.spin is not None:
            set_(self, "spin", _whole(self.spin, "spin", 0, MAX_CHARGE))
        set_(self, "max_frames", _whole(self.max_frames, "max_check_frames", 1))


# The flat keywords of BuildOptions (the README's contract) and the part each belongs to.
_BASIS_KEYS = ("rule", "gaussians", "norm", "sharing", "radial", "zeta")
_OUTPUT_KEYS = {"codes": "codes", "sp_shells": "sp_shells"}
_CHECK_KEYS = {"check": "run", "method": "method", "charge": "charge", "spin": "spin", "max_check_frames": "max_frames"}
FLAT_KEYS = (*_BASIS_KEYS, "zeta_library", "zeta_file", *_OUTPUT_KEYS, *_CHECK_KEYS)


@dataclass(frozen=True, init=False)
class BuildOptions:
    """One structure job's request: the basis, the output and the checks (validated when made).

    basis         the BasisSpec (rule, gaussians, norm, sharing, radial, zeta); its ``zeta`` are your
                  own ζ, and every element they name must occur in the structures
                  (``pipeline.path.check_zeta_elements``)
    library       ζ from a zeta file (a ZetaTable, e.g. ``tune``'s for a whole training set), applied
                  to the elements a structure has; ``basis.zeta`` goes on top. It must name at
                  least one element of the structures
    zeta_file     the TOML zeta file the library was read from (read once, when the options are
                  made, unless ``zeta_library`` is given too); only named in messages: no part of
                  the options' equality or JSON
    output        OutputOptions (codes, sp_shells)
    checks        CheckOptions (run, method, charge, spin, max_frames)

    Made from the parts (``BuildOptions(basis=BasisSpec(...), checks=CheckOptions(run=True))``)
    or from their fields as keywords: rule, gaussians, norm, sharing, radial, zeta, zeta_library,
    zeta_file, codes, sp_shells, check, method, charge, spin, max_check_frames.
    """

    basis: BasisSpec
    library: ZetaTable
    output: OutputOptions
    checks: CheckOptions
    zeta_file: str | None = field(default=None, compare=False)

    def __init__(self, basis: BasisSpec | None = None, output: OutputOptions | None = None,
                 checks: CheckOptions | None = None, library: ZetaTable | None = None, **flat):
        deprecated_sharing(flat, "BuildOptions")
        unknown = set(flat) - set(FLAT_KEYS)
        if unknown:
            raise TypeError(f"BuildOptions: unknown option {', '.join(sorted(unknown))}")
        for part, keys, name in ((basis, _BASIS_KEYS, "basis"), (output, _OUTPUT_KEYS, "output"), (checks, _CHECK_KEYS, "checks")):
            given = [k for k in keys if k in flat]
            if part is not None and given:
                raise TypeError(f"BuildOptions: give {name} or its fields ({', '.join(given)}), not both")
        if basis is None:
            basis = BasisSpec(**{k: flat[k] for k in _BASIS_KEYS if k in flat})
        elif not isinstance(basis, BasisSpec):
            raise TypeError(f"basis must be a BasisSpec, got {type(basis).__name__}")
        if output is None:
            output = OutputOptions(**{v: flat[k] for k, v in _OUTPUT_KEYS.items() if k in flat})
        elif not isinstance(output, OutputOptions):
            raise TypeError(f"output must be an OutputOptions, got {type(output).__name__}")
        if checks is None:
            checks = CheckOptions(**{v: flat[k] for k, v in _CHECK_KEYS.items() if k in flat})
        elif not isinstance(checks, CheckOptions):
            raise TypeError(f"checks must be a CheckOptions, got {type(checks).__name__}")
        zeta_file = flat.get("zeta_file")
        if library is not None and "zeta_library" in flat:
            raise TypeError("BuildOptions: give library or zeta_library, not both")
        library = ZetaTable.of(library if library is not None else flat.get("zeta_library"), "zeta_library")
        if zeta_file is not None:
            from stobuilder.core import arguments

            zeta_file = arguments.path(zeta_file, "zeta_file")
            if not library:
                library = ZetaTable.load(zeta_file)
        set_ = object.__setattr__
        set_(self, "basis", basis)
        set_(self, "library", library)
        set_(self, "output", output)
        set_(self, "checks", checks)
        set_(self, "zeta_file", zeta_file)

    # -- views

    def spec_for(self, symbols: Iterable[str]) -> BasisSpec:
        """The basis spec of a structure with the elements ``symbols``: the library's ζ of those
        elements, ``basis.zeta`` on top (the key of its basis)."""
        symbols = tuple(symbols)
        zeta = self.basis.zeta.over(self.library).restricted(symbols)
        return self.basis if zeta == self.basis.zeta else self.basis.with_zeta(zeta)

    # -- JSON

    def to_json(self) -> dict:
        """Plain JSON (the manifest's ``options`` record): the parts' fields, flat, with the
        stobuilder version."""
        from stobuilder.core.version import __version__

        doc = self.basis.to_json()
        doc["zeta_library"] = self.library.as_dict()
        doc["sp_shells"] = self.output.sp_shells
        doc["codes"] = list(self.output.codes)
        for flat, name in _CHECK_KEYS.items():
            doc[flat] = getattr(self.checks, name)
        doc["stobuilder"] = __version__
        return doc

    @classmethod
    def from_json(cls, doc: Mapping | str) -> "BuildOptions":
        """The options of ``to_json`` (a dict or its text); unknown keys are an InputError. A
        record of an earlier version with ``exponents`` (the sharing mode) is read as ``sharing``."""
        if isinstance(doc, str):
            try:
                doc = json.loads(doc)
            except json.JSONDecodeError as exc:
                raise InputError(f"build options: not JSON ({exc})") from None
        if not isinstance(doc, Mapping):
            raise InputError("build options: expected a JSON object")
        doc = dict(doc)
        doc.pop("stobuilder", None)
        if "exponents" in doc and "sharing" not in doc:
            doc["sharing"] = doc.pop("exponents")
        unknown = set(doc) - set(FLAT_KEYS) - {"zeta_file"}
        if unknown:
            raise InputError(f"build options: unknown option {', '.join(sorted(unknown))}")
        if "codes" in doc and isinstance(doc["codes"], list):
            doc["codes"] = tuple(doc["codes"])
        return cls(**doc)


def load_zeta_file(path) -> dict[str, dict[str, float]]:
    """Deprecated: ``ZetaTable.load(path).as_dict()``."""
    warnings.warn("load_zeta_file is deprecated; use stobuilder.ZetaTable.load", DeprecationWarning, stacklevel=2)
    return ZetaTable.load(path).as_dict()


def parse_zeta_overrides(items, per_element: bool = False) -> dict:
    """Deprecated: ``ZetaTable.parse(items)`` (the ``[ELEMENT:]LABEL=VALUE`` grammar)."""
    warnings.warn("parse_zeta_overrides is deprecated; use stobuilder.ZetaTable.parse", DeprecationWarning, stacklevel=2)
    if per_element:
        return ZetaTable.parse(items).as_dict()
    return ZetaTable.parse(items, element="H").of_element("H")


__all__ = ["BuildOptions", "CheckOptions", "MAX_CHECK_FRAMES", "OutputOptions", "load_zeta_file", "parse_zeta_overrides"]
