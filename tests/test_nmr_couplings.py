"""Vicinal pairs, proton equivalence, per-conformer and averaged couplings, NOE distances.

Structures are built here with RDKit (ETKDG, fixed seeds) and minimized with MMFF94.
Reference values: tagged [M] (from memory), [C] (arithmetic), "common practice".
"""

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdForceFieldHelpers as FF
from rdkit.Chem import rdMolTransforms

from nmr_molecules import rotamers

from confpop.ensemble import Ensemble
from confpop.errors import InputError
from confpop.nmr import (average_couplings, average_dipole, coupling_spread, couplings,
                         group_couplings, noe_distances, population_spread, proton_groups,
                         vicinal_pairs)
from reference_values import value as refval


def lowest_mmff(smiles, n=8, seed=11):
    """The lowest-MMFF94 conformer of n ETKDG embeddings, as a one-conformer molecule."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    ids = list(AllChem.EmbedMultipleConfs(mol, n, randomSeed=seed))
    energies = [e for _, e in AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)]
    best = ids[int(np.argmin(energies))]
    return Chem.Mol(mol, confId=best)


def _j(table, a, b, conf=None):
    row = table[((table.atom_a == min(a, b)) & (table.atom_b == max(a, b)))]
    assert len(row) == 1, (a, b)
    col = conf if conf is not None else [c for c in table.columns if isinstance(c, int)][0]
    return float(row[col].iloc[0])


# ----------------------------------------------------------------------------- equivalence
def test_groups_methyl_enantiotopic_and_diastereotopic():
    # ethanol: CH3 one group; the CH2 protons are enantiotopic (mirror-related) -> one group
    mol = lowest_mmff("CCO", n=2)
    labels = [g.label for g in proton_groups(mol)]
    assert labels == ["H3/H4/H5(C0)", "H6/H7(C1)", "H8(O2)"]
    # (S)-butan-2-ol: the CH2 next to the stereocentre is diastereotopic -> kept apart
    mol = lowest_mmff("CC[C@H](C)O", n=2)
    groups = {g.heavy_atoms[0]: [] for g in proton_groups(mol)}
    for g in proton_groups(mol):
        groups[g.heavy_atoms[0]].append(g.atoms)
    assert groups[1] == [(8,), (9,)]          # C1 (CH2): two groups of one proton
    assert groups[0] == [(5, 6, 7)]           # methyl groups stay whole
    assert groups[3] == [(11, 12, 13)]


def test_groups_isopropyl_methyls_diastereotopic():
    # L-valine: the two methyls of the isopropyl group next to C-alpha are diastereotopic
    mol = lowest_mmff("CC(C)[C@H](N)C(=O)O", n=2)
    methyls = [g for g in proton_groups(mol) if len(g.atoms) == 3]
    assert len(methyls) == 2
    assert {g.heavy_atoms[0] for g in methyls} == {0, 2}


def test_groups_ring_symmetry_and_mirror_image():
    # trans-4-tert-butylcyclohexanol: C2/C6 (and C3/C5) protons are related by the mirror
    # plane through C1 and C4 -> H2ax with H6ax, H2eq with H6eq; axial != equatorial
    mol = lowest_mmff("CC(C)(C)[C@H]1CC[C@H](O)CC1", n=4)
    groups = proton_groups(mol)
    ring = [g for g in groups if len(g.atoms) == 2]
    assert len(ring) == 4
    for g in ring:
        assert len(set(g.heavy_atoms)) == 2  # one proton on each of two mirror-related carbons
    # the mirror image has the same grouping
    mirror = Chem.Mol(mol)
    conf = mirror.GetConformer()
    pos = -conf.GetPositions()
    for i in range(mirror.GetNumAtoms()):
        conf.SetAtomPosition(i, pos[i].tolist())
    assert [g.atoms for g in proton_groups(mirror)] == [g.atoms for g in groups]


# ----------------------------------------------------------------------------- pair detection
def test_pair_kinds_and_sets():
    # N-acetylalanine methylamide: amide H-N-C-H gets Hu-Bax; H-C-C-H gets HLA by count
    mol = lowest_mmff("CC(=O)N[C@@H](C)C(=O)NC", n=2)
    pairs = vicinal_pairs(mol)
    by_path = {tuple(p): s for p, s in zip(pairs["path"], pairs["parameter_set"])}
    assert by_path[(13, 3, 4, 14)] == "hu-bax-1997"
    assert by_path[(14, 4, 5, 15)] == "haasnoot-2"  # C-alpha has N and C(=O): 2 substituents
    assert set(pairs.loc[pairs["parameter_set"] == "hu-bax-1997", "fragment"]) == {"H-N(amide)-C-H"}
    # an amine H-N-C-H is not an amide: no protein backbone set for it
    mol = lowest_mmff("CNC", n=1)
    pairs = vicinal_pairs(mol)
    assert set(pairs["fragment"]) == {"H-C-N-H"} and pairs["parameter_set"].isna().all()
    # propene: the H-C=C-H pairs have no rotamer-dependent set and are reported, not predicted
    mol = lowest_mmff("C=CC", n=1)
    pairs = vicinal_pairs(mol)
    assert set(pairs["fragment"]) == {"H-C(sp2)=C(sp2)-H", "H-C(sp2)-C-H"}
    assert pairs["parameter_set"].isna().all()
    double = pairs[pairs["fragment"] == "H-C(sp2)=C(sp2)-H"]
    assert len(double) == 2 and all("not a single bond" in r for r in double["reason"])
    assert len(couplings(mol)) == 0
    # ... unless the user names a set for that fragment
    table = couplings(mol, parameters={"H-C(sp2)-C-H": "karplus-generic"})
    assert len(table) == 3 and set(table["parameter_set"]) == {"karplus-generic"}


def test_user_parameters_replace_the_fragment_set():
    mol = lowest_mmff("CCO", n=2)
    table = couplings(mol, parameters=(10.0, -1.0, 2.0))
    assert set(table["parameter_set"]) == {"user"}
    pos = mol.GetConformer().GetPositions()
    a, b = int(table.atom_a.iloc[0]), int(table.atom_b.iloc[0])
    phi = np.radians(rdMolTransforms.GetDihedralDeg(mol.GetConformer(), a, 0, 1, b))
    # [C] J = 10 cos^2 - cos + 2 on the RDKit dihedral
    assert _j(table, a, b) == pytest.approx(10 * np.cos(phi) ** 2 - np.cos(phi) + 2, abs=1e-9)
    assert pos.shape[0] == mol.GetNumAtoms()
    with pytest.raises(InputError, match="fragments like"):
        couplings(mol, parameters={"CC": "karplus-generic"})


def test_inverted_structure_gives_the_same_couplings():
    # scalar couplings with the xi term are invariant under inversion (helper_api contract)
    mol = lowest_mmff("OC[C@H](O)[C@@H](F)C", n=3)
    mirror = Chem.Mol(mol)
    conf = mirror.GetConformer()
    pos = -conf.GetPositions()
    for i in range(mirror.GetNumAtoms()):
        conf.SetAtomPosition(i, pos[i].tolist())
    a, b = couplings(mol), couplings(mirror)
    col = [c for c in a.columns if isinstance(c, int)][0]
    np.testing.assert_allclose(a[col], b[col], rtol=0, atol=1e-9)


# ----------------------------------------------------------------------------- handbook values
def _axial(mol, h):
    """True if the C-H bond is axial: nearly parallel to the normal of the ring's mean plane."""
    ring = [r for r in mol.GetRingInfo().AtomRings() if len(r) == 6][0]
    pos = mol.GetConformer().GetPositions()
    centred = pos[list(ring)] - pos[list(ring)].mean(axis=0)
    normal = np.linalg.svd(centred)[2][2]
    carbon = mol.GetAtomWithIdx(h).GetNeighbors()[0].GetIdx()
    bond = pos[h] - pos[carbon]
    return abs(np.dot(bond / np.linalg.norm(bond), normal)) > 0.8


def _ring_couplings(mol):
    """{"ax-ax": [...], "ax-eq": [...], "eq-eq": [...]} for H-C-C-H pairs inside the ring."""
    ring_atoms = set([r for r in mol.GetRingInfo().AtomRings() if len(r) == 6][0])
    table = couplings(mol)
    col = [c for c in table.columns if isinstance(c, int)][0]
    kinds = {"ax-ax": [], "ax-eq": [], "eq-eq": []}
    names = {(True, True): "ax-ax", (False, True): "ax-eq", (False, False): "eq-eq"}
    for _, row in table.iterrows():
        ca = mol.GetAtomWithIdx(int(row.atom_a)).GetNeighbors()[0].GetIdx()
        cb = mol.GetAtomWithIdx(int(row.atom_b)).GetNeighbors()[0].GetIdx()
        if ca in ring_atoms and cb in ring_atoms:
            ax = tuple(sorted([bool(_axial(mol, int(row.atom_a))), bool(_axial(mol, int(row.atom_b)))]))
            kinds[names[ax]].append(float(row[col]))
    return kinds


def test_locked_chair_axial_equatorial_couplings():
    # tert-butylcyclohexane, locked in the chair with tBu equatorial, MMFF94 geometry.
    # Handbook ranges [from memory; tests/reference_values.py]: J(ax,ax) 10-13.5 Hz,
    # J(ax,eq) and J(eq,eq) 2-5 Hz.
    kinds = _ring_couplings(lowest_mmff("CC(C)(C)C1CCCCC1", n=4))
    assert [len(kinds[k]) for k in ("ax-ax", "ax-eq", "eq-eq")] == [6, 10, 4]
    low, high = refval("cyclohexane_j_ax_ax_range")
    for value in kinds["ax-ax"]:
        assert low <= value <= high
    low, high = refval("cyclohexane_j_ax_eq_range")
    for value in kinds["ax-eq"] + kinds["eq-eq"]:
        assert low <= value <= high


def test_cyclohexane_chair():
    # cyclohexane chair J(ax,ax) ~ 13.1 Hz [from memory]; HLA on MMFF94 gives 13.2
    kinds = _ring_couplings(lowest_mmff("C1CCCCC1", n=2))
    np.testing.assert_allclose(kinds["ax-ax"], refval("cyclohexane_j_ax_ax"), atol=0.5)
    for value in kinds["ax-eq"] + kinds["eq-eq"]:
        assert 2.0 <= value <= 5.0


def test_cyclohexanol_carbinol_proton():
    # trans-4-tert-butylcyclohexanol: the axial H1 (CHOH) shows two large (ax,ax) and two
    # small (ax,eq) couplings: handbook ranges 10-13.5 and 2-5 Hz [from memory].
    mol = lowest_mmff("CC(C)(C)[C@H]1CC[C@H](O)CC1", n=6)
    h1 = _ring_h(mol, 7)  # atom 7 carries the OH
    assert _axial(mol, h1)
    table = couplings(mol)
    col = [c for c in table.columns if isinstance(c, int)][0]
    rows = table[(table.atom_a == h1) | (table.atom_b == h1)]
    large, small = [], []
    for _, row in rows.iterrows():
        other = int(row.atom_b) if int(row.atom_a) == h1 else int(row.atom_a)
        (large if _axial(mol, other) else small).append(float(row[col]))
    assert len(large) == 2 and len(small) == 2
    for value in large:
        assert 10.0 <= value <= 13.5
    for value in small:
        assert 2.0 <= value <= 5.0


GLUCOSIDES = {
    # methyl alpha-/beta-D-glucopyranoside; atoms: 4 = C1, 7 = C2, 9 = C3, 11 = C4, 2 = C5
    "alpha": "OC[C@H]1O[C@H](OC)[C@H](O)[C@@H](O)[C@@H]1O",
    "beta": "OC[C@H]1O[C@@H](OC)[C@H](O)[C@@H](O)[C@@H]1O",
}


def _ring_h(mol, carbon):
    return [a.GetIdx() for a in mol.GetAtomWithIdx(carbon).GetNeighbors() if a.GetAtomicNum() == 1][0]


RING = [3, 4, 7, 9, 11, 2]  # O5, C1, C2, C3, C4, C5 in the SMILES above


def lowest_4c1(smiles, n=12, seed=5):
    """The lowest-MMFF94 conformer whose pyranose ring is a 4C1 chair.

    MMFF94 in the gas phase sometimes ranks a skew or the 1C4 chair lowest (hydroxyl
    hydrogen-bond networks), so the chair is selected by its ring torsions: alternating
    signs, each 35-80 degrees, O5-C1-C2-C3 positive (4C1 for D-sugars).
    """
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    ids = list(AllChem.EmbedMultipleConfs(mol, n, randomSeed=seed))
    energies = [e for _, e in AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)]
    best = None
    for cid, e in zip(ids, energies):
        conf = mol.GetConformer(cid)
        tors = [rdMolTransforms.GetDihedralDeg(conf, *(RING[(i + k) % 6] for k in range(4)))
                for i in range(6)]
        signs = [1 if i % 2 == 0 else -1 for i in range(6)]
        if all(35 <= s * t <= 80 for s, t in zip(signs, tors)) and (best is None or e < best[1]):
            best = (cid, e)
    assert best is not None, "no 4C1 chair among the embedded conformers"
    return Chem.Mol(mol, confId=best[0])


@pytest.fixture(scope="module")
def glucosides():
    return {k: lowest_4c1(s) for k, s in GLUCOSIDES.items()}


def test_glucopyranoside_h1_h2(glucosides):
    # D-glucopyranose/-osides H1-H2 [from memory]: alpha ~3.7 Hz, beta ~8.0 Hz;
    # HLA equation on the MMFF94 4C1 chair, within 1.0 Hz. (The xi sign convention matters
    # here: reversed, alpha comes out near 1.6 Hz.)
    measured = {"alpha": refval("glucopyranose_j12_alpha"), "beta": refval("glucopyranose_j12_beta")}
    for kind, mol in glucosides.items():
        table = couplings(mol)
        j12 = _j(table, _ring_h(mol, 4), _ring_h(mol, 7))
        assert j12 == pytest.approx(measured[kind], abs=1.0), kind


def test_glucopyranoside_ring_couplings(glucosides):
    # gluco ring J2,3 / J3,4 / J4,5 ~ 9-10 Hz (trans-diaxial in the 4C1 chair) [from memory;
    # the handbook value is for beta; the alpha anomer has the same ring protons]
    for kind, mol in glucosides.items():
        table = couplings(mol)
        for c1, c2 in ((7, 9), (9, 11), (11, 2)):
            assert _j(table, _ring_h(mol, c1), _ring_h(mol, c2)) == pytest.approx(9.5, abs=1.0), kind
        assert "haasnoot-4" in set(table["parameter_set"])  # ring fragments: four substituents


# ----------------------------------------------------------------------------- averages
@pytest.fixture(scope="module")
def butanol():
    mol, e = rotamers("CC[C@H](C)O", (0, 1, 2, 3), [60, 180, 300])
    return Ensemble.from_mol(mol, energies=e, unit="kcal/mol")


def test_average_is_population_weighted(butanol):
    table = couplings(butanol)
    pops = butanol.populations([273.15, 298.15, 373.15])
    avg = average_couplings(butanol, [273.15, 298.15, 373.15])
    ids = list(pops.index)
    for t in pops.columns:
        expected = table[ids].to_numpy() @ pops[t].to_numpy()
        np.testing.assert_allclose(avg[t].to_numpy(), expected, rtol=0, atol=1e-12)
    assert list(avg.columns[:5]) == ["atom_a", "atom_b", "label", "group", "parameter_set"]


def test_equal_energies_give_the_plain_mean(butanol):
    # identity: equal energies and degeneracies -> equal weights at every temperature
    flat = Ensemble.from_mol(butanol.mol, energies=[0.0, 0.0, 0.0], unit="kcal/mol")
    table = couplings(flat)
    avg = average_couplings(flat, [200.0, 400.0])
    np.testing.assert_allclose(avg[200.0], table[[0, 1, 2]].mean(axis=1), atol=1e-12)
    np.testing.assert_allclose(avg[400.0], avg[200.0], atol=1e-12)


def test_group_average_rows(butanol):
    avg = average_couplings(butanol, 298.15)
    grouped = average_couplings(butanol, 298.15, by="group")
    methyl = grouped[grouped["atoms_a"] == (5, 6, 7)]
    assert list(methyl["n_pairs"]) == [3, 3]
    for _, row in methyl.iterrows():
        members = avg[(avg.atom_a.isin(row.atoms_a)) & (avg.atom_b.isin(row.atoms_b))]
        assert row[298.15] == pytest.approx(members[298.15].mean(), abs=1e-12)
    pd.testing.assert_frame_equal(group_couplings(avg), grouped)


def test_spread_zero_sigma_and_seed(butanol):
    s0 = coupling_spread(butanol, [298.15], energy_sigma=0.0, n_samples=50, seed=1)
    np.testing.assert_allclose(s0["mean"], s0["value"], atol=1e-12)
    np.testing.assert_allclose(s0["std"], 0.0, atol=1e-12)
    a = coupling_spread(butanol, [298.15, 323.15], energy_sigma=1.0, n_samples=200, seed=3)
    b = coupling_spread(butanol, [298.15, 323.15], energy_sigma=1.0, n_samples=200, seed=3)
    pd.testing.assert_frame_equal(a, b)
    # the methyl group coupling hardly depends on the C1-C2 rotamer: robust; H8-H10 is not
    g = coupling_spread(butanol, [298.15], energy_sigma=1.0, n_samples=200, seed=3, by="group")
    g = g.set_index("group")
    assert g.loc["H5/H6/H7(C0)–H8(C1,pro-R)", "p95"] - g.loc["H5/H6/H7(C0)–H8(C1,pro-R)", "p05"] < 0.2
    assert g.loc["H8(C1,pro-R)–H10(C2)", "p95"] - g.loc["H8(C1,pro-R)–H10(C2)", "p05"] > 2.0
    pops = population_spread(butanol, 298.15, energy_sigma=1.0, n_samples=200, seed=3)
    assert pops.groupby("temperature")["mean"].sum().to_numpy() == pytest.approx([1.0], abs=1e-12)
    assert (pops["p05"] <= pops["p95"]).all()
    with pytest.raises(InputError, match="energy_sigma"):
        coupling_spread(butanol, 298.15, energy_sigma=-1.0)


def test_average_needs_an_ensemble():
    mol = lowest_mmff("CCO", n=1)
    with pytest.raises(InputError, match="Ensemble"):
        average_couplings(mol, 298.15)
    with pytest.raises(InputError, match="explicit hydrogens"):
        m = Chem.MolFromSmiles("CCO")
        AllChem.EmbedMolecule(m, randomSeed=1)
        couplings(m)


# ----------------------------------------------------------------------------- NOE
def _formic_two_distances():
    """Formic acid with the O-H proton placed 2.5 and 4.0 angstrom from the C-H proton."""
    mol = Chem.AddHs(Chem.MolFromSmiles("OC=O"))
    AllChem.EmbedMolecule(mol, randomSeed=1)
    h_o = [a.GetIdx() for a in mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1][0]
    h_c = [a.GetIdx() for a in mol.GetAtomWithIdx(1).GetNeighbors() if a.GetAtomicNum() == 1][0]
    base = Chem.Conformer(mol.GetConformer())
    mol.RemoveAllConformers()
    for k, r in enumerate((2.5, 4.0)):
        conf = Chem.Conformer(base)
        p = np.array(conf.GetAtomPosition(h_c))
        conf.SetAtomPosition(h_o, (p + np.array([r, 0.0, 0.0])).tolist())
        conf.SetId(k)
        mol.AddConformer(conf, assignId=False)
    return mol, h_o, h_c


def test_noe_r6_worked_example():
    # [C] p = 0.5 each, r = 2.5 and 4.0 angstrom:
    # r_eff = (0.5 * 2.5^-6 + 0.5 * 4.0^-6)^(-1/6) = (0.5 * (0.0040960 + 0.00024414))^(-1/6)
    #       = (0.00217007)^(-1/6) = 2.7792 angstrom  (the short distance dominates)
    # r^-3 averaging: (0.5 * 2.5^-3 + 0.5 * 4.0^-3)^(-1/3) = (0.0398125)^(-1/3) = 2.9286 angstrom
    mol, h_o, h_c = _formic_two_distances()
    pops = pd.DataFrame({298.15: [0.5, 0.5]}, index=[0, 1])
    r6 = noe_distances(mol, 298.15, pairs=[(h_o, h_c)], populations=pops)
    r3 = noe_distances(mol, 298.15, pairs=[(h_o, h_c)], populations=pops, averaging="r-3")
    assert float(r6[298.15].iloc[0]) == pytest.approx(2.7792, abs=1e-4)
    assert float(r3[298.15].iloc[0]) == pytest.approx(2.9286, abs=1e-4)
    # the cutoff selects pairs when pairs is None
    assert len(noe_distances(mol, 298.15, populations=pops, cutoff=2.7)) == 0
    assert len(noe_distances(mol, 298.15, populations=pops, cutoff=2.8)) == 1


def test_noe_methyl_group_sum():
    # a methyl group counts as the sum of its protons' r^-6 (module docstring; Tropp 1980 [M])
    mol = lowest_mmff("CC(=O)N[C@@H](C)C(=O)NC", n=2)
    ens = Ensemble.from_mol(mol, energies=[0.0])
    methyl = [a.GetIdx() for a in mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1]
    out = noe_distances(ens, 298.15, pairs=[(methyl[0], 13)])  # acetyl CH3 to the N-H proton
    pos = mol.GetConformer().GetPositions()
    r = np.linalg.norm(pos[methyl] - pos[13], axis=1)
    assert float(out[298.15].iloc[0]) == pytest.approx(np.sum(r ** -6.0) ** (-1 / 6), rel=1e-12)
    assert float(out[298.15].iloc[0]) < r.min()
    assert out["n_a"].iloc[0] == 3 and out["n_b"].iloc[0] == 1
    # any methyl proton names the same group
    again = noe_distances(ens, 298.15, pairs=[(methyl[2], 13)])
    assert float(again[298.15].iloc[0]) == pytest.approx(float(out[298.15].iloc[0]), rel=1e-12)
    with pytest.raises(InputError, match="equivalent protons"):
        noe_distances(ens, 298.15, pairs=[(methyl[0], methyl[1])])
    with pytest.raises(InputError, match="averaging"):
        noe_distances(ens, 298.15, averaging="r-4")
    with pytest.raises(InputError, match="not a hydrogen"):
        noe_distances(ens, 298.15, pairs=[(0, 13)])


# ----------------------------------------------------------------------------- dipole
def test_average_dipole(butanol):
    with pytest.raises(InputError, match="dipole_debye"):
        average_dipole(butanol, 298.15)
    ens = butanol.with_column("dipole_debye", {0: 1.0, 1: 2.0, 2: 3.0})
    pops = ens.populations([298.15])[298.15]
    out = average_dipole(ens, [298.15])
    mu = np.array([1.0, 2.0, 3.0])
    assert out.loc[298.15, "mean_dipole"] == pytest.approx(float(pops.to_numpy() @ mu), abs=1e-12)
    assert out.loc[298.15, "rms_dipole"] == pytest.approx(float(np.sqrt(pops.to_numpy() @ mu ** 2)), abs=1e-12)
