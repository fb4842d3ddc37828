"""Energy units and physical constants.

The one internal energy unit is the hartree. Every conversion factor here is derived from
:mod:`scipy.constants` (CODATA) in this one place; no other module types a factor.

Examples
--------
>>> round(convert(1.0, "hartree", "kcal/mol"), 6)
627.509474
>>> round(convert(1.0, "kcal/mol", "kJ/mol"), 6)
4.184
"""

from __future__ import annotations

import numpy as np
import scipy.constants as sc

from .errors import InputError

__all__ = [
    "UNITS",
    "convert",
    "normalize_unit",
    "gas_constant",
    "HARTREE_J",
    "AVOGADRO",
    "BOLTZMANN",
    "PLANCK",
    "BOHR_ANGSTROM",
    "ANGSTROM_BOHR",
    "AMU_KG",
    "LIGHT_SPEED_CM",
]

HARTREE_J: float = sc.physical_constants["Hartree energy"][0]
AVOGADRO: float = sc.N_A
BOLTZMANN: float = sc.k
PLANCK: float = sc.h
LIGHT_SPEED_CM: float = sc.c * 100.0  # cm/s
BOHR_ANGSTROM: float = sc.physical_constants["Bohr radius"][0] * 1e10
ANGSTROM_BOHR: float = 1.0 / BOHR_ANGSTROM
AMU_KG: float = sc.physical_constants["atomic mass constant"][0]
DEBYE_CM: float = 1e-21 / sc.c  # 1 debye in C m
EBOHR_DEBYE: float = sc.e * sc.physical_constants["Bohr radius"][0] / DEBYE_CM

# hartree expressed in each unit (value_in_unit = value_in_hartree * factor)
UNITS: dict[str, float] = {
    "hartree": 1.0,
    "kcal/mol": HARTREE_J * AVOGADRO / (1000.0 * sc.calorie),
    "kJ/mol": HARTREE_J * AVOGADRO / 1000.0,
    "eV": HARTREE_J / sc.e,
    "cm-1": HARTREE_J / (sc.h * LIGHT_SPEED_CM),
}

_ALIASES: dict[str, str] = {
    "hartree": "hartree", "eh": "hartree", "au": "hartree", "a.u.": "hartree",
    "kcal/mol": "kcal/mol", "kcal": "kcal/mol", "kcal mol-1": "kcal/mol",
    "kj/mol": "kJ/mol", "kj": "kJ/mol", "kj mol-1": "kJ/mol",
    "ev": "eV",
    "cm-1": "cm-1", "cm^-1": "cm-1", "1/cm": "cm-1", "wavenumber": "cm-1",
}


def normalize_unit(unit: str) -> str:
    """Return the canonical spelling of an energy unit.

    Raises
    ------
    InputError
        If ``unit`` is not one of the accepted units; the message lists them.
    """
    if isinstance(unit, str):
        key = unit.strip().lower()
        if key in _ALIASES:
            return _ALIASES[key]
    raise InputError(f"unit must be one of {sorted(UNITS)}, got {unit!r}")


def convert(value, from_unit: str, to_unit: str):
    """Convert an energy (scalar or array) between units.

    Parameters
    ----------
    value : float or array
        Energy in ``from_unit``.
    from_unit, to_unit : str
        Any of "hartree", "kcal/mol", "kJ/mol", "eV", "cm-1".

    Returns
    -------
    float or ndarray
        The energy in ``to_unit`` (a float for scalar input).

    Examples
    --------
    >>> round(convert(1.0, "eV", "kJ/mol"), 4)
    96.4853
    """
    factor = UNITS[normalize_unit(to_unit)] / UNITS[normalize_unit(from_unit)]
    if np.isscalar(value):
        return float(value) * factor
    return np.asarray(value, dtype=float) * factor


def gas_constant(unit: str = "kcal/mol") -> float:
    """Molar gas constant R in ``unit`` per kelvin (per molecule for "hartree", "eV", "cm-1").

    Examples
    --------
    >>> round(gas_constant("kcal/mol") * 298.15, 8)
    0.59248495
    """
    r_hartree = BOLTZMANN / HARTREE_J  # hartree per K per molecule
    return r_hartree * UNITS[normalize_unit(unit)]
