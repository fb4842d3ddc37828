"""Energy units and constants against CODATA (through scipy.constants) and published digits."""

import itertools

import numpy as np
import pytest
import scipy.constants as sc

from confpop import units
from confpop.errors import InputError
from confpop.units import UNITS, convert, gas_constant, normalize_unit
from reference_values import value as refval


# CODATA 2022 as printed in the NIST constants tables (identical to CODATA 2018 at 1e-9):
# 1 hartree = 627.509474063 kcal/mol, 2625.49963948 kJ/mol, 27.211386245981 eV,
# 219474.6313632 cm^-1 (tests/reference_values.py).
@pytest.mark.parametrize(
    "unit, value",
    [
        ("kcal/mol", refval("hartree_in_kcal_per_mol")),
        ("kJ/mol", refval("hartree_in_kj_per_mol")),
        ("eV", refval("hartree_in_ev")),
        ("cm-1", refval("hartree_in_wavenumber")),
        ("hartree", 1.0),
    ],
)
def test_hartree_in_each_unit_matches_codata(unit, value):
    assert convert(1.0, "hartree", unit) == pytest.approx(value, rel=1e-9)


def test_factors_agree_with_scipy_constants_tables():
    # scipy.constants.physical_constants carries the CODATA conversion entries directly
    pc = sc.physical_constants
    assert convert(1.0, "hartree", "eV") == pytest.approx(pc["Hartree energy in eV"][0], rel=1e-12)
    assert convert(1.0, "hartree", "cm-1") == pytest.approx(
        pc["hartree-inverse meter relationship"][0] / 100.0, rel=1e-12)
    assert convert(1.0, "eV", "kJ/mol") == pytest.approx(sc.e * sc.N_A / 1000.0, rel=1e-12)
    # the thermochemical calorie is exactly 4.184 J (scipy.constants.calorie)
    assert convert(1.0, "kcal/mol", "kJ/mol") == pytest.approx(4.184, rel=1e-14)


def test_constants_match_scipy_codata():
    pc = sc.physical_constants
    assert units.BOHR_ANGSTROM == pytest.approx(pc["Bohr radius"][0] * 1e10, rel=1e-14)
    assert units.BOHR_ANGSTROM == pytest.approx(0.529177210544, rel=1e-9)  # CODATA 2022 [S: NIST]
    assert units.ANGSTROM_BOHR * units.BOHR_ANGSTROM == pytest.approx(1.0, rel=1e-15)
    # CODATA 2022 [S: NIST]; CODATA 2018 (older scipy) differs by 1.4e-9
    assert units.AMU_KG == pytest.approx(1.66053906892e-27, rel=3e-9)
    assert units.LIGHT_SPEED_CM == pytest.approx(2.99792458e10, rel=1e-15)  # exact (SI)
    assert units.BOLTZMANN == pytest.approx(1.380649e-23, rel=1e-15)  # exact (SI 2019)
    assert units.PLANCK == pytest.approx(6.62607015e-34, rel=1e-15)  # exact (SI 2019)
    assert units.AVOGADRO == pytest.approx(6.02214076e23, rel=1e-15)  # exact (SI 2019)
    # atomic unit of electric dipole moment: 8.4783536198e-30 C m (CODATA 2022 [S: NIST]);
    # 1 D = 1e-21 / c C m  ->  1 e bohr = 2.541746 D
    assert units.EBOHR_DEBYE == pytest.approx(8.4783536198e-30 / (1e-21 / 299792458.0), rel=1e-9)


@pytest.mark.parametrize(
    "unit, reference",
    [
        ("kcal/mol", sc.R / 4184.0),  # R in kcal/(mol K) (1.987204258640832e-3)
        ("kJ/mol", sc.R / 1000.0),
        ("hartree", sc.k / sc.physical_constants["Hartree energy"][0]),  # per molecule
        ("eV", sc.physical_constants["Boltzmann constant in eV/K"][0]),
        ("cm-1", sc.physical_constants["Boltzmann constant in inverse meter per kelvin"][0] / 100.0),
    ],
)
def test_gas_constant_in_each_unit(unit, reference):
    assert gas_constant(unit) == pytest.approx(reference, rel=1e-12)


def test_rt_at_room_temperature():
    # RT(298.15 K) = 0.59248495 kcal/mol, computed from CODATA 2022 R
    assert gas_constant("kcal/mol") * 298.15 == pytest.approx(refval("rt_298"), rel=1e-8)
    assert gas_constant() == pytest.approx(refval("gas_constant_kcal"), rel=1e-12)


@pytest.mark.parametrize("a, b", list(itertools.permutations(sorted(UNITS), 2)))
def test_round_trip_between_every_pair(a, b):
    values = np.array([-1.0e4, -3.25, 0.0, 1e-6, 17.5])
    back = convert(convert(values, a, b), b, a)
    np.testing.assert_allclose(back, values, rtol=1e-14, atol=1e-18)


def test_scalar_in_float_out_and_arrays_elementwise():
    out = convert(2.0, "kcal/mol", "kJ/mol")
    assert isinstance(out, float)
    assert out == pytest.approx(8.368, rel=1e-14)
    np.testing.assert_allclose(convert([1.0, 2.0], "kcal/mol", "kJ/mol"), [4.184, 8.368], rtol=1e-14)


@pytest.mark.parametrize(
    "alias, canonical",
    [("KCAL/MOL", "kcal/mol"), (" kj/mol ", "kJ/mol"), ("Eh", "hartree"), ("au", "hartree"),
     ("1/cm", "cm-1"), ("cm^-1", "cm-1"), ("EV", "eV")],
)
def test_aliases(alias, canonical):
    assert normalize_unit(alias) == canonical


@pytest.mark.parametrize("bad", ["kcal/mole", "joule", "", None, 3])
def test_unknown_unit_lists_the_accepted_ones(bad):
    with pytest.raises(InputError, match=r"unit must be one of .*'cm-1'.*'eV'.*'hartree'.*'kJ/mol'.*'kcal/mol'"):
        convert(1.0, bad, "kcal/mol")
    with pytest.raises(ValueError, match="got"):  # InputError is also a ValueError
        gas_constant(bad)
