"""The ranges every number we accept must lie in, checked in one place.

ζ (bohr⁻¹) of an STO, whether from a screening rule, a ``--zeta`` item, a zeta file or the Python
API, lies in [ZETA_MIN, ZETA_MAX]: the 1s of Rn has ζ ≈ 86 and a neutral atom's most diffuse
valence STO under Slater's rules has ζ ≈ 0.5 (Cs 6s: 2.2/4.2), so the range leaves wide room on
both sides while keeping every scaled Gaussian exponent a normal double (common practice, no
source). A Gaussian exponent (bohr⁻²) we write lies in [EXPONENT_MIN, EXPONENT_MAX]. Charges and
2S are whole numbers (``arguments.whole_number``) of at most MAX_CHARGE in size.
Geometry: no two atoms closer than MIN_DISTANCE_ANGSTROM (the shortest bond, H2, is 0.74 Å).
JSON we print or write holds finite numbers only (``strict_json``). Text taken from an input (a
file name, a structure's comment) goes into a comment or a field of our files only through
``one_line``, so that it cannot end the comment or the field and become live content.
"""

from __future__ import annotations

import math
import re
from numbers import Real

from stobuilder.core.errors import InputError

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


# Characters that end a line for some reader (str.splitlines' set: \n \r \v \f \x1c-\x1e \x85
# \u2028 \u2029), the other control characters, and the quote and backslash of TOML, JSON and
# Python strings. Each becomes \uNNNN, an escape that TOML, JSON and Python strings decode back to
# the character, and that is plain text in a comment (common practice, no source).
_UNSAFE = re.compile(r'[\x00-\x1f\x7f-\x9f\u2028\u2029"\\]')


def one_line(text) -> str:
    """``text`` (any object, via str) as one line of printable text that no reader can take for
    more than one line, a closing quote or an escape: control characters, line separators, the
    double quote and the backslash become ``\\uNNNN``. Use it for every text from an input that
    goes into a comment or a field of a file we write (zeta files, basis-file headers, TSV, HTML
    after html.escape, extxyz comments).

    >>> print(one_line('h2.xyz\\n[He]\\n1s = 5.0'))
    h2.xyz\\u000a[He]\\u000a1s = 5.0
    """
    return _UNSAFE.sub(lambda match: f"\\u{ord(match.group()):04x}", str(text))


def strict_json(doc, failure: str) -> str:
    """``doc`` as indented strict JSON (RFC 8259: no NaN, no Infinity); InputError ``failure``
    when it holds a number that is not finite. Every JSON we print or write goes through it."""
    import json

    try:
        return json.dumps(doc, indent=2, allow_nan=False)
    except ValueError:
        raise InputError(failure) from None
