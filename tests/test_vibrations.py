"""Vibrational analysis: Hessian, Eckart projection, frequencies, symmetry numbers.

Checks against the outside world: ASE's finite-difference vibrations driven by xtb-python's
own ASE calculator (an independent implementation with the same engine), ASE's moments of
inertia, JANAF/CCCBDB entropies and point-group symmetry numbers.
"""

from __future__ import annotations

import concurrent.futures

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from confpop.errors import InputError
from confpop.optimize import optimize_structure
from confpop.units import convert
from confpop.vibrations import (
    WAVENUMBER_FACTOR,
    atomic_masses,
    harmonic_analysis,
    hessian,
    is_linear,
    project_hessian,
    rotational_constants,
    symmetry_number,
)
from reference_values import value as refval

ase = pytest.importorskip("ase")


def _mmff(smiles: str, seed: int = 1) -> Chem.Mol:
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    AllChem.MMFFOptimizeMolecule(mol, maxIters=5000)
    return mol


@pytest.fixture(scope="module")
def gfn2_minima(gfn2_minimum):
    """GFN2 minima of water, formaldehyde and CO2 (verytight; tests/conftest.py)."""
    return {smi: gfn2_minimum(smi, seed=1, convergence="verytight")
            for smi in ("O", "C=O", "O=C=O")}


def _ase_frequencies(mol, tmp_path, name):
    """Harmonic wavenumbers from ase.vibrations.Vibrations with xtb-python's ASE calculator."""
    from ase import Atoms
    from ase import units as ase_units
    from ase.vibrations import Vibrations
    from xtb.ase.calculator import XTB

    atoms = Atoms(numbers=[a.GetAtomicNum() for a in mol.GetAtoms()],
                  positions=mol.GetConformer().GetPositions())
    atoms.set_masses(atomic_masses(mol))
    atoms.calc = XTB(method="GFN2-xTB")
    vib = Vibrations(atoms, name=str(tmp_path / name), delta=0.01, nfree=2)
    vib.run()
    energies = vib.get_energies()
    wn = np.array([e.real if abs(e.imag) < 1e-12 else -e.imag for e in energies]) / ase_units.invcm
    return np.sort(wn)


# ---------------------------------------------------------------------------------- constants
def test_wavenumber_factor():
    # ν̃ = 5140.487 √λ cm⁻¹ for λ in hartree bohr⁻² amu⁻¹ (computed from CODATA 2022 constants)
    assert WAVENUMBER_FACTOR == pytest.approx(refval("wavenumber_factor"), rel=2e-7)


# ---------------------------------------------------------------------------------- vs ASE
@pytest.mark.parametrize("smiles", ["O", "C=O"])
def test_gfn2_frequencies_match_ase(gfn2_minima, tmp_path, smiles):
    # independent implementation: ase.vibrations.Vibrations (central differences of forces,
    # 0.01 Å step, no Eckart projection) driven by xtb-python's ASE calculator, same geometry
    mol = gfn2_minima[smiles]
    ours = harmonic_analysis(mol, "gfn2").frequencies
    theirs = _ase_frequencies(mol, tmp_path, f"vib{len(smiles)}")[-len(ours):]
    np.testing.assert_allclose(ours, theirs, atol=5.0, rtol=0)


# ---------------------------------------------------------------------------------- projection
def test_eckart_projection_leaves_six_zero_modes(gfn2_minima):
    mol = gfn2_minima["C=O"]
    res = harmonic_analysis(mol, "gfn2")
    projected = project_hessian(res.hessian, res.positions, res.masses)
    lam = np.linalg.eigvalsh(projected)
    order = np.argsort(np.abs(lam))
    # 3N-6 = 6 vibrations and exactly 6 external motions (translations + rotations)
    np.testing.assert_allclose(lam[order[:6]], 0.0, atol=1e-10)
    assert np.min(np.abs(lam[order[6:]])) == pytest.approx(
        (res.frequencies.min() / WAVENUMBER_FACTOR) ** 2, rel=1e-6)
    # the projected full matrix carries the same vibrations as the reduced diagonalisation
    vib = np.sort(np.sign(lam[order[6:]]) * np.sqrt(np.abs(lam[order[6:]])) * WAVENUMBER_FACTOR)
    np.testing.assert_allclose(vib, res.frequencies, rtol=1e-8)


def test_linear_molecule_has_five_zero_modes(gfn2_minima):
    # tblite's GFN2 here: xtb-python 22.1 (libxtb 6.5.1) gives a perpendicular bend of 522
    # instead of 600 cm⁻¹ when CO2 is exactly linear (its gradients are not smooth there;
    # tblite and xtb-python 1e-4 Å off linear both give 600.5 cm⁻¹ twice) [measured here]
    mol = gfn2_minima["O=C=O"]
    res = harmonic_analysis(mol, "tblite-gfn2")
    assert res.linear
    assert res.frequencies.shape == (4,)  # 3N-5
    lam = np.linalg.eigvalsh(project_hessian(res.hessian, res.positions, res.masses))
    assert int(np.sum(np.abs(lam) < 1e-10)) == 5
    # the bend is doubly degenerate (D∞h)
    assert res.frequencies[0] == pytest.approx(res.frequencies[1], abs=0.5)
    assert np.isinf(res.rotational_constants[0])


# ---------------------------------------------------------------------------------- physics
def test_diatomic_frequency_from_energy_curvature():
    # harmonic oscillator: ν̃ = √(k/μ) / (2πc), with k the second derivative of the energy
    # along the bond (from energies only, an independent route) and μ = m1 m2 / (m1 + m2)
    from confpop.backends import get_backend
    from confpop.units import AMU_KG, HARTREE_J, LIGHT_SPEED_CM

    mol = Chem.AddHs(Chem.MolFromSmiles("Cl"))
    conf = Chem.Conformer(2)
    conf.SetAtomPosition(1, (0.0, 0.0, 1.28))
    mol.AddConformer(conf)
    mol = optimize_structure(mol, "gfn2", convergence="verytight")
    res = harmonic_analysis(mol, "gfn2")
    backend = get_backend("gfn2", mol)
    pos = mol.GetConformer().GetPositions()
    axis = (pos[1] - pos[0]) / np.linalg.norm(pos[1] - pos[0])
    h = 0.005  # angstrom
    e = [backend.compute(pos + np.outer([0, 1], axis) * s * h, gradient=False).energy
         for s in (-1, 0, 1)]
    k = (e[0] - 2 * e[1] + e[2]) / h ** 2 * HARTREE_J / 1e-20  # J/m²
    m = atomic_masses(mol)
    mu = m[0] * m[1] / m.sum() * AMU_KG
    expected = np.sqrt(k / mu) / (2 * np.pi * LIGHT_SPEED_CM)
    assert res.frequencies[0] == pytest.approx(expected, rel=2e-3)
    # reduced mass in the usual quantum-chemistry convention (1 / squared length of the
    # mass-weighted mode turned Cartesian): m1 m2 (m1 + m2) / (m1² + m2²) for a diatomic,
    # which is not the classical μ (worked out by hand from the normalisation)
    assert res.reduced_masses[0] == pytest.approx(m[0] * m[1] * m.sum() / (m ** 2).sum(), rel=1e-6)


def test_water_entropy_close_to_janaf(gfn2_minima):
    # S°(H2O, g, 298.15 K, 1 bar) = 188.84 J/(mol K) (JANAF / NIST CCCBDB, primary).
    # GFN2 harmonic frequencies (~1540, 3640, 3650 cm⁻¹) and geometry give 188.6; the
    # vibrational part is only 0.03 J/(mol K), so the method error stays below ~1 J/(mol K).
    res = harmonic_analysis(gfn2_minima["O"], "gfn2")
    th = res.thermo(298.15, low_mode="rrho", unit="kJ/mol")
    assert th.entropy * 1000 == pytest.approx(refval("water_standard_entropy"), abs=2.0)


def test_rotational_constants_match_ase_moments(gfn2_minima):
    from ase import Atoms
    from confpop.units import AMU_KG, LIGHT_SPEED_CM, PLANCK

    mol = gfn2_minima["C=O"]
    atoms = Atoms(numbers=[a.GetAtomicNum() for a in mol.GetAtoms()],
                  positions=mol.GetConformer().GetPositions(), masses=atomic_masses(mol))
    moments = np.sort(atoms.get_moments_of_inertia())  # amu Å², ASE's own implementation
    expected = PLANCK / (8 * np.pi ** 2 * LIGHT_SPEED_CM * moments * AMU_KG * 1e-20)
    np.testing.assert_allclose(rotational_constants(mol), expected, rtol=1e-9)


def test_parallel_hessian_equals_serial():
    mol = _mmff("CC=O")
    serial = hessian(mol, "mmff94")
    with concurrent.futures.ThreadPoolExecutor(2) as pool:
        parallel = hessian(mol, "mmff94", executor=pool, n_chunks=5)
    np.testing.assert_allclose(parallel, serial, rtol=0, atol=1e-12)
    np.testing.assert_allclose(serial, serial.T, atol=0)


def test_result_is_read_only(gfn2_minima):
    res = harmonic_analysis(gfn2_minima["O"], "gfn2")
    with pytest.raises(ValueError, match="read-only"):
        res.frequencies[0] = 0.0
    assert res.energy == pytest.approx(gfn2_minima["O"].GetDoubleProp("energy_hartree"), abs=1e-9)
    assert res.zero_point_energy == pytest.approx(
        convert(0.5 * res.frequencies.sum(), "cm-1", "hartree"), rel=1e-12)


# ---------------------------------------------------------------------------------- symmetry
# Rotational symmetry numbers from the point groups [from memory; tests/reference_values.py]:
# H2O C2v 2, NH3 C3v 3, CH4 Td 12, benzene D6h 12, staggered ethane D3d 6, CO2 D∞h 2,
# HCN C∞v 1, ethylene D2h 4, cyclohexane chair D3d 6, ethanol C1/Cs 1.
@pytest.mark.parametrize("smiles, sigma", [
    (smiles, refval(f"symmetry_number_{name}")) for smiles, name in [
        ("O", "water"), ("N", "ammonia"), ("C", "methane"), ("c1ccccc1", "benzene"),
        ("CC", "ethane"), ("O=C=O", "carbon_dioxide"), ("C#N", "hydrogen_cyanide"),
        ("C=C", "ethylene"), ("C1CCCCC1", "cyclohexane_chair"), ("CCO", "ethanol")]
])
def test_symmetry_numbers(smiles, sigma):
    assert symmetry_number(_mmff(smiles)) == sigma


def test_eclipsed_ethane_and_distorted_methane():
    from rdkit.Chem import rdMolTransforms

    ethane = _mmff("CC")
    rdMolTransforms.SetDihedralDeg(ethane.GetConformer(), 2, 0, 1, 5, 0.0)  # eclipsed, D3h
    assert symmetry_number(ethane) == 6
    methane = _mmff("C")
    conf = methane.GetConformer()
    p = conf.GetAtomPosition(1)
    conf.SetAtomPosition(1, (p.x * 1.3, p.y * 1.3, p.z * 1.3))  # one C-H stretched: C3v
    assert symmetry_number(methane) == 3


def test_is_linear():
    assert is_linear([[0, 0, 0], [0, 0, 1.1], [0, 0, 2.3]])
    assert not is_linear([[0, 0, 0], [0, 0, 1.1], [0, 0.3, 2.3]])


# ---------------------------------------------------------------------------------- errors
def test_errors():
    no_conf = Chem.AddHs(Chem.MolFromSmiles("O"))
    with pytest.raises(InputError, match="no conformer"):
        symmetry_number(no_conf)
    with pytest.raises(InputError, match="no conformer"):
        harmonic_analysis(no_conf, "gfn2")
    water = _mmff("O")
    with pytest.raises(InputError, match="step must be"):
        hessian(water, "mmff94", step=1.0)
    with pytest.raises(InputError, match="method must be one of"):
        harmonic_analysis(water, "no-such-method")
    with pytest.raises(InputError, match="conf_id must be one of"):
        rotational_constants(water, conf_id=7)
    with pytest.raises(InputError, match="tolerance must be"):
        symmetry_number(water, tolerance=-1)
    with pytest.raises(InputError, match="mol must be an RDKit Mol"):
        symmetry_number("O")
