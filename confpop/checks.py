"""Argument checks shared by the library's entry points (no RDKit, no engines).

Each check returns the cleaned value or raises :class:`~confpop.errors.InputError` naming the
argument, what was expected and what came.
"""

from __future__ import annotations

from .errors import InputError

__all__: list[str] = []


def _check_int(argument, value):
    if value is None:
        return None
    if isinstance(value, bool):
        raise InputError(f"{argument} must be an integer, got {value!r}")
    if isinstance(value, float):
        if not value.is_integer():
            raise InputError(f"{argument} must be an integer, got {value!r}")
        return int(value)
    try:
        return int(value.__index__())
    except (AttributeError, TypeError):
        raise InputError(f"{argument} must be an integer, got {value!r}") from None


def _check_method(method):
    if method is None:
        return None
    if not isinstance(method, str) or not method.strip():
        raise InputError(f"method must be a method name such as 'gfn2' or 'mmff94', "
                         f"got {method!r}")
    return method.strip().lower()
