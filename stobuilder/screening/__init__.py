"""Screening rules by name: each turns a Configuration into one ShellExponent per basis subshell.

A rule is a module with NAME, DESCRIPTION and shell_exponents(conf); adding one is a new module
and one line in ``_MODULES`` (see DEVELOPERS.md).
"""

from __future__ import annotations

from stobuilder.core.defaults import DEFAULTS

import math
from dataclasses import dataclass
from functools import lru_cache
from importlib import import_module
from typing import Callable

from stobuilder.model.elements import Configuration
from stobuilder.core.errors import InputError
from stobuilder.model.shells import ShellExponent, basis_subshells


@dataclass(frozen=True)
class Rule:
    name: str
    description: str
    shell_exponents: Callable[[Configuration], tuple[ShellExponent, ...]]


_MODULES = ("slater", "molecular", "clementi", "optimized")


@lru_cache(maxsize=1)
def _registry() -> tuple[Rule, ...]:
    out = []
    for mod_name in _MODULES:
        mod = import_module(f"{__name__}.{mod_name}")
        out.append(Rule(mod.NAME, mod.DESCRIPTION, mod.shell_exponents))
    return tuple(out)


def rules() -> dict[str, Rule]:
    """All registered rules, by name (the modules are read once)."""
    return {r.name: r for r in _registry()}


def get_rule(name: str) -> Rule:
    table = rules()
    if name not in table:
        raise InputError(f"unknown screening rule {name!r}; choose one of {', '.join(table)}")
    return table[name]


def shell_exponents(conf: Configuration, rule: str = DEFAULTS["rule"]) -> tuple[ShellExponent, ...]:
    """ζ of every basis subshell of ``conf`` under the named rule.

    The one door to every rule: a rule's error is given the element, the configuration and the
    rule's name, and every ζ the rule gives is checked here to be a finite positive number (an
    absurd anion such as H⁵⁻ drives Slater's Zeff below zero)."""
    chosen = get_rule(rule)
    where = f"{conf.symbol} {conf.label}" + (f" (charge {conf.charge:+d})" if conf.charge else "")
    try:
        stos = chosen.shell_exponents(conf)
    except InputError as exc:
        message = str(exc)
        for prefix in (f"{conf.symbol} {conf.label}", f"{conf.symbol}:"):
            if message.startswith(prefix):
                message = message[len(prefix):].lstrip(" :")
        raise InputError(f"{where}, rule {chosen.name}: {message}") from None
    for s in stos:
        if not (math.isfinite(s.zeta) and s.zeta > 0):
            raise InputError(
                f"{where}, rule {chosen.name}: subshell {s.label} gets Zeff = {s.zeff:.4g} and ζ = {s.zeta:.4g} "
                "bohr⁻¹; an STO needs a positive ζ (too many electrons for this nucleus?)"
            )
    return stos


__all__ = ["Rule", "ShellExponent", "basis_subshells", "get_rule", "rules", "shell_exponents"]
