"""The choice of SCF method, in one place for the Gaussian checks and the exact-STO atoms.

"auto" is RHF for a closed shell and ROHF for an open one; an explicit "rhf", "rohf" or "uhf"
applies to the system it was asked for (a closed-shell RHF request on an open shell is an error).
Free atoms computed beside a structure (its free-atom check, the exact-STO atoms) take the method
their own electron count allows: the requested one where it can describe them, else the "auto"
choice, with a note saying so (``free_atom_method``).
"""

from __future__ import annotations

from stobuilder.core.errors import InputError

METHODS = ("auto", "rhf", "rohf", "uhf")


def check_method(method) -> str:
    """The method name in lower case; TypeError for one that is no string, InputError for an
    unknown one (both messages name ``method``)."""
    if not isinstance(method, str):
        raise TypeError(f"method must be a str ({', '.join(METHODS)}), got {type(method).__name__} {method!r}")
    m = method.lower()
    if m not in METHODS:
        raise InputError(f"method {method!r}: unknown SCF method; choose one of {', '.join(METHODS)}")
    return m


def pick_method(method: str, spin: int, what: str = "") -> str:
    """"RHF", "ROHF" or "UHF": RHF for closed shells and ROHF for open ones under "auto"; an
    explicit choice is validated (``what`` names the system in the message)."""
    m = check_method(method)
    if m == "auto":
        return "RHF" if spin == 0 else "ROHF"
    if m == "rhf" and spin != 0:
        raise InputError(
            f"RHF needs a closed shell{' ' + what if what else ''}; it has {_unpaired(spin)} (spin {spin})"
        )
    return m.upper()


def free_atom_method(method: str, spin: int, what: str = "") -> tuple[str, str]:
    """(method, note) for a free atom checked beside a structure: the requested method where it
    can describe ``spin`` unpaired electrons, else the "auto" choice and a note naming why."""
    m = check_method(method)
    if m == "rhf" and spin != 0:
        chosen = pick_method("auto", spin)
        return chosen, f"{what or 'free atom'}: {chosen} (RHF needs a closed shell; it has {_unpaired(spin)})"
    return pick_method(m, spin, what), ""


def _unpaired(spin: int) -> str:
    return f"{spin} unpaired electron{'' if spin == 1 else 's'}"
