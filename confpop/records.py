"""Two plain-data conventions shared by the modules that add to an ensemble's table.

Kept apart from :mod:`confpop.ensemble` (which re-exports both) so that a step such as
:mod:`confpop.freeenergy` can write its columns and provenance without importing the
ensemble module that forwards to it (no import cycle).

Examples
--------
>>> temperature_key(298.15), temperature_key(310)
('298.15', '310.00')
>>> sorted(step_record("rescore", started=0.0, n_in=3, n_out=2, method="dft"))
['method', 'n_in', 'n_out', 'seconds', 'step']
"""

from __future__ import annotations

import time

__all__ = ["temperature_key", "step_record"]


def temperature_key(temperature: float) -> str:
    """The suffix of per-temperature columns, e.g. ``gcorr_298.15``."""
    return f"{float(temperature):.2f}"


def step_record(name: str, *, started: float, n_in: int, n_out: int, **settings) -> dict:
    """A provenance entry: what ran, with which settings, counts in and out, wall time (s)."""
    return {"step": name, "n_in": int(n_in), "n_out": int(n_out),
            "seconds": round(time.perf_counter() - started, 3), **settings}
