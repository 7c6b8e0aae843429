"""Screening rules by name: each turns a Configuration into one ShellExponent per basis subshell.

A rule is a module with NAME, DESCRIPTION and shell_exponents(conf); adding one is a new module
and one line in ``_MODULES`` (see DEVELOPERS.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import import_module
from typing import Callable

from ..elements import Configuration
from ..errors import InputError
from .base import ShellExponent, basis_subshells


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


def shell_exponents(conf: Configuration, rule: str = "slater") -> tuple[ShellExponent, ...]:
    """ζ of every basis subshell of ``conf`` under the named rule."""
    return get_rule(rule).shell_exponents(conf)


__all__ = ["Rule", "ShellExponent", "basis_subshells", "get_rule", "rules", "shell_exponents"]
