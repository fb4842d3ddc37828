"""Expensive steps after the search (free energies, rescoring, torsion scans) as stored jobs.

Each step builds plain-data work items and hands them to :func:`run_jobs`, which runs them
through :func:`confpop.execution.run_units` (retries, failure records, any executor) and,
when a result store is given, names each item by :func:`job_key` so that a run that is
interrupted and started again reuses every finished result. The key holds the structure, the
charge and multiplicity, the method, the solvent, every setting that changes the result, the
kind of job, and (through :func:`confpop.store.content_key`) the versions of confpop and of
the engines.

Examples
--------
>>> import math
>>> [o.value for o in run_jobs(math.sqrt, [4.0, 9.0], keys=None, workers=1)]
[2.0, 3.0]
"""

from __future__ import annotations

import contextlib

__all__ = ["job_key", "run_jobs"]


def job_key(numbers, positions, *, charge, multiplicity, method, solvent, settings: dict,
            kind: str) -> str:
    """The store key of one job (see :func:`confpop.store.content_key`).

    ``charge`` or ``multiplicity`` may be None (the engine's default for the molecule); the
    key then records None in ``settings`` and uses 0 and 1 in the fixed fields, so two jobs
    that differ only there still get different keys.
    """
    from .store import content_key

    settings = dict(settings)
    if charge is None or multiplicity is None:
        settings["given_charge"] = charge
        settings["given_multiplicity"] = multiplicity
    return content_key(numbers, positions, charge=0 if charge is None else int(charge),
                       multiplicity=1 if multiplicity is None else int(multiplicity),
                       method=method, solvent=solvent, settings=settings, kind=kind)


@contextlib.contextmanager
def _opened(store):
    """A ResultStore for ``store`` (a path is opened here and closed afterwards)."""
    if store is None or hasattr(store, "get"):
        yield store
        return
    from .store import ResultStore

    opened = ResultStore(store)
    try:
        yield opened
    finally:
        opened.close()


def run_jobs(function, items, *, keys, store=None, executor=None, workers=None,
             progress: bool = False, description: str | None = None):
    """Run ``function`` over ``items`` through the execution layer and the store.

    Parameters
    ----------
    function : callable
        A picklable unit of work taking one item.
    items : sequence
        Plain-data work items.
    keys : sequence of str, or None
        One :func:`job_key` per item; only needed with ``store``.
    store : str, os.PathLike or confpop.store.ResultStore, optional
        A path is opened for this call and closed afterwards.
    executor, workers, progress, description
        As for :func:`confpop.execution.run_units`.

    Returns
    -------
    list of confpop.execution.UnitOutcome
    """
    from .execution import run_units

    with _opened(store) as opened:
        return run_units(function, items, executor=executor, workers=workers,
                         progress=progress, description=description, store=opened,
                         keys=keys if opened is not None else None)
