"""Axial and equatorial ring substituents (confpop.describe.ring_substituents) against
independent checks: the ring torsion through the substituent (an equatorial substituent is
anti to the ring bonds beyond its ring atom, an axial one gauche: the textbook definition,
Eliel & Wilen, Stereochemistry of Organic Compounds, 1994, ch. 11, from memory), the
handbook equatorial preference of a methyl group, and the all-equatorial 4C1 chair of a
beta-D-glucopyranoside."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms

from confpop.describe import AXIAL_DEGREES, describe_conformers, ring_substituents

# methylcyclohexane, equatorial minus axial free energy: A-value of CH3 1.74 kcal/mol (Eliel &
# Wilen 1994, Table 11.7; from memory). MMFF94s energies are compared with a generous window.
A_VALUE_METHYL = 1.74


def _chairs(smiles, n=30, seed=7):
    """MMFF94s-optimized conformers from ETKDG embeddings; returns (mol, energies kcal/mol)."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    ids = list(AllChem.EmbedMultipleConfs(mol, numConfs=n, randomSeed=seed))
    result = AllChem.MMFFOptimizeMoleculeConfs(mol, mmffVariant="MMFF94s", maxIters=2000)
    assert all(not_converged == 0 for not_converged, _ in result)
    return mol, {cid: e for cid, (_, e) in zip(ids, result)}


def _ring_torsion_position(mol, cid, ring_atom, substituent):
    """'eq' when the substituent is anti (|dihedral| > 120) to both ring bonds beyond its ring
    atom, 'ax' when gauche (< 90) to both: independent of the mean plane."""
    ring = set(next(r for r in mol.GetRingInfo().AtomRings() if ring_atom in r))
    conf = mol.GetConformer(cid)
    dihedrals = []
    for nb in mol.GetAtomWithIdx(ring_atom).GetNeighbors():
        if nb.GetIdx() not in ring:
            continue
        far = next(x.GetIdx() for x in nb.GetNeighbors() if x.GetIdx() in ring and x.GetIdx() != ring_atom)
        dihedrals.append(abs(rdMolTransforms.GetDihedralDeg(conf, substituent, ring_atom, nb.GetIdx(), far)))
    if all(d > 120 for d in dihedrals):
        return "eq"
    if all(d < 90 for d in dihedrals):
        return "ax"
    return "?"


def _agree_with_ring_torsions(mol, subs):
    for r in subs.itertuples():
        assert r.position == _ring_torsion_position(mol, r.conformer, r.ring_atom, r.substituent), r


def test_methylcyclohexane_axial_and_equatorial_chairs():
    mol, energy = _chairs("CC1CCCCC1")
    desc = describe_conformers(mol)
    chairs = desc.rings[desc.rings["pucker"] == "chair"]["conformer"]
    subs = desc.substituents[desc.substituents["conformer"].isin(chairs)]
    assert set(subs["label"]) == {"C1"}
    _agree_with_ring_torsions(mol, subs)
    by_position = subs.groupby("position")["conformer"].apply(list).to_dict()
    assert set(by_position) == {"ax", "eq"}          # both chairs found
    e_ax = min(energy[c] for c in by_position["ax"])
    e_eq = min(energy[c] for c in by_position["eq"])
    # equatorial preferred; MMFF94s electronic energy near the A-value (handbook, from memory)
    assert 0.5 * A_VALUE_METHYL < e_ax - e_eq < 1.5 * A_VALUE_METHYL
    # the angles sit far from the threshold on both sides
    assert subs[subs["position"] == "ax"]["angle_deg"].max() < AXIAL_DEGREES - 15
    assert subs[subs["position"] == "eq"]["angle_deg"].min() > AXIAL_DEGREES + 15
    # the ring column and the shares name the difference
    ax, eq = by_position["ax"][0], by_position["eq"][0]
    column = desc.table["ring_C2-C3-C4-C5-C6-C7"]
    assert column[ax] == "chair, C1 ax" and column[eq] == "chair, C1 eq"
    shares = describe_conformers(mol, [ax, eq]).pucker_shares({ax: 0.05, eq: 0.95})  # invented
    assert shares == {"C2-C3-C4-C5-C6-C7": {"chair, C1 eq": pytest.approx(0.95),
                                            "chair, C1 ax": pytest.approx(0.05)}}
    record = describe_conformers(mol, [ax, eq]).conformer_dict(ax)["rings"]["C2-C3-C4-C5-C6-C7"]
    assert record["shown"] == "chair, C1 ax" and record["substituents"]["C1"]["position"] == "ax"


def _same_face(mol, cid, a, b):
    """Whether the methyls on ring atoms a and b are on the same face of the ring (cis): the
    sign of (C_methyl - H) along the ring normal at each atom, from the geometry alone."""
    xyz = mol.GetConformer(cid).GetPositions()
    ring = list(next(r for r in mol.GetRingInfo().AtomRings() if a in r))
    centred = xyz[ring] - xyz[ring].mean(axis=0)
    normal = np.linalg.svd(centred)[2][-1]     # least-squares plane: an independent normal
    signs = []
    for atom in (a, b):
        nbrs = mol.GetAtomWithIdx(atom).GetNeighbors()
        me = next(n.GetIdx() for n in nbrs if n.GetIdx() not in ring and n.GetAtomicNum() == 6)
        h = next(n.GetIdx() for n in nbrs if n.GetAtomicNum() == 1)
        signs.append(np.sign((xyz[me] - xyz[h]) @ normal))
    return signs[0] == signs[1]


@pytest.mark.parametrize("smiles, cis, patterns", [
    # trans-1,4-dimethylcyclohexane: diequatorial or diaxial chairs, diequatorial lowest
    ("C[C@H]1CC[C@H](C)CC1", False, {("eq", "eq"), ("ax", "ax")}),
    # cis-1,4: one axial, one equatorial in every chair
    ("C[C@H]1CC[C@@H](C)CC1", True, {("ax", "eq"), ("eq", "ax")}),
])
def test_dimethylcyclohexanes(smiles, cis, patterns):
    mol, energy = _chairs(smiles)
    assert all(_same_face(mol, c.GetId(), 1, 4) == cis for c in mol.GetConformers())
    desc = describe_conformers(mol)
    chairs = set(desc.rings[desc.rings["pucker"] == "chair"]["conformer"])
    subs = desc.substituents[desc.substituents["conformer"].isin(chairs)]
    _agree_with_ring_torsions(mol, subs)
    found = {tuple(part.sort_values("label")["position"]) for _, part in subs.groupby("conformer")}
    assert found <= patterns and found & patterns
    lowest = min(chairs, key=energy.get)
    if ("eq", "eq") in patterns:
        assert set(subs[subs["conformer"] == lowest]["position"]) == {"eq"}


def test_methyl_beta_glucoside_is_an_all_equatorial_chair():
    # methyl beta-D-glucopyranoside: the 4C1 chair carries all five substituents (OMe, three
    # OH, CH2OH) equatorial (textbook, from memory)
    mol, energy = _chairs("CO[C@@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O", n=20)
    lowest = min(energy, key=energy.get)
    desc = describe_conformers(mol, [lowest])
    assert list(desc.rings["pucker"]) == ["chair"]
    subs = ring_substituents(mol, [lowest])
    assert len(subs) == 5 and set(subs["position"]) == {"eq"}
    _agree_with_ring_torsions(mol, subs)


def test_planar_rings_and_aromatic_rings_have_no_positions():
    mol = Chem.AddHs(Chem.MolFromSmiles("Cc1ccccc1"))
    AllChem.EmbedMolecule(mol, randomSeed=1)
    assert ring_substituents(mol).empty
    assert describe_conformers(mol).conformer_dict(0)["rings"] == {}


def test_report_and_table_name_the_flip_of_methylcyclohexane():
    from confpop import Ensemble
    from confpop.report import _pucker_sentence
    from confpop.views import conformer_table

    mol, energy = _chairs("CC1CCCCC1")
    subs = ring_substituents(mol)
    chairs = set(describe_conformers(mol).rings.query("pucker == 'chair'")["conformer"])
    pick = [subs[(subs["position"] == p) & subs["conformer"].isin(chairs)]["conformer"].iloc[0]
            for p in ("eq", "ax")]
    two = Chem.Mol(mol)
    two.RemoveAllConformers()
    for cid in pick:
        two.AddConformer(Chem.Conformer(mol.GetConformer(int(cid))), assignId=True)
    ens = Ensemble.from_mol(two, [energy[c] for c in pick], unit="kcal/mol", level="mmff94s")
    pops = ens.populations([298.15])[298.15]
    sentence = _pucker_sentence(ens, pops)
    assert f"chair, C1 eq {100 * pops[0]:.0f} %; chair, C1 ax {100 * pops[1]:.0f} %" in sentence
    table, text = conformer_table(ens, [298.15], free=False)
    assert list(table["ring C2-C3-C4-C5-C6-C7"]) == ["chair, C1 eq", "chair, C1 ax"]


def test_sdf_ring_property_names_the_substituent_position(tmp_path):
    # the SD property a plain SDF reader shows carries the same text as the table; independent
    # check: RDKit reads the file back and the two chairs of methylcyclohexane say eq and ax
    from rdkit import Chem

    import confpop as cp

    ens = cp.search("CC1CCCCC1", method="mmff94s", seed=1)
    ens.to_sdf(tmp_path / "e.sdf")
    texts = [m.GetProp("ring_puckers")
             for m in Chem.SDMolSupplier(str(tmp_path / "e.sdf"), removeHs=False)]
    assert sorted(t.split()[-1] for t in texts) == ["ax", "eq"]
    assert all("chair, C1" in t for t in texts)
