"""Former home of the torsion code, kept so that ``confpop.torsion`` imports keep working.

The code now lives in modules of one concept each: :mod:`confpop.rotatable` (which torsions
rotate: :func:`rotatable_torsions`, :func:`torsion_for_bond`), :mod:`confpop.torsion_scan`
(:func:`scan_torsion`), :mod:`confpop.fourier` (the periodic fit),
:mod:`confpop.torsion_profile` (:class:`TorsionProfile`: extrema, barriers, rates),
:mod:`confpop.interconversion` (:func:`interconversion`, :func:`exchange_summary`),
:mod:`confpop.barrier_correction` (:func:`rescore_barrier`), and :mod:`confpop.geometry`
(:func:`dihedral_angle`, :func:`set_dihedral`). New code imports from there; every name this
module had still resolves here.
"""

from __future__ import annotations

import importlib

from .barrier_correction import BarrierCorrection, rescore_barrier
from .geometry import dihedral_angle, set_dihedral
from .interconversion import Interconversion, exchange_summary, interconversion, torsion_changes
from .rotatable import Torsion, _check_dihedral_atoms, rotatable_torsions, torsion_for_bond
from .torsion_profile import BARRIER_NOTE, HYSTERESIS_KCAL, MIN_DEPTH_KCAL, SNAP_DEG, TorsionProfile
from .torsion_scan import EMBED_SEED, REFINE_DEG, scan_torsion

__all__ = ["Torsion", "TorsionProfile", "Interconversion", "scan_torsion", "rotatable_torsions",
           "dihedral_angle", "set_dihedral", "interconversion", "exchange_summary",
           "BarrierCorrection", "rescore_barrier", "BARRIER_NOTE"]

_MOVED_TO = ("torsion_scan", "torsion_profile", "fourier", "rotatable", "interconversion",
             "barrier_correction", "geometry")


def __getattr__(name: str):
    # any other (private) name of the old module, looked up where it moved
    for module in _MOVED_TO:
        namespace = importlib.import_module(f".{module}", __package__)
        if name in vars(namespace):
            return getattr(namespace, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
