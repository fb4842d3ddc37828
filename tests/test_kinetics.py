"""Eyring rates, half-lives, atropisomer classes and NMR coalescence against published values,
rules of thumb of the trade and exact identities."""

import math

import numpy as np
import pytest
import scipy.constants as sc
from hypothesis import given, settings
from hypothesis import strategies as st

from confpop.errors import InputError
from confpop.kinetics import (
    ATROPISOMER_CLASS_LIMITS,
    atropisomer_class,
    barrier_for_half_life,
    coalescence_barrier,
    coalescence_rate,
    eyring_rate,
    exchange_regime,
    format_duration,
    half_life,
    mean_residence_time,
)
from reference_values import value as refval

R_KCAL = sc.R / 4184.0
YEAR = sc.Julian_year
MINUTE = 60.0


def test_prefactor_kt_over_h():
    # k_B T / h = 6.2124e12 s^-1 at 298.15 K, computed from CODATA 2022 constants
    assert eyring_rate(0.0, 298.15) == pytest.approx(refval("eyring_prefactor_298"), rel=1e-5)
    assert eyring_rate(0.0, 298.15) == pytest.approx(sc.k * 298.15 / sc.h, rel=1e-14)


@pytest.mark.parametrize(
    "barrier, low, high",
    [
        # ~5 kcal/mol: about a nanosecond (common practice)
        (5.0, *refval("time_scale_5_kcal_room_temperature")),
        # ~20 kcal/mol: seconds to a minute (common practice)
        (20.0, *refval("time_scale_20_kcal_room_temperature")),
        # ~30 kcal/mol: years (common practice)
        (30.0, *(YEAR * t for t in refval("time_scale_30_kcal_room_temperature"))),
    ],
)
def test_room_temperature_rules_of_thumb(barrier, low, high):
    t = half_life(barrier, 298.15)
    assert low < t < high


@pytest.mark.parametrize(
    "barrier, temperature, expected",
    [
        # computed from the Eyring equation (tests/reference_values.py)
        (20.0, 298.15, refval("half_life_20_kcal_298")),  # t½ ≈ 51 s
        (30.0, 298.15, refval("half_life_30_kcal_298") * YEAR),  # ≈ 34.6 yr
        (20.0, 310.15, refval("half_life_20_kcal_310")),  # 13.3 s
        (30.0, 310.15, refval("half_life_30_kcal_310") * YEAR),  # 4.68 yr
    ],
)
def test_exact_eyring_half_lives(barrier, temperature, expected):
    # values given to three digits, so rel=2e-3
    assert half_life(barrier, temperature) == pytest.approx(expected, rel=2e-3)


def test_half_life_residence_time_and_rate_are_consistent():
    barriers = np.array([3.0, 12.0, 21.5, 33.0])
    k = eyring_rate(barriers, 300.0)
    np.testing.assert_allclose(half_life(barriers, 300.0), math.log(2) / k, rtol=1e-15)
    np.testing.assert_allclose(mean_residence_time(barriers, 300.0), 1.0 / k, rtol=1e-15)
    # the formula, written out
    np.testing.assert_allclose(k, sc.k * 300.0 / sc.h * np.exp(-barriers / (R_KCAL * 300.0)), rtol=1e-13)


def test_units_transmission_and_broadcasting():
    assert eyring_rate(83.68, 298.15, unit="kJ/mol") == pytest.approx(eyring_rate(20.0, 298.15), rel=1e-13)
    assert eyring_rate(20.0 / 627.509474063, 298.15, unit="hartree") == pytest.approx(
        eyring_rate(20.0, 298.15), rel=1e-9)
    assert eyring_rate(20.0, 298.15, transmission=0.5) == pytest.approx(0.5 * eyring_rate(20.0, 298.15), rel=1e-15)
    barriers = np.array([[10.0], [20.0], [30.0]])
    temps = np.array([[250.0, 350.0]])
    k = eyring_rate(barriers, temps)
    assert k.shape == (3, 2)
    assert k[1, 1] == pytest.approx(eyring_rate(20.0, 350.0), rel=1e-15)
    assert isinstance(eyring_rate(20.0, 300.0), float)
    assert isinstance(half_life(20.0, 300.0), float)
    # a barrier so high the rate underflows: infinite half-life, not an error
    assert half_life(1e5, 300.0) == math.inf


def test_barrier_for_half_life_inverts_half_life():
    barriers = np.array([0.5, 8.0, 20.0, 29.9, 45.0])
    temps = np.array([200.0, 298.15, 310.15, 400.0, 500.0])
    back = barrier_for_half_life(half_life(barriers, temps), temps)
    np.testing.assert_allclose(back, barriers, rtol=1e-12)
    back_kj = barrier_for_half_life(half_life(20.0, 300.0, transmission=0.3), 300.0,
                                    unit="kJ/mol", transmission=0.3)
    assert back_kj == pytest.approx(83.68, rel=1e-12)


@settings(max_examples=50, deadline=None)
@given(barrier=st.floats(0.0, 60.0), temperature=st.floats(50.0, 1500.0))
def test_property_round_trip_and_monotonic(barrier, temperature):
    t_half = half_life(barrier, temperature)
    assert barrier_for_half_life(t_half, temperature) == pytest.approx(barrier, abs=1e-9)
    assert half_life(barrier + 0.1, temperature) > t_half
    assert eyring_rate(barrier, temperature * 1.01) > eyring_rate(barrier, temperature)


def test_atropisomer_class_thresholds():
    # LaPlante et al., J. Med. Chem. 2011, 54, 7005 (doi:10.1021/jm200584g): at 37 °C,
    # class 1 t½ < 60 s, class 2 60 s to 4.5 yr, class 3 > 4.5 yr [S: as summarised in
    # Acc. Chem. Res. 2022, 55, 2904]
    class_1_limit_s, class_3_limit_yr = refval("atropisomer_class_limits_37C")
    assert ATROPISOMER_CLASS_LIMITS == (class_1_limit_s, pytest.approx(class_3_limit_yr * YEAR, rel=1e-15))
    b1 = barrier_for_half_life(60.0, 310.15)
    b2 = barrier_for_half_life(4.5 * YEAR, 310.15)
    # the barriers usually quoted with the classes: ~20 and ~30 kcal/mol (LaPlante 2011)
    assert b1 == pytest.approx(20.9, abs=0.1)
    assert b2 == pytest.approx(30.0, abs=0.1)
    assert atropisomer_class(b1 - 1e-6) == 1
    assert atropisomer_class(b1 + 1e-6) == 2
    assert atropisomer_class(b2 - 1e-6) == 2
    assert atropisomer_class(b2 + 1e-6) == 3
    assert atropisomer_class([15.0, 20.0, 25.0, 28.0, 35.0]).tolist() == [1, 1, 2, 2, 3]
    assert isinstance(atropisomer_class(25.0), int)


def test_atropisomer_class_racemization_halves_the_half_life():
    # k_rac = 2 k_enant: the boundaries move up by RT ln 2 = 0.4272 kcal/mol at 310.15 K [C]
    shift = R_KCAL * 310.15 * math.log(2)
    assert shift == pytest.approx(0.4272, abs=1e-4)
    b2 = barrier_for_half_life(4.5 * YEAR, 310.15)
    assert atropisomer_class(b2 + 0.2) == 3
    assert atropisomer_class(b2 + 0.2, process="racemization") == 2
    assert atropisomer_class(b2 + shift + 1e-6, process="racemization") == 3
    with pytest.raises(InputError, match=r"process must be one of \['enantiomerization', 'racemization'\], got 'inversion'"):
        atropisomer_class(25.0, process="inversion")


def test_coalescence_worked_values():
    # Gutowsky & Holm, J. Chem. Phys. 1956, 25, 1228 [M]; check values computed from the
    # formula (tests/reference_values.py):
    # Δν = 100 Hz, T_c = 300 K -> k_c = 222.14 s^-1, ΔG‡ = 14.34 kcal/mol
    assert coalescence_rate(100.0) == pytest.approx(refval("coalescence_rate_100_hz"), abs=0.005)
    assert coalescence_barrier(300.0, 100.0) == pytest.approx(
        refval("coalescence_barrier_300_K_100_hz"), abs=0.005)
    # the textbook shortcut ΔG‡ = R T_c [22.96 + ln(T_c/Δν)] J/mol agrees to ~0.01%
    shortcut = sc.R * 300.0 * (refval("coalescence_shortcut_constant") + math.log(300.0 / 100.0)) / 4184.0
    assert coalescence_barrier(300.0, 100.0) == pytest.approx(shortcut, rel=2e-4)
    # Eyring at k_c gives back the rate
    assert eyring_rate(coalescence_barrier(300.0, 100.0), 300.0) == pytest.approx(
        coalescence_rate(100.0), rel=1e-12)


def test_coalescence_coupled_ab_case():
    # Kurland, Rubin & Wise, J. Chem. Phys. 1964, 40, 2426 [M]: k_c = π √(Δν² + 6J²) / √2
    assert coalescence_rate(100.0, j_hz=12.0) == pytest.approx(
        math.pi * math.sqrt(100.0**2 + 6 * 12.0**2) / math.sqrt(2), rel=1e-15)
    assert coalescence_rate(100.0, 0.0) == coalescence_rate(100.0)
    np.testing.assert_allclose(coalescence_barrier([280.0, 320.0], [50.0, 200.0], j_hz=5.0),
                               [coalescence_barrier(280.0, 50.0, 5.0), coalescence_barrier(320.0, 200.0, 5.0)],
                               rtol=1e-15)


def test_exchange_regime_thresholds():
    # documented choice: slow below k_c/10, fast above 10 k_c (Δν = 100 Hz: k_c = 222.14 s^-1)
    k_c = coalescence_rate(100.0)
    rates = [0.0, 0.099 * k_c, 0.101 * k_c, k_c, 9.9 * k_c, 10.1 * k_c, 1e12]
    assert exchange_regime(rates, 100.0).tolist() == [
        "slow", "slow", "intermediate", "intermediate", "intermediate", "fast", "fast"]
    assert exchange_regime(eyring_rate(20.0, 298.15), 100.0) == "slow"  # minutes: separate lines
    assert exchange_regime(eyring_rate(5.0, 298.15), 100.0) == "fast"  # nanoseconds: averaged
    assert exchange_regime(coalescence_rate(100.0), 100.0) == "intermediate"


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: eyring_rate(-1.0, 300.0), r"barrier must be finite and >= 0 kcal/mol, got -1\.0"),
        (lambda: eyring_rate([5.0, float("nan")], 300.0), r"barrier must be finite .*got nan at position 1"),
        (lambda: eyring_rate(20.0, -5.0), r"temperature must be finite and > 0 K, got -5\.0"),
        (lambda: eyring_rate(20.0, [300.0, 0.0]), r"temperature must be .*got 0\.0 at position 1"),
        (lambda: eyring_rate(20.0, 300.0, transmission=0.0), r"transmission must be finite and > 0, got 0\.0"),
        (lambda: eyring_rate(20.0, 300.0, unit="kcal/mole"), r"unit must be one of"),
        (lambda: eyring_rate([1.0, 2.0], [300.0, 310.0, 320.0]), r"cannot be broadcast together: barrier \(2,\), temperature \(3,\)"),
        (lambda: half_life(20.0, float("inf")), r"temperature must be finite and > 0 K, got inf"),
        (lambda: barrier_for_half_life(0.0, 300.0), r"half_life_s must be finite and > 0 s, got 0\.0"),
        (lambda: coalescence_rate(0.0), r"delta_nu_hz must be finite and > 0 Hz, got 0\.0"),
        (lambda: coalescence_barrier(-300.0, 100.0), r"t_c must be finite and > 0 K, got -300\.0"),
        (lambda: exchange_regime(-1.0, 100.0), r"rate must be finite and >= 0 s\^-1, got -1\.0"),
        (lambda: format_duration(-2.0), r"seconds must be >= 0, got -2\.0"),
        (lambda: format_duration("soon"), r"seconds must be a number, got 'soon'"),
    ],
)
def test_bad_input(call, message):
    with pytest.raises(InputError, match=message):
        call()


@pytest.mark.parametrize(
    "seconds, text",
    [
        (3.2e-9, "3.2 ns"), (5.16e-10, "520 ps"), (51.01, "51 s"), (13.3, "13 s"), (0.999, "1.0 s"),
        (90.0, "1.5 min"), (7200.0, "2.0 h"), (3 * 86400.0, "3.0 d"), (34.56 * YEAR, "35 yr"),
        (4.684 * YEAR, "4.7 yr"), (2.5e-4, "250 µs"), (3e-14, "30 fs"), (0.0, "0 s"),
        (math.inf, "inf"), (3.2e7 * YEAR, "3.2e+07 yr"),
    ],
)
def test_format_duration(seconds, text):
    assert format_duration(seconds) == text
