"""Torsion scans, profile fits, barriers and rates: against an analytic model potential, exact
identities with the kinetics module, and published barriers (ethane, butane) within the known
error of GFN2-xTB.

Tolerances for the GFN2 checks are the method's error, not the tool's: GFN2-xTB conformer
energies typically fall within 0.5-1.5 kcal/mol of high-level references (common practice;
tests/reference_values.py), and its eclipsing barriers of alkanes run low by up to ~1 kcal/mol.
"""

import json
import math

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdMolTransforms
from scipy.optimize import minimize_scalar

import confpop
from confpop import kinetics
from confpop.backends.base import Backend, BackendResult
from confpop.backends.model import ModelTorsion, rotor_dihedrals
from confpop.cli import main
from confpop.ensemble import Ensemble
from confpop.errors import CalculationFailed, InputError
from confpop.torsion import (
    TorsionProfile,
    dihedral_angle,
    exchange_summary,
    interconversion,
    rotatable_torsions,
    scan_torsion,
    torsion_for_bond,
)
from confpop.units import convert
from reference_values import value as refval

BUTANE = (0, 1, 2, 3)
ETHANE_HCCH = (2, 0, 1, 5)  # the dihedral that carries the model backend's ethane rotor term


def with_conformer(smiles, seed=11):
    """The molecule with explicit H and one embedded conformer (rigid scans then start there,
    with no optimization)."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=seed)
    return mol


def model_energy(phi, barrier=3.0, n=3, gamma=180.0):
    """The model backend's torsion term V/2 [1 - cos(n phi - gamma)] (confpop/backends/model.py)."""
    return 0.5 * barrier * (1.0 - np.cos(np.radians(n * np.asarray(phi) - gamma)))


# ----------------------------------------------------------------------------- model backend
def test_rigid_model_scan_is_the_analytic_threefold_profile():
    # analytic: the model's only torsion term on C0-C1-C2-C3 is 3.0/2 [1 - cos(3 phi - 180)]
    assert BUTANE in rotor_dihedrals(with_conformer("CCCC"))
    prof = scan_torsion(with_conformer("CCCC"), BUTANE, method="model", step=30, relaxed=False)
    np.testing.assert_allclose(prof.energies, model_energy(prof.angles), atol=1e-9)
    np.testing.assert_allclose(prof.barriers()["barrier_forward"], [3.0, 3.0, 3.0], atol=1e-9)
    assert prof.converged.all()
    assert prof.hysteresis == ()


def test_relaxed_model_scan_gives_exact_barrier_and_threefold_fit():
    # analytic: relaxing bonds and angles cannot lower the pure torsion term, so the relaxed
    # profile equals V/2 [1 - cos(3 phi - 180)] with V = 3.0 kcal/mol (ethane: the smallest
    # molecule with a model rotor term, on H2-C0-C1-H5)
    assert rotor_dihedrals(Chem.AddHs(Chem.MolFromSmiles("CC"))) == [ETHANE_HCCH]
    prof = scan_torsion("CC", ETHANE_HCCH, method="model", step=30)
    assert prof.relaxed and prof.converged.all() and prof.hysteresis == ()
    np.testing.assert_allclose(prof.energies, model_energy(prof.angles), atol=1e-4)
    minima, maxima = prof.minima(), prof.maxima()
    # a threefold rotor: all three equivalent minima and maxima are reported
    np.testing.assert_allclose(np.sort(minima["angle"]), [-180.0, -60.0, 60.0], atol=0.1)
    np.testing.assert_allclose(np.sort(maxima["angle"]), [-120.0, 0.0, 120.0], atol=0.1)
    barriers = prof.barriers()
    assert len(barriers) == 3
    np.testing.assert_allclose(barriers["barrier_forward"], 3.0, atol=1e-3)
    np.testing.assert_allclose(barriers["barrier_reverse"], 3.0, atol=1e-3)
    terms = prof.fourier_terms().set_index("n")
    assert terms.loc[3, "V"] == pytest.approx(3.0, abs=1e-3)
    assert terms.loc[3, "gamma"] % 360.0 == pytest.approx(180.0, abs=0.1)
    others = terms.drop(index=[0, 3])["V"]
    np.testing.assert_allclose(others, 0.0, atol=1e-3)
    assert prof.full_rotation_barrier() == pytest.approx(3.0, abs=1e-3)
    assert prof.interconversion_barrier() == pytest.approx(3.0, abs=1e-3)


def test_model_barrier_option_scales_the_profile_and_units_convert():
    # analytic: V = 7 kcal/mol = 29.288 kJ/mol (1 kcal = 4.184 kJ by definition)
    prof = scan_torsion(with_conformer("CCCC"), BUTANE, method="model", step=30, relaxed=False,
                        unit="kJ/mol", barrier=7.0)
    assert prof.unit == "kJ/mol"
    assert prof.full_rotation_barrier() == pytest.approx(7.0 * 4.184, rel=1e-9)


# ----------------------------------------------------------------------------- numbers only
def test_fit_recovers_a_known_fourier_series():
    # analytic: V(phi) = 1.2/2 [1 - cos(phi)] + 2.5/2 [1 - cos(3 phi - 180)] + 0.4/2 [1 - cos(2 phi - 30)]
    phi = np.arange(-180.0, 180.0, 15.0)

    def v(x):
        x = np.radians(x)
        return (0.6 * (1 - np.cos(x)) + 1.25 * (1 - np.cos(3 * x - np.pi))
                + 0.2 * (1 - np.cos(2 * x - np.radians(30))))

    prof = TorsionProfile.from_energies(phi, v(phi) + 7.0)  # a constant shift changes nothing
    terms = prof.fourier_terms().set_index("n")
    assert terms.loc[1, "V"] == pytest.approx(1.2, abs=1e-9)
    assert terms.loc[2, "V"] == pytest.approx(0.4, abs=1e-9)
    assert terms.loc[2, "gamma"] == pytest.approx(30.0, abs=1e-6)
    assert terms.loc[3, "V"] == pytest.approx(2.5, abs=1e-9)
    # minima and maxima from the fit against a brute-force search on a 0.001 degree grid
    dense = np.arange(-180.0, 180.0, 0.001)
    e = v(dense) - v(phi).min()
    is_min = (e < np.roll(e, 1)) & (e < np.roll(e, -1))
    is_max = (e > np.roll(e, 1)) & (e > np.roll(e, -1))
    np.testing.assert_allclose(prof.minima()["angle"], dense[is_min], atol=0.01)
    np.testing.assert_allclose(prof.maxima()["angle"], dense[is_max], atol=0.01)
    np.testing.assert_allclose(prof.minima()["energy"], e[is_min], atol=1e-6)
    np.testing.assert_allclose(prof.maxima()["energy"], e[is_max], atol=1e-6)


def test_barrier_table_is_consistent_around_the_circle():
    # identity: walking once round the circle, forward barriers minus reverse barriers sum to 0
    phi = np.arange(0.0, 360.0, 10.0)
    x = np.radians(phi)
    prof = TorsionProfile.from_energies(phi, 2 * (1 - np.cos(x)) + 1.5 * (1 - np.cos(3 * x)))
    b = prof.barriers()
    assert len(b) == len(prof.minima())
    assert float((b["barrier_forward"] - b["barrier_reverse"]).sum()) == pytest.approx(0.0, abs=1e-9)
    assert (b["barrier_forward"] > 0).all() and (b["barrier_reverse"] > 0).all()
    assert prof.full_rotation_barrier() >= prof.interconversion_barrier()


def test_half_life_from_profile_equals_kinetics_module():
    # a twofold profile with a 20 kcal/mol barrier; t1/2 at 298.15 K is ~51 s (Eyring, computed)
    phi = np.arange(-180.0, 180.0, 30.0)
    prof = TorsionProfile.from_energies(phi, 10.0 * (1 - np.cos(np.radians(2 * phi))))
    rates = prof.rates([298.15, 310.15], delta_nu_hz=100.0)
    assert len(rates) == 2 * len(prof.barriers())
    for _, row in rates.iterrows():
        assert row["barrier_forward"] == pytest.approx(20.0, abs=1e-9)
        assert row["half_life_forward"] == pytest.approx(
            kinetics.half_life(20.0, row["temperature"]), rel=1e-12)
        assert row["k_forward"] == pytest.approx(
            kinetics.eyring_rate(20.0, row["temperature"]), rel=1e-12)
        assert row["exchange_regime"] == "slow"  # k ~ 0.01 s^-1 << k_c = 222 s^-1
    at_298 = rates[rates["temperature"] == 298.15].iloc[0]
    assert at_298["half_life_forward"] == pytest.approx(refval("half_life_20_kcal_298"), rel=0.02)
    # 20 kcal/mol: class 1 (t1/2 13 s at 37 °C < 60 s; LaPlante et al. 2011 via kinetics)
    assert prof.atropisomer_class() == 1
    assert "ΔG‡" in prof.note and "±1 kcal/mol" in prof.note
    assert rates.attrs["note"] == prof.note


def test_atropisomer_class_of_a_high_barrier_profile():
    # 31 kcal/mol: t1/2 > 4.5 yr at 37 °C -> class 3 (LaPlante et al., J. Med. Chem. 2011)
    phi = np.arange(-180.0, 180.0, 30.0)
    prof = TorsionProfile.from_energies(phi, 15.5 * (1 - np.cos(np.radians(2 * phi))))
    assert prof.interconversion_barrier() == pytest.approx(31.0, abs=1e-9)
    assert prof.atropisomer_class() == 3 == kinetics.atropisomer_class(31.0)


def test_partial_range_profile_uses_a_spline():
    phi = np.arange(-90.0, 91.0, 15.0)
    prof = TorsionProfile.from_energies(phi, model_energy(phi))
    assert not prof.periodic
    np.testing.assert_allclose(prof.minima()["angle"], [-60.0, 60.0], atol=0.5)
    np.testing.assert_allclose(prof.maxima()["angle"], [0.0], atol=0.5)
    assert prof.barriers()["barrier_forward"].iloc[0] == pytest.approx(3.0, abs=0.05)
    with pytest.raises(InputError, match="no Fourier fit"):
        prof.fourier_terms()


# ----------------------------------------------------------------------------- hysteresis
def _dihedrals(p, quads):
    out = []
    for i, j, k, l in quads:
        b0, b1, b2 = p[:, i] - p[:, j], p[:, k] - p[:, j], p[:, l] - p[:, k]
        b1n = b1 / np.linalg.norm(b1, axis=1)[:, None]
        v = b0 - np.sum(b0 * b1n, axis=1)[:, None] * b1n
        w = b2 - np.sum(b2 * b1n, axis=1)[:, None] * b1n
        out.append(np.arctan2(np.sum(np.cross(b1n, v) * w, axis=1), np.sum(v * w, axis=1)))
    return out


B_FLIP, C_COUPLE = 4.0, 6.0  # kcal/mol


def coupled_rotor_energy(phi1, phi2):
    """O-C-C-O (phi1) coupled to the neighbouring C-C-O-H rotor (phi2), radians, kcal/mol."""
    return (0.5 * B_FLIP * (1 - np.cos(2 * phi2))
            + C_COUPLE * np.cos(phi1) * np.cos(phi2 - np.pi / 4))


class TwoRotors(Backend):
    """HO-CH2-CH2-OH: harmonic bonds and angles, the scanned O-C-C-O dihedral coupled to the
    O3-H rotor (which therefore flips during the scan), a threefold term on the other O-H."""

    name = "two-rotors-test"
    capabilities = frozenset({"energy", "gradient"})

    def __init__(self, mol, **kw):
        super().__init__(mol, **kw)
        ref = Chem.Mol(self.mol)
        p = ref.GetConformer().GetPositions()[None]
        self.bonds = np.array([(b.GetBeginAtomIdx(), b.GetEndAtomIdx()) for b in ref.GetBonds()])
        self.angles = np.array([(n1.GetIdx(), a.GetIdx(), n2.GetIdx()) for a in ref.GetAtoms()
                                for x, n1 in enumerate(a.GetNeighbors())
                                for n2 in list(a.GetNeighbors())[x + 1:]])
        self.r0, self.t0 = self._r(p), self._t(p)
        h = {a.GetNeighbors()[0].GetIdx(): a.GetIdx() for a in ref.GetAtoms()
             if a.GetAtomicNum() == 1 and a.GetNeighbors()[0].GetAtomicNum() == 8}
        self.quads = [(0, 1, 2, 3), (1, 2, 3, h[3]), (h[0], 0, 1, 2)]
        self.kcal = convert(1.0, "kcal/mol", "hartree")

    def _r(self, p):
        return np.linalg.norm(p[:, self.bonds[:, 0]] - p[:, self.bonds[:, 1]], axis=2)

    def _t(self, p):
        u = p[:, self.angles[:, 0]] - p[:, self.angles[:, 1]]
        w = p[:, self.angles[:, 2]] - p[:, self.angles[:, 1]]
        c = np.sum(u * w, axis=2) / (np.linalg.norm(u, axis=2) * np.linalg.norm(w, axis=2))
        return np.arccos(np.clip(c, -1.0, 1.0))

    def _e(self, p):
        phi1, phi2, psi = _dihedrals(p, self.quads)
        return self.kcal * (300.0 * np.sum((self._r(p) - self.r0) ** 2, axis=1)
                            + 60.0 * np.sum((self._t(p) - self.t0) ** 2, axis=1)
                            + coupled_rotor_energy(phi1, phi2) + 1.5 * (1 - np.cos(3 * psi)))

    def _compute(self, positions, gradient):
        energy = float(self._e(positions[None])[0])
        grad = None
        if gradient:
            n, h = positions.size, 1e-5
            d = np.eye(n).reshape(n, -1, 3) * h
            grad = ((self._e(positions[None] + d) - self._e(positions[None] - d)) / (2 * h))
            grad = grad.reshape(-1, 3)
        return BackendResult(energy=energy, gradient=grad)


def test_neighbouring_rotor_flip_is_reported_as_hysteresis():
    # Independent expectation: along phi1 the O-H rotor (phi2) has two wells; the walk that
    # arrives from the side where its well is stable stays in it until the well disappears,
    # so at phi1 = ±60 and ±120 the two walks sit in different wells. Their energy difference
    # is the difference of the two local minima of E(phi2) at fixed phi1 (scipy, 1D).
    prof = scan_torsion("OCCO", (0, 1, 2, 3), method=TwoRotors, step=30, convergence="normal")
    flagged = sorted(a for a, _ in prof.hysteresis)
    assert flagged == [-120.0, -60.0, 60.0, 120.0]
    phi1 = math.radians(60.0)
    wells = [minimize_scalar(lambda x: coupled_rotor_energy(phi1, x),
                             bounds=(lo, lo + math.pi), method="bounded").fun
             for lo in (-math.pi / 4, 3 * math.pi / 4)]
    expected = abs(wells[0] - wells[1])
    assert expected == pytest.approx(4.08, abs=0.01)  # a clear flip, far above 0.5 kcal/mol
    for angle, diff in prof.hysteresis:
        assert diff == pytest.approx(expected, abs=0.02)
    # the profile keeps the lower walk at every angle
    both = np.vstack([prof.energies_up, prof.energies_down])
    np.testing.assert_allclose(prof.energies, np.nanmin(both, axis=0), atol=1e-9)
    table = prof.hysteresis_table()
    assert table["flagged"].sum() == 4


# ----------------------------------------------------------------------------- failures
class FailsNear90(ModelTorsion):
    """The model backend, but the engine 'fails' between 80 and 100 degrees (both signs)."""

    name = "fails-near-90"

    def _compute(self, positions, gradient):
        if 80.0 < abs(dihedral_angle(positions, ETHANE_HCCH)) < 100.0:
            raise CalculationFailed("SCF did not converge (test)")
        return super()._compute(positions, gradient)


@pytest.mark.parametrize("relaxed", [False, True])
def test_failed_points_are_recorded_not_dropped(relaxed):
    start = with_conformer("CC")
    rdMolTransforms.SetDihedralDeg(start.GetConformer(), *ETHANE_HCCH, 180.0)
    prof = scan_torsion(start, ETHANE_HCCH, method=FailsNear90, step=45, relaxed=relaxed,
                        refine=False)
    table = prof.table()
    assert len(table) == 8
    bad = table[table["angle"].abs() == 90.0]
    assert len(bad) == 2
    assert bad["energy"].isna().all() and not bad["converged"].any()
    assert bad["message"].str.contains("SCF did not converge").all()
    good = table[table["angle"].abs() != 90.0]
    np.testing.assert_allclose(good["energy"], model_energy(good["angle"]), atol=1e-4)
    assert prof.full_rotation_barrier() == pytest.approx(3.0, abs=1e-3)


# ----------------------------------------------------------------------------- GFN2 vs literature
def test_ethane_gfn2_barrier_and_threefold_fit():
    mol = Chem.AddHs(Chem.MolFromSmiles("CC"))
    h_on_0 = [a.GetIdx() for a in mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1]
    h_on_1 = [a.GetIdx() for a in mol.GetAtomWithIdx(1).GetNeighbors() if a.GetAtomicNum() == 1]
    prof = scan_torsion("CC", (h_on_0[0], 0, 1, h_on_1[0]), method="gfn2", step=30)
    assert prof.converged.all() and prof.hysteresis == ()
    barriers = prof.barriers()
    assert len(barriers) == 3 and len(prof.minima()) == 3  # three staggered minima
    # Weiss & Leroi, J. Chem. Phys. 1968, 48, 962: 2.9 kcal/mol [S]; allowance ±0.6 for the
    # method (GFN2 torsion barriers of small molecules fall within ~0.5 kcal/mol of reference
    # values, common practice; measured here 2.59)
    np.testing.assert_allclose(barriers["barrier_forward"], refval("ethane_rotational_barrier"), atol=0.6)
    # the three barriers are equal by symmetry
    assert np.ptp(barriers["barrier_forward"]) == pytest.approx(0.0, abs=0.01)
    terms = prof.fourier_terms().set_index("n")
    v3 = terms.loc[3, "V"]
    assert v3 == pytest.approx(barriers["barrier_forward"].mean(), abs=0.05)
    assert terms.drop(index=[0, 3])["V"].max() < 0.05 * v3


@pytest.mark.slow
def test_butane_gfn2_minima_and_barriers():
    prof = scan_torsion("CCCC", BUTANE, method="gfn2", step=30)
    assert prof.converged.all() and prof.hysteresis == ()
    minima = prof.minima()
    angles = np.sort(np.asarray(minima["angle"]) % 360.0)
    # anti at 180; gauche near ±65 ± 10 (high-level calculations put the gauche minimum at
    # 65-68 degrees [from memory]; measured here ±67.6)
    assert len(angles) == 3
    np.testing.assert_allclose(angles, [65.0, 180.0, 295.0], atol=10.0)
    anti = minima.loc[(minima["angle"].abs() - 180.0).abs().idxmin()]
    gauche = minima.drop(index=anti.name)["energy"]
    assert anti["angle"] % 360.0 == pytest.approx(180.0, abs=1.0)
    # gauche - anti: CCSD(T) 0.59 kcal/mol (Smith & Jaffe, J. Phys. Chem. 1996, 100, 18718 [S]);
    # allowance ±0.4 (GFN2 conformer energies of alkanes, common practice; measured here 0.60)
    np.testing.assert_allclose(gauche - anti["energy"], refval("butane_gauche_anti_ccsdt"), atol=0.4)
    # syn barrier: CCSD(T) 5.48 kcal/mol (same source); allowance ±1.0: GFN2 eclipsing barriers
    # run low by up to ~1 kcal/mol (measured here 4.95)
    syn = prof.maxima().loc[prof.maxima()["angle"].abs().idxmin()]
    assert syn["angle"] == pytest.approx(0.0, abs=1.0)
    assert syn["energy"] - anti["energy"] == pytest.approx(5.48, abs=1.0)
    # anti -> gauche barrier: CCSD(T) 3.31 kcal/mol (same source); same allowance
    side = prof.maxima().loc[prof.maxima()["angle"].abs().idxmax()]
    assert side["energy"] - anti["energy"] == pytest.approx(3.31, abs=1.0)


@pytest.mark.slow  # ~70 CPU-s (geomeTRIC steps), ~35 s on two free cores
def test_ortho_substituents_raise_the_biphenyl_barrier_and_class():
    # MMFF94s instead of GFN2 and a 45 degree grid with loose convergence, for run time: the
    # point is the tool's consequence (ortho groups block the planar transition states, the
    # classic origin of biaryl atropisomerism, common practice), not the exact numbers.
    from confpop.execution import local_executor

    profiles = {}
    with local_executor(2) as pool:
        for smiles in ("c1ccccc1-c1ccccc1", "Ic1ccccc1-c1ccccc1I"):
            torsion = rotatable_torsions(Chem.MolFromSmiles(smiles))[0]
            assert torsion.kind == "biaryl"
            profiles[smiles] = scan_torsion(smiles, torsion.atoms, method="mmff94s", step=45,
                                            convergence="loose", executor=pool)
    plain = profiles["c1ccccc1-c1ccccc1"]
    iodo = profiles["Ic1ccccc1-c1ccccc1I"]
    # biphenyl: four twisted minima, low barriers; the 2,2'-diiodo compound: two minima near
    # perpendicular and a planar transition state far above
    assert len(plain.minima()) == 4 and len(iodo.minima()) == 2
    np.testing.assert_allclose(np.abs(iodo.minima()["angle"]), 90.0, atol=15.0)
    assert plain.interconversion_barrier() < 5.0
    assert iodo.interconversion_barrier() - plain.interconversion_barrier() > 15.0
    assert plain.atropisomer_class() == 1
    assert iodo.atropisomer_class() >= 2
    assert iodo.atropisomer_class() == kinetics.atropisomer_class(iodo.interconversion_barrier())


# ----------------------------------------------------------------------------- torsion lists
def test_rotatable_torsions_labels_and_terminal_tops():
    butane = rotatable_torsions(Chem.MolFromSmiles("CCCC"))
    assert [(t.label, t.bond, t.atoms) for t in butane] == [("C0-C1-C2-C3", "C1-C2", BUTANE)]
    # RDKit counts one rotatable bond in butane (its strict definition, independent code)
    assert len(butane) == Chem.rdMolDescriptors.CalcNumRotatableBonds(Chem.MolFromSmiles("CCCC"))
    assert len(rotatable_torsions(Chem.MolFromSmiles("CCCC"), include_terminal=True)) == 3
    assert rotatable_torsions(Chem.MolFromSmiles("CCO")) == []  # CH3 and a non-conjugated OH
    phenol = rotatable_torsions(Chem.AddHs(Chem.MolFromSmiles("Oc1ccccc1")))
    assert len(phenol) == 1 and phenol[0].bond == "O0-C1"  # conjugated OH has a real barrier
    amide = rotatable_torsions(Chem.MolFromSmiles("CC(=O)Nc1ccccc1"))
    assert [t.kind for t in amide] == ["amide", "single"]
    assert amide[0].label == "O2-C1-N3-C4"
    assert rotatable_torsions(Chem.MolFromSmiles("CC#CC")) == []  # linear sp carbons


def test_torsion_for_bond_prefers_heavy_atoms():
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    assert torsion_for_bond(mol, 1, 2).atoms == BUTANE
    assert torsion_for_bond(mol, 2, 1).atoms == (3, 2, 1, 0)
    assert torsion_for_bond(mol, 0, 1).atoms[2:] == (1, 2)
    with pytest.raises(InputError, match="not bonded"):
        torsion_for_bond(mol, 0, 3)
    with pytest.raises(InputError, match="no other neighbour"):
        torsion_for_bond(mol, 0, 4)


# ----------------------------------------------------------------------------- bad input
def test_bad_scan_input_raises_clear_errors():
    with pytest.raises(InputError, match="bonded chain"):
        scan_torsion("CCCC", (0, 1, 3, 2), method="model", relaxed=False)
    with pytest.raises(InputError, match="out of range"):
        scan_torsion("CCCC", (0, 1, 2, 40), method="model", relaxed=False)
    with pytest.raises(InputError, match="four atom indices"):
        scan_torsion("CCCC", (0, 1, 2), method="model", relaxed=False)
    with pytest.raises(InputError, match="must divide 360"):
        scan_torsion("CCCC", BUTANE, method="model", step=25, relaxed=False)
    with pytest.raises(InputError, match="at most 360"):
        scan_torsion("CCCC", BUTANE, method="model", start=0, stop=400, relaxed=False)
    with pytest.raises(InputError, match="in a ring"):
        scan_torsion("C1CCCCC1", (0, 1, 2, 3), method="model", relaxed=False)
    with pytest.raises(InputError, match="SMILES string or an RDKit Mol"):
        scan_torsion(42, BUTANE, method="model")
    with pytest.raises(InputError, match="unit must be one of"):
        scan_torsion("CCCC", BUTANE, method="model", relaxed=False, unit="furlongs")
    with pytest.raises(InputError, match="method must be one of"):
        scan_torsion("CCCC", BUTANE, method="nonsense", relaxed=False)
    with pytest.raises(InputError, match="at least 4 points"):
        TorsionProfile.from_energies([0, 90, 180], [0, 1, 0])
    with pytest.raises(InputError, match="temperature must be finite and > 0 K"):
        TorsionProfile.from_energies(np.arange(0, 360, 30.0), np.arange(12.0)).rates(-5.0)


# ----------------------------------------------------------------------------- ensembles
def _butane_ensemble(angles, energies):
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    AllChem.EmbedMultipleConfs(mol, len(angles), randomSeed=3)
    for conf, angle in zip(mol.GetConformers(), angles):
        rdMolTransforms.SetDihedralDeg(conf, *BUTANE, angle)
    return Ensemble.from_mol(mol, energies=energies, level="model", unit="kcal/mol")


def test_interconversion_of_two_conformers_with_the_model_backend():
    ens = _butane_ensemble([180.0, 65.0], [0.0, 0.6])
    result = interconversion(ens, 0, 1, temperatures=[200.0, 298.15], step=60,
                             delta_nu_hz=100.0)
    assert result.single_torsion and result.atoms == BUTANE
    assert result.torsion_changes.iloc[0]["difference"] == pytest.approx(115.0, abs=0.5)
    # analytic model: every barrier is V = 3.0 kcal/mol
    assert result.barrier_forward == pytest.approx(3.0, abs=1e-3)
    assert result.barrier_reverse == pytest.approx(3.0, abs=1e-3)
    assert result.from_min % 360.0 == pytest.approx(180.0, abs=0.5)
    assert result.to_min == pytest.approx(60.0, abs=0.5)
    for _, row in result.rates.iterrows():
        assert row["k_forward"] == pytest.approx(
            kinetics.eyring_rate(result.barrier_forward, row["temperature"]), rel=1e-12)
        assert row["exchange_regime"] == "fast"
    assert "ΔG‡" in result.note


def test_two_torsion_change_is_not_a_single_torsion_interconversion():
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCCC"))
    AllChem.EmbedMultipleConfs(mol, 2, randomSeed=5)
    confs = list(mol.GetConformers())
    for conf, (a, b) in zip(confs, [(180.0, 180.0), (65.0, -65.0)]):
        rdMolTransforms.SetDihedralDeg(conf, 0, 1, 2, 3, a)
        rdMolTransforms.SetDihedralDeg(conf, 1, 2, 3, 4, b)
    ens = Ensemble.from_mol(mol, level="model")
    result = ens.interconversion(0, 1)  # the ensemble method calls torsion.interconversion
    assert not result.single_torsion and result.profile is None
    assert "not a single-torsion interconversion" in result.message
    assert set(result.torsion_changes["label"][:2]) == {"C0-C1-C2-C3", "C1-C2-C3-C4"}
    assert math.isnan(result.barrier_forward)
    with pytest.raises(InputError, match="two different conformers"):
        interconversion(ens, 1, 1)


def test_exchange_summary_slow_and_fast_regimes():
    # model barrier 20 kcal/mol: k(298.15 K) = 0.014 s^-1, far below k_c = 222 s^-1 for 100 Hz
    # (slow); at 500 K k = 1.9e4 s^-1 > 10 k_c (fast); both through kinetics.exchange_regime
    ens = _butane_ensemble([180.0, 65.0], [0.0, 0.6])
    table = exchange_summary(ens, [298.15, 500.0], delta_nu_hz=100.0, step=60, barrier=20.0)
    assert list(table["temperature"]) == [298.15, 500.0]
    assert list(table["regime"]) == ["slow", "fast"]
    np.testing.assert_allclose(table["barrier_ab"], 20.0, atol=0.01)
    for _, row in table.iterrows():
        k = kinetics.eyring_rate(row["barrier_ab"], row["temperature"])
        assert row["k_ab"] == pytest.approx(k, rel=1e-12)
        assert row["regime"] == kinetics.exchange_regime(0.5 * (row["k_ab"] + row["k_ba"]), 100.0)
    assert "ΔG‡" in table.attrs["note"]


# ----------------------------------------------------------------------------- CLI, plot, API
@pytest.fixture
def butane_molfile(tmp_path):
    path = tmp_path / "butane.mol"
    Chem.MolToMolFile(with_conformer("CCCC"), str(path))
    return str(path)


def test_cli_scan_prints_table_and_draws(tmp_path, butane_molfile, capsys):
    png = tmp_path / "profile.png"
    # the command line numbers atoms from 1, as molecule viewers and the MOL file do
    status = main(["scan", butane_molfile, "--bond", "2", "3", "--method", "model", "--rigid",
                   "--step", "30", "--plot", str(png)])
    out = capsys.readouterr().out
    assert status == 0
    assert "C1-C2-C3-C4" in out and "numbered from 1" in out
    assert "minima" in out and "maxima" in out and "3.00" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_cli_scan_json_and_errors(butane_molfile, capsys):
    assert main(["scan", butane_molfile, "--torsion", "1", "2", "3", "4", "--method", "model",
                 "--rigid", "--step", "30", "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["atoms"] == [a + 1 for a in BUTANE] and payload["index_base"] == 1
    assert len(payload["minima"]) == 3
    assert payload["barriers"][0]["barrier_forward"] == pytest.approx(3.0, abs=1e-9)
    assert main(["scan", "CCCC", "--bond", "2", "8", "--method", "model", "--rigid"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("confpop: error:") and "no dihedral" in err and len(err.splitlines()) == 1
    assert "C2" in err and "H8" in err  # the atoms as the user numbered them
    assert main(["scan", "CCCC", "--torsion", "0", "1", "2", "3", "--method", "model"]) == 2
    assert "atoms are numbered from 1" in capsys.readouterr().err
    # atoms not bonded: named once, as the user numbered them (C2 and C4 are not bonded)
    assert main(["scan", "CCCC", "--torsion", "1", "2", "4", "3", "--method", "model"]) == 2
    assert capsys.readouterr().err.strip() == (
        "confpop: error: --torsion 1 2 4 3: C2 and C4 are not bonded; give four atoms in a "
        "bonded chain I-J-K-L (atoms numbered from 1, as in molecule viewers and the SDF atom "
        "block)")
    assert main(["scan", "CCCC", "--bond", "1", "4", "--method", "model"]) == 2
    assert capsys.readouterr().err.strip() == (
        "confpop: error: --bond 1 4: C1 and C4 are not bonded; give two bonded atoms (atoms "
        "numbered from 1, as in molecule viewers and the SDF atom block)")


def test_plot_torsion_profile(tmp_path):
    from confpop.plot import plot_torsion_profile

    phi = np.arange(-180.0, 180.0, 30.0)
    prof = TorsionProfile.from_energies(phi, model_energy(phi), label="C0-C1-C2-C3")
    fig = plot_torsion_profile(prof, path=tmp_path / "p.png")
    assert (tmp_path / "p.png").stat().st_size > 1000
    assert fig.axes[0].get_xlabel().startswith("dihedral")
    with pytest.raises(InputError, match="needs a TorsionProfile"):
        plot_torsion_profile([1, 2, 3])


def test_public_names():
    assert confpop.scan_torsion is scan_torsion
    assert confpop.rotatable_torsions is rotatable_torsions
    assert confpop.TorsionProfile is TorsionProfile


def test_cli_scan_cautions_number_atoms_from_one(capsys):
    # the hysteresis caution of the coupled-rotor model above, through the command line: one
    # "confpop: warning:" line naming O1-C2-C3-O4 (the library's 0-based O0-C1-C2-O3), and no
    # bare log line beside it
    from confpop.backends import _REGISTRY, register_backend
    register_backend("two-rotors-cli-test", TwoRotors)
    try:
        assert main(["scan", "OCCO", "--torsion", "1", "2", "3", "4", "--method",
                     "two-rotors-cli-test", "--step", "30", "--workers", "1",
                     "--convergence", "normal"]) == 0
    finally:
        _REGISTRY.pop("two-rotors-cli-test", None)
    err = [line for line in capsys.readouterr().err.splitlines() if "[" not in line[:12]]
    scan = [line for line in err if "up and down walks" in line]
    assert len(scan) == 1
    assert scan[0].startswith("confpop: warning: scan of O1-C2-C3-O4: the up and down walks")
    assert all(line.startswith("confpop: ") for line in err), err


def test_a_scan_inside_a_pool_scope_runs_its_walks_on_that_pool_with_the_serial_profile(monkeypatch):
    # the command line's scan opens a pool_scope (preloaded workers, rebuilt after a worker
    # death) and passes no executor: the walks must go to that pool, and give the profile of
    # the same calculations in this process (an independent run of the same units)
    import confpop.execution as execution
    from confpop.execution import pool_scope

    uses = []  # the pool's executor handed out: once when the scope opens, then per call
    original = execution._LocalPool.get

    def counting(self):
        uses.append(self)
        return original(self)

    monkeypatch.setattr(execution._LocalPool, "get", counting)
    atoms = (0, 1, 2, 3)
    serial = scan_torsion("CCCC", atoms, method="mmff94s", step=60, convergence="loose")
    assert not uses  # outside a scope: in this process
    with pool_scope(2):
        opened = len(uses)
        pooled = scan_torsion("CCCC", atoms, method="mmff94s", step=60, convergence="loose")
    assert len(uses) > opened and len(set(map(id, uses))) == 1  # the walks ran on that pool
    np.testing.assert_allclose(pooled.angles, serial.angles)
    np.testing.assert_allclose(pooled.energies, serial.energies, atol=1e-9)


def test_a_scan_with_a_backend_class_of_the_callers_script_stays_in_process_inside_a_pool_scope():
    # a backend class defined in a notebook or `python -c` cannot be unpickled by a worker:
    # inside a pool_scope the scan must run such a method here (review finding: it failed
    # with "Can't get attribute 'MyPotential'" after scans learnt to use an enclosing scope)
    import subprocess
    import sys

    code = ("from confpop.backends.model import ModelTorsion\n"
            "from confpop.execution import pool_scope\n"
            "from confpop import scan_torsion\n"
            "class MyPotential(ModelTorsion):\n"
            "    pass\n"
            "with pool_scope(2):\n"
            "    p = scan_torsion('CCCC', (0, 1, 2, 3), method=MyPotential, step=60)\n"
            "print('ENERGIES', [round(float(e), 6) for e in p.energies])\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    import ast

    energies = ast.literal_eval(out.stdout.split("ENERGIES", 1)[1].strip())
    direct = scan_torsion("CCCC", (0, 1, 2, 3), method=ModelTorsion, step=60)
    np.testing.assert_allclose(energies, direct.energies, atol=1e-6)
