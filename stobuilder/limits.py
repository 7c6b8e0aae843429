"""The ranges every number we accept must lie in, checked in one place.

ζ (bohr⁻¹) of an STO, whether from a screening rule, a ``--zeta`` item, a zeta file or the Python
API, lies in [ZETA_MIN, ZETA_MAX]: the 1s of Rn has ζ ≈ 86 and a neutral atom's most diffuse
valence STO under Slater's rules has ζ ≈ 0.5 (Cs 6s: 2.2/4.2), so the range leaves wide room on
both sides while keeping every scaled Gaussian exponent a normal double (common practice, no
source). A Gaussian exponent (bohr⁻²) we write lies
in [EXPONENT_MIN, EXPONENT_MAX]. Charges and 2S are whole numbers of at most MAX_CHARGE in size.
Geometry: no two atoms closer than MIN_DISTANCE_ANGSTROM (the shortest bond, H2, is 0.74 Å).
JSON we print or write holds finite numbers only (``strict_json``).
"""

from __future__ import annotations

import math
from numbers import Integral, Real

from .errors import InputError

ZETA_MIN = 1e-3
ZETA_MAX = 1e3
EXPONENT_MIN = 1e-12
EXPONENT_MAX = 1e15
MAX_CHARGE = 1000
MIN_DISTANCE_ANGSTROM = 0.1


def zeta_value(value, where: str) -> float:
    """``value`` as a ζ in bohr⁻¹; InputError (prefixed by ``where``) unless it is a real number
    in [ZETA_MIN, ZETA_MAX]."""
    if isinstance(value, bool) or not isinstance(value, Real):
        raise InputError(f"{where}: {value!r} is not a number")
    try:
        v = float(value)
    except OverflowError:  # a huge integer (e.g. from TOML)
        v = math.inf
    if not math.isfinite(v):
        raise InputError(f"{where}: ζ = {value!r} is not a finite number")
    if v <= 0:
        raise InputError(f"{where}: ζ = {v!r} must be positive")
    if not ZETA_MIN <= v <= ZETA_MAX:
        raise InputError(f"{where}: ζ = {v!r} bohr^-1 is outside the supported range {ZETA_MIN:g}–{ZETA_MAX:g}")
    return v


def exponent_value(value: float, where: str) -> float:
    """A Gaussian exponent (bohr⁻²) we are about to write: finite, normal, in range."""
    v = float(value)
    if not (math.isfinite(v) and EXPONENT_MIN <= v <= EXPONENT_MAX):
        raise InputError(
            f"{where}: Gaussian exponent {v!r} bohr^-2 is outside {EXPONENT_MIN:g}–{EXPONENT_MAX:g} "
            "(too small or too large a ζ)"
        )
    return v


def whole_number(value, name: str, minimum: int | None = None, maximum: int | None = None) -> int:
    """``value`` as an int; InputError naming ``name`` for a non-integer (bool, float, text, None)
    or a value out of [minimum, maximum]."""
    if isinstance(value, bool) or not isinstance(value, Integral):
        raise InputError(f"{name} must be a whole number, got {value!r}")
    v = int(value)
    if minimum is not None and v < minimum:
        raise InputError(f"{name} must be >= {minimum}, got {v}")
    if maximum is not None and v > maximum:
        raise InputError(f"{name} must be <= {maximum}, got {v}")
    return v


def strict_json(doc, failure: str) -> str:
    """``doc`` as indented strict JSON (RFC 8259: no NaN, no Infinity); InputError ``failure``
    when it holds a number that is not finite. Every JSON we print or write goes through it."""
    import json

    try:
        return json.dumps(doc, indent=2, allow_nan=False)
    except ValueError:
        raise InputError(failure) from None
