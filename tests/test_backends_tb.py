"""Tight-binding backends: xtb-python and tblite against each other and against physics.

xtb-python and tblite are two independent implementations of the published GFN methods
(GFN2-xTB: Bannwarth, Ehlert, Grimme, J. Chem. Theory Comput. 2019, 15, 1652,
doi:10.1021/acs.jctc.8b01176; GFN1-xTB: Grimme, Bannwarth, Shushkov, J. Chem. Theory
Comput. 2017, 13, 1989), so agreement between them checks our unit handling, charge and
spin set-up against an outside implementation.
"""

import os
import pickle

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdMolTransforms

from confpop.backends import get_backend
from confpop.backends.xtb import canonical_solvent, solvents_for
from confpop.errors import CalculationFailed, InputError
from confpop.units import EBOHR_DEBYE, convert


def embedded(smiles, seed=42):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    return mol


@pytest.fixture(scope="module")
def water():
    return embedded("O")


@pytest.fixture(scope="module")
def butane():
    return embedded("CCCC")


def kcal(hartree):
    return convert(hartree, "hartree", "kcal/mol")


# ---------------------------------------------------------------- two implementations agree

@pytest.mark.parametrize("smiles", ["O", "CCCC"])
@pytest.mark.parametrize("method", ["gfn2", "gfn1"])
def test_xtb_and_tblite_agree_in_gas_phase(smiles, method):
    # Same published method in two independent codes (xtb-python 22.1 vs tblite 0.8);
    # observed differences ~1e-8 hartree, 1e-6 hartree/angstrom (SCF convergence noise).
    mol = embedded(smiles)
    x = mol.GetConformer().GetPositions()
    a = get_backend(method, mol).compute(x)
    b = get_backend(f"tblite-{method}", mol).compute(x)
    assert a.energy == pytest.approx(b.energy, abs=1e-6)
    np.testing.assert_allclose(a.gradient, b.gradient, rtol=0, atol=2e-5)
    np.testing.assert_allclose(a.dipole, b.dipole, rtol=0, atol=1e-4)
    np.testing.assert_allclose(a.charges, b.charges, rtol=0, atol=1e-4)
    assert a.gradient.shape == (mol.GetNumAtoms(), 3)


@pytest.mark.parametrize("smiles, charge, multiplicity",
                         [("[CH3]", 0, 2),          # methyl radical: doublet from RDKit
                          ("CC(=O)[O-]", -1, 1),    # acetate anion
                          ("C[NH3+]", 1, 1)])       # methylammonium cation
def test_charge_and_spin_reach_the_engines(smiles, charge, multiplicity):
    # Charge and multiplicity come from the RDKit molecule; both engines must agree
    # (independent implementations) and the partial charges must sum to the total charge.
    mol = embedded(smiles)
    x = mol.GetConformer().GetPositions()
    a = get_backend("gfn2", mol)
    b = get_backend("tblite-gfn2", mol)
    assert (a.charge, a.multiplicity) == (charge, multiplicity)
    ra, rb = a.compute(x), b.compute(x)
    assert ra.energy == pytest.approx(rb.energy, abs=1e-6)
    np.testing.assert_allclose(ra.gradient, rb.gradient, rtol=0, atol=5e-5)
    assert ra.charges.sum() == pytest.approx(charge, abs=1e-8)
    assert rb.charges.sum() == pytest.approx(charge, abs=1e-8)


def test_explicit_spin_changes_the_energy(butane):
    # A triplet butane is an excited state: higher in energy than the singlet (physics).
    x = butane.GetConformer().GetPositions()
    singlet = get_backend("gfn2", butane).compute(x).energy
    triplet = get_backend("gfn2", butane, multiplicity=3).compute(x).energy
    triplet_tb = get_backend("tblite-gfn2", butane, multiplicity=3).compute(x).energy
    assert triplet == pytest.approx(triplet_tb, abs=1e-6)
    # common practice: a closed-shell alkane's lowest triplet lies several eV (> 100
    # kcal/mol) higher; GFN2 without spin polarisation puts it ~300 kcal/mol up
    assert kcal(triplet - singlet) > 100.0


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_impossible_multiplicity_is_refused(water, method):
    with pytest.raises(InputError, match="multiplicity 2 is impossible with 10 electrons"):
        get_backend(method, water, multiplicity=2)


# ------------------------------------------------------------------------------- gradients

@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2", "gfn1", "tblite-gfn1", "gfnff"])
def test_gradient_matches_central_differences(butane, method):
    # Analytic gradient (hartree/angstrom after our unit conversion) against a central
    # finite difference of the energy, step 1e-3 angstrom (error O(h^2) ~ 1e-7).
    backend = get_backend(method, butane)
    x = butane.GetConformer().GetPositions()
    grad = backend.compute(x).gradient
    h = 1e-3
    for atom, axis in [(0, 0), (1, 2), (5, 1), (13, 0)]:
        plus, minus = x.copy(), x.copy()
        plus[atom, axis] += h
        minus[atom, axis] -= h
        numeric = (backend.compute(plus, gradient=False).energy
                   - backend.compute(minus, gradient=False).energy) / (2 * h)
        assert grad[atom, axis] == pytest.approx(numeric, abs=1e-5)


# ------------------------------------------------------------------ determinism and pickling

@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_result_does_not_depend_on_call_history(butane, method):
    # The engine object is reused between calls, but every call starts from a fresh guess.
    x = butane.GetConformer().GetPositions()
    fresh = get_backend(method, butane).compute(x).energy
    reused = get_backend(method, butane)
    reused.compute(x + 0.05)
    reused.compute(x - 0.03)
    assert reused.compute(x).energy == pytest.approx(fresh, abs=1e-9)
    copy = pickle.loads(pickle.dumps(reused))
    assert copy.compute(x).energy == pytest.approx(fresh, abs=1e-9)


# --------------------------------------------------------------------------------- solvents

def test_solvent_names_accept_chemists_spellings():
    assert canonical_solvent("CHCl3") == "chloroform"
    assert canonical_solvent("  Chloroform ") == "chloroform"
    assert canonical_solvent("CH2Cl2") == "dichloromethane"
    assert canonical_solvent("h2o") == "water"
    assert canonical_solvent("Et2O") == "diethyl ether"
    assert canonical_solvent("DMSO") == "dmso"
    for name in ["water", "chloroform", "dichloromethane", "dmso", "methanol", "acetonitrile",
                 "toluene", "thf", "hexane", "benzene", "acetone", "dmf", "diethyl ether",
                 "cs2"]:
        assert name in solvents_for("gfn2", "gbsa")
        assert name in solvents_for("gfn2", "alpb")


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_spellings_of_one_solvent_give_one_energy(water, method):
    x = water.GetConformer().GetPositions()
    energies = [get_backend(method, water, solvent=s).compute(x).energy
                for s in ("chloroform", "CHCl3", "chcl3")]
    assert energies[1] == pytest.approx(energies[0], abs=1e-12)
    assert energies[2] == pytest.approx(energies[0], abs=1e-12)
    assert get_backend(method, water, solvent="CHCl3").solvent == "chloroform"


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2", "gfnff"])
def test_unknown_solvent_lists_the_valid_ones(water, method):
    with pytest.raises(InputError, match=r"solvent 'seawater' .*valid solvents: .*water"):
        get_backend(method, water, solvent="seawater")


def test_alpb_only_solvent_and_model_errors(water):
    # xtb-python 22.1 exposes GBSA only; ethanol has ALPB parameters only (checked in tblite)
    with pytest.raises(InputError, match="not available for gfn2 with GBSA"):
        get_backend("gfn2", water, solvent="ethanol")
    with pytest.raises(InputError, match="tblite-gfn2"):
        get_backend("gfn2", water, solvent="water", solvent_model="alpb")
    with pytest.raises(InputError, match="solvent_model must be 'alpb' or 'gbsa'"):
        get_backend("tblite-gfn2", water, solvent="water", solvent_model="cosmo")
    assert get_backend("tblite-gfn2", water, solvent="ethanol").solvent == "ethanol"


def test_gbsa_of_xtb_equals_gbsa_of_tblite(water):
    # Same GBSA model and parameters in two codes (observed agreement ~2e-9 hartree).
    x = water.GetConformer().GetPositions()
    a = get_backend("gfn2", water, solvent="water").compute(x).energy
    b = get_backend("tblite-gfn2", water, solvent="water", solvent_model="gbsa").compute(x)
    assert a == pytest.approx(b.energy, abs=1e-6)
    assert get_backend("tblite-gfn2", water, solvent="water").settings()["solvent_model"] == "alpb"


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_water_lowers_the_energy_of_water(water, method):
    # Hydration free energy of water: -6.3 kcal/mol (experiment, Ben-Naim & Marcus,
    # J. Chem. Phys. 1984, 81, 2016 [from memory]). GBSA/ALPB were fitted to such data;
    # we allow a generous band for the model (observed: GBSA -6.0, ALPB -9.1).
    x = water.GetConformer().GetPositions()
    gas = get_backend(method, water).compute(x).energy
    wet = get_backend(method, water, solvent="water").compute(x).energy
    assert kcal(wet - gas) == pytest.approx(-6.3, abs=4.0)


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_polar_solvent_favours_the_polar_gauche_dichloroethane(method):
    # 1,2-Dichloroethane: anti (no dipole) is favoured by ~1.1-1.2 kcal/mol in the gas
    # phase [from memory]; polar solvents stabilise the gauche form (dipole ~2.5 D) so the
    # gap shrinks by about 1 kcal/mol in polar liquids (common practice; observed with
    # GBSA -1.14, ALPB -1.23 kcal/mol at fixed geometries).
    mol = embedded("ClCCCl")
    conf = mol.GetConformer()
    geometries = {}
    for label, phi in (("anti", 180.0), ("gauche", 65.0)):
        rdMolTransforms.SetDihedralDeg(conf, 0, 1, 2, 3, phi)
        geometries[label] = conf.GetPositions()
    gaps, dipoles = {}, {}
    for solvent in (None, "water"):
        backend = get_backend(method, mol, solvent=solvent)
        res = {k: backend.compute(v) for k, v in geometries.items()}
        gaps[solvent] = kcal(res["gauche"].energy - res["anti"].energy)
        if solvent is None:
            dipoles = {k: np.linalg.norm(r.dipole) * EBOHR_DEBYE for k, r in res.items()}
    assert gaps[None] == pytest.approx(1.2, abs=0.8)
    assert gaps["water"] - gaps[None] == pytest.approx(-1.1, abs=0.7)
    # anti is nearly centrosymmetric (embedded, not optimized: ~0.3 D observed);
    # gauche carries ~2.5 D [from memory]
    assert dipoles["anti"] == pytest.approx(0.0, abs=0.5)
    assert dipoles["gauche"] == pytest.approx(2.6, abs=0.8)


# -------------------------------------------------------------------------- engine failures

@pytest.mark.parametrize("method, message", [("gfn2", "did not converge"),
                                             ("tblite-gfn2", "SCF not converged")])
def test_unconverged_scf_raises_with_the_engines_message(water, method, message):
    backend = get_backend(method, water, max_iterations=1)
    with pytest.raises(CalculationFailed, match=message):
        backend.compute(water.GetConformer().GetPositions())
    # the same backend object is usable again afterwards (and fails the same way)
    with pytest.raises(CalculationFailed, match=message):
        backend.compute(water.GetConformer().GetPositions())


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_bad_options_are_refused(water, method):
    with pytest.raises(InputError, match="accepts the options"):
        get_backend(method, water, temperature=300)
    with pytest.raises(InputError, match="accuracy must be a number between"):
        get_backend(method, water, accuracy=-1.0)
    with pytest.raises(InputError, match="max_iterations must be an integer >= 1"):
        get_backend(method, water, max_iterations=0)
    with pytest.raises(InputError, match="electronic_temperature must be > 0 K"):
        get_backend(method, water, electronic_temperature=0)


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_options_reach_the_engine(butane, method):
    # A hotter electron gas (Fermi smearing) can only lower the free energy of the
    # electrons; for a wide-gap alkane the change at 1000 K is tiny but nonzero.
    x = butane.GetConformer().GetPositions()
    cold = get_backend(method, butane).compute(x).energy
    tight = get_backend(method, butane, accuracy=0.01).compute(x).energy
    assert tight == pytest.approx(cold, abs=1e-6)
    hot = get_backend(method, butane, electronic_temperature=5000.0).compute(x).energy
    assert kcal(hot - cold) == pytest.approx(0.0, abs=1.0)
    assert hot != cold


def test_gfnff_is_silent_and_leaves_no_files(tmp_path, monkeypatch, capfd, butane):
    # GFN-FF writes topology files and prints while it sets up; we keep both away.
    monkeypatch.chdir(tmp_path)
    backend = get_backend("gfnff", butane, solvent="water")
    result = backend.compute(butane.GetConformer().GetPositions())
    assert np.isfinite(result.energy)
    assert result.charges is None
    assert os.listdir(tmp_path) == []
    captured = capfd.readouterr()
    assert captured.out == ""
    assert captured.err == ""


@pytest.mark.parametrize("method", ["gfn2", "tblite-gfn2"])
def test_scf_restart_inside_a_continuation_gives_the_same_energies(butane, method):
    # Inside Backend.continuation() each SCF starts from the previous solution (the steps
    # of one optimization); the converged energies must be those of a fresh guess (to
    # 1e-8 hartree, the agreement asked of a restart), gradients to the SCF tolerance, and
    # nothing is kept afterwards or pickled.
    x = butane.GetConformer().GetPositions()
    rng = np.random.default_rng(3)
    path = [x + rng.normal(scale=0.02, size=x.shape) * k for k in range(4)]
    fresh = [get_backend(method, butane).compute(p) for p in path]
    backend = get_backend(method, butane)
    assert backend.restarts
    with backend.continuation():
        warm = [backend.compute(p) for p in path]
        assert backend._solution is not None
        copy = pickle.loads(pickle.dumps(backend))
        assert copy._solution is None and not copy._continuing
    assert backend._solution is None and not backend._continuing
    for f, w in zip(fresh, warm):
        assert w.energy == pytest.approx(f.energy, abs=1e-8)
        np.testing.assert_allclose(w.gradient, f.gradient, rtol=0, atol=5e-5)


def test_gfnff_has_no_scf_to_restart(butane):
    backend = get_backend("gfnff", butane)
    assert not backend.restarts
    x = butane.GetConformer().GetPositions()
    with backend.continuation():
        backend.compute(x)
        assert backend._solution is None
