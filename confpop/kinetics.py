"""Interconversion rates from barriers: Eyring rates, half-lives, stability classes, NMR.

Plain numpy (no chemistry imports). Barriers are free energies of activation ΔG‡ in
``unit`` (default ``"kcal/mol"``); rates are first-order rate constants in s⁻¹ for one
direction of the process (A -> B); times are in seconds. Barrier and temperature arguments
broadcast against each other like numpy arrays; scalars in give floats out.

Examples
--------
>>> round(half_life(20.0, 298.15), 1)
51.0
>>> format_duration(half_life(30.0, 298.15))
'35 yr'
>>> atropisomer_class([18.0, 25.0, 32.0]).tolist()
[1, 2, 3]
"""

from __future__ import annotations

import math

import numpy as np
import scipy.constants as sc

from .errors import InputError
from .thermo import _describe_bad, _float_array
from .units import BOLTZMANN, PLANCK, gas_constant

__all__ = [
    "eyring_rate",
    "half_life",
    "mean_residence_time",
    "barrier_for_half_life",
    "atropisomer_class",
    "ATROPISOMER_CLASS_LIMITS",
    "coalescence_rate",
    "coalescence_barrier",
    "exchange_regime",
    "EXCHANGE_REGIME_FACTOR",
    "format_duration",
]

_LN2 = math.log(2.0)
_YEAR = sc.Julian_year  # 365.25 d, in s

#: Half-life limits (s) of the atropisomer classes at 37 °C: class 1 below the first,
#: class 3 above the second (LaPlante et al. 2011): 60 s and 4.5 years.
ATROPISOMER_CLASS_LIMITS: tuple[float, float] = (60.0, 4.5 * _YEAR)

#: A rate more than this factor below (above) the coalescence rate counts as slow (fast)
#: exchange on the NMR time scale; in between is the intermediate regime.
EXCHANGE_REGIME_FACTOR: float = 10.0

_PROCESSES = ("enantiomerization", "racemization")


def _scalar_or_array(a):
    return float(a) if np.ndim(a) == 0 else a


def _checked(value, name: str, *, positive: bool = False, nonnegative: bool = False,
             unit_text: str = "") -> np.ndarray:
    arr = _float_array(value, name)
    if arr.size == 0:
        raise InputError(f"{name} must contain at least one value, got an empty sequence")
    bad = ~np.isfinite(arr)
    rule = "finite"
    if positive:
        bad |= arr <= 0.0
        rule = f"finite and > 0{unit_text}"
    elif nonnegative:
        bad |= arr < 0.0
        rule = f"finite and >= 0{unit_text}"
    if bad.any():
        raise InputError(f"{name} must be {rule}, {_describe_bad(arr, bad)}")
    return arr


def _check_transmission(transmission) -> float:
    """κ of transition-state theory: the fraction of crossings that do not recross, 0 < κ <= 1
    (a tunnelling factor, which may exceed 1, is a separate correction)."""
    arr = _checked(transmission, "transmission", positive=True)
    if arr.ndim != 0:
        raise InputError(f"transmission must be a single number, got shape {arr.shape}")
    kappa = float(arr)
    if kappa > 1.0:
        raise InputError(f"transmission κ must be > 0 and <= 1 (the fraction of crossings that "
                         f"do not recross), got {kappa:g}")
    return kappa


def _broadcast(*arrays_and_names):
    arrays = [a for a, _ in arrays_and_names]
    try:
        return np.broadcast_arrays(*arrays)
    except ValueError:
        shapes = ", ".join(f"{name} {a.shape}" for a, name in arrays_and_names)
        raise InputError(f"arguments cannot be broadcast together: {shapes}") from None


def _barrier_temperature(barrier, temperature, unit):
    b = _checked(barrier, "barrier", nonnegative=True, unit_text=f" {unit}")
    t = _checked(temperature, "temperature", positive=True, unit_text=" K")
    return b, t


def eyring_rate(barrier, temperature, unit: str = "kcal/mol", transmission: float = 1.0):
    r"""First-order rate constant from a free energy of activation (Eyring equation).

    Parameters
    ----------
    barrier : float or array, `unit`
        ΔG‡ >= 0 of one direction of the process.
    temperature : float or array, K
        Broadcast against `barrier`.
    unit : str
        "kcal/mol", "kJ/mol", "hartree", "eV" or "cm-1".
    transmission : float
        Transmission coefficient 0 < κ <= 1 (default 1).

    Returns
    -------
    float or ndarray, s^-1

    Raises
    ------
    InputError
        Negative or non-finite barrier, temperature <= 0, transmission outside (0, 1].

    Notes
    -----
    .. math:: k = \kappa \frac{k_B T}{h} e^{-\Delta G^\ddagger / RT}

    References
    ----------
    H. Eyring, J. Chem. Phys. 1935, 3, 107, doi:10.1063/1.1749604.

    Examples
    --------
    >>> f"{eyring_rate(0.0, 298.15):.4e}"   # k_B T / h
    '6.2124e+12'
    >>> eyring_rate([10.0, 20.0], [298.15, 310.15]).round(4).tolist()
    [290543.5244, 0.0522]
    """
    b, t = _barrier_temperature(barrier, temperature, unit)
    kappa = _check_transmission(transmission)
    b, t = _broadcast((b, "barrier"), (t, "temperature"))
    with np.errstate(under="ignore"):
        k = kappa * BOLTZMANN * t / PLANCK * np.exp(-b / (gas_constant(unit) * t))
    return _scalar_or_array(k)


def half_life(barrier, temperature, unit: str = "kcal/mol", transmission: float = 1.0):
    r"""Half-life ln2 / k of a first-order process with barrier ΔG‡ (seconds).

    The time for half of the molecules to cross the barrier once, in one direction (for a
    reversible process the approach to equilibrium is faster; see :func:`atropisomer_class`).

    Parameters
    ----------
    barrier, temperature, unit, transmission
        As for :func:`eyring_rate`.

    Returns
    -------
    float or ndarray, s
        ``inf`` where the rate underflows to 0.

    Notes
    -----
    .. math:: t_{1/2} = \ln 2 / k

    Examples
    --------
    >>> round(half_life(20.0, 310.15), 1)
    13.3
    """
    k = np.asarray(eyring_rate(barrier, temperature, unit, transmission))
    with np.errstate(divide="ignore"):
        return _scalar_or_array(_LN2 / k)


def mean_residence_time(barrier, temperature, unit: str = "kcal/mol", transmission: float = 1.0):
    r"""Mean lifetime 1 / k of a conformer that leaves over a barrier ΔG‡ (seconds).

    Parameters
    ----------
    barrier, temperature, unit, transmission
        As for :func:`eyring_rate`.

    Returns
    -------
    float or ndarray, s

    Notes
    -----
    .. math:: \tau = 1 / k = t_{1/2} / \ln 2

    Examples
    --------
    >>> f"{mean_residence_time(5.0, 298.15):.2e}"
    '7.44e-10'
    """
    k = np.asarray(eyring_rate(barrier, temperature, unit, transmission))
    with np.errstate(divide="ignore"):
        return _scalar_or_array(1.0 / k)


def barrier_for_half_life(half_life_s, temperature, unit: str = "kcal/mol",
                          transmission: float = 1.0):
    r"""Free energy of activation that gives a first-order half-life (inverse of :func:`half_life`).

    Parameters
    ----------
    half_life_s : float or array, s
        Half-life > 0.
    temperature : float or array, K
    unit : str
    transmission : float

    Returns
    -------
    float or ndarray, `unit`
        May be negative for half-lives shorter than ln2 · h / (κ k_B T) (~0.1 ps).

    Notes
    -----
    .. math:: \Delta G^\ddagger = -RT \ln\frac{h \ln 2}{\kappa k_B T\, t_{1/2}}

    Examples
    --------
    >>> round(barrier_for_half_life(60.0, 310.15), 2)    # 1 minute at 37 °C
    20.93
    """
    h = _checked(half_life_s, "half_life_s", positive=True, unit_text=" s")
    t = _checked(temperature, "temperature", positive=True, unit_text=" K")
    kappa = _check_transmission(transmission)
    h, t = _broadcast((h, "half_life_s"), (t, "temperature"))
    k = _LN2 / h
    dg = -gas_constant(unit) * t * np.log(k * PLANCK / (kappa * BOLTZMANN * t))
    return _scalar_or_array(dg)


def atropisomer_class(barrier, temperature=310.15, unit: str = "kcal/mol",
                      process: str = "enantiomerization", transmission: float = 1.0):
    r"""LaPlante stability class (1, 2 or 3) of an atropisomer from its rotation barrier.

    Class 1: t½ < 60 s (interconverts on dissolution); class 2: 60 s <= t½ <= 4.5 yr;
    class 3: t½ > 4.5 yr (can be developed as a single atropisomer). The classes are defined
    at 37 °C, hence the default temperature.

    Parameters
    ----------
    barrier : float or array, `unit`
        ΔG‡ for the interconversion of one atropisomer into the other (one direction, i.e.
        the enantiomerization barrier; for diastereomeric atropisomers, the barrier out of
        the atropisomer of interest).
    temperature : float or array, K
        Default 310.15 K (37 °C). Other temperatures give the class the same half-life would
        have, not the published classification.
    unit : str
    process : {"enantiomerization", "racemization"}
        Which half-life is compared with the limits. "enantiomerization" (default): t½ =
        ln2 / k, the half-life for one atropisomer turning into the other. "racemization":
        the half-life for the enantiomeric excess of an enantiopure sample, which decays with
        k_rac = 2 k, so t½ is half as long and the class boundaries sit ~0.43 kcal/mol higher
        at 37 °C.
    transmission : float

    Returns
    -------
    int or ndarray of int

    Notes
    -----
    The barrier values usually quoted with the classes (class 1 below ~20 kcal/mol, class 3
    above ~30 kcal/mol) follow from the half-life limits with the Eyring equation at 37 °C:
    60 s <-> 20.9 kcal/mol and 4.5 yr <-> 30.0 kcal/mol for enantiomerization.

    References
    ----------
    S. R. LaPlante, L. D. Fader, K. R. Fandrick, D. R. Fandrick, O. Hucke, R. Kemper,
    S. P. F. Miller, P. J. Edwards, J. Med. Chem. 2011, 54, 7005, doi:10.1021/jm200584g.

    Examples
    --------
    >>> atropisomer_class(25.0)
    2
    >>> atropisomer_class(30.1), atropisomer_class(30.1, process="racemization")
    (3, 2)
    """
    if process not in _PROCESSES:
        raise InputError(f"process must be one of {list(_PROCESSES)}, got {process!r}")
    t_half = np.asarray(half_life(barrier, temperature, unit, transmission))
    if process == "racemization":
        t_half = t_half / 2.0
    lower, upper = ATROPISOMER_CLASS_LIMITS
    cls = np.where(t_half < lower, 1, np.where(t_half > upper, 3, 2))
    return int(cls) if cls.ndim == 0 else cls


def coalescence_rate(delta_nu_hz, j_hz=0.0):
    r"""Exchange rate at the coalescence of two equally populated NMR signals (s^-1).

    Parameters
    ----------
    delta_nu_hz : float or array, Hz
        Separation of the two signals in the slow-exchange limit, > 0.
    j_hz : float or array, Hz
        Scalar coupling between the two exchanging nuclei (coupled AB case); 0 for singlets.

    Returns
    -------
    float or ndarray, s^-1
        The first-order rate constant of one direction, A -> B.

    Notes
    -----
    .. math:: k_c = \frac{\pi \Delta\nu}{\sqrt 2}, \qquad
              k_c^{AB} = \frac{\pi \sqrt{\Delta\nu^2 + 6 J^2}}{\sqrt 2}

    References
    ----------
    H. S. Gutowsky, C. H. Holm, J. Chem. Phys. 1956, 25, 1228, doi:10.1063/1.1743184;
    R. J. Kurland, M. B. Rubin, W. B. Wise, J. Chem. Phys. 1964, 40, 2426,
    doi:10.1063/1.1725544.

    Examples
    --------
    >>> round(coalescence_rate(100.0), 2)
    222.14
    """
    dnu = _checked(delta_nu_hz, "delta_nu_hz", positive=True, unit_text=" Hz")
    j = _checked(j_hz, "j_hz")
    dnu, j = _broadcast((dnu, "delta_nu_hz"), (j, "j_hz"))
    return _scalar_or_array(np.pi * np.sqrt(dnu**2 + 6.0 * j**2) / math.sqrt(2.0))


def coalescence_barrier(t_c, delta_nu_hz, j_hz=0.0, unit: str = "kcal/mol"):
    r"""Free energy of activation at the coalescence temperature (Eyring at k_c).

    Parameters
    ----------
    t_c : float or array, K
        Coalescence temperature.
    delta_nu_hz, j_hz : float or array, Hz
        As for :func:`coalescence_rate`.
    unit : str

    Returns
    -------
    float or ndarray, `unit`
        ΔG‡ at T_c, for one direction of a two-site exchange between equally populated
        sites (κ = 1).

    Notes
    -----
    .. math:: \Delta G^\ddagger = R T_c \ln\frac{k_B T_c}{h k_c}
              \;\approx\; R T_c\,[22.96 + \ln(T_c/\Delta\nu)] \;\;(\mathrm{J/mol}, J = 0)

    Examples
    --------
    >>> round(coalescence_barrier(300.0, 100.0), 2)
    14.34
    """
    t = _checked(t_c, "t_c", positive=True, unit_text=" K")
    k_c = np.asarray(coalescence_rate(delta_nu_hz, j_hz))
    t, k_c = _broadcast((t, "t_c"), (k_c, "delta_nu_hz"))
    dg = gas_constant(unit) * t * np.log(BOLTZMANN * t / (PLANCK * k_c))
    return _scalar_or_array(dg)


def exchange_regime(rate, delta_nu_hz, j_hz=0.0):
    r"""NMR time-scale regime of a two-site exchange: "slow", "intermediate" or "fast".

    Parameters
    ----------
    rate : float or array, s^-1
        First-order rate constant of one direction (e.g. from :func:`eyring_rate`), >= 0.
    delta_nu_hz : float or array, Hz
        Signal separation in the slow-exchange limit (depends on the spectrometer field).
    j_hz : float or array, Hz
        Coupling between the exchanging nuclei (0 for singlets).

    Returns
    -------
    str or ndarray of str

    Notes
    -----
    Compared with the coalescence rate k_c of :func:`coalescence_rate`:
    slow if k < k_c / 10, fast if k > 10 k_c, intermediate otherwise (factor
    :data:`EXCHANGE_REGIME_FACTOR`; a choice, not a law). At k = k_c / 10 each line of the
    slow-exchange doublet is broadened by k/π ≈ 0.07 Δν; within the intermediate band the
    spectrum changes visibly with temperature and line-shape analysis is needed.

    Examples
    --------
    >>> exchange_regime(1.0, 100.0)
    'slow'
    >>> exchange_regime([1.0, 300.0, 1e5], 100.0).tolist()
    ['slow', 'intermediate', 'fast']
    """
    k = _checked(rate, "rate", nonnegative=True, unit_text=" s^-1")
    k_c = np.asarray(coalescence_rate(delta_nu_hz, j_hz))
    k, k_c = _broadcast((k, "rate"), (k_c, "delta_nu_hz"))
    regime = np.where(k < k_c / EXCHANGE_REGIME_FACTOR, "slow",
                      np.where(k > k_c * EXCHANGE_REGIME_FACTOR, "fast", "intermediate"))
    return str(regime) if regime.ndim == 0 else regime


_SMALL_UNITS = (("fs", 1e-15), ("ps", 1e-12), ("ns", 1e-9), ("µs", 1e-6), ("ms", 1e-3))
_LARGE_UNITS = (("yr", _YEAR), ("d", 86400.0), ("h", 3600.0), ("min", 60.0))


def _two_significant(x: float) -> str:
    if x >= 1e6:
        return f"{x:.1e}"
    value = float(f"{x:.2g}")
    if value >= 10.0:
        return f"{value:.0f}"
    return f"{value:.{1 - math.floor(math.log10(value))}f}"


def format_duration(seconds) -> str:
    """A duration in the most readable unit with two significant figures.

    Parameters
    ----------
    seconds : float
        Duration >= 0 (``inf`` allowed).

    Returns
    -------
    str
        e.g. "3.2 ns", "51 s", "4.7 min", "35 yr"; years are Julian (365.25 d).

    Examples
    --------
    >>> format_duration(3.2e-9), format_duration(51.04), format_duration(1.092e9)
    ('3.2 ns', '51 s', '35 yr')
    >>> format_duration(0.0), format_duration(float("inf"))
    ('0 s', 'inf')
    """
    try:
        s = float(seconds)
    except (TypeError, ValueError):
        raise InputError(f"seconds must be a number, got {seconds!r}") from None
    if math.isnan(s) or s < 0.0:
        raise InputError(f"seconds must be >= 0, got {seconds!r}")
    if math.isinf(s):
        return "inf"
    if s == 0.0:
        return "0 s"
    # the unit is chosen on the value rounded to two figures (0.999 s reads "1.0 s", not
    # "1000 ms"); the number shown is rounded once, from the exact value
    rounded = float(f"{s:.2g}")
    if rounded >= 60.0:
        for name, size in _LARGE_UNITS:
            if rounded >= size:
                return f"{_two_significant(s / size)} {name}"
    if rounded >= 1.0:
        return f"{_two_significant(s)} s"
    for name, size in reversed(_SMALL_UNITS):
        if rounded >= size:
            return f"{_two_significant(s / size)} {name}"
    return f"{_two_significant(s / 1e-15)} fs"
