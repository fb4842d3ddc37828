"""Boltzmann statistics of conformer ensembles and ideal-gas (RRHO) thermochemistry.

Plain numpy/scipy on numbers from anywhere: no chemistry toolkit is imported. Every function
that takes or returns an energy has ``unit=`` (default ``"kcal/mol"``); entropies and heat
capacities come in ``unit`` per kelvin.

Weights are computed from reduced energies in log space, so absolute energies of -10⁴ hartree
or spreads of hundreds of kcal/mol neither overflow nor give NaN, and every function is
vectorized over temperatures.

Examples
--------
>>> boltzmann_weights([0.0, 1.0], 298.15).round(7).tolist()
[0.8439355, 0.1560645]
>>> boltzmann_weights([0.0, 1.0], [200.0, 400.0]).shape
(2, 2)
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping

import numpy as np

from .errors import InputError
from .units import (
    AMU_KG,
    AVOGADRO,
    BOLTZMANN,
    LIGHT_SPEED_CM,
    PLANCK,
    gas_constant,
    normalize_unit,
)


# numpy versions of scipy.special's logsumexp and entr (importing scipy.special cost 0.2 s
# of every command's start-up here)
def _logsumexp(a, axis=None, keepdims=False):
    """log(sum(exp(a))) along ``axis`` without overflow (-inf where every term is -inf)."""
    a = np.asarray(a, dtype=float)
    top = np.max(a, axis=axis, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    with np.errstate(divide="ignore"):
        out = np.log(np.sum(np.exp(a - top), axis=axis, keepdims=True)) + top
    return out if keepdims else (np.squeeze(out, axis=axis) if axis is not None else out.item())


def _entr(p):
    """Elementwise -p log p (0 at p = 0, -inf for p < 0), as scipy.special.entr."""
    p = np.asarray(p, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(p > 0, -p * np.log(np.where(p > 0, p, 1.0)),
                        np.where(p == 0, 0.0, -np.inf))


__all__ = [
    "boltzmann_weights",
    "log_boltzmann_weights",
    "ensemble_free_energy",
    "conformational_entropy",
    "effective_conformer_count",
    "free_energy_gap",
    "population_ratio",
    "ThermoContribution",
    "ThermoResult",
    "ideal_gas_thermo",
    "standard_state_correction",
]

logger = logging.getLogger(__name__)

# Grimme's limiting average moment of inertia for the free-rotor entropy (kg m^2)
_GRIMME_B_AV = 1e-44
_LOW_MODES = ("rrho", "qrrho", "quasi-harmonic")
# tolerance on the normalisation of weights handed in by a caller
_WEIGHT_SUM_TOL = 1e-6


# --------------------------------------------------------------------------- validation


def _describe_bad(values: np.ndarray, bad: np.ndarray) -> str:
    """'got -5.0' for a scalar, 'got -5.0 at position 2' (first offender) for arrays."""
    if values.ndim == 0:
        return f"got {values.item()!r}"
    index = tuple(int(i) for i in np.argwhere(bad)[0])
    where = index[0] if len(index) == 1 else index
    n_bad = int(np.count_nonzero(bad))
    more = f" ({n_bad} bad values)" if n_bad > 1 else ""
    return f"got {values[index].item()!r} at position {where}{more}"


def _float_array(value, name: str) -> np.ndarray:
    # True/False are numbers to numpy (True -> 1.0): a temperature of True is a mistake
    if isinstance(value, (bool, np.bool_)) or (
            isinstance(value, (list, tuple)) and any(isinstance(v, (bool, np.bool_))
                                                     for v in value)) or (
            isinstance(value, np.ndarray) and value.dtype.kind == "b"):
        raise InputError(f"{name} must be a number or an array of numbers, got {value!r} "
                         "(True/False)")
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number or an array of numbers, got {value!r}") from None
    return arr


def _temperatures(temperature, name: str = "temperature") -> tuple[np.ndarray, bool]:
    """Return (1-D array of temperatures in K, True if a scalar was given)."""
    t = _float_array(temperature, name)
    if t.ndim > 1:
        raise InputError(f"{name} must be a number or a 1-D sequence, got shape {t.shape}")
    if t.size == 0:
        raise InputError(f"{name} must contain at least one value, got an empty sequence")
    bad = ~np.isfinite(t) | (t <= 0.0)
    if bad.any():
        raise InputError(f"{name} must be finite and > 0 K, {_describe_bad(t, bad)}")
    return np.atleast_1d(t), t.ndim == 0


def check_temperatures(temperatures, name: str = "temperature") -> list[float]:
    """Temperatures (a number or a 1-D sequence, K) as a list of floats, each finite and > 0.

    Raises
    ------
    InputError
        Empty, not 1-D, not finite or not positive; the message names the bad value.
    """
    t, _ = _temperatures(temperatures, name)
    return [float(x) for x in t]


def _check_positive(value, name: str, what: str = "> 0") -> float:
    v = _float_array(value, name)
    if v.ndim != 0:
        raise InputError(f"{name} must be a single number, got shape {v.shape}")
    x = float(v)
    if not math.isfinite(x) or x <= 0.0:
        raise InputError(f"{name} must be finite and {what}, got {value!r}")
    return x


def _energies(energies) -> np.ndarray:
    e = _float_array(energies, "energies")
    if e.ndim not in (1, 2):
        raise InputError(
            "energies must be a 1-D sequence (one per conformer) or a 2-D array "
            f"(temperatures x conformers), got shape {e.shape}"
        )
    if e.shape[-1] == 0:
        raise InputError("energies must contain at least one conformer, got an empty array")
    bad = ~np.isfinite(e)
    if bad.any():
        raise InputError(f"energies must be finite numbers, {_describe_bad(e, bad)}")
    return e


def _degeneracy(degeneracy, n: int) -> np.ndarray | None:
    if degeneracy is None:
        return None
    g = _float_array(degeneracy, "degeneracy")
    if g.ndim != 1:
        raise InputError(f"degeneracy must be a 1-D sequence, got shape {g.shape}")
    if g.size != n:
        raise InputError(
            f"degeneracy has {g.size} entries but energies has {n} conformers; "
            "give one degeneracy per conformer"
        )
    bad = ~np.isfinite(g) | (g < 0.0)
    if bad.any():
        raise InputError(f"degeneracy must be finite and >= 0, {_describe_bad(g, bad)}")
    if not (g > 0.0).any():
        raise InputError("degeneracy must be > 0 for at least one conformer, got all zeros")
    return g


def _prepare(energies, temperature, degeneracy):
    """Validate and return (E, T, scalar_T, g) with E 2-D-compatible."""
    e = _energies(energies)
    t, scalar_t = _temperatures(temperature)
    g = _degeneracy(degeneracy, e.shape[-1])
    if e.ndim == 2:
        if scalar_t or e.shape[0] != t.size:
            raise InputError(
                f"energies of shape {e.shape} need one temperature per row "
                f"({e.shape[0]} temperatures), got temperature={temperature!r}"
            )
    return e, t, scalar_t, g


def _reference_energy(e: np.ndarray, g: np.ndarray | None):
    """Lowest energy among conformers with g > 0 (per row for 2-D energies).

    Energies are taken relative to it before the division by RT, so exact differences are
    kept (important for absolute energies of -10^4 hartree) and the largest reduced term of
    every row is O(1).
    """
    allowed = slice(None) if g is None else (g > 0.0)
    return e[allowed].min() if e.ndim == 1 else e[:, allowed].min(axis=1)


def _reduced_into(out: np.ndarray, e: np.ndarray, e_ref, neg_beta: np.ndarray, log_g, rows: slice):
    """Write x[j, i] = -(E_i - e_ref_j) / (R T_j) + ln g_i for the temperature rows `rows`.

    For 1-D energies already taken relative to the reference, pass ``e_ref=None``.
    """
    if e.ndim == 1:
        np.multiply.outer(neg_beta[rows], e if e_ref is None else e - e_ref, out=out)
    else:
        np.subtract(e[rows], e_ref[rows, None], out=out)
        out *= neg_beta[rows, None]
    if log_g is not None:
        out += log_g


def _shifted_reduced(e: np.ndarray, t: np.ndarray, g: np.ndarray | None, r: float):
    """Return (x, e_ref): the (n_T, n) reduced energies of :func:`_reduced_into` for all T."""
    e_ref = _reference_energy(e, g)
    x = np.empty((t.size, e.shape[-1]))
    _reduced_into(x, e, e_ref, -1.0 / (r * t), _log_degeneracy(g), slice(None))
    return x, e_ref


def _log_degeneracy(g: np.ndarray | None):
    if g is None:
        return None
    with np.errstate(divide="ignore"):
        return np.log(g)


# rows of temperatures are processed in blocks of about this many elements, so the reduced
# energies, their exponentials and the row sums are computed while the block is in cache
_BLOCK_ELEMENTS = 1 << 15
# beyond this ratio of the largest to the smallest positive degeneracy, weights are formed
# in log space (see boltzmann_weights)
_MAX_DEGENERACY_RATIO = 1e100


# --------------------------------------------------------------------------- weights


def boltzmann_weights(energies, temperature, unit: str = "kcal/mol", degeneracy=None):
    r"""Boltzmann populations of conformers at one or several temperatures.

    Parameters
    ----------
    energies : (n,) array, or (n_T, n) array, in `unit`
        Energies (or free energies) of the conformers; absolute or relative. A 2-D array gives
        one row of (temperature-dependent) free energies per temperature.
    temperature : float or (n_T,) sequence, K
        Temperature(s), each finite and > 0.
    unit : str
        Energy unit of `energies`: "kcal/mol", "kJ/mol", "hartree", "eV" or "cm-1".
    degeneracy : (n,) array, optional
        Number of equivalent copies g_i of each conformer (default 1). Zero is allowed and
        gives that conformer weight exactly 0 (a way to mask a row); at least one must be > 0.
        Non-integer values are accepted (effective degeneracies).

    Returns
    -------
    (n,) ndarray for a scalar temperature, (n_T, n) ndarray for a sequence
        Populations p_i, degeneracy included; each row sums to 1.

    Raises
    ------
    InputError
        Temperature not finite or <= 0; NaN/inf energies; no conformers; negative or
        mismatched degeneracy. The message names the argument and the bad value.

    Notes
    -----
    .. math:: p_i(T) = \frac{g_i\, e^{-E_i/RT}}{\sum_j g_j\, e^{-E_j/RT}}

    evaluated with the log-sum-exp shift: energies are first taken relative to the lowest one
    (among conformers with g > 0), so every exponent is <= 0, no term overflows and the
    normalisation is at least min(g > 0), never 0. Weights below ~1e-308 are returned as 0.
    The work is done in place in the (n_T, n) float64 output, a block of temperatures at a
    time (peak memory ≈ the output).

    See Also
    --------
    log_boltzmann_weights : the same in log space (no underflow at all).

    Examples
    --------
    >>> w = boltzmann_weights([0.0, 0.5, 1.2], 298.15, degeneracy=[1, 2, 1])
    >>> w.round(7).tolist()
    [0.5020073, 0.4317551, 0.0662375]
    >>> w = boltzmann_weights([-10000.0, -10000.0 + 0.5 / 627.5], 298.15, unit="hartree")
    >>> round(float(w.sum()), 12)
    1.0
    """
    e, t, scalar_t, g = _prepare(energies, temperature, degeneracy)
    n = e.shape[-1]
    neg_beta = -1.0 / (gas_constant(unit) * t)
    e_ref = _reference_energy(e, g)
    # Degeneracies within a sane range multiply the exponentials (fewer passes over the
    # data): every exponent is <= 0 and the reference conformer contributes g_ref * 1, so
    # the normalisation is >= min(g > 0) and no term can overflow. Absurd ranges of g go
    # through log space with a per-row shift instead.
    log_g = None
    if g is not None:
        positive = g[g > 0.0]
        if math.log(positive.max()) - math.log(positive.min()) > math.log(_MAX_DEGENERACY_RATIO):
            log_g = _log_degeneracy(g)
        elif positive.size < g.size:
            # a masked (g = 0) conformer may lie below e_ref: give it e_ref, its weight is 0
            e = np.where(g > 0.0, e, e_ref if e.ndim == 1 else e_ref[:, None])
    if e.ndim == 1:  # shift once, not once per block
        e, e_ref = e - e_ref, None
    x = np.empty((t.size, n))
    step = max(1, _BLOCK_ELEMENTS // n)
    for start in range(0, t.size, step):
        rows = slice(start, start + step)
        block = x[rows]
        _reduced_into(block, e, e_ref, neg_beta, log_g, rows)
        if log_g is not None:
            block -= block.max(axis=1, keepdims=True)
        np.exp(block, out=block)
        if g is not None and log_g is None:
            block *= g
        norm = block.sum(axis=1, keepdims=True)
        np.reciprocal(norm, out=norm)
        block *= norm
    return x[0] if scalar_t else x


def log_boltzmann_weights(energies, temperature, unit: str = "kcal/mol", degeneracy=None):
    r"""Natural logarithm of the Boltzmann populations (see :func:`boltzmann_weights`).

    Finite for every conformer with g > 0, however high its energy; -inf where g = 0.

    Parameters
    ----------
    energies, temperature, unit, degeneracy
        As for :func:`boltzmann_weights`.

    Returns
    -------
    (n,) or (n_T, n) ndarray
        ln p_i.

    Notes
    -----
    .. math:: \ln p_i = -E_i/RT + \ln g_i - \ln \sum_j g_j e^{-E_j/RT}

    with the last term from a log-sum-exp (as :func:`scipy.special.logsumexp`).

    Examples
    --------
    >>> lw = log_boltzmann_weights([0.0, 500.0], 298.15)
    >>> round(float(lw[1]), 2)
    -843.9
    """
    e, t, scalar_t, g = _prepare(energies, temperature, degeneracy)
    r = gas_constant(unit)
    x, _ = _shifted_reduced(e, t, g, r)
    x -= _logsumexp(x, axis=1, keepdims=True)
    return x[0] if scalar_t else x


def ensemble_free_energy(energies, temperature, unit: str = "kcal/mol", degeneracy=None):
    r"""Free energy of the whole conformer ensemble, G_ens = -RT ln Σ g_i exp(-G_i/RT).

    Parameters
    ----------
    energies, temperature, unit, degeneracy
        As for :func:`boltzmann_weights`.

    Returns
    -------
    float or (n_T,) ndarray, in `unit`
        On the same zero as `energies` (absolute in, absolute out). Always at or below the
        lowest energy when every g >= 1.

    Notes
    -----
    .. math:: G_\mathrm{ens} = G_\mathrm{min} - RT \ln \sum_i g_i e^{-(G_i - G_\mathrm{min})/RT}
              = \sum_i p_i G_i - T S_\mathrm{mix}

    with :math:`S_\mathrm{mix} = -R\sum_i p_i \ln(p_i/g_i)`.

    Examples
    --------
    >>> round(ensemble_free_energy([0.0, 1.0], 298.15), 7)
    -0.1005324
    """
    e, t, scalar_t, g = _prepare(energies, temperature, degeneracy)
    r = gas_constant(unit)
    x, e_ref = _shifted_reduced(e, t, g, r)
    result = e_ref - r * t * _logsumexp(x, axis=1)
    return float(result[0]) if scalar_t else result


def _weights(weights) -> np.ndarray:
    p = _float_array(weights, "weights")
    if p.ndim not in (1, 2):
        raise InputError(f"weights must be a 1-D or 2-D array, got shape {p.shape}")
    if p.shape[-1] == 0:
        raise InputError("weights must contain at least one conformer, got an empty array")
    bad = ~np.isfinite(p) | (p < 0.0)
    if bad.any():
        raise InputError(f"weights must be finite and >= 0, {_describe_bad(p, bad)}")
    total = p.sum(axis=-1)
    off = np.abs(total - 1.0) > _WEIGHT_SUM_TOL
    if np.any(off):
        raise InputError(
            f"weights must sum to 1 along the conformer axis, {_describe_bad(np.atleast_1d(total), np.atleast_1d(off))}"
        )
    return p


def conformational_entropy(weights, unit: str = "kcal/mol", degeneracy=None):
    r"""Conformational (mixing) entropy of a population, -R Σ p ln p, in `unit`/K.

    Parameters
    ----------
    weights : (n,) or (n_T, n) array
        Populations, each row summing to 1 (within 1e-6).
    unit : str
        Energy unit of the result (per kelvin).
    degeneracy : (n,) array, optional
        If given, returns the degeneracy-aware mixing entropy -R Σ p ln(p/g), which is the
        entropy that satisfies G_ens = Σ p G - T S_mix when `weights` already include g. A
        conformer with g = 0 must have p = 0.

    Returns
    -------
    float or (n_T,) ndarray, `unit`/K

    Raises
    ------
    InputError
        Negative or non-finite weights, rows not summing to 1, bad degeneracy.

    Notes
    -----
    .. math:: S_\mathrm{conf} = -R \sum_i p_i \ln p_i \qquad (0 \ln 0 = 0)

    Examples
    --------
    >>> s = conformational_entropy([0.8439355, 0.1560645], unit="kcal/mol")
    >>> round(s * 1000, 5)   # cal/(mol K)
    0.86063
    """
    p = _weights(weights)
    r = gas_constant(unit)
    s = _entr(p).sum(axis=-1)
    if degeneracy is not None:
        g = _degeneracy(degeneracy, p.shape[-1])
        stray = (g == 0.0) & np.any(p > 0.0, axis=tuple(range(p.ndim - 1)))
        if stray.any():
            raise InputError(
                "weights must be 0 where degeneracy is 0, "
                f"{_describe_bad(g, stray)} (degeneracy) with a non-zero weight"
            )
        with np.errstate(divide="ignore"):
            log_g = np.where(g > 0.0, np.log(np.where(g > 0.0, g, 1.0)), 0.0)
        s = s + (p * log_g).sum(axis=-1)
    s = r * s
    return float(s) if np.ndim(s) == 0 else s


def effective_conformer_count(weights):
    r"""Kish effective number of conformers, 1 / Σ p².

    1 when one conformer holds all the population, n when n conformers are equally populated.

    Parameters
    ----------
    weights : (n,) or (n_T, n) array
        Populations, each row summing to 1.

    Returns
    -------
    float or (n_T,) ndarray

    Notes
    -----
    .. math:: n_\mathrm{eff} = \Big(\sum_i p_i^2\Big)^{-1}

    References
    ----------
    L. Kish, Survey Sampling, Wiley, 1965.

    Examples
    --------
    >>> effective_conformer_count([0.5, 0.5])
    2.0
    >>> effective_conformer_count([[1.0, 0.0], [0.25, 0.75]]).round(3).tolist()
    [1.0, 1.6]
    """
    p = _weights(weights)
    n_eff = 1.0 / np.einsum("...i,...i->...", p, p)
    return float(n_eff) if np.ndim(n_eff) == 0 else n_eff


def free_energy_gap(pop_a, pop_b, temperature, unit: str = "kcal/mol"):
    r"""Free-energy difference of state a relative to state b from their populations.

    Parameters
    ----------
    pop_a, pop_b : float or array
        Populations (or any quantities proportional to them, e.g. NMR integrals), > 0.
    temperature : float or array, K
    unit : str
        Unit of the result.

    Returns
    -------
    float or ndarray (broadcast of the inputs), `unit`
        ΔG = G_a - G_b; negative when a is the more populated state.

    Notes
    -----
    .. math:: \Delta G_{a-b} = -RT \ln (p_a / p_b)

    Examples
    --------
    >>> round(free_energy_gap(0.1560645, 0.8439355, 298.15), 6)
    1.0
    """
    a = _float_array(pop_a, "pop_a")
    b = _float_array(pop_b, "pop_b")
    for arr, name in ((a, "pop_a"), (b, "pop_b")):
        bad = ~np.isfinite(arr) | (arr <= 0.0)
        if bad.any():
            raise InputError(f"{name} must be finite and > 0, {_describe_bad(arr, bad)}")
    t = _float_array(temperature, "temperature")
    bad = ~np.isfinite(t) | (t <= 0.0)
    if bad.any():
        raise InputError(f"temperature must be finite and > 0 K, {_describe_bad(t, bad)}")
    dg = -gas_constant(unit) * t * (np.log(a) - np.log(b))
    return float(dg) if np.ndim(dg) == 0 else dg


def population_ratio(delta_g, temperature, unit: str = "kcal/mol"):
    r"""Population ratio p_a / p_b for a free-energy gap ΔG = G_a - G_b (inverse of
    :func:`free_energy_gap`).

    Parameters
    ----------
    delta_g : float or array, `unit`
    temperature : float or array, K

    Returns
    -------
    float or ndarray

    Notes
    -----
    .. math:: p_a / p_b = e^{-\Delta G/RT}

    Examples
    --------
    >>> round(population_ratio(1.0, 298.15), 5)
    0.18492
    """
    dg = _float_array(delta_g, "delta_g")
    bad = ~np.isfinite(dg)
    if bad.any():
        raise InputError(f"delta_g must be finite, {_describe_bad(dg, bad)}")
    t = _float_array(temperature, "temperature")
    bad = ~np.isfinite(t) | (t <= 0.0)
    if bad.any():
        raise InputError(f"temperature must be finite and > 0 K, {_describe_bad(t, bad)}")
    with np.errstate(over="ignore", under="ignore"):
        ratio = np.exp(-dg / (gas_constant(unit) * t))
    return float(ratio) if np.ndim(ratio) == 0 else ratio


# --------------------------------------------------------------------------- ideal gas


@dataclass(frozen=True, eq=False)
class ThermoContribution:
    """One part (translational, rotational, vibrational or electronic) of the thermal terms.

    Each field is a float for a scalar temperature or an (n_T,) read-only array.

    Attributes
    ----------
    internal_energy : `unit`
        Thermal internal energy (the vibrational part includes the zero-point energy).
    enthalpy : `unit`
        Internal energy plus, for the translational part only, the ideal-gas PV = RT.
    entropy : `unit`/K
    heat_capacity : `unit`/K
        Constant-volume heat capacity, except the translational part, which carries the
        extra R so that the parts add up to Cp.
    """

    internal_energy: float | np.ndarray
    enthalpy: float | np.ndarray
    entropy: float | np.ndarray
    heat_capacity: float | np.ndarray


@dataclass(frozen=True, eq=False)
class ThermoResult:
    """Ideal-gas thermal corrections of one molecule (from :func:`ideal_gas_thermo`).

    Energies are thermal *corrections*: add the electronic energy to get absolute values.
    Scalars for a scalar temperature; (n_T,) read-only arrays for a sequence of temperatures.

    Attributes
    ----------
    zpe : float, `unit`
        Harmonic zero-point energy of the real modes used (after any frequency raising).
    internal_energy : `unit`
        Thermal correction to the internal energy (ZPE included).
    enthalpy : `unit`
        Thermal correction to the enthalpy, internal_energy + RT (ZPE included).
    entropy : `unit`/K
        Absolute entropy at `pressure`.
    gibbs : `unit`
        Thermal correction to the Gibbs energy, enthalpy - T * entropy.
    heat_capacity : `unit`/K
        Constant-pressure heat capacity Cp (Cv = Cp - R).
    translational, rotational, vibrational, electronic : ThermoContribution
        The parts of internal_energy, enthalpy, entropy and heat_capacity.
    imaginary_frequencies : (k,) ndarray, cm^-1
        The negative (imaginary) frequencies that were left out, as given.
    frequencies : (m,) ndarray, cm^-1
        The real frequencies used (after raising, for "quasi-harmonic").
    temperature : float or (n_T,) ndarray, K
    pressure : float, Pa
    unit : str
    linear : bool
    settings : mapping
        mass, rotational_constants, symmetry_number, multiplicity, low_mode, cutoff,
        enthalpy_interpolation.
    """

    zpe: float
    internal_energy: float | np.ndarray
    enthalpy: float | np.ndarray
    entropy: float | np.ndarray
    gibbs: float | np.ndarray
    heat_capacity: float | np.ndarray
    translational: ThermoContribution
    rotational: ThermoContribution
    vibrational: ThermoContribution
    electronic: ThermoContribution
    imaginary_frequencies: np.ndarray
    frequencies: np.ndarray
    temperature: float | np.ndarray
    pressure: float
    unit: str
    linear: bool
    settings: Mapping = field(default_factory=dict)

    @property
    def parts(self) -> dict[str, ThermoContribution]:
        """The four contributions by name."""
        return {
            "translational": self.translational,
            "rotational": self.rotational,
            "vibrational": self.vibrational,
            "electronic": self.electronic,
        }


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


def _rotational_constants(rotational_constants) -> tuple[np.ndarray, bool]:
    """Return (constants used, linear). Empty -> atom; one or a zero/inf entry -> linear."""
    b = _float_array(rotational_constants, "rotational_constants")
    b = np.atleast_1d(b)
    if b.ndim != 1 or b.size not in (0, 1, 3):
        raise InputError(
            "rotational_constants must hold one value (linear molecule) or three (A, B, C), "
            f"in cm^-1, got {rotational_constants!r}"
        )
    if np.isnan(b).any() or (b < 0.0).any():
        raise InputError(f"rotational_constants must be >= 0 cm^-1, got {rotational_constants!r}")
    if b.size == 0:
        return b, False
    marker = (b == 0.0) | np.isinf(b)
    if b.size == 3 and marker.any():
        if marker.sum() > 1:
            raise InputError(
                "rotational_constants may mark a linear molecule with one zero (or infinite) "
                f"constant, got {rotational_constants!r}"
            )
        rest = b[~marker]
        if not np.isclose(rest[0], rest[1], rtol=1e-3):
            raise InputError(
                "rotational_constants with a zero entry describe a linear molecule, whose two "
                f"other constants must be equal, got {rotational_constants!r}"
            )
        return np.array([rest.mean()]), True
    if b.size == 1:
        if not np.isfinite(b[0]) or b[0] == 0.0:
            raise InputError(f"rotational_constants must be finite and > 0 cm^-1, got {rotational_constants!r}")
        return b, True
    return b, False


def ideal_gas_thermo(
    frequencies,
    *,
    mass,
    rotational_constants,
    symmetry_number,
    temperature=298.15,
    pressure: float = 1e5,
    multiplicity: int = 1,
    low_mode: str = "rrho",
    cutoff: float = 100.0,
    enthalpy_interpolation: bool = False,
    unit: str = "kcal/mol",
) -> ThermoResult:
    r"""Ideal-gas thermal corrections (rigid rotor, harmonic oscillator and low-mode variants).

    Parameters
    ----------
    frequencies : (m,) array, cm^-1
        Vibrational frequencies (3N-6, or 3N-5 for a linear molecule; translations and
        rotations already removed). Negative values stand for imaginary modes: they are left
        out and reported in ``imaginary_frequencies`` (a small spurious imaginary mode of a
        minimum is left out too; pass its absolute value if you judge it numerical noise).
        Zero is rejected.
    mass : float, amu
        Molecular mass (for spectroscopic constants of the main isotopologue, its exact mass).
    rotational_constants : sequence, cm^-1
        (A, B, C) for a non-linear molecule; one value B, or three with one zero (or inf)
        entry, for a linear one; empty for an atom.
    symmetry_number : int
        Rotational symmetry number σ (1 for C1/Cs/Ci, 2 for C2v, 12 for Td, ...).
    temperature : float or (n_T,) sequence, K
        Vectorized: a sequence gives (n_T,) arrays in the result.
    pressure : float, Pa
        Default 1e5 Pa (1 bar, the IUPAC standard state). Use
        :func:`standard_state_correction` to move to 1 mol/L.
    multiplicity : int
        Spin multiplicity 2S+1; S_el = R ln(multiplicity) (no low-lying excited states).
    low_mode : {"rrho", "qrrho", "quasi-harmonic"}
        - "rrho": every real mode is a harmonic oscillator.
        - "qrrho": Grimme's quasi-RRHO entropy: each mode's entropy is interpolated between
          the harmonic-oscillator and a free-rotor value with w = 1/(1 + (ν₀/ν)⁴), ν₀ =
          `cutoff`, and the free-rotor moment μ' = μ B_av/(μ + B_av), B_av = 1e-44 kg m².
          Only the entropy changes (unless `enthalpy_interpolation`).
        - "quasi-harmonic": Truhlar's treatment: real frequencies below `cutoff` are raised
          to `cutoff` for the whole vibrational partition function (ZPE, energy, entropy,
          heat capacity).
    cutoff : float, cm^-1
        ν₀ of the low-mode treatment (default 100).
    enthalpy_interpolation : bool
        Head-Gordon's quasi-RRHO enthalpy: each mode's energy (ZPE included) is interpolated
        with the same w between the harmonic value and the free-rotor RT/2 (and its heat
        capacity between the harmonic value and R/2). Not allowed with "quasi-harmonic",
        which already changes the enthalpy. The ``zpe`` field stays the undamped value.
    unit : str
        Energy unit of the result; entropies and heat capacities in `unit`/K.

    Returns
    -------
    ThermoResult

    Raises
    ------
    InputError
        For non-positive mass, temperature, pressure or symmetry number, zero or non-finite
        frequencies, a wrong number of rotational constants, an unknown `low_mode`, ...

    Notes
    -----
    Per mole, with θ_v = hcν̃/k, x = θ_v/T, θ_r = hcB/k:

    .. math::

        S_t &= R\left[\ln\left(\left(\frac{2\pi m k T}{h^2}\right)^{3/2}\frac{kT}{p}\right)
               + \frac52\right], \quad H_t = \tfrac52 RT \\
        S_r &= R\left[\ln\frac{\sqrt{\pi}}{\sigma}\frac{T^{3/2}}{\sqrt{θ_Aθ_Bθ_C}}
               + \frac32\right] \;(\text{linear: } R[\ln\frac{T}{σθ_r} + 1]) \\
        S_v &= R\sum\left[\frac{x}{e^x - 1} - \ln(1 - e^{-x})\right], \quad
        E_v = R\sum θ_v\left[\frac12 + \frac{1}{e^x - 1}\right] \\
        S_\mathrm{free\,rotor} &= R\left[\frac12 + \ln\left(\frac{8π^3 μ' kT}{h^2}\right)^{1/2}
               \right], \quad μ = \frac{h}{8π^2 ν}

    References
    ----------
    J. W. Ochterski, Thermochemistry in Gaussian (2000); D. A. McQuarrie, J. D. Simon,
    Molecular Thermodynamics (1999).
    S. Grimme, Chem. Eur. J. 2012, 18, 9955, doi:10.1002/chem.201200497.
    Y.-P. Li, J. Gomes, S. M. Sharada, A. T. Bell, M. Head-Gordon, J. Phys. Chem. C 2015,
    119, 1840, doi:10.1021/jp509921r.
    R. F. Ribeiro, A. V. Marenich, C. J. Cramer, D. G. Truhlar, J. Phys. Chem. B 2011, 115,
    14556, doi:10.1021/jp205508z.

    Examples
    --------
    Water from its experimental fundamentals and rotational constants:

    >>> r = ideal_gas_thermo([3657.0, 1595.0, 3756.0], mass=18.010565,
    ...                      rotational_constants=[27.877, 14.512, 9.285],
    ...                      symmetry_number=2, unit="kJ/mol")
    >>> round(r.entropy * 1000, 1)   # J/(mol K), 1 bar
    188.7
    >>> round(r.zpe, 2)   # kJ/mol
    53.88
    """
    unit = normalize_unit(unit)
    t, scalar_t = _temperatures(temperature)
    pressure = _check_positive(pressure, "pressure", "> 0 Pa")
    mass = _check_positive(mass, "mass", "> 0 amu")
    cutoff = _check_positive(cutoff, "cutoff", "> 0 cm^-1")
    if low_mode not in _LOW_MODES:
        raise InputError(f"low_mode must be one of {list(_LOW_MODES)}, got {low_mode!r}")
    if enthalpy_interpolation and low_mode == "quasi-harmonic":
        raise InputError(
            "enthalpy_interpolation cannot be combined with low_mode='quasi-harmonic' "
            "(both correct the low-mode enthalpy); use low_mode='qrrho' or 'rrho'"
        )
    if isinstance(symmetry_number, bool) or not float(symmetry_number).is_integer() or symmetry_number < 1:
        raise InputError(f"symmetry_number must be a positive integer, got {symmetry_number!r}")
    if isinstance(multiplicity, bool) or not float(multiplicity).is_integer() or multiplicity < 1:
        raise InputError(f"multiplicity must be a positive integer (2S+1), got {multiplicity!r}")
    sigma = int(symmetry_number)

    nu = np.atleast_1d(_float_array(frequencies, "frequencies"))
    if nu.ndim != 1:
        raise InputError(f"frequencies must be a 1-D sequence in cm^-1, got shape {nu.shape}")
    bad = ~np.isfinite(nu) | (nu == 0.0)
    if bad.any():
        raise InputError(
            "frequencies must be finite and non-zero (pass only the vibrational modes, "
            f"translations and rotations removed), {_describe_bad(nu, bad)}"
        )
    imaginary = nu[nu < 0.0]
    nu = nu[nu > 0.0]
    if imaginary.size:
        logger.info("leaving out %d imaginary mode(s): %s cm^-1", imaginary.size, imaginary)
    if low_mode == "quasi-harmonic":
        nu = np.maximum(nu, cutoff)

    consts, linear = _rotational_constants(rotational_constants)

    r = gas_constant(unit)  # unit per K (per mole for molar units)
    kt = BOLTZMANN * t  # J, (n_T,)
    zeros = np.zeros_like(t)

    # translation (PV = RT carried here so the parts add up to H and Cp)
    m = mass * AMU_KG
    ln_qt = 1.5 * np.log(2.0 * np.pi * m * kt / PLANCK**2) + np.log(kt / pressure)
    trans = (1.5 * r * t, 2.5 * r * t, r * (ln_qt + 2.5), 2.5 * r + zeros)

    # rotation (classical high-temperature limit)
    theta_rot = PLANCK * LIGHT_SPEED_CM * consts / BOLTZMANN  # K
    if consts.size == 0:
        rot = (zeros, zeros, zeros, zeros)
    elif linear:
        ln_qr = np.log(t / (sigma * theta_rot[0]))
        rot = (r * t, r * t, r * (ln_qr + 1.0), r + zeros)
    else:
        ln_qr = 0.5 * np.log(np.pi) - np.log(sigma) + 1.5 * np.log(t) - 0.5 * np.log(theta_rot).sum()
        rot = (1.5 * r * t, 1.5 * r * t, r * (ln_qr + 1.5), 1.5 * r + zeros)

    # vibration, per temperature (rows) and mode (columns)
    theta_v = PLANCK * LIGHT_SPEED_CM * nu / BOLTZMANN  # K, (m,)
    x = theta_v[None, :] / t[:, None]
    with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
        em1 = np.expm1(x)
        e_th_mode = np.where(np.isinf(em1), 0.0, r * theta_v / em1)  # thermal, no ZPE
        s_ho = r * (np.where(np.isinf(em1), 0.0, x / em1) - np.log(-np.expm1(-x)))
        half = 0.5 * x
        cv_ho = r * np.where(half > 350.0, 0.0, (half / np.sinh(half)) ** 2)
    zpe_mode = 0.5 * r * theta_v  # (m,)
    e_mode = zpe_mode[None, :] + e_th_mode
    weight = 1.0 / (1.0 + (cutoff / nu) ** 4)  # (m,)

    if low_mode == "qrrho":
        mu = PLANCK / (8.0 * np.pi**2 * LIGHT_SPEED_CM * nu)  # kg m^2
        mu_eff = mu * _GRIMME_B_AV / (mu + _GRIMME_B_AV)
        s_rot = r * (0.5 + 0.5 * np.log(8.0 * np.pi**3 * mu_eff[None, :] * kt[:, None] / PLANCK**2))
        s_vib_mode = weight * s_ho + (1.0 - weight) * s_rot
    else:
        s_vib_mode = s_ho
    if enthalpy_interpolation:
        e_mode = weight * e_mode + (1.0 - weight) * 0.5 * r * t[:, None]
        cv_mode = weight * cv_ho + (1.0 - weight) * 0.5 * r
    else:
        cv_mode = cv_ho
    e_vib = e_mode.sum(axis=1)
    vib = (e_vib, e_vib, s_vib_mode.sum(axis=1), cv_mode.sum(axis=1))

    elec = (zeros, zeros, r * math.log(multiplicity) + zeros, zeros)

    def pack(values):
        return tuple(float(v[0]) if scalar_t else _readonly(v) for v in values)

    parts = [ThermoContribution(*pack(p)) for p in (trans, rot, vib, elec)]
    energy = trans[0] + rot[0] + vib[0] + elec[0]
    enthalpy = trans[1] + rot[1] + vib[1] + elec[1]
    entropy = trans[2] + rot[2] + vib[2] + elec[2]
    cp = trans[3] + rot[3] + vib[3] + elec[3]
    gibbs = enthalpy - t * entropy
    energy, enthalpy, entropy, gibbs, cp = pack((energy, enthalpy, entropy, gibbs, cp))

    settings = MappingProxyType(
        {
            "mass": mass,
            "rotational_constants": tuple(float(c) for c in np.atleast_1d(rotational_constants)),
            "symmetry_number": sigma,
            "multiplicity": int(multiplicity),
            "low_mode": low_mode,
            "cutoff": cutoff,
            "enthalpy_interpolation": bool(enthalpy_interpolation),
        }
    )
    return ThermoResult(
        zpe=float(zpe_mode.sum()),
        internal_energy=energy,
        enthalpy=enthalpy,
        entropy=entropy,
        gibbs=gibbs,
        heat_capacity=cp,
        translational=parts[0],
        rotational=parts[1],
        vibrational=parts[2],
        electronic=parts[3],
        imaginary_frequencies=_readonly(imaginary),
        frequencies=_readonly(nu),
        temperature=float(t[0]) if scalar_t else _readonly(t),
        pressure=pressure,
        unit=unit,
        linear=linear,
        settings=settings,
    )


# --------------------------------------------------------------------------- standard states

_PRESSURE_STATES = {"1 bar": 1e5, "1 atm": 101325.0}
_CONCENTRATION_STATES = {"1 m": 1000.0, "1 mol/l": 1000.0, "1 mol/dm3": 1000.0}  # mol/m^3


def _state_concentration(state, t: np.ndarray, name: str) -> np.ndarray:
    key = " ".join(str(state).lower().split()) if isinstance(state, str) else None
    if key in _PRESSURE_STATES:
        return _PRESSURE_STATES[key] / (AVOGADRO * BOLTZMANN * t)  # ideal gas, mol/m^3
    if key in _CONCENTRATION_STATES:
        return np.full_like(t, _CONCENTRATION_STATES[key])
    raise InputError(f"{name} must be one of '1 bar', '1 atm', '1 M', got {state!r}")


def standard_state_correction(temperature, from_state: str = "1 bar", to_state: str = "1 M",
                              unit: str = "kcal/mol"):
    r"""Free-energy change of moving one species between standard states.

    Parameters
    ----------
    temperature : float or (n_T,) sequence, K
    from_state, to_state : {"1 bar", "1 atm", "1 M"}
        Gas at 1 bar or 1 atm (ideal gas), or 1 mol/L ("1 M", also "1 mol/L").
    unit : str

    Returns
    -------
    float or (n_T,) ndarray, `unit`
        Add it to a free energy in `from_state` to get the free energy in `to_state`.

    Notes
    -----
    .. math:: \Delta G = RT \ln \frac{c_\mathrm{to}}{c_\mathrm{from}},
              \qquad c_\mathrm{gas} = \frac{p}{RT}

    so gas 1 atm -> 1 mol/L at 298.15 K is RT ln 24.4654 = 1.8943 kcal/mol.

    Examples
    --------
    >>> round(standard_state_correction(298.15, "1 atm", "1 M"), 4)
    1.8943
    >>> round(standard_state_correction(298.15, "1 bar", "1 M"), 4)
    1.9021
    """
    t, scalar_t = _temperatures(temperature)
    c_from = _state_concentration(from_state, t, "from_state")
    c_to = _state_concentration(to_state, t, "to_state")
    dg = gas_constant(unit) * t * np.log(c_to / c_from)
    return float(dg[0]) if scalar_t else dg
