"""confpop: conformer ensembles, their populations, interconversion rates and NMR observables.

The public names are imported lazily (the command line and the plain-number functions do
not pay for RDKit or the engines until they are used).

Examples
--------
>>> import confpop as cp
>>> w = cp.boltzmann_weights([0.0, 1.0], 298.15)
>>> w.round(4).tolist()
[0.8439, 0.1561]
"""

from __future__ import annotations

import importlib
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("confpop")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

# public name -> module that defines it, in the order of the data flow (input -> search ->
# the ensemble -> thermodynamics -> kinetics and torsions -> observables), then errors
_PUBLIC: dict[str, str] = {
    # input
    "load_molecule": "loading",
    "stereoisomers": "loading",
    # the search and its settings
    "search": "pipeline",
    "search_many": "batch",
    "read_batch_input": "batch",
    "BatchResult": "batch",
    "SearchSettings": "settings",
    "ScanSettings": "settings",
    # the result
    "Ensemble": "ensemble",
    "read_ensemble": "io",
    # thermodynamics
    "boltzmann_weights": "thermo",
    "log_boltzmann_weights": "thermo",
    "ensemble_free_energy": "thermo",
    "conformational_entropy": "thermo",
    "effective_conformer_count": "thermo",
    "free_energy_gap": "thermo",
    "population_ratio": "thermo",
    "ideal_gas_thermo": "thermo",
    "standard_state_correction": "thermo",
    "ThermoResult": "thermo",
    "harmonic_analysis": "vibrations",
    "frequencies": "vibrations",
    "rotational_constants": "vibrations",
    "symmetry_number": "vibrations",
    # kinetics and torsions
    "eyring_rate": "kinetics",
    "half_life": "kinetics",
    "mean_residence_time": "kinetics",
    "barrier_for_half_life": "kinetics",
    "atropisomer_class": "kinetics",
    "coalescence_rate": "kinetics",
    "coalescence_barrier": "kinetics",
    "exchange_regime": "kinetics",
    "format_duration": "kinetics",
    "scan_torsion": "torsion_scan",
    "rotatable_torsions": "rotatable",
    "TorsionProfile": "torsion_profile",
    # NMR observables
    "KarplusParameters": "nmr",
    "GeneralizedKarplus": "nmr",
    "proton_groups": "nmr",
    "vicinal_pairs": "nmr",
    "couplings": "nmr",
    "average_couplings": "nmr",
    "coupling_spread": "nmr",
    "population_spread": "nmr",
    "noe_distances": "nmr",
    "average_dipole": "nmr",
    "fit_populations": "nmr",
    "PopulationFit": "nmr",
    # units, errors and cautions
    "convert": "units",
    "ConfpopError": "errors",
    "InputError": "errors",
    "BackendUnavailable": "errors",
    "CalculationFailed": "errors",
    "StoreError": "errors",
    "OutputError": "errors",
    "ConfpopWarning": "errors",
    "StoreWarning": "errors",
    "StereoWarning": "errors",
    "ScanWarning": "errors",
    "FrequencyWarning": "errors",
}

# machinery: importable from confpop as before, but not part of ``from confpop import *``
# (engines, the optimizer, the execution layer and the store have their own modules)
_MACHINERY: dict[str, str] = {
    "get_backend": "backends",
    "register_backend": "backends",
    "available_backends": "backends",
    "optimize_positions": "optimize",
    "optimize_structure": "optimize",
    "OptimizationResult": "optimize",
    "run_units": "execution",
    "ResultStore": "store",
    "chemical_shifts": "nmr.shifts",
}

__all__ = sorted(_PUBLIC) + ["__version__"]


def __getattr__(name: str):
    module = _PUBLIC.get(name) or _MACHINERY.get(name)
    if module is None:
        raise AttributeError(f"module 'confpop' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC) | set(_MACHINERY))
