"""Slater's rules for screening constants and effective quantum numbers.

J. C. Slater, "Atomic Shielding Constants", Phys. Rev. 36, 57 (1930).
Groups (1s)(2s,2p)(3s,3p)(3d)(4s,4p)(4d)(4f)(5s,5p)(5d)(5f)(6s,6p). For an electron of a group:
0.35 for each other electron of the same group (0.30 within 1s); for s and p electrons 0.85 for
each electron with principal quantum number n − 1 and 1.00 for each with n − 2 or lower; for d and
f electrons 1.00 for every electron of the groups to the left; nothing for groups to the right.
n* = 1, 2, 3, 3.7, 4.0, 4.2 for n = 1…6. The STO keeps the integer n with ζ = Zeff / n*.
An empty p partner of an occupied s (Li 2p) belongs to the s group and gets the group's ζ.
"""

from __future__ import annotations

from stobuilder.model.elements import Configuration, subshell_label
from stobuilder.core.errors import InputError
from stobuilder.model.shells import ShellExponent, basis_subshells

NAME = "slater"
DESCRIPTION = "Slater's rules (Phys. Rev. 36, 57, 1930), H–Rn, any configuration"

N_EFF = {1: 1.0, 2: 2.0, 3: 3.0, 4: 3.7, 5: 4.0, 6: 4.2}

GROUPS = ("1s", "2sp", "3sp", "3d", "4sp", "4d", "4f", "5sp", "5d", "5f", "6sp")


def group_of(n: int, l: int) -> int:
    """Index of the Slater group of subshell (n, l) in ``GROUPS``."""
    key = f"{n}sp" if l <= 1 and n > 1 else subshell_label(n, l)
    if key not in GROUPS:
        raise InputError(f"Slater's rules have no group for subshell {subshell_label(n, l)}")
    return GROUPS.index(key)


def screening_constant(conf: Configuration, n: int, l: int) -> float:
    """Slater's screening constant S for one electron in subshell (n, l) of ``conf``.

    The electron itself is not counted when (n, l) is occupied.
    """
    g = group_of(n, l)
    same_group = -1 if conf.occupation(n, l) else 0
    s = 0.0
    for sub in conf.subshells:
        gs = group_of(sub.n, sub.l)
        if gs == g:
            same_group += sub.occupation
        elif gs < g:
            if l >= 2 or sub.n < n - 1:
                s += 1.00 * sub.occupation
            elif sub.n == n - 1:
                s += 0.85 * sub.occupation
    return s + (0.30 if n == 1 else 0.35) * same_group


def shell_exponents(conf: Configuration) -> tuple[ShellExponent, ...]:
    """ζ of every basis subshell of ``conf`` by Slater's rules."""
    out = []
    for n, l in basis_subshells(conf):
        if n not in N_EFF:
            raise InputError(f"{conf.symbol}: Slater's rules give no n* for n = {n}")
        if conf.occupation(n, l):
            s = screening_constant(conf, n, l)
        else:  # empty p partner: the ζ an electron of the (ns, np) group sees
            s = screening_constant(conf, n, 0)
        zeff = conf.z - s
        out.append(ShellExponent(subshell_label(n, l), n, l, zeff, N_EFF[n], zeff / N_EFF[n]))
    return tuple(out)
