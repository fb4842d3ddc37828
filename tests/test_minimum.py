"""Minimum check: symmetric saddle points found and left, true minima kept."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

import confpop as cp
from confpop.backends import get_backend
from confpop.minimum import relax_to_minimum, soft_directions, symmetry_of_conformer
from confpop.molecule import load_molecule
from reference_values import value as refval


@pytest.fixture(scope="module")
def phenylcyclohexane():
    # without the check (check_minima=False) seed 1 keeps an axial structure with the
    # phenyl plane on the mirror plane: one imaginary mode (-21 cm-1, full GFN2 Hessian
    # computed here) 4.14 kcal/mol above the equatorial chair
    # (min_population low enough that the unchecked run keeps its axial row: 4.14 kcal/mol
    # holds 0.09 % at 298 K)
    # (the one-stream ETKDG sampler without moves: at seed 1 it draws the axial saddle this
    # test is about; the move search starts from other structures)
    former = {"moves": False, "target_overlap": None}
    return (cp.search("C1CCC(CC1)c1ccccc1", seed=1, min_population=1e-5, **former),
            cp.search("C1CCC(CC1)c1ccccc1", seed=1, min_population=1e-5, check_minima=False,
                      **former))


@pytest.mark.slow
def test_axial_phenyl_saddle_is_left_for_the_mirror_pair(phenylcyclohexane):
    ens, unchecked = phenylcyclohexane
    gaps = ens.free_energy_gaps(298.15)
    axial = ens.table()["minimum_check"] == "saddle point left"
    assert axial.sum() == 1
    row = ens.table()[axial].iloc[0]
    assert "saddle point on a mirror plane" in row["reason"]
    assert row["degeneracy"] == 2                      # the mirror pair it fell into
    assert int(ens.table()[axial].index[0]) in ens.ids()
    old = unchecked.free_energy_gaps(298.15)["effective_gap"].iloc[-1]
    new = gaps["effective_gap"][axial].iloc[0]
    # the phenyl A-value is 2.8 kcal/mol (Eliel, Wilen & Mander 1994, Table 11.7) [from
    # memory]; GFN2 gas-phase energies err by 0.5-1.5 kcal/mol (common practice), so the
    # tolerance is the method's; the saddle sat 4.14 - 2.8 = 1.3 above the A-value
    assert new == pytest.approx(refval("a_value_phenyl"), abs=0.8)
    assert old - new > 1.0
    # the new structure is a minimum: a full numerical Hessian has no imaginary mode
    freqs = cp.frequencies(ens.mol, conf_id=int(ens.table()[axial].index[0]))
    assert freqs.min() > -10.0


def test_symmetric_minimum_stays():
    # anti-butane (C2h) is a true minimum: re-optimized from a kick it returns, no change
    ens = cp.search("CCCC", seed=1)
    anti = 0
    be = get_backend("gfn2", ens.mol)
    out = relax_to_minimum(be, ens.positions(anti), ens.raw_table.loc[anti, "energy_gfn2"])
    assert out.symmetry in ("mirror", "rotation") and not out.saddle
    assert out.energy == pytest.approx(ens.raw_table.loc[anti, "energy_gfn2"], abs=1e-12)
    assert set(ens.table()["minimum_check"]) == {"symmetric minimum"}


def test_symmetry_detection_and_soft_directions():
    mol = load_molecule("CCCC")
    AllChem.EmbedMolecule(mol, randomSeed=3)
    conf = mol.GetConformer()
    from rdkit.Chem import rdMolTransforms as T
    T.SetDihedralDeg(conf, 0, 1, 2, 3, 180.0)
    AllChem.MMFFOptimizeMolecule(mol)
    assert symmetry_of_conformer(mol, conf.GetPositions())          # anti: C2h
    T.SetDihedralDeg(conf, 0, 1, 2, 3, 100.0)
    assert symmetry_of_conformer(mol, conf.GetPositions()) in ("", "rotation")
    dirs, labels = soft_directions(mol, conf.GetPositions())
    assert labels == ["C2-C3"]                                      # methyl tops left out
    assert np.linalg.norm(dirs[0], axis=1).max() == pytest.approx(1.0)


# --- molecules MMFF94s cannot type ------------------------------------------------------
def _angle(pos, a, c, b):
    u, v = pos[a] - pos[c], pos[b] - pos[c]
    return float(np.degrees(np.arccos(u @ v / np.linalg.norm(u) / np.linalg.norm(v))))


@pytest.mark.slow
def test_cisplatin_stays_cis_square_planar(capfd):
    # cis-diamminedichloridoplatinum(II): square planar, the two N cis (textbook
    # coordination chemistry); MMFF94s has no Pt parameters, so the trial structures are
    # relaxed with GFN-FF and the search says so; RDKit's C++ typer lines stay off stderr
    ens = cp.search("[NH3][Pt@SP1]([NH3])(Cl)Cl", seed=1, n_trials=10, max_rounds=2)
    sample = [p for p in ens.provenance if p["step"] == "sample"][0]
    assert sample["force_field"] == "gfnff" and "Pt2" in sample["force_field_reason"]
    assert len(ens) >= 1
    for cid in ens.ids():
        pos = ens.positions(cid)
        assert _angle(pos, 0, 1, 2) < 135.0                       # N-Pt-N cis (99 here)
        assert _angle(pos, 0, 1, 3) > 135.0 and _angle(pos, 2, 1, 4) > 135.0  # N trans to Cl
    assert "UFFTYPER" not in capfd.readouterr().err


def test_unassigned_square_planar_centre_is_refused():
    with pytest.raises(cp.InputError, match=r"Pt2 has four unlike ligands.*\[Pt@SP1\]"):
        cp.search("[NH3][Pt]([NH3])(Cl)Cl")


def test_hypervalent_phosphorus_is_sampled_with_uff(capfd):
    # PCl5: MMFF94s lacks terms for five-coordinate P; UFF types it
    ens = cp.search("ClP(Cl)(Cl)(Cl)Cl", seed=1)
    sample = [p for p in ens.provenance if p["step"] == "sample"][0]
    assert sample["force_field"] == "uff" and "mmff94s" in sample["force_field_reason"]
    assert len(ens) == 1
    assert "UFFTYPER" not in capfd.readouterr().err


def test_conformer_of_a_chiral_molecule_is_not_symmetric():
    # a stereocentre rules out any mirror plane; the two N-methyls swap by graph symmetry
    # but no rotation of the whole conformer realises that swap
    mol = load_molecule("CN(C)C(=O)[C@@H](C)OC")
    AllChem.EmbedMolecule(mol, randomSeed=5)
    AllChem.MMFFOptimizeMolecule(mol)
    assert symmetry_of_conformer(mol, mol.GetConformer().GetPositions()) == ""


def test_square_planar_trans_pairs_tell_cis_from_trans():
    # square-planar geometry by hand: ligands at 0, 90, 180, 270 degrees (textbook)
    from confpop.prune import square_planar_trans_pairs
    mol = Chem.MolFromSmiles("N[Pt@SP1](N)(Cl)Cl")
    square = np.array([[2.0, 0, 0], [0, 2.0, 0], [-2.0, 0, 0], [0, -2.0, 0]])
    pos = np.zeros((5, 3))
    pos[[0, 2, 3, 4]] = square[[0, 1, 2, 3]]      # N, N adjacent (cis)
    cis = square_planar_trans_pairs(mol, pos)
    pos[[0, 2, 3, 4]] = square[[0, 2, 1, 3]]      # N, N opposite (trans)
    trans = square_planar_trans_pairs(mol, pos)
    assert cis == {1: {(0, 3), (2, 4)}} and trans == {1: {(0, 2), (3, 4)}}


def test_ligand_written_without_brackets_is_flagged():
    # "N[Pt]" is an amido ligand (NH2, 2 H) to RDKit; cisplatin's ammines are [NH3]
    with pytest.warns(cp.errors.ConfpopWarning, match=r"read N1 \(bonded to Pt2\) with 2 H, N3 \(bonded to Pt2\) with 2 H"):
        with pytest.raises(cp.InputError):              # and the arrangement is still open
            cp.search("N[Pt](N)(Cl)Cl", stereo="ignore")
