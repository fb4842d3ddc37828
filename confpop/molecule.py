"""Former home of the input code, kept so that ``confpop.molecule`` imports keep working.

The code now lives in modules of one concept each: :mod:`confpop.loading` (the entry points
:func:`load_molecule` and :func:`stereoisomers`, the common checks), :mod:`confpop.reading`
(one reader per file format), :mod:`confpop.stereo`, :mod:`confpop.coverage` (charge,
multiplicity, method coverage), :mod:`confpop.bonds` and :mod:`confpop.chem_helpers`. New
code imports from there; every name this module had still resolves here.
"""

from __future__ import annotations

import importlib

from .bonds import BOND_TOLERANCE, bond_graph_from_coordinates
from .loading import STEREO_POLICIES, _load, load_molecule, molecule_summary, stereoisomers
from .reading import SmilesText, _parse_xyz_frames
from .stereo import configuration_smiles, stereo_signature

__all__ = [
    "load_molecule",
    "stereoisomers",
    "stereo_signature",
    "configuration_smiles",
    "bond_graph_from_coordinates",
    "molecule_summary",
    "STEREO_POLICIES",
    "BOND_TOLERANCE",
]

_MOVED_TO = ("loading", "reading", "stereo", "coverage", "bonds", "chem_helpers", "checks")


def __getattr__(name: str):
    # any other (private) name of the old module, looked up where it moved
    for module in _MOVED_TO:
        namespace = importlib.import_module(f".{module}", __package__)
        if name in vars(namespace):
            return getattr(namespace, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
