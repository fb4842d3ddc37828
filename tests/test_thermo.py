"""Boltzmann statistics and ideal-gas thermochemistry against published data, an independent
library (ASE) and exact identities."""

import math

import numpy as np
import pytest
import scipy.constants as sc
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import logsumexp

from confpop.errors import InputError
from confpop.thermo import (
    ThermoResult,
    boltzmann_weights,
    conformational_entropy,
    effective_conformer_count,
    ensemble_free_energy,
    free_energy_gap,
    ideal_gas_thermo,
    log_boltzmann_weights,
    population_ratio,
    standard_state_correction,
)
from confpop.units import gas_constant
from reference_values import value as refval

R_KCAL = sc.R / 4184.0
KCAL_PER_HARTREE = refval("hartree_in_kcal_per_mol")  # CODATA 2022

# ----------------------------------------------------------------------- Boltzmann weights


def test_two_states_reference_values():
    # computed from the Boltzmann formula: ΔG = 0 and 1 kcal/mol, g = 1, 298.15 K
    p = boltzmann_weights([0.0, 1.0], 298.15)
    np.testing.assert_allclose(p, refval("two_state_populations"), rtol=0, atol=5e-8)
    assert ensemble_free_energy([0.0, 1.0], 298.15) == pytest.approx(
        refval("two_state_ensemble_free_energy"), abs=5e-8)
    # S_conf = 0.86063 cal/(mol K)
    assert conformational_entropy(p) * 1000 == pytest.approx(
        refval("two_state_conformational_entropy"), abs=5e-6)


def test_three_states_with_degeneracy_reference_values():
    # computed from the Boltzmann formula: G = (0, 0.5, 1.2) kcal/mol, g = (1, 2, 1), 298.15 K
    g = [1, 2, 1]
    p = boltzmann_weights([0.0, 0.5, 1.2], 298.15, degeneracy=g)
    np.testing.assert_allclose(p, refval("three_state_populations"), rtol=0, atol=5e-8)
    assert ensemble_free_energy([0.0, 0.5, 1.2], 298.15, degeneracy=g) == pytest.approx(
        refval("three_state_ensemble_free_energy"), abs=5e-8)
    assert conformational_entropy(p) * 1000 == pytest.approx(
        refval("three_state_conformational_entropy"), abs=5e-6)


def test_matches_direct_formula_and_scipy_logsumexp():
    # independent evaluation: the textbook formula (safe here) and scipy's logsumexp
    e = np.array([0.0, 0.3, 1.7, 2.2, 4.0])
    g = np.array([1.0, 2.0, 1.0, 3.0, 1.0])
    temps = np.array([150.0, 298.15, 1000.0])
    direct = g * np.exp(-e[None, :] / (R_KCAL * temps[:, None]))
    direct /= direct.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(boltzmann_weights(e, temps, degeneracy=g), direct, rtol=1e-13)
    log_w = -e[None, :] / (R_KCAL * temps[:, None]) + np.log(g)
    log_w -= logsumexp(log_w, axis=1, keepdims=True)
    np.testing.assert_allclose(log_boltzmann_weights(e, temps, degeneracy=g), log_w, rtol=1e-13)


def test_shapes_scalar_and_sequence_of_temperatures():
    assert boltzmann_weights([0.0, 1.0, 2.0], 300.0).shape == (3,)
    assert boltzmann_weights([0.0, 1.0, 2.0], [300.0]).shape == (1, 3)
    w = boltzmann_weights([0.0, 1.0, 2.0], [200.0, 300.0, 400.0, 500.0])
    assert w.shape == (4, 3)
    np.testing.assert_allclose(w.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    # each row equals the scalar-temperature result
    np.testing.assert_allclose(w[2], boltzmann_weights([0.0, 1.0, 2.0], 400.0), rtol=1e-15)
    assert np.ndim(ensemble_free_energy([0.0, 1.0], 300.0)) == 0
    assert ensemble_free_energy([0.0, 1.0], [300.0, 400.0]).shape == (2,)


def test_absolute_energies_of_minus_ten_thousand_hartree():
    # a constant shift of -1e4 hartree changes nothing (exact identity; float64 keeps
    # ~1e-12 hartree of the absolute value, i.e. ~1e-9 kcal/mol)
    rel_kcal = np.array([0.0, 0.4, 1.1, 3.0])
    absolute = -1.0e4 + rel_kcal / KCAL_PER_HARTREE
    w_abs = boltzmann_weights(absolute, [250.0, 298.15], unit="hartree")
    w_rel = boltzmann_weights(rel_kcal, [250.0, 298.15], unit="kcal/mol")
    assert np.all(np.isfinite(w_abs))
    np.testing.assert_allclose(w_abs, w_rel, rtol=1e-6)
    g_abs = ensemble_free_energy(absolute, 298.15, unit="hartree")
    g_rel = ensemble_free_energy(rel_kcal, 298.15)
    assert (g_abs + 1.0e4) * KCAL_PER_HARTREE == pytest.approx(g_rel, abs=1e-6)


def test_spread_of_hundreds_of_kcal_per_mol():
    e = [0.0, 250.0, 500.0]
    w = boltzmann_weights(e, 298.15)
    assert np.all(np.isfinite(w))
    # exp(-250/RT) = 1e-183 is representable, exp(-500/RT) underflows to exactly 0
    np.testing.assert_allclose(w, [1.0, math.exp(-250.0 / (R_KCAL * 298.15)), 0.0],
                               rtol=1e-12, atol=0)
    lw = log_boltzmann_weights(e, 298.15)
    # (ln p of the minimum is -1e-183, not exactly 0)
    np.testing.assert_allclose(lw, [0.0, -250.0 / (R_KCAL * 298.15), -500.0 / (R_KCAL * 298.15)],
                               rtol=1e-12, atol=1e-150)
    # the minimum need not be first, and a huge spread of +/- energies stays finite
    w2 = boltzmann_weights([600.0, -300.0, 100.0], [100.0, 5000.0])
    assert np.all(np.isfinite(w2))
    np.testing.assert_allclose(w2.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    assert w2[0, 1] == pytest.approx(1.0, abs=1e-15)


def test_low_temperature_limit_with_degeneracy():
    # T -> 0: all weight on the minimum; two degenerate minima share it as their g
    assert boltzmann_weights([0.5, 0.0, 1.0], 1e-3, degeneracy=[5, 1, 9]).tolist() == [0.0, 1.0, 0.0]
    w = boltzmann_weights([0.0, 0.0, 0.2], 1e-2, degeneracy=[1, 2, 1])
    np.testing.assert_allclose(w, [1 / 3, 2 / 3, 0.0], rtol=1e-14, atol=1e-300)


def test_high_temperature_limit_with_degeneracy():
    # T -> infinity: weights proportional to g
    # (at 1e16 K the Boltzmann factors differ from 1 by < 1e-12)
    w = boltzmann_weights([0.0, 3.0, 10.0], 1e16, degeneracy=[1, 2, 3])
    np.testing.assert_allclose(w, [1 / 6, 2 / 6, 3 / 6], rtol=1e-12)


def test_duplicate_conformer_equals_degeneracy_two():
    e_dup = [0.0, 0.7, 0.7, 1.5]
    e_merged = [0.0, 0.7, 1.5]
    temps = [200.0, 298.15, 450.0]
    w_dup = boltzmann_weights(e_dup, temps)
    w_merged = boltzmann_weights(e_merged, temps, degeneracy=[1, 2, 1])
    np.testing.assert_allclose(w_dup[:, 1] + w_dup[:, 2], w_merged[:, 1], rtol=1e-14)
    np.testing.assert_allclose(w_dup[:, [0, 3]], w_merged[:, [0, 2]], rtol=1e-14)
    np.testing.assert_allclose(ensemble_free_energy(e_dup, temps),
                               ensemble_free_energy(e_merged, temps, degeneracy=[1, 2, 1]),
                               rtol=1e-14)


def test_degeneracy_zero_masks_a_conformer():
    # documented choice: g = 0 gives exactly zero weight, the rest as if the row were absent
    w = boltzmann_weights([-5.0, 0.0, 1.0], 298.15, degeneracy=[0, 1, 1])
    assert w[0] == 0.0
    np.testing.assert_allclose(w[1:], boltzmann_weights([0.0, 1.0], 298.15), rtol=1e-14)
    assert log_boltzmann_weights([-5.0, 0.0], 298.15, degeneracy=[0, 1])[0] == -np.inf
    assert ensemble_free_energy([-5.0, 0.0], 298.15, degeneracy=[0, 1]) == pytest.approx(0.0, abs=1e-15)
    # a masked conformer far below the rest at low T must not overflow (found by hypothesis)
    assert boltzmann_weights([-2.0, 0.0], 1.0, degeneracy=[0, 1]).tolist() == [0.0, 1.0]
    assert boltzmann_weights([[-2.0, 0.0], [0.0, -5.0]], [1.0, 2.0], degeneracy=[0, 1]).tolist() == [
        [0.0, 1.0], [0.0, 1.0]]


def test_extreme_degeneracy_ratios_agree_with_log_space():
    e = [0.0, 1.0, 2.0]
    for g in ([1e-200, 1e200, 1.0], [1.0, 3.0, 1e150]):
        np.testing.assert_allclose(boltzmann_weights(e, 300.0, degeneracy=g),
                                   np.exp(log_boltzmann_weights(e, 300.0, degeneracy=g)),
                                   rtol=1e-13, atol=1e-300)


def test_ensemble_free_energy_identity_with_mixing_entropy():
    # G_ens = Σ p G - T S_mix with S_mix = -R Σ p ln(p/g) (follows from the Boltzmann formula)
    e = np.array([0.0, 0.5, 1.2, 2.0])
    g = np.array([1, 2, 1, 4])
    temps = np.array([200.0, 298.15, 600.0])
    p = boltzmann_weights(e, temps, degeneracy=g)
    s_mix = conformational_entropy(p, degeneracy=g)
    lhs = ensemble_free_energy(e, temps, degeneracy=g)
    rhs = p @ e - temps * s_mix
    np.testing.assert_allclose(lhs, rhs, rtol=1e-12)
    # equal energies: S_mix = R ln Σg and G_ens = -RT ln Σg
    p_eq = boltzmann_weights([1.0, 1.0, 1.0], 300.0, degeneracy=[1, 2, 1])
    assert conformational_entropy(p_eq, degeneracy=[1, 2, 1]) == pytest.approx(R_KCAL * math.log(4), rel=1e-13)
    assert ensemble_free_energy([1.0, 1.0, 1.0], 300.0, degeneracy=[1, 2, 1]) == pytest.approx(
        1.0 - R_KCAL * 300.0 * math.log(4), rel=1e-13)


def test_dlnz_dbeta_is_minus_mean_energy():
    # d ln Z / d beta = -<E>, by central finite difference (beta = 1/RT)
    e = np.array([0.0, 0.35, 0.9, 2.5])
    g = np.array([1, 2, 2, 1])
    beta0 = 1.0 / (R_KCAL * 298.15)
    h = 1e-4 * beta0

    def ln_z(beta):
        t = 1.0 / (R_KCAL * beta)
        return -ensemble_free_energy(e, t, degeneracy=g) * beta

    derivative = (ln_z(beta0 + h) - ln_z(beta0 - h)) / (2 * h)
    mean_e = boltzmann_weights(e, 298.15, degeneracy=g) @ e
    assert derivative == pytest.approx(-mean_e, rel=1e-7)


def test_two_dimensional_energies_one_row_per_temperature():
    # temperature-dependent free energies: row j is used at temperature j
    e = np.array([[0.0, 1.0], [0.0, 0.5], [0.3, 0.0]])
    temps = [250.0, 300.0, 350.0]
    w = boltzmann_weights(e, temps)
    for j, t in enumerate(temps):
        np.testing.assert_allclose(w[j], boltzmann_weights(e[j], t), rtol=1e-14)
        assert ensemble_free_energy(e, temps)[j] == pytest.approx(ensemble_free_energy(e[j], t), rel=1e-14)


def test_unit_consistency():
    kcal = [0.0, 0.8, 1.5]
    kj = [x * 4.184 for x in kcal]  # thermochemical calorie
    np.testing.assert_allclose(boltzmann_weights(kj, 310.0, unit="kJ/mol"),
                               boltzmann_weights(kcal, 310.0), rtol=1e-13)
    assert ensemble_free_energy(kj, 310.0, unit="kJ/mol") == pytest.approx(
        4.184 * ensemble_free_energy(kcal, 310.0), rel=1e-13)


energy_lists = st.lists(st.floats(-500.0, 500.0, allow_nan=False), min_size=1, max_size=12)


@settings(max_examples=60, deadline=None)
@given(energies=energy_lists, temperature=st.floats(1.0, 1e4),
       shift=st.floats(-1e4, 1e4), data=st.data())
def test_properties_of_weights(energies, temperature, shift, data):
    n = len(energies)
    g = data.draw(st.lists(st.integers(0, 4), min_size=n, max_size=n).filter(lambda x: any(x)))
    w = boltzmann_weights(energies, temperature, degeneracy=g)
    assert np.all(np.isfinite(w)) and np.all(w >= 0.0)
    assert w.sum() == pytest.approx(1.0, abs=1e-12)
    assert np.all(w[np.asarray(g) == 0] == 0.0)
    # a constant shift changes nothing (tolerance: rounding of |E| ~ 1e4 over RT >= 2e-3)
    shifted = boltzmann_weights(np.asarray(energies) + shift, temperature, degeneracy=g)
    np.testing.assert_allclose(shifted, w, rtol=1e-6, atol=1e-12)
    # permuting conformers permutes weights
    perm = np.random.default_rng(n).permutation(n)
    np.testing.assert_allclose(
        boltzmann_weights(np.asarray(energies)[perm], temperature, degeneracy=np.asarray(g)[perm]),
        w[perm], rtol=1e-12, atol=1e-300)
    # G_ens is at or below the lowest energy with g >= 1
    lowest = min(e for e, gi in zip(energies, g) if gi > 0)
    assert ensemble_free_energy(energies, temperature, degeneracy=g) <= lowest + 1e-9 * (1 + abs(lowest))


@settings(max_examples=40, deadline=None)
@given(energies=st.lists(st.floats(-20.0, 20.0), min_size=1, max_size=10),
       temperatures=st.lists(st.floats(50.0, 2000.0), min_size=1, max_size=5))
def test_properties_entropy_and_effective_count(energies, temperatures):
    w = boltzmann_weights(energies, temperatures)
    n = len(energies)
    n_eff = effective_conformer_count(w)
    assert np.all(n_eff >= 1.0 - 1e-12) and np.all(n_eff <= n + 1e-9)
    s = conformational_entropy(w)
    assert np.all(s >= -1e-15) and np.all(s <= R_KCAL * math.log(n) + 1e-12)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(energies=[0.0, 1.0], temperature=-5.0), r"temperature must be finite and > 0 K, got -5\.0"),
        (dict(energies=[0.0, 1.0], temperature=0.0), r"temperature must be .*got 0\.0"),
        (dict(energies=[0.0, 1.0], temperature=float("nan")), r"temperature must be .*got nan"),
        (dict(energies=[0.0, 1.0], temperature=float("inf")), r"temperature must be .*got inf"),
        (dict(energies=[0.0, 1.0], temperature=[300.0, -1.0]), r"temperature .*got -1\.0 at position 1"),
        (dict(energies=[0.0, 1.0], temperature=[]), r"temperature must contain at least one"),
        (dict(energies=[0.0, float("nan")], temperature=300.0), r"energies must be finite numbers, got nan at position 1"),
        (dict(energies=[float("inf"), 0.0], temperature=300.0), r"energies must be finite numbers, got inf at position 0"),
        (dict(energies=[], temperature=300.0), r"energies must contain at least one conformer"),
        (dict(energies=[[[0.0]]], temperature=300.0), r"energies must be a 1-D .* got shape \(1, 1, 1\)"),
        (dict(energies="abc", temperature=300.0), r"energies must be a number or an array"),
        (dict(energies=[0.0, 1.0], temperature=300.0, degeneracy=[-1, 1]), r"degeneracy must be finite and >= 0, got -1\.0 at position 0"),
        (dict(energies=[0.0, 1.0], temperature=300.0, degeneracy=[1, 1, 1]), r"degeneracy has 3 entries but energies has 2 conformers"),
        (dict(energies=[0.0, 1.0], temperature=300.0, degeneracy=[0, 0]), r"degeneracy must be > 0 for at least one conformer"),
        (dict(energies=[[0.0, 1.0]] * 2, temperature=300.0), r"energies of shape \(2, 2\) need one temperature per row"),
        (dict(energies=[0.0, 1.0], temperature=300.0, unit="kcal"), None),  # alias accepted
        (dict(energies=[0.0, 1.0], temperature=300.0, unit="kcal/mole"), r"unit must be one of .*'kcal/mol'.*got 'kcal/mole'"),
    ],
)
@pytest.mark.parametrize("function", [boltzmann_weights, log_boltzmann_weights, ensemble_free_energy])
def test_bad_input_names_argument_and_value(function, kwargs, message):
    if message is None:
        function(**kwargs)
        return
    with pytest.raises(InputError, match=message):
        function(**kwargs)


# ----------------------------------------------------------------------- entropy, gaps


def test_effective_conformer_count():
    assert effective_conformer_count([1.0, 0.0, 0.0]) == pytest.approx(1.0, rel=1e-15)
    assert effective_conformer_count(np.full(8, 1 / 8)) == pytest.approx(8.0, rel=1e-12)
    out = effective_conformer_count([[0.5, 0.5, 0.0], [0.2, 0.3, 0.5]])
    np.testing.assert_allclose(out, [2.0, 1 / 0.38], rtol=1e-13)


@pytest.mark.parametrize("function", [conformational_entropy, effective_conformer_count])
def test_weights_must_be_a_distribution(function):
    with pytest.raises(InputError, match=r"weights must sum to 1 .*got 0\.9"):
        function([0.5, 0.4])
    with pytest.raises(InputError, match=r"weights must be finite and >= 0, got -0\.1 at position 1"):
        function([1.1, -0.1])
    with pytest.raises(InputError, match="at least one conformer"):
        function([])


def test_conformational_entropy_units_and_rows():
    p = [[0.5, 0.5], [1.0, 0.0]]
    # R ln 2 = 5.763 J/(mol K) [C]
    np.testing.assert_allclose(conformational_entropy(p, unit="kJ/mol") * 1000,
                               [sc.R * math.log(2), 0.0], rtol=1e-13, atol=1e-15)
    with pytest.raises(InputError, match="weights must be 0 where degeneracy is 0"):
        conformational_entropy([0.5, 0.5], degeneracy=[1, 0])


def test_free_energy_gap_and_population_ratio():
    # the computed two-state populations (tests/reference_values.py) belong to a 1 kcal/mol gap
    p_low, p_high = refval("two_state_populations")
    assert free_energy_gap(p_high, p_low, 298.15) == pytest.approx(1.0, abs=2e-7)
    assert free_energy_gap(p_low, p_high, 298.15) == pytest.approx(-1.0, abs=2e-7)
    assert free_energy_gap(3.0, 1.0, 300.0, unit="kJ/mol") == pytest.approx(
        -sc.R * 300.0 * math.log(3.0) / 1000, rel=1e-13)
    gaps = np.array([-2.0, 0.0, 0.5, 3.0])
    temps = np.array([[250.0], [400.0]])
    ratio = population_ratio(gaps, temps)
    assert ratio.shape == (2, 4)
    np.testing.assert_allclose(free_energy_gap(ratio, 1.0, temps), np.broadcast_to(gaps, (2, 4)),
                               rtol=1e-12, atol=1e-14)
    assert population_ratio(0.0, 300.0) == 1.0
    with pytest.raises(InputError, match=r"pop_a must be finite and > 0, got 0\.0"):
        free_energy_gap(0.0, 1.0, 300.0)
    with pytest.raises(InputError, match=r"temperature must be finite and > 0 K, got -3\.0"):
        population_ratio(1.0, -3.0)
    with pytest.raises(InputError, match=r"delta_g must be finite, got nan"):
        population_ratio(float("nan"), 300.0)


# ----------------------------------------------------------------------- ideal gas (RRHO)

WATER = dict(frequencies=[3657.0, 1595.0, 3756.0],  # [S: NIST CCCBDB] fundamentals
             mass=18.010565,  # 1H2 16O [S: AME isotopic masses, from memory]
             rotational_constants=[27.877, 14.512, 9.285],  # [S: CCCBDB]
             symmetry_number=2)
CARBON_DIOXIDE = dict(frequencies=[1333.0, 667.0, 667.0, 2349.0],  # [S: CCCBDB]
                      mass=43.989830, rotational_constants=[0.39021],  # [S: CCCBDB]
                      symmetry_number=2)
METHANE = dict(frequencies=[2917.0, 1534.0, 1534.0] + [3019.0] * 3 + [1306.0] * 3,  # [M]
               mass=16.031300, rotational_constants=[5.241] * 3,  # [M]
               symmetry_number=12)


@pytest.mark.parametrize(
    "molecule, reference, rrho",
    [
        # S° [S: NIST CCCBDB]; RRHO value computed
        (WATER, refval("water_standard_entropy"), refval("water_rrho_entropy")),
        # S° [S: NIST WebBook]
        (CARBON_DIOXIDE, refval("carbon_dioxide_standard_entropy"),
         refval("carbon_dioxide_rrho_entropy")),
        # S° [M: JANAF]
        (METHANE, refval("methane_standard_entropy"), refval("methane_rrho_entropy")),
    ],
)
def test_standard_entropy_against_nist_janaf(molecule, reference, rrho):
    result = ideal_gas_thermo(**molecule, temperature=298.15, pressure=1e5, unit="kJ/mol")
    s = result.entropy * 1000  # J/(mol K)
    assert s == pytest.approx(reference, abs=0.5)
    assert s == pytest.approx(rrho, abs=0.01)


def test_atom_and_triplet_oxygen():
    # argon: Sackur-Tetrode alone; S° = 154.846 J/(mol K) [M: CODATA key values]
    ar = ideal_gas_thermo([], mass=39.948, rotational_constants=[], symmetry_number=1, unit="kJ/mol")
    assert ar.entropy * 1000 == pytest.approx(154.846, abs=0.05)
    assert ar.heat_capacity * 1000 == pytest.approx(2.5 * sc.R, rel=1e-12)
    assert ar.enthalpy == pytest.approx(2.5 * sc.R * 298.15 / 1000, rel=1e-12)
    # O2 (X 3Σg-): ν = 1556 cm^-1, B = 1.4377 cm^-1 [M]; S° = 205.152 J/(mol K) [M: JANAF]
    o2 = ideal_gas_thermo([1556.4], mass=31.98983, rotational_constants=[1.4377],
                          symmetry_number=2, multiplicity=3, unit="kJ/mol")
    assert o2.entropy * 1000 == pytest.approx(205.152, abs=0.5)
    assert o2.electronic.entropy * 1000 == pytest.approx(sc.R * math.log(3), rel=1e-12)


def test_pressure_one_atm_and_heat_capacity_of_water():
    bar = ideal_gas_thermo(**WATER, unit="kJ/mol")
    atm = ideal_gas_thermo(**WATER, pressure=101325.0, unit="kJ/mol")
    # S(1 atm) = S(1 bar) - 0.10944 J/(mol K), computed: -R ln(1.01325)
    assert (atm.entropy - bar.entropy) * 1000 == pytest.approx(
        refval("entropy_1_atm_minus_1_bar"), abs=2e-5)
    # Cp° of water vapour 33.59 J/(mol K) [M: JANAF]; RRHO misses anharmonicity slightly
    assert bar.heat_capacity * 1000 == pytest.approx(33.59, abs=0.3)


def _ase_rotational_constants(atoms):
    # B = h / (8 π² c I), I from ASE's principal moments (amu Å²)
    moments = atoms.get_moments_of_inertia() * sc.atomic_mass * 1e-20
    with np.errstate(divide="ignore"):
        return sc.h / (8 * np.pi**2 * sc.c * 100 * moments)


@pytest.mark.parametrize("name, geometry, sigma, frequencies",
                         [("H2O", "nonlinear", 2, [3657.0, 1595.0, 3756.0]),
                          ("CO2", "linear", 2, [1333.0, 667.0, 667.0, 2349.0]),
                          ("NH3", "nonlinear", 3, [3337.0, 950.0, 3444.0, 3444.0, 1627.0, 1627.0])])
def test_against_ase_ideal_gas_thermo(name, geometry, sigma, frequencies):
    # an independent implementation (ASE, CODATA 2014 constants) on the same inputs; ASE 3.29
    # takes the pressure in Pa although its default is given in eV/Å^3, so pass it explicitly
    from ase.build import molecule
    from ase.thermochemistry import IdealGasThermo
    from ase.units import invcm

    atoms = molecule(name)
    constants = _ase_rotational_constants(atoms)
    if geometry == "linear":
        constants = [np.nanmin(constants[np.isfinite(constants)])]
    ase_thermo = IdealGasThermo(vib_energies=np.array(frequencies) * invcm, geometry=geometry,
                                atoms=atoms, symmetrynumber=sigma, spin=0, potentialenergy=0.0)
    ours = ideal_gas_thermo(frequencies, mass=atoms.get_masses().sum(),
                            rotational_constants=constants, symmetry_number=sigma,
                            temperature=[298.15, 800.0], unit="eV")
    for i, t in enumerate([298.15, 800.0]):
        assert ours.entropy[i] == pytest.approx(ase_thermo.get_entropy(t, 1e5, verbose=False), rel=2e-5)
        assert ours.enthalpy[i] == pytest.approx(ase_thermo.get_enthalpy(t, verbose=False), rel=2e-5)
        assert ours.gibbs[i] == pytest.approx(
            ase_thermo.get_gibbs_energy(t, 1e5, verbose=False), rel=2e-5)
    assert ours.zpe == pytest.approx(ase_thermo.get_ZPE_correction(), rel=2e-5)


def test_identities_and_parts_add_up():
    r = ideal_gas_thermo(**WATER, temperature=[200.0, 298.15, 1000.0], unit="kcal/mol")
    t = np.array([200.0, 298.15, 1000.0])
    rt = R_KCAL * t
    np.testing.assert_allclose(r.gibbs, r.enthalpy - t * r.entropy, rtol=1e-14)
    np.testing.assert_allclose(r.enthalpy, r.internal_energy + rt, rtol=1e-14)
    for field in ("internal_energy", "entropy", "heat_capacity"):
        total = sum(getattr(part, field) for part in r.parts.values())
        np.testing.assert_allclose(total, getattr(r, field), rtol=1e-14)
    np.testing.assert_allclose(sum(p.enthalpy for p in r.parts.values()), r.enthalpy, rtol=1e-14)
    # classical translation and rotation: Cp_t = 5/2 R (PV included), Cv_r = 3/2 R
    np.testing.assert_allclose(r.translational.heat_capacity, 2.5 * R_KCAL, rtol=1e-14)
    np.testing.assert_allclose(r.rotational.internal_energy, 1.5 * rt, rtol=1e-14)
    # ZPE = ½ h c Σν: 4504 cm^-1 = 12.877 kcal/mol [C]
    assert r.zpe == pytest.approx(4504.0 / 349.7550882318032, rel=1e-9)
    # vectorized temperatures equal one call per temperature
    for i, ti in enumerate(t):
        single = ideal_gas_thermo(**WATER, temperature=ti)
        assert isinstance(single.entropy, float)
        assert single.gibbs == pytest.approx(r.gibbs[i], rel=1e-14)
    assert isinstance(r, ThermoResult)
    with pytest.raises(ValueError):
        r.entropy[0] = 0.0  # read-only arrays
    with pytest.raises(AttributeError):
        r.zpe = 0.0  # frozen


def test_imaginary_modes_are_left_out_and_reported():
    plain = ideal_gas_thermo(**WATER)
    frequencies = [-412.5] + WATER["frequencies"]
    with_ts = ideal_gas_thermo(**{**WATER, "frequencies": frequencies})
    assert with_ts.imaginary_frequencies.tolist() == [-412.5]
    assert with_ts.frequencies.tolist() == WATER["frequencies"]
    assert with_ts.entropy == pytest.approx(plain.entropy, rel=1e-15)
    assert with_ts.zpe == pytest.approx(plain.zpe, rel=1e-15)


def test_linear_molecule_recognised_by_a_zero_or_infinite_constant():
    ref = ideal_gas_thermo(**CARBON_DIOXIDE)
    for constants in ([0.0, 0.39021, 0.39021], [np.inf, 0.39021, 0.39021]):
        r = ideal_gas_thermo(**{**CARBON_DIOXIDE, "rotational_constants": constants})
        assert r.linear
        assert r.entropy == pytest.approx(ref.entropy, rel=1e-14)
    assert not ideal_gas_thermo(**WATER).linear


# qRRHO single-mode checks at 298.15 K, computed from the formulas of Grimme, Chem. Eur. J.
# 2012, 18, 9955: S_HO, S with the free-rotor interpolation, J/(mol K)
@pytest.mark.parametrize("nu, s_ho, s_qrrho", [
    (nu, refval(f"qrrho_mode_{nu:.0f}")[0], refval(f"qrrho_mode_{nu:.0f}")[2])
    for nu in (50.0, 100.0, 200.0)])
def test_qrrho_single_mode_entropy(nu, s_ho, s_qrrho):
    common = dict(mass=50.0, rotational_constants=[], symmetry_number=1, unit="kJ/mol")
    rrho = ideal_gas_thermo([nu], **common)
    qrrho = ideal_gas_thermo([nu], low_mode="qrrho", **common)
    assert rrho.vibrational.entropy * 1000 == pytest.approx(s_ho, abs=1e-4)
    assert qrrho.vibrational.entropy * 1000 == pytest.approx(s_qrrho, abs=1e-4)
    # the entropy treatment leaves energies alone
    assert qrrho.enthalpy == pytest.approx(rrho.enthalpy, rel=1e-15)


def test_qrrho_leaves_stiff_modes_and_translation_alone():
    rrho = ideal_gas_thermo(**WATER, unit="kJ/mol")
    q = ideal_gas_thermo(**WATER, low_mode="qrrho", unit="kJ/mol")
    # w(1595 cm^-1) = 1 - 1.5e-5: the difference is far below 1e-3 J/(mol K)
    assert q.entropy * 1000 == pytest.approx(rrho.entropy * 1000, abs=1e-3)


def test_quasi_harmonic_raises_low_frequencies():
    # Ribeiro et al. 2011: real frequencies below 100 cm^-1 are set to 100 cm^-1
    common = dict(mass=100.0, rotational_constants=[], symmetry_number=1, unit="kJ/mol")
    qh = ideal_gas_thermo([30.0, 75.0, 250.0], low_mode="quasi-harmonic", **common)
    ref = ideal_gas_thermo([100.0, 100.0, 250.0], **common)
    assert qh.frequencies.tolist() == [100.0, 100.0, 250.0]
    for field in ("zpe", "enthalpy", "entropy", "heat_capacity"):
        assert getattr(qh, field) == pytest.approx(getattr(ref, field), rel=1e-15)
    cut = ideal_gas_thermo([30.0], low_mode="quasi-harmonic", cutoff=50.0, **common)
    assert cut.frequencies.tolist() == [50.0]


def test_head_gordon_enthalpy_interpolation():
    # Li et al., J. Phys. Chem. C 2015, 119, 1840: H = w (ZPE + E_HO) + (1 - w) RT/2 per mode
    t = 298.15
    common = dict(mass=100.0, rotational_constants=[], symmetry_number=1, unit="kcal/mol",
                  temperature=t)
    for nu in (5.0, 50.0, 100.0, 3000.0):
        plain = ideal_gas_thermo([nu], **common)
        inter = ideal_gas_thermo([nu], low_mode="qrrho", enthalpy_interpolation=True, **common)
        w = 1.0 / (1.0 + (100.0 / nu) ** 4)
        expected = w * plain.vibrational.enthalpy + (1 - w) * 0.5 * R_KCAL * t
        assert inter.vibrational.enthalpy == pytest.approx(expected, rel=1e-13)
        assert inter.zpe == pytest.approx(plain.zpe, rel=1e-15)  # reported undamped
    # a 5 cm^-1 mode is essentially a free rotor: RT/2
    very_soft = ideal_gas_thermo([5.0], enthalpy_interpolation=True, **common)
    assert very_soft.vibrational.enthalpy == pytest.approx(0.5 * R_KCAL * t, rel=1e-4)


@pytest.mark.parametrize(
    "changes, message",
    [
        (dict(mass=0.0), r"mass must be finite and > 0 amu, got 0\.0"),
        (dict(symmetry_number=0), r"symmetry_number must be a positive integer, got 0"),
        (dict(symmetry_number=1.5), r"symmetry_number must be a positive integer, got 1\.5"),
        (dict(multiplicity=0), r"multiplicity must be a positive integer \(2S\+1\), got 0"),
        (dict(temperature=-10.0), r"temperature must be finite and > 0 K, got -10\.0"),
        (dict(pressure=-1.0), r"pressure must be finite and > 0 Pa, got -1\.0"),
        (dict(low_mode="harmonic"), r"low_mode must be one of \['rrho', 'qrrho', 'quasi-harmonic'\], got 'harmonic'"),
        (dict(cutoff=0.0), r"cutoff must be finite and > 0 cm\^-1, got 0\.0"),
        (dict(frequencies=[3657.0, 0.0, 3756.0]), r"frequencies must be finite and non-zero .*got 0\.0 at position 1"),
        (dict(frequencies=[3657.0, float("nan")]), r"frequencies must be finite .*got nan at position 1"),
        (dict(rotational_constants=[27.9, 14.5]), r"rotational_constants must hold one value .* or three"),
        (dict(rotational_constants=[0.0, 0.0, 9.3]), r"rotational_constants may mark a linear molecule with one zero"),
        (dict(rotational_constants=[0.0, 1.0, 2.0]), r"two other constants must be equal"),
        (dict(rotational_constants=[-1.0, 1.0, 2.0]), r"rotational_constants must be >= 0"),
        (dict(low_mode="quasi-harmonic", enthalpy_interpolation=True), r"enthalpy_interpolation cannot be combined"),
        (dict(unit="cal"), r"unit must be one of"),
    ],
)
def test_ideal_gas_bad_input(changes, message):
    with pytest.raises(InputError, match=message):
        ideal_gas_thermo(**{**WATER, **changes})


# ----------------------------------------------------------------------- standard states


def test_standard_state_corrections():
    # gas 1 atm -> 1 mol/L: RT ln(24.4654) = 1.8943 kcal/mol at 298.15 K (computed)
    expected = refval("standard_state_1_atm_to_1_M_298")
    assert standard_state_correction(298.15, "1 atm", "1 M") == pytest.approx(expected, abs=5e-5)
    assert R_KCAL * 298.15 * math.log(24.4654) == pytest.approx(expected, abs=5e-5)
    # from 1 bar the molar volume is 24.7896 L [C]
    assert standard_state_correction(298.15, "1 bar", "1 M") == pytest.approx(
        R_KCAL * 298.15 * math.log(sc.R * 298.15 / 1e5 * 1000), rel=1e-12)
    assert standard_state_correction(298.15, "1 M", "1 atm") == pytest.approx(
        -standard_state_correction(298.15, "1 atm", "1 M"), rel=1e-15)
    # consistent with the pressure dependence of the ideal-gas entropy
    t = np.array([250.0, 298.15, 400.0])
    delta = standard_state_correction(t, "1 bar", "1 atm", unit="kJ/mol")
    s_bar = ideal_gas_thermo(**WATER, temperature=t, unit="kJ/mol").entropy
    s_atm = ideal_gas_thermo(**WATER, temperature=t, pressure=101325.0, unit="kJ/mol").entropy
    np.testing.assert_allclose(delta, -t * (s_atm - s_bar), rtol=1e-9)
    assert standard_state_correction(298.15, " 1  mol/L ", "1 M") == 0.0
    with pytest.raises(InputError, match=r"to_state must be one of '1 bar', '1 atm', '1 M', got '1 mM'"):
        standard_state_correction(298.15, "1 bar", "1 mM")
    with pytest.raises(InputError, match=r"temperature must be finite and > 0 K, got 0\.0"):
        standard_state_correction(0.0)
    assert gas_constant("kcal/mol") == pytest.approx(R_KCAL, rel=1e-14)


def test_numpy_logsumexp_and_entr_equal_scipys():
    # thermo computes log-sum-exp and -p log p with numpy (no scipy import at start-up);
    # the reference is scipy.special, an independent library
    from scipy.special import entr, logsumexp

    from confpop.thermo import _entr, _logsumexp

    rng = np.random.default_rng(7)
    x = rng.normal(scale=300.0, size=(5, 9))
    x[1, :] = -np.inf            # a row of zero weights
    x[2, 3] = -np.inf
    for axis in (0, 1):
        np.testing.assert_allclose(_logsumexp(x, axis=axis), logsumexp(x, axis=axis),
                                   rtol=1e-13, atol=0)
        np.testing.assert_allclose(_logsumexp(x, axis=axis, keepdims=True),
                                   logsumexp(x, axis=axis, keepdims=True), rtol=1e-13, atol=0)
    assert _logsumexp(np.array([1000.0, 1000.0])) == pytest.approx(1000.0 + np.log(2.0))
    p = np.array([0.0, 1e-300, 0.25, 0.5, 1.0, -0.1])
    np.testing.assert_allclose(_entr(p), entr(p), rtol=1e-14, atol=0)
