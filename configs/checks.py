"""How every config value is checked: the one error type and the small checks behind it.

This is the bottom layer of seedsweep: agents, envs and the runner all raise
:class:`ConfigError`, and the command line turns it into the single line
``seedsweep: error: <field>: <message>`` with exit status 2. Nothing here imports the rest
of the project.
"""

from __future__ import annotations

import difflib
import math
import types
import typing
from collections.abc import Iterable
from typing import Any


class ConfigError(ValueError):
    """A bad setting: names the field and what is allowed. The CLI prints it on one line."""

    def __init__(self, field: str, message: str):
        super().__init__(f"{field}: {message}")
        self.field = field


def suggest(name: str, allowed: Iterable[str]) -> str:
    """``"; did you mean 'x'?"`` for the allowed name closest to a mistyped one, else ``""``."""
    close = difflib.get_close_matches(name, list(allowed), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def unknown_key(field: str, name: str, allowed: Iterable[str], what: str = "option") -> ConfigError:
    """The error for a key that is not one of ``allowed``, with the nearest match."""
    allowed = sorted(allowed)
    return ConfigError(field, f"unknown {what} (allowed: {', '.join(allowed)})"
                       + suggest(name, allowed))


def check_type(field: str, value: Any, hint: Any, finite: bool = True) -> Any:
    """Check ``value`` against a simple type hint (bool, int, float, str, list[...],
    Literal[...], Optional); ints are accepted where floats are expected. Floats must be
    finite (``finite=False`` leaves that to the caller, e.g. to let a range check speak
    first): a NaN or infinite setting is always a mistake in a config."""
    origin = typing.get_origin(hint)
    args = typing.get_args(hint)
    if origin in (typing.Union, types.UnionType):
        if value is None and type(None) in args:
            return None
        inner = [a for a in args if a is not type(None)]
        errors = []
        for a in inner:
            try:
                return check_type(field, value, a, finite)
            except ConfigError as err:
                errors.append(err)
        raise errors[0]
    if origin is typing.Literal:
        if value not in args:
            raise ConfigError(field, f"got {value!r} (allowed: {', '.join(map(repr, args))})")
        return value
    if origin in (list, tuple):
        if not isinstance(value, (list, tuple)):
            raise ConfigError(field, f"expected a list, got {value!r}")
        item = args[0] if args else Any
        return [check_type(f"{field}[{i}]", v, item, finite) for i, v in enumerate(value)]
    if hint is Any:
        return value
    if hint is bool:
        if not isinstance(value, bool):
            raise ConfigError(field, f"expected true or false, got {value!r}")
        return value
    if hint is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(field, f"expected an integer, got {value!r}")
        return value
    if hint is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(field, f"expected a number, got {value!r}")
        if finite and not math.isfinite(value):
            raise ConfigError(field, f"must be a finite number (got {value!r})")
        return float(value)
    if hint is str:
        if not isinstance(value, str):
            raise ConfigError(field, f"expected a string, got {value!r}")
        return value
    return value


def nonfinite(value: Any) -> bool:
    """Whether a config value is, or holds, a NaN or infinite float."""
    if isinstance(value, float):
        return not math.isfinite(value)
    if isinstance(value, (list, tuple)):
        return any(nonfinite(v) for v in value)
    return False


def require(field: str, value: Any, ok: bool, allowed: str) -> None:
    """Range check for a Config ``__post_init__``: ``require("lr", lr, lr > 0, "> 0")``."""
    if not ok:
        raise ConfigError(field, f"must be {allowed} (got {value!r})")
