"""Duplicate removal: symmetry, mirror images, integrity checks."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolAlign
from scipy.spatial.transform import Rotation

from confpop.prune import (PruneSettings, automorphisms, best_rmsd, conformer_is_chiral,
                           find_duplicates, integrity_problems, is_achiral, rmsd_atoms)


def _embedded(smiles, n=1, seed=11):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMultipleConfs(mol, n, randomSeed=seed)
    AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)
    return mol


def _permuted_copy(mol, pos, perm):
    """Coordinates of the same structure with atom labels permuted by ``perm``."""
    out = np.empty_like(pos)
    out[perm] = pos
    return out


def test_rotated_translated_permuted_copies_collapse():
    mol = _embedded("CC(C)(C)CC(=O)[O-]")
    pos = mol.GetConformer().GetPositions()
    rot = Rotation.from_euler("xyz", [30, -50, 77], degrees=True).as_matrix()
    moved = pos @ rot.T + np.array([3.0, -1.0, 7.5])
    # swap the two carboxylate oxygens and two of the tert-butyl methyl carbons (with their H)
    match = mol.GetSubstructMatches(mol, uniquify=False, useChirality=False, maxMatches=500)
    perm = np.array(match[-1])
    permuted = _permuted_copy(mol, moved, perm)
    perms = automorphisms(mol, rmsd_atoms(mol))
    assert best_rmsd(pos, permuted, perms) == pytest.approx(0.0, abs=1e-6)
    energies = np.zeros(3)
    rep = find_duplicates(mol, [pos, moved, permuted], energies, PruneSettings())
    assert rep.unique == [0]
    assert rep.times_found[0] == 3


def test_rmsd_agrees_with_rdkit_best_rms():
    # independent reference: RDKit's GetBestRMS (symmetry-aware, heavy atoms after RemoveHs)
    mol = _embedded("CCC(C)CC(=O)OC", n=4, seed=3)
    heavy = Chem.RemoveHs(mol)
    perms = automorphisms(heavy, rmsd_atoms(heavy))
    pos = [c.GetPositions() for c in heavy.GetConformers()]
    for j in range(1, 4):
        ours = best_rmsd(pos[0], pos[j], perms)
        ref = rdMolAlign.GetBestRMS(Chem.Mol(heavy), Chem.Mol(heavy), 0, j)
        assert ours == pytest.approx(ref, abs=1e-4)


def test_methyl_rotamers_collapse_but_oh_rotamers_do_not():
    mol = _embedded("CCO")
    pos = mol.GetConformer().GetPositions()
    # rotate the methyl hydrogens by 120 degrees about the C-C bond: same conformer
    c0, c1 = pos[0], pos[1]
    axis = (c1 - c0) / np.linalg.norm(c1 - c0)
    rot = Rotation.from_rotvec(axis * np.radians(120)).as_matrix()
    methyl_h = [a.GetIdx() for a in mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1]
    turned = pos.copy()
    turned[methyl_h] = (pos[methyl_h] - c0) @ rot.T + c0
    rep = find_duplicates(mol, [pos, turned], np.zeros(2), PruneSettings())
    assert len(rep.unique) == 1
    # an OH rotamer (trans -> gauche H-O-C-C) is a different conformer: the polar H is compared
    from rdkit.Chem import rdMolTransforms as T
    ho = [a.GetIdx() for a in mol.GetAtomWithIdx(2).GetNeighbors() if a.GetAtomicNum() == 1][0]
    conf = mol.GetConformer()
    T.SetDihedralDeg(conf, ho, 2, 1, 0, 180.0)
    pos = conf.GetPositions()
    T.SetDihedralDeg(conf, ho, 2, 1, 0, 60.0)
    oh = conf.GetPositions()
    rep = find_duplicates(mol, [pos, oh], np.zeros(2), PruneSettings())
    assert len(rep.unique) == 2


def test_mirror_images_of_gauche_butane():
    mol = _embedded("CCCC")
    conf = mol.GetConformer()
    from rdkit.Chem import rdMolTransforms as T
    T.SetDihedralDeg(conf, 0, 1, 2, 3, 65.0)
    gplus = conf.GetPositions()
    gminus = gplus.copy()
    gminus[:, 2] *= -1
    perms = automorphisms(mol, rmsd_atoms(mol))
    assert best_rmsd(gplus, gminus, perms) > 0.3
    assert best_rmsd(gplus, gminus, perms, allow_reflection=True) == pytest.approx(0.0, abs=1e-6)
    assert conformer_is_chiral(gplus, perms, 0.125)
    T.SetDihedralDeg(conf, 0, 1, 2, 3, 180.0)
    assert not conformer_is_chiral(conf.GetPositions(), perms, 0.125)
    merged = find_duplicates(mol, [gplus, gminus], np.zeros(2), PruneSettings())
    assert merged.unique == [0] and merged.mirror_of == {1: 0}
    kept = find_duplicates(mol, [gplus, gminus], np.zeros(2),
                           PruneSettings(merge_mirror_images=False))
    assert kept.unique == [0, 1]


def test_chirality_of_molecules():
    assert is_achiral(Chem.MolFromSmiles("CCCC"))
    assert not is_achiral(Chem.MolFromSmiles("C[C@H](O)CC"))
    assert is_achiral(Chem.MolFromSmiles("C[C@H](O)[C@@H](C)O"))  # meso-2,3-butanediol


def test_energy_criterion_keeps_different_energies_apart():
    mol = _embedded("CCCC")
    pos = mol.GetConformer().GetPositions()
    e = np.array([0.0, 0.5]) / 627.509474
    rep = find_duplicates(mol, [pos, pos], e, PruneSettings(energy_tolerance=0.1))
    assert rep.unique == [0, 1]


def test_broken_geometry_fails_integrity_with_reason():
    mol = _embedded("CCO")
    assert integrity_problems(mol, 0) == []
    conf = mol.GetConformer()
    p = conf.GetPositions()
    # pull the oxygen 3 angstrom away along the C-O bond
    direction = (p[2] - p[1]) / np.linalg.norm(p[2] - p[1])
    conf.SetAtomPosition(2, (p[2] + 3.0 * direction).tolist())
    problems = integrity_problems(mol, 0)
    assert any("bond broken" in s and "C1-O2" in s for s in problems)


# --- resonance-equivalent atoms --------------------------------------------------------
# Resonance structures are one molecule (IUPAC Gold Book, "resonance"): atoms exchanged
# between them are equivalent, so swapping their coordinates gives the same structure.
@pytest.mark.parametrize("smiles, n_perm", [
    ("CCC(=O)[O-]", 2),              # carboxylate O/O-
    ("C[N+](=O)[O-]", 2),            # nitro O
    ("CS(=O)(=O)[O-]", 6),           # sulfonate: 3! orders of the three O
    ("COP(=O)([O-])[O-]", 6),        # phosphate monoester dianion: 3! orders
    ("NC(=[NH2+])N", 48),            # guanidinium: 3! NH2 orders x 2^3 H swaps (hand count)
    ("CC(=[NH2+])N", 8),             # acetamidinium: 2 NH2 orders x 2^2 H swaps
    ("CC(=O)O", 1),                  # neutral acid: C=O and C-OH are different atoms
    ("CC(=O)C", 2),                  # acetone: the two methyl carbons (graph symmetry)
])
def test_resonance_equivalent_atoms_are_symmetric(smiles, n_perm):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    perms = automorphisms(mol, rmsd_atoms(mol))
    assert len(perms) == n_perm


@pytest.mark.parametrize("smiles, pair", [("CCC(=O)[O-]", (3, 4)), ("[NH3+]CC(=O)[O-]", (3, 4)),
                                          ("C[N+](=O)[O-]", (2, 3))])
def test_swapped_resonance_partners_are_one_conformer(smiles, pair):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=11)
    pos = mol.GetConformer().GetPositions()
    swapped = pos.copy()
    swapped[list(pair)] = pos[list(pair[::-1])]
    perms = automorphisms(mol, rmsd_atoms(mol))
    assert best_rmsd(pos, swapped, perms) == pytest.approx(0.0, abs=1e-6)
    rep = find_duplicates(mol, [pos, swapped], [0.0, 1e-6], PruneSettings())
    assert rep.unique == [0] and rep.duplicate_of == {1: 0}


def test_symmetry_number_sees_resonance_equivalent_oxygens():
    # nitrate is D3h: sigma = 6 (point-group rotational symmetry number, any textbook);
    # the Lewis structure has one N=O and two N-O-, the molecule does not
    from confpop.vibrations import symmetry_number
    mol = Chem.AddHs(Chem.MolFromSmiles("[O-][N+](=O)[O-]"))
    conf = Chem.Conformer(mol.GetNumAtoms())
    conf.SetAtomPosition(1, (0.0, 0.0, 0.0))
    for k, idx in enumerate((0, 2, 3)):
        a = 2 * np.pi * k / 3
        conf.SetAtomPosition(idx, (1.25 * np.cos(a), 1.25 * np.sin(a), 0.0))
    mol.AddConformer(conf)
    assert symmetry_number(mol) == 6


@pytest.mark.slow
def test_glycine_zwitterion_in_water_is_one_conformer():
    # before resonance-aware symmetry: two rows at 0.501/0.499 (O/O- swapped, one structure)
    import confpop as cp
    ens = cp.search("[NH3+]CC(=O)[O-]", solvent="water", seed=1)
    assert len(ens) == 1
    assert ens.effective_count(298.15) == pytest.approx(1.0)
