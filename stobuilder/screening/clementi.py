"""Screening constants of Clementi & Raimondi for Z ≤ 36.

E. Clementi and D. L. Raimondi, "Atomic Screening Constants from SCF Functions",
J. Chem. Phys. 38, 2686 (1963): linear formulas for the screening constant s of each subshell,
fitted to their variationally optimised single-ζ exponents; ζ = (Z − s)/n with the integer n.
All coefficients below are values from memory (not checked against a copy of the paper); the
tests compare the rule with the exact optimised exponents of stobuilder.exact.atoms, which the
formulas reproduce to about 0.01–0.03 in ζ (the size of the fit's own residuals).
An empty p partner of an occupied s (Li 2p, K 4p) takes the ζ of that s, as in the other rules.
"""

from __future__ import annotations

from stobuilder.model.elements import Configuration, subshell_label
from stobuilder.core.errors import InputError
from stobuilder.model.shells import ShellExponent, basis_subshells

NAME = "clementi"
DESCRIPTION = "Clementi & Raimondi screening formulas (J. Chem. Phys. 38, 2686, 1963), Z ≤ 36"

MAX_Z = 36
SUBSHELLS = ("1s", "2s", "2p", "3s", "3p", "3d", "4s", "4p")


def screening_constant(conf: Configuration, label: str) -> float:
    """Clementi–Raimondi screening constant of ``label`` in ``conf`` (coefficients: value from memory)."""
    occ = {lab: 0 for lab in SUBSHELLS}
    for s in conf.subshells:
        occ[s.label] = s.occupation
    own = {lab: max(q - 1, 0) for lab, q in occ.items()}  # the electron itself is not counted
    n1s, n2s, n2p, n3s, n3p, n3d, n4s, n4p = (occ[lab] for lab in SUBSHELLS)
    outer3 = n3s + n3p + n3d + n4s + n4p
    if label == "1s":
        return 0.3 * own["1s"] + 0.0072 * (n2s + n2p) + 0.0158 * outer3
    if label == "2s":
        return 1.7208 + 0.3601 * (own["2s"] + n2p) + 0.2062 * outer3
    if label == "2p":
        return 2.5787 + 0.3326 * own["2p"] - 0.0773 * n3s - 0.0161 * (n3p + n4s) - 0.0048 * n3d + 0.0085 * n4p
    if label == "3s":
        return 8.4927 + 0.2501 * (own["3s"] + n3p) + 0.0778 * n4s + 0.3382 * n3d + 0.1978 * n4p
    if label == "3p":
        return 9.3345 + 0.3803 * own["3p"] + 0.0526 * n4s + 0.3289 * n3d + 0.1558 * n4p
    if label == "4s":
        return 15.505 + 0.0971 * own["4s"] + 0.8433 * n3d + 0.0687 * n4p
    if label == "3d":
        return 13.5894 + 0.2693 * own["3d"] - 0.1065 * n4p
    if label == "4p":
        return 24.7782 + 0.2905 * own["4p"]
    raise InputError(f"the clementi rule has no formula for subshell {label}")


def shell_exponents(conf: Configuration) -> tuple[ShellExponent, ...]:
    """ζ = (Z − s)/n of every basis subshell of ``conf`` by the Clementi–Raimondi formulas."""
    if conf.z > MAX_Z:
        raise InputError(f"the clementi rule covers Z ≤ {MAX_Z} (H–Kr), not {conf.symbol}; use --rule slater")
    for s in conf.subshells:
        if s.label not in SUBSHELLS:
            raise InputError(f"the clementi rule has no formula for subshell {s.label} of {conf.symbol} {conf.label}")
    out = {}
    for n, l in basis_subshells(conf):
        label = subshell_label(n, l)
        if conf.occupation(n, l):
            zeff = conf.z - screening_constant(conf, label)
            out[label] = ShellExponent(label, n, l, zeff, float(n), zeff / n)
    for n, l in basis_subshells(conf):
        label = subshell_label(n, l)
        if label not in out:  # empty p partner: the ζ of the s of its n
            s = out[subshell_label(n, 0)]
            out[label] = ShellExponent(label, n, l, s.zeta * n, float(n), s.zeta)
    return tuple(out[subshell_label(n, l)] for n, l in basis_subshells(conf))
