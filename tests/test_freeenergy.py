"""Per-conformer free energies (add_free_energies) and single points at another level (rescore)."""

from __future__ import annotations

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdMolTransforms

from confpop.ensemble import Ensemble
from confpop.errors import InputError
from confpop.freeenergy import add_free_energies, rescore
from confpop.thermo import boltzmann_weights, standard_state_correction
from confpop.units import convert
from reference_values import value as refval

TEMPS = [200.0, 298.15, 400.0]


def _ensemble(structures, degeneracy=None, level="gfn2"):
    mol = Chem.Mol(structures[0])
    mol.RemoveAllConformers()
    for cid, s in enumerate(structures):
        conf = Chem.Conformer(s.GetConformer())
        conf.SetId(cid)
        mol.AddConformer(conf, assignId=False)
    energies = [s.GetDoubleProp("energy_hartree") for s in structures]
    return Ensemble.from_mol(mol, energies, level=level, unit="hartree", degeneracy=degeneracy)


@pytest.fixture(scope="module")
def butane(gfn2_butane):
    """n-Butane anti and gauche GFN2 minima (tests/conftest.py); gauche counts twice (its
    mirror image)."""
    ens = _ensemble([gfn2_butane["anti"], gfn2_butane["gauche"]], degeneracy=[1, 2])
    return add_free_energies(ens, "gfn2", temperatures=TEMPS, workers=1)


@pytest.fixture(scope="module")
def water(gfn2_water):
    return _ensemble([gfn2_water])


# ---------------------------------------------------------------------------------- columns
def test_columns_and_identities(butane):
    table = butane.raw_table
    for t in TEMPS:
        key = f"{t:.2f}"
        g, h, s = table[f"gcorr_{key}"], table[f"hcorr_{key}"], table[f"entropy_{key}"]
        # G = H - TS (identity), per conformer and temperature
        np.testing.assert_allclose(g, h - t * s, rtol=0, atol=1e-12)
    # anti C2h and gauche C2 both have σ = 2 (point groups [from memory])
    assert table["symmetry_number"].tolist() == [2, 2]
    assert table["imaginary_modes"].tolist() == [0, 0]
    assert (table["lowest_frequency"] > 50).all()
    assert (table["max_gradient"] < 1e-3).all()
    # ZPE of butane ≈ 82 kcal/mol (GFN2 harmonic; experimental-fundamental sums for C4H10
    # are ~80-82 kcal/mol [from memory]): a units check of the zpe column
    zpe = convert(table["zpe"].to_numpy(dtype=float), "hartree", "kcal/mol")
    np.testing.assert_allclose(zpe, 81.0, atol=3.0)


def test_free_populations_use_e_plus_gcorr(butane):
    table = butane.raw_table
    for t in TEMPS:
        g = table["energy_gfn2"] + table[f"gcorr_{t:.2f}"]
        expected = boltzmann_weights(g.to_numpy(dtype=float), t, unit="hartree",
                                     degeneracy=[1, 2])
        np.testing.assert_allclose(butane.populations([t], energy="free")[t], expected, atol=1e-12)


def test_butane_enthalpy_gap_matches_experiment(butane):
    # n-butane gauche - anti ΔH = 0.67 ± 0.10 kcal/mol (gas; Herrebout et al., J. Phys. Chem.
    # 1995, 99, 578) and 0.66 ± 0.02 (Balabin, J. Phys. Chem. A 2009, 113, 1012), both
    # primary. GFN2 conformer energies carry 0.5-1.5 kcal/mol errors in general (common
    # practice); measured here: ΔE 0.60, ΔH(298.15 K) 0.63 kcal/mol.
    dh = butane.energies(energy="enthalpy", temperature=298.15)
    assert dh[1] == pytest.approx(refval("butane_gauche_anti_dh_herrebout"), abs=0.3)


def test_free_energy_gap_differs_from_energy_gap(butane):
    # the RRHO terms move the gauche-anti gap: measured here (GFN2, qRRHO, 298.15 K)
    # ΔE = 0.596, ΔG = 0.656 kcal/mol, so the anti population rises from 0.578 to 0.602.
    de = butane.energies(temperature=298.15)[1]
    dg = butane.energies(energy="free", temperature=298.15)[1]
    table = butane.raw_table
    dgcorr = convert(table.loc[1, "gcorr_298.15"] - table.loc[0, "gcorr_298.15"],
                     "hartree", "kcal/mol")
    assert dg - de == pytest.approx(dgcorr, abs=1e-9)  # identity
    assert dg - de == pytest.approx(0.060, abs=0.03)  # measured here (regression value)
    p_e = butane.populations([298.15])[298.15]
    p_g = butane.populations([298.15], energy="free")[298.15]
    assert p_g[0] - p_e[0] == pytest.approx(0.024, abs=0.012)  # measured here
    # the gap is temperature dependent through G(T), not through E
    gaps = [butane.energies(energy="free", temperature=t)[1] for t in TEMPS]
    assert gaps[0] != pytest.approx(gaps[2], abs=0.01)


def test_water_entropy_column_against_janaf(water):
    # S°(H2O, g, 298.15 K, 1 bar) = 188.84 J/(mol K) (JANAF via NIST CCCBDB, primary);
    # GFN2 RRHO gives 188.6 [measured here]; the method error is below ~1 J/(mol K) because
    # the stiff modes contribute almost nothing
    out = add_free_energies(water, "gfn2", temperatures=[298.15], low_mode="rrho", workers=1)
    s = convert(out.column("entropy_298.15")[0], "hartree", "kJ/mol") * 1000
    assert s == pytest.approx(refval("water_standard_entropy"), abs=2.0)
    assert int(out.column("symmetry_number")[0]) == refval("symmetry_number_water")


def test_standard_state_shift(water):
    # 1 bar -> 1 mol/L at 298.15 K: RT ln(24.79) = 1.9021 kcal/mol (computed, CODATA 2022 R)
    gas = add_free_energies(water, "gfn2", temperatures=[298.15], workers=1)
    molar = add_free_energies(water, "gfn2", temperatures=[298.15], workers=1,
                              standard_state="1 M")
    shift = convert(molar.column("gcorr_298.15")[0] - gas.column("gcorr_298.15")[0],
                    "hartree", "kcal/mol")
    assert shift == pytest.approx(refval("standard_state_1_bar_to_1_M_298"), abs=1e-4)
    assert shift == pytest.approx(standard_state_correction(298.15, "1 bar", "1 M"), rel=1e-9)
    assert gas.provenance[-1]["standard_state"] == "1 bar"


# ---------------------------------------------------------------------------------- imaginary
def test_saddle_point_flagged_and_displaced(gfn2_minimum):
    # eclipsed ethane (torsion held at 0°) is the top of the rotational barrier: one imaginary
    # mode. Displacing along it and re-optimizing reaches staggered ethane, lower by the
    # barrier: 2.9 kcal/mol experimentally (Weiss & Leroi, J. Chem. Phys. 1968, 48, 962,
    # primary); tolerance for the GFN2 method error.
    eclipsed = gfn2_minimum("CC", (2, 0, 1, 5), 0.0, constrain=True)
    ens = _ensemble([eclipsed])
    flagged = add_free_energies(ens, "gfn2", workers=1)
    assert int(flagged.column("imaginary_modes")[0]) == 1
    assert flagged.column("lowest_frequency")[0] < -50.0
    assert int(flagged.column("symmetry_number")[0]) == 6  # D3h [from memory]
    fixed = add_free_energies(ens, "gfn2", workers=1, displace_imaginary=True)
    assert int(fixed.column("imaginary_modes")[0]) == 0
    drop = convert(ens.column("energy_gfn2")[0] - fixed.column("energy_gfn2")[0],
                   "hartree", "kcal/mol")
    assert drop == pytest.approx(2.9, abs=1.0)
    dihedral = rdMolTransforms.GetDihedralDeg(fixed.mol.GetConformer(0), 2, 0, 1, 5)
    assert abs(dihedral) == pytest.approx(60.0, abs=5.0)
    assert int(fixed.column("symmetry_number")[0]) == 6  # D3d [from memory]


# ---------------------------------------------------------------------------------- rescore
def test_rescore_records_failures_and_keeps_rows(water):
    mol = water.mol
    bad = Chem.Conformer(mol.GetNumAtoms())  # every atom on one spot: the engine fails
    bad.SetId(1)
    mol.AddConformer(bad, assignId=False)
    ens = Ensemble.from_mol(mol, level="input")
    out = rescore(ens, "gfn2", workers=1)
    table = out.raw_table
    assert list(table.index) == [0, 1]
    assert table.loc[1, "status"] == "failed"
    assert "CalculationFailed" in table.loc[1, "reason"]
    assert np.isnan(table.loc[1, "energy_gfn2"])
    assert table.loc[0, "energy_gfn2"] == pytest.approx(water.column("energy_gfn2")[0], abs=1e-8)
    assert out.level == "gfn2" and out.ids() == [0]
    with pytest.raises(InputError, match="no active conformers"):
        add_free_energies(out.select([1]), workers=1)


def test_errors(water):
    with pytest.raises(InputError, match="temperature must be finite and > 0 K"):
        add_free_energies(water, temperatures=[-5.0], workers=1)
    with pytest.raises(InputError, match="low_mode must be"):
        add_free_energies(water, low_mode="cheap", workers=1)
    with pytest.raises(InputError, match="imaginary_threshold must be"):
        add_free_energies(water, imaginary_threshold=20.0, workers=1)
    with pytest.raises(InputError, match="standard_state must be"):
        add_free_energies(water, standard_state="1 atm", workers=1)
    with pytest.raises(InputError, match="method must be one of"):
        rescore(water, "no-such-method", workers=1)
    with pytest.raises(InputError, match="no free-energy correction at 310.0 K"):
        add_free_energies(water, temperatures=[298.15], workers=1).populations([310.0],
                                                                              energy="free")


def test_solvent_from_ensemble_and_ensemble_methods(water):
    # an ensemble in a solvent: the Hessians use it (GBSA water for GFN2) and G moves to 1 M
    wet = Ensemble.from_mol(water.mol, [water.column("energy_gfn2")[0]], level="gfn2",
                            unit="hartree", solvent="water")
    out = wet.add_free_energies(temperatures=[298.15], workers=1)  # the Ensemble method
    step = out.provenance[-1]
    assert step["solvent"] == "water" and step["standard_state"] == "1 M"
    gas = add_free_energies(wet, temperatures=[298.15], workers=1, solvent="gas")
    assert gas.provenance[-1]["standard_state"] == "1 bar"
    # the difference is mostly the 1.90 kcal/mol standard-state term (computed, CODATA 2022 R),
    # plus a small change of the frequencies in the continuum
    diff = convert(out.column("gcorr_298.15")[0] - gas.column("gcorr_298.15")[0],
                   "hartree", "kcal/mol")
    assert diff == pytest.approx(1.90, abs=0.3)
    via_method = wet.rescore("gfn2", workers=1)  # the Ensemble method, solvent from ens
    # hydration free energy of water -6.3 kcal/mol (Ben-Naim & Marcus, J. Chem. Phys. 1984,
    # 81, 2016 [from memory]); GFN2/GBSA gives -6.0 [measured here]
    solvation = convert(via_method.column("energy_gfn2")[0] - water.column("energy_gfn2")[0],
                        "hartree", "kcal/mol")
    assert solvation == pytest.approx(-6.3, abs=2.5)


def test_executor_gives_the_same_columns():
    import concurrent.futures

    mol = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    AllChem.EmbedMultipleConfs(mol, 2, randomSeed=5)
    AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=5000)
    ens = Ensemble.from_mol(mol, level="mmff94")
    serial = add_free_energies(ens, "mmff94", workers=1)
    with concurrent.futures.ThreadPoolExecutor(2) as pool:
        parallel = add_free_energies(ens, "mmff94", executor=pool)
    np.testing.assert_allclose(parallel.column("gcorr_298.15"), serial.column("gcorr_298.15"),
                               rtol=0, atol=1e-12)


def test_max_gradient_is_hartree_per_angstrom_and_named_so():
    # an ethane geometry off its minimum on the analytic model backend: max_gradient equals a
    # brute-force central difference of the energy over Cartesian steps in angstrom
    from confpop.backends import get_backend
    from confpop.schema import describe_written, file_name
    mol = Chem.AddHs(Chem.MolFromSmiles("CC"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    conf = mol.GetConformer()
    p = conf.GetAtomPosition(2)
    conf.SetAtomPosition(2, (p.x + 0.02, p.y, p.z))   # stretch one C-H off the reference
    backend = get_backend("model", mol)
    x0 = conf.GetPositions()
    e0 = backend.compute(x0).energy
    ens = Ensemble.from_mol(mol, [e0], level="model", unit="hartree")
    table = add_free_energies(ens, "model", temperatures=[298.15], workers=1).raw_table
    h = 1e-4  # angstrom
    grad = np.zeros_like(x0)
    for a in range(len(x0)):
        for c in range(3):
            up, down = x0.copy(), x0.copy()
            up[a, c] += h
            down[a, c] -= h
            grad[a, c] = (backend.compute(up).energy - backend.compute(down).energy) / (2 * h)
    assert np.max(np.abs(grad)) > 1e-3   # off the minimum: a bohr/angstrom mix-up shows
    assert table["max_gradient"].iloc[0] == pytest.approx(np.max(np.abs(grad)), rel=1e-4)
    assert file_name("max_gradient") == "max_gradient_hartree_angstrom"
    assert describe_written(["max_gradient"])["max_gradient_hartree_angstrom"]["unit"] \
        == "hartree/angstrom"
