"""Conformer descriptions: Cremer-Pople puckering against the defining equations, torsions
that do not depend on which of two equivalent atoms came first, hydrogen bonds against a
brute-force geometric check."""

from reference_values import value

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms

from confpop.describe import HBOND_ANGLE, HBOND_DISTANCE
from confpop.describe import (atom_label, cremer_pople, describe_conformers,
                              distinguishing_torsions, hydrogen_bonds, pucker_name, ring_form)


def _ring(n, q, phi, q_half=0.0, radius=1.45):
    """A ring with given puckering coordinates, built from the Cremer-Pople definition
    z_j = sqrt(2/N) sum_m q_m cos(phi_m + 2 pi m j/N) + sqrt(1/N) q_{N/2} (-1)^j on a regular
    polygon traversed so that the mean-plane normal is +z."""
    j = np.arange(n)
    z = np.zeros(n)
    for m in q:
        z += np.sqrt(2.0 / n) * q[m] * np.cos(np.radians(phi[m]) + 2 * np.pi * m * j / n)
    z += np.sqrt(1.0 / n) * q_half * (-1.0) ** j
    angle = 2 * np.pi * j / n
    return np.column_stack([radius * np.cos(angle), -radius * np.sin(angle), z])


# ideal forms of the six-membered ring (Cremer & Pople, J. Am. Chem. Soc. 1975, 97, 1354):
# chair theta = 0 or 180; boat theta = 90, phi = 0 (mod 60); twist-boat theta = 90, phi = 30
# (mod 60); half-chair/envelope at theta ~ 50.8 with phi = 30 / 0 (mod 60)
CHAIR, BOAT, HALF = value("six_ring_ideal_theta")
ENVELOPE_5, TWIST_5 = value("five_ring_ideal_phi_period")


@pytest.mark.parametrize("theta, phi, name", [
    (CHAIR, 0.0, "chair"), (180.0 - CHAIR, 0.0, "chair"), (BOAT, 0.0, "boat"),
    (BOAT, 120.0, "boat"), (BOAT, 30.0, "twist-boat"), (BOAT, 270.0, "twist-boat"),
    (HALF, 30.0, "half-chair"), (HALF, 0.0, "envelope")])
def test_six_ring_coordinates_and_names_follow_the_definition(theta, phi, name):
    big_q = 0.6
    q2, q3 = big_q * np.sin(np.radians(theta)), big_q * np.cos(np.radians(theta))
    xyz = _ring(6, {2: q2}, {2: phi}, q_half=q3)
    cp = cremer_pople(xyz)
    assert cp["Q"] == pytest.approx(big_q, abs=1e-9)
    assert cp["theta"] == pytest.approx(theta, abs=1e-6)
    if q2 > 1e-9:
        assert (cp["phi"][2] - phi + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=1e-6)
    assert pucker_name(cp, 6) == name
    # the name does not depend on where the ring starts or which way it runs
    for rolled in (np.roll(xyz, 1, axis=0), xyz[::-1]):
        assert pucker_name(cremer_pople(rolled), 6) == name


@pytest.mark.parametrize("phi, name", [(0.0, "envelope"), (ENVELOPE_5, "envelope"),
                                       (TWIST_5, "twist"), (TWIST_5 + 2 * ENVELOPE_5, "twist")])
def test_five_ring_envelope_and_twist(phi, name):
    # cyclopentane: envelope at phi_2 = 36k, twist at 18 + 36k (Cremer & Pople 1975)
    cp = cremer_pople(_ring(5, {2: 0.43}, {2: phi}))
    assert cp["Q"] == pytest.approx(0.43, abs=1e-9)
    assert pucker_name(cp, 5) == name
    assert pucker_name(cremer_pople(_ring(5, {2: 0.02}, {2: phi})), 5) == "planar"


def _side_by_plane(xyz, ring, k, anchor, substituent) -> str:
    """Brute force, without Cremer-Pople: the least-squares plane of the ring atoms other than
    ring[k]; ring[k] is "toward" the substituent when it lies on the side the substituent's
    bond (anchor -> substituent) points to."""
    others = xyz[[a for i, a in enumerate(ring) if i != k]]
    centre = others.mean(axis=0)
    normal = np.linalg.svd(others - centre)[2][2]
    lifted = (xyz[ring[k]] - centre) @ normal
    pointing = (xyz[substituent] - xyz[anchor]) @ normal
    return "toward" if lifted * pointing > 0 else "away from"


def _methylcyclopentane(k, lift, up, rng):
    """Methylcyclopentane built by hand: four ring atoms of a regular pentagon in a plane, ring
    atom k lifted by ``lift``, the methyl on ring atom 0 leaning to ``up`` (+1/-1); turned
    and shifted at random. Atoms as in SMILES CC1CCCC1 (methyl 0, ring 1-5)."""
    angle = 2 * np.pi * np.arange(5) / 5
    ring = np.column_stack([1.25 * np.cos(angle), 1.25 * np.sin(angle), np.zeros(5)])
    ring[k, 2] = lift
    methyl = ring[0] + np.array([0.9, 0.0, 1.1 * up])
    xyz = np.vstack([methyl, ring])
    rotation, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    return xyz @ rotation.T + rng.normal(size=3)


@pytest.mark.parametrize("seed", range(8))
def test_five_ring_envelopes_name_the_flap_and_its_side_against_a_substituent(seed):
    # an envelope built by hand, flap on either side, methyl on either side: the flap and
    # whether it lies toward the methyl, as built; a mirror image reads the same (one row of
    # an ensemble with mirror images merged)
    mol = Chem.MolFromSmiles("CC1CCCC1")
    ring = [1, 2, 3, 4, 5]
    rng = np.random.default_rng(seed)
    k = int(rng.integers(5))
    lift = float(rng.choice([-1.0, 1.0]) * rng.uniform(0.4, 0.7))
    up = float(rng.choice([-1.0, 1.0]))
    xyz = _methylcyclopentane(k, lift, up, rng)
    side = "toward" if lift * up > 0 else "away from"
    assert _side_by_plane(xyz, ring, k, 1, 0) == side
    form = ring_form(mol, ring, cremer_pople(xyz[ring]), positions=xyz)
    assert form == f"envelope, C{k + 2} {side} C1"
    mirror = xyz * [1.0, 1.0, -1.0]
    assert ring_form(mol, ring, cremer_pople(mirror[ring]), positions=mirror) == form
    # without positions, or without a tetrahedral substituent, only the flap is named
    assert ring_form(mol, ring, cremer_pople(xyz[ring])) == f"envelope, C{k + 2}"
    assert ring_form(Chem.MolFromSmiles("C1CCCC1"), [0, 1, 2, 3, 4], cremer_pople(xyz[ring]),
                     positions=xyz[ring]) == f"envelope, C{k + 1}"


def test_five_ring_twists_name_the_twisted_bond_and_both_sides():
    # the ideal twist (Cremer & Pople 1975: phi_2 = 18 + 36k): its two atoms of largest
    # displacement are bonded, one on each side, as the plane of the other atoms says
    mol = Chem.MolFromSmiles("CC1CCCC1")
    ring = [1, 2, 3, 4, 5]
    for k in range(10):
        for up in (1.0, -1.0):
            ring_xyz = _ring(5, {2: 0.43}, {2: TWIST_5 + k * ENVELOPE_5})
            methyl = ring_xyz[0] + 0.9 * ring_xyz[0] / np.linalg.norm(ring_xyz[0]) \
                + np.array([0.0, 0.0, 1.1 * up])
            xyz = np.vstack([methyl, ring_xyz])
            form = ring_form(mol, ring, cremer_pople(ring_xyz), positions=xyz)
            name, rest = form.split(", ")
            assert name == "twist" and rest.endswith(" C1")
            first, second = rest[:-len(" C1")].split(" and ")
            a, side_a = first.split(" ", 1)
            b, side_b = second.split(" ", 1)
            ia, ib = int(a[1:]) - 2, int(b[1:]) - 2
            assert (ib - ia) % 5 in (1, 4) and {side_a, side_b} == {"toward", "away from"}
            z = ring_xyz[:, 2]  # the built ring's mean plane is z = 0
            for i, side in ((ia, side_a), (ib, side_b)):
                assert side == ("toward" if z[i] * up > 0 else "away from")
    # six-membered rings keep their plain name
    assert ring_form(Chem.MolFromSmiles("C1CCCCC1"), list(range(6)),
                     cremer_pople(_ring(6, {2: 0.0}, {2: 0.0}, q_half=0.6))) == "chair"


def test_the_two_envelopes_of_a_lactone_are_told_apart_in_the_description():
    # the gamma-lactone's ring flip (flap C8 toward or away from the CH2OH carbon C2) used to
    # read "envelope" in both conformers; MMFF94s conformers of both kinds, and each form's
    # side agrees with the plane of the other four ring atoms
    mol = Chem.AddHs(Chem.MolFromSmiles("OC[C@H]1OC(=O)CC1"))
    AllChem.EmbedMultipleConfs(mol, 30, randomSeed=11)
    AllChem.MMFFOptimizeMoleculeConfs(mol)
    desc = describe_conformers(mol)
    rings = desc.rings
    assert set(rings["pucker"]) <= {"envelope", "twist"}
    envelopes = rings[rings["pucker"] == "envelope"]
    ring = [2, 3, 4, 6, 7]  # ring order of the label C3-O4-C5-C7-C8
    assert envelopes["ring"].iloc[0] == "C3-O4-C5-C7-C8"
    assert {f.split(", ")[1].split(" ", 1)[1] for f in envelopes["form"]} == \
        {"toward C2", "away from C2"}
    for r in envelopes.itertuples():
        flap = r.form.split(", ")[1].split()[0]
        xyz = mol.GetConformer(r.conformer).GetPositions()
        k = [atom_label(mol, a) for a in ring].index(flap)
        assert r.form.endswith(f"{_side_by_plane(xyz, ring, k, 2, 1)} C2")
    assert desc.table["ring_C3-O4-C5-C7-C8"].nunique() > 1


def test_cyclohexane_is_a_chair_with_the_known_amplitude():
    mol = Chem.AddHs(Chem.MolFromSmiles("C1CCCCC1"))
    AllChem.EmbedMolecule(mol, randomSeed=3)
    AllChem.MMFFOptimizeMolecule(mol)
    desc = describe_conformers(mol)
    assert list(desc.rings["pucker"]) == ["chair"]
    # Q of the cyclohexane chair ~0.55-0.63 A (from memory; force-field geometries vary)
    low, high = value("cyclohexane_chair_q")
    assert low - 0.05 < desc.rings["Q_angstrom"].iloc[0] < high + 0.05
    assert desc.ring_summary() == ["ring C1-C2-C3-C4-C5-C6: chair in every conformer"]


def _with_dihedrals(smiles, settings, seed=11, relax=False):
    """A molecule with one conformer per entry of settings ({(i, j, k, l): degrees});
    relax: MMFF-optimise the embedded geometry first (regular symmetric tops)."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=seed)
    if relax:
        AllChem.MMFFOptimizeMolecule(mol)
    base = Chem.Conformer(mol.GetConformer())
    mol.RemoveAllConformers()
    for values in settings:
        conf = Chem.Conformer(base)
        for atoms, value in values.items():
            rdMolTransforms.SetDihedralDeg(conf, *atoms, value)
        mol.AddConformer(conf, assignId=True)
    return mol


def test_butane_anti_and_gauche_differ_in_one_torsion_named_from_one():
    mol = _with_dihedrals("CCCC", [{(0, 1, 2, 3): 180.0}, {(0, 1, 2, 3): 65.0},
                                   {(0, 1, 2, 3): 180.0, (4, 0, 1, 2): 120.0}])
    found = distinguishing_torsions(mol)
    assert [t.label for t in found] == ["C1-C2-C3-C4"]  # a turned methyl is no difference
    assert [round(v) for v in found[0].values.values()] == [180, 65, 180]
    assert atom_label(mol, 0) == "C1"


def test_equivalent_methyls_give_the_same_description_whichever_came_first():
    # N,N-dimethylpropanamide: the two N-methyls are equivalent; only the ethyl torsion differs
    smiles = "CCC(=O)N(C)C"
    mol = _with_dihedrals(smiles, [{(0, 1, 2, 3): 0.0}, {(0, 1, 2, 3): 100.0}])
    first = distinguishing_torsions(mol)
    assert [t.label for t in first] == ["C1-C2-C3-O4"]
    # swap the two N-methyl carbons (atoms 5 and 6) and their hydrogens
    order = list(range(mol.GetNumAtoms()))
    h5 = [a.GetIdx() for a in mol.GetAtomWithIdx(5).GetNeighbors() if a.GetAtomicNum() == 1]
    h6 = [a.GetIdx() for a in mol.GetAtomWithIdx(6).GetNeighbors() if a.GetAtomicNum() == 1]
    order[5], order[6] = 6, 5
    for a, b in zip(h5, h6):
        order[a], order[b] = b, a
    swapped = Chem.RenumberAtoms(mol, order)
    second = distinguishing_torsions(swapped)
    assert [t.label for t in second] == ["C1-C2-C3-O4"]
    np.testing.assert_allclose(list(second[0].values.values()), list(first[0].values.values()),
                               atol=1e-6)


def test_isopropyl_rotamers_are_told_apart_through_its_unique_hydrogen():
    # isopropyl methyl ether: the two methyls are equivalent, the C-H is not
    mol = _with_dihedrals("CC(C)OC", [{(4, 3, 1, 0): 60.0}, {(4, 3, 1, 0): 180.0}])
    found = distinguishing_torsions(mol)
    assert [t.label for t in found] == ["H9-C2-O4-C5"]  # hydrogens follow the heavy atoms
    assert found[0].spread == pytest.approx(120.0, abs=1e-6)


def test_hydrogen_bonds_match_a_brute_force_geometric_check():
    distance, angle_min = value("hydrogen_bond_geometry")
    assert (HBOND_DISTANCE, HBOND_ANGLE) == (distance, angle_min)
    mol = Chem.AddHs(Chem.MolFromSmiles("NCCCO"))  # 3-aminopropanol: O-H...N closes a 6-ring
    AllChem.EmbedMultipleConfs(mol, 40, randomSeed=5)
    AllChem.MMFFOptimizeMoleculeConfs(mol)
    found = hydrogen_bonds(mol)
    o_h = [a.GetIdx() for a in mol.GetAtomWithIdx(4).GetNeighbors() if a.GetAtomicNum() == 1][0]
    n_h = [a.GetIdx() for a in mol.GetAtomWithIdx(0).GetNeighbors() if a.GetAtomicNum() == 1]
    expected = set()
    for conf in mol.GetConformers():
        xyz = conf.GetPositions()
        for donor, h, acceptor in [(4, o_h, 0)] + [(0, h, 4) for h in n_h]:
            d = np.linalg.norm(xyz[h] - xyz[acceptor])
            u, v = xyz[donor] - xyz[h], xyz[acceptor] - xyz[h]
            angle = np.degrees(np.arccos(u @ v / np.linalg.norm(u) / np.linalg.norm(v)))
            if d <= distance and angle >= angle_min:
                expected.add((conf.GetId(), donor, h, acceptor))
    got = {(r.conformer, r.donor, r.hydrogen, r.acceptor) for r in found.itertuples()}
    assert got == expected and any(e[1] == 4 for e in expected)
    assert all(label.startswith(("O5-H", "N1-H")) for label in found["label"])
    # equal invented populations: each bond's share is the fraction of conformers having it
    ids = [c.GetId() for c in mol.GetConformers()]
    shares = describe_conformers(mol).hydrogen_bond_shares({c: 1.0 / len(ids) for c in ids})
    for label, share in shares.items():
        having = {c for c, lab in zip(found["conformer"], found["label"]) if lab == label}
        assert share == pytest.approx(len(having) / len(ids), abs=1e-12)


def test_torsions_varying_among_populated_conformers_come_first():
    # pentane: C1-C2-C3-C4 differs between the two populated conformers, C2-C3-C4-C5 only in
    # a rare third one (invented weights)
    a, b = (0, 1, 2, 3), (1, 2, 3, 4)
    mol = _with_dihedrals("CCCCC", [{a: 180.0, b: 180.0}, {a: 65.0, b: 180.0},
                                    {a: 180.0, b: 65.0}])
    by_spread = distinguishing_torsions(mol)
    assert {t.label for t in by_spread} == {"C1-C2-C3-C4", "C2-C3-C4-C5"}
    weighted = distinguishing_torsions(mol, weights=[0.5, 0.45, 0.05])
    assert [t.label for t in weighted] == ["C1-C2-C3-C4", "C2-C3-C4-C5"]
    reverse = distinguishing_torsions(mol, weights=[0.5, 0.05, 0.45])
    assert [t.label for t in reverse] == ["C2-C3-C4-C5", "C1-C2-C3-C4"]


def test_pucker_shares_add_up_per_ring():
    mol = Chem.AddHs(Chem.MolFromSmiles("C1CCCCC1"))
    AllChem.EmbedMolecule(mol, randomSeed=3)
    AllChem.MMFFOptimizeMolecule(mol)
    chair = Chem.Conformer(mol.GetConformer())
    flat = Chem.Conformer(chair)
    ring = [0, 1, 2, 3, 4, 5]
    xyz = _ring(6, {2: 0.0}, {2: 0.0}, q_half=0.0)  # a planar hexagon for the ring atoms
    for a, p in zip(ring, xyz):
        flat.SetAtomPosition(a, p.tolist())
    mol.RemoveAllConformers()
    for conf in (chair, flat):
        mol.AddConformer(conf, assignId=True)
    shares = describe_conformers(mol).pucker_shares({0: 0.7, 1: 0.3})  # invented populations
    assert shares == {"C1-C2-C3-C4-C5-C6": {"chair": pytest.approx(0.7), "planar": pytest.approx(0.3)}}


@pytest.mark.parametrize("smiles, atoms, period, relax", [
    # p-tolyl-NMe2: a planar NMe2 (2-fold) on a phenyl (2-fold) repeats every 180 degrees
    # (the embedded geometry keeps NMe2 planar; MMFF puckers it slightly)
    ("Cc1ccc(N(C)C)cc1", (3, 4, 5, 6), 180.0, False),
    # ethane: two 3-fold methyl tops repeat every 120 degrees (relaxed: regular methyls)
    ("CC", (2, 0, 1, 5), 120.0, True),
])
def test_two_symmetric_ends_repeat_on_the_lcm_of_their_folds(smiles, atoms, period, relax):
    # brute force over a 2D grid of dihedral pairs: the reported spread is the circular
    # distance of the two settings modulo the combined period 360/lcm(n1, n2) (an end of n
    # equivalent atoms turned by 360/n is the same molecule; common practice)
    grid = np.arange(0.0, 360.0, 30.0)
    for a in grid:
        for b in grid[::2]:
            mol = _with_dihedrals(smiles, [{atoms: a}, {atoms: b}], relax=relax)
            d = abs(a - b) % period
            expected = min(d, period - d)
            found = distinguishing_torsions(mol, threshold=1.0)
            if expected < 1.0:
                assert found == [], (a, b)
            else:
                assert len(found) == 1, (a, b)
                assert found[0].spread == pytest.approx(expected, abs=0.5), (a, b)
                assert found[0].period == period


def test_one_based_labels_renumber_any_element_and_nothing_else():
    from confpop.describe import one_based_labels
    # element symbols from RDKit's periodic table; words and units are left alone
    assert one_based_labels("Se4-Ge0, Sn12; C2 at 298K in H2O, step 30") == \
        "Se5-Ge1, Sn13; C3 at 298K in H2O, step 30"
    # atom_label is the 1-based form of the same numbers
    mol = Chem.AddHs(Chem.MolFromSmiles("C[Se]C"))
    assert one_based_labels(f"Se{1}") == atom_label(mol, 1) == "Se2"


def test_five_ring_forms_of_an_achiral_molecule_do_not_depend_on_the_seed():
    # cyclopentanol is achiral: a row stands for a conformer and its mirror image, and C3/C6,
    # C4/C5 are equivalent atoms, so which twin a seed keeps must not change the row's label
    # (found by review: "C2 above" at one seed was "C2 below" at another, "C5" became "C4").
    # The same ensemble (energies and degeneracies equal) from three seeds: the same labels.
    import confpop as cp

    tables = []
    for seed in (1, 2, 3):
        ens = cp.search("OC1CCCC1", "mmff94s", seed=seed, workers=1)
        desc = describe_conformers(ens)
        energies = ens.energies("kcal/mol")
        tables.append(sorted((round(float(energies[c]), 3), int(ens.degeneracy[c]),
                              desc.table.loc[c, "ring_C2-C3-C4-C5-C6"]) for c in ens.ids()))
    assert [[(e, d) for e, d, _ in t] for t in tables[1:]] == [[(e, d) for e, d, _ in tables[0]]] * 2
    assert tables[1] == tables[0] and tables[2] == tables[0]
    assert all(" toward O1" in form or " away from O1" in form for _, _, form in tables[0])
