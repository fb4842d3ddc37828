"""The confpop error hierarchy.

Every error raised on purpose by confpop derives from :class:`ConfpopError` and also from
the builtin a caller would expect, so ``except ValueError`` keeps working.
"""

from __future__ import annotations

__all__ = [
    "ConfpopError",
    "InputError",
    "BackendUnavailable",
    "CalculationFailed",
    "StoreError",
    "OutputError",
    "ConfpopWarning",
    "StoreWarning",
]


class ConfpopError(Exception):
    """Root of every error that confpop raises deliberately."""


class InputError(ConfpopError, ValueError):
    """Input that cannot be used: the message names the argument, what was expected and what came."""


class BackendUnavailable(ConfpopError, ImportError):
    """An energy engine (or other optional dependency) is not installed; the message names the package."""


class CalculationFailed(ConfpopError, RuntimeError):
    """An engine ran but did not produce a result (SCF not converged, optimizer failure, ...)."""


class StoreError(ConfpopError, RuntimeError):
    """The result store file is corrupt, foreign, or cannot be written."""


class OutputError(ConfpopError, OSError):
    """An output file or folder cannot be written (full disk, permissions); the message names it."""


class ConfpopWarning(UserWarning):
    """Root of the cautions confpop gives through :mod:`warnings` (filterable, testable)."""


class StoreWarning(ConfpopWarning):
    """A result-store value could not be read as data; that unit is computed again."""
