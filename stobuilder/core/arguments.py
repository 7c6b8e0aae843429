"""Checks of the public functions' arguments, made once at their entry.

A value of the wrong type raises TypeError and a value of the right type that cannot be meant
(a fractional charge, a non-finite number) raises InputError; both messages name the argument.
A string is never taken as a sequence of its characters: where a function takes several element
symbols or paths, one string is one symbol or one path.
"""

from __future__ import annotations

import numbers
import os
from collections.abc import Iterable, Mapping

from stobuilder.core.errors import InputError


def kind(value) -> str:
    """The type name of ``value``, for a TypeError's message."""
    return type(value).__name__


def shown(value) -> str:
    """``repr(value)``, cut to 60 characters, for an error's message."""
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def whole_number(value, name: str, minimum: int | None = None, maximum: int | None = None,
                 allow_none: bool = False) -> int | None:
    """``value`` as an int in [``minimum``, ``maximum``] (each bound optional); None only with
    ``allow_none``. An int (or numpy integer) is taken; a bool, a string, None or another
    non-number is a TypeError; a float, even a whole one such as 1.0, and an int out of range are
    InputErrors ("must be a whole number", "must be >= ..."). Every message begins with ``name``."""
    if value is None and allow_none:
        return None
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"{name} must be a whole number, got {kind(value)} {shown(value)}")
    if not isinstance(value, numbers.Integral):
        raise InputError(f"{name} must be a whole number, got {shown(value)}")
    v = int(value)
    if minimum is not None and v < minimum:
        raise InputError(f"{name} must be >= {minimum}, got {v}")
    if maximum is not None and v > maximum:
        raise InputError(f"{name} must be <= {maximum}, got {v}")
    return v


def text(value, name: str) -> str:
    """``value`` itself when it is a str; TypeError naming ``name`` otherwise."""
    if not isinstance(value, str):
        raise TypeError(f"{name} must be a str, got {kind(value)} {shown(value)}")
    return value


def flag(value, name: str) -> bool:
    """``value`` when it is a bool (or numpy's); TypeError otherwise ("no" is not False)."""
    if isinstance(value, bool) or type(value).__name__ == "bool_":
        return bool(value)
    raise TypeError(f"{name} must be True or False, got {kind(value)} {shown(value)}")



def path(value, name: str = "path") -> str:
    """A file path: str or os.PathLike (not bytes); TypeError naming ``name`` otherwise."""
    if isinstance(value, os.PathLike):
        value = os.fspath(value)
    if not isinstance(value, str):
        raise TypeError(f"{name} must be a path (str or os.PathLike), got {kind(value)} {shown(value)}")
    return value


def paths(value, name: str = "paths") -> tuple[str, ...]:
    """File paths: one path (str or os.PathLike) or an iterable of them."""
    if isinstance(value, (str, os.PathLike)):
        return (path(value, name),)
    if isinstance(value, (bytes, Mapping)) or not isinstance(value, Iterable):
        raise TypeError(f"{name} must be a path or a list of paths, got {kind(value)} {shown(value)}")
    return tuple(path(item, f"{name}: item {item!r}") for item in value)


def names(value, name: str) -> tuple[str, ...] | None:
    """None, one name (str) or an iterable of names (str each)."""
    if value is None:
        return None
    if isinstance(value, str):
        return (value,)
    if isinstance(value, (bytes, Mapping)) or not isinstance(value, Iterable):
        raise TypeError(f"{name} must be a name or a list of names, got {kind(value)} {shown(value)}")
    return tuple(text(item, f"{name}: item") for item in value)



def mapping(value, name: str):
    """None or a mapping; TypeError otherwise."""
    if value is not None and not isinstance(value, Mapping):
        raise TypeError(f"{name} must be a mapping (dict), got {kind(value)} {shown(value)}")
    return value
