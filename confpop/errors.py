"""The confpop error hierarchy.

Every error raised on purpose by confpop derives from :class:`ConfpopError` and also from
the builtin a caller would expect, so ``except ValueError`` keeps working.
"""

from __future__ import annotations

import warnings

__all__ = [
    "ConfpopError",
    "InputError",
    "BackendUnavailable",
    "CalculationFailed",
    "StoreError",
    "OutputError",
    "ConfpopWarning",
    "StoreWarning",
    "LoggedWarning",
    "StereoWarning",
    "ScanWarning",
    "FrequencyWarning",
    "caution",
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


class LoggedWarning(ConfpopWarning):
    """A caution that is also written to confpop's logger (see :func:`caution`); the command
    line shows the log line and not the warning, so it appears once."""


class StereoWarning(LoggedWarning):
    """Stereo elements were left open (``stereo="ignore"``): the ensemble mixes stereoisomers."""


class ScanWarning(LoggedWarning):
    """A torsion scan is less reliable than it looks: hysteresis between the walks, a ring
    bond turned by the optimizer alone, or a starting structure that did not converge."""


class FrequencyWarning(LoggedWarning):
    """Harmonic frequencies flag a problem: imaginary modes, or a conformer re-optimized so
    that an energy of another level belongs to its old geometry."""


def caution(logger, category: type, message: str, *args, stacklevel: int = 3) -> str:
    """Give a caution both ways: ``logger.warning`` (as before) and ``warnings.warn``.

    Notebook and library users can filter or test the warning by its class; log readers
    keep the log line. ``message % args`` is formatted once; the text is returned.
    """
    text = message % args if args else message
    logger.warning("%s", text)
    warnings.warn(text, category, stacklevel=stacklevel)
    return text
