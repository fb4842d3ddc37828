"""Population-averaged NMR observables: Karplus couplings, NOE distances, population fits.

- :mod:`.karplus`: parameter sets (data) and the equations.
- :mod:`.couplings`: vicinal pairs, proton equivalence, J per conformer and averaged.
- :mod:`.noe`: r^-6 / r^-3 averaged distances and averaged dipole moments.
- :mod:`.fit`: conformer populations fitted to measured couplings and NOE distances.
- :mod:`.identity`: one pro-R/pro-S identity per atom index in every conformer.
- :mod:`.cautions`: known method weaknesses (with measured sizes) that apply to a result.
"""

from __future__ import annotations

from .cautions import MethodCaution, MethodWarning, method_cautions
from .couplings import (ProtonGroup, average_couplings, coupling_spread, couplings,
                        group_couplings, population_spread, proton_groups, vicinal_pairs)
from .identity import ProtonIdentityWarning, consistent_proton_identity, prochiral_labels
from .fit import Observation, PopulationFit, fit_populations, read_observations
from .karplus import (PARAMETER_SETS, ExtendedKarplus, GeneralizedKarplus, KarplusParameters,
                      get_parameters, haasnoot_set_for)
from .noe import average_dipole, group_distance_matrix, noe_distances

__all__ = [
    "KarplusParameters",
    "GeneralizedKarplus",
    "ExtendedKarplus",
    "PARAMETER_SETS",
    "get_parameters",
    "haasnoot_set_for",
    "ProtonGroup",
    "proton_groups",
    "vicinal_pairs",
    "couplings",
    "average_couplings",
    "group_couplings",
    "coupling_spread",
    "population_spread",
    "noe_distances",
    "group_distance_matrix",
    "average_dipole",
    "Observation",
    "PopulationFit",
    "read_observations",
    "fit_populations",
    "consistent_proton_identity",
    "prochiral_labels",
    "ProtonIdentityWarning",
    "method_cautions",
    "MethodCaution",
    "MethodWarning",
]
