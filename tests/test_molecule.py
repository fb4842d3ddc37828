"""Tests of confpop.molecule: user input -> checked RDKit molecule.

The input files under tests/data/molecule_* were made with RDKit (ETKDG, fixed seeds, MMFF94
relaxed). Reference facts (formulas, electron counts, numbers of stereoisomers, rotatable-bond
counts) are named beside each check; RDKit's own readers and ``rdDetermineBonds`` serve as
independent implementations where we re-implement something.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdCIPLabeler, rdDetermineBonds, rdForceFieldHelpers, rdMolTransforms

import confpop
from confpop.errors import InputError
from confpop.molecule import (bond_graph_from_coordinates, configuration_smiles, load_molecule,
                              molecule_summary, stereo_signature, stereoisomers)

DATA = Path(__file__).parent / "data"
BUTANOL_SDF = DATA / "molecule_butanol_single.sdf"
BUTANOL_CONFS_SDF = DATA / "molecule_butanol_conformers.sdf"
BUTENE_MOL = DATA / "molecule_butene_2d.mol"
ACETATE_XYZ = DATA / "molecule_acetate.xyz"
ETHANOL_XYZ = DATA / "molecule_ethanol_frames.xyz"


def embedded(smiles, n=1, seed=7):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    params = AllChem.ETKDGv3()
    params.randomSeed = seed
    ids = list(AllChem.EmbedMultipleConfs(mol, n, params))
    assert len(ids) == n
    return mol


def bonds_of(mol):
    return {tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}


def cip_labels(mol):
    mol = Chem.Mol(mol)
    rdCIPLabeler.AssignCIPLabels(mol)
    return ({a.GetIdx(): a.GetProp("_CIPCode") for a in mol.GetAtoms() if a.HasProp("_CIPCode")},
            {b.GetIdx(): b.GetProp("_CIPCode") for b in mol.GetBonds() if b.HasProp("_CIPCode")})


def write_xyz(path, mol, conf_ids, comments=None):
    blocks = []
    for k, cid in enumerate(conf_ids):
        lines = Chem.MolToXYZBlock(mol, confId=cid).splitlines()
        if comments:
            lines[1] = comments[k]
        blocks.append("\n".join(lines))
    path.write_text("\n".join(blocks) + "\n")


# --------------------------------------------------------------------------------------
# input routes
# --------------------------------------------------------------------------------------

def test_public_names_resolve():
    assert confpop.load_molecule is load_molecule
    assert confpop.stereoisomers is stereoisomers


def test_smiles_gives_explicit_hydrogens_and_no_conformer():
    mol = load_molecule("CCO")
    # ethanol is C2H6O, 9 atoms (handbook formula)
    assert mol.GetNumAtoms() == 9
    assert sum(a.GetAtomicNum() == 1 for a in mol.GetAtoms()) == 6
    assert all(a.GetNumImplicitHs() == 0 for a in mol.GetAtoms())
    assert mol.GetNumConformers() == 0
    assert (mol.GetIntProp("charge"), mol.GetIntProp("multiplicity")) == (0, 1)
    assert mol.GetProp("_Name") == "CCO"


def test_smiles_with_name_after_space_and_name_argument():
    assert load_molecule("CCO ethanol").GetProp("_Name") == "ethanol"
    assert load_molecule("CCO ethanol", name="invented-1").GetProp("_Name") == "invented-1"


def test_rdkit_mol_keeps_3d_conformers_and_is_not_changed():
    source = embedded("CCCC", n=3)
    before = Chem.MolToMolBlock(source, confId=1)
    mol = load_molecule(source)
    assert mol.GetNumConformers() == 3
    assert [c.GetId() for c in mol.GetConformers()] == [0, 1, 2]
    for cid in range(3):
        np.testing.assert_allclose(mol.GetConformer(cid).GetPositions(),
                                   source.GetConformer(cid).GetPositions(), rtol=0, atol=1e-12)
    assert Chem.MolToMolBlock(source, confId=1) == before
    assert not source.HasProp("charge")


def test_rdkit_mol_with_2d_coordinates_gives_no_conformer():
    flat = Chem.MolFromSmiles("C[C@@H](O)CC")
    AllChem.Compute2DCoords(flat)
    mol = load_molecule(flat)
    assert mol.GetNumConformers() == 0
    assert mol.GetNumAtoms() == 15  # C4H10O


def test_rdkit_mol_without_hydrogens_gets_them_with_coordinates():
    heavy = Chem.RemoveHs(embedded("CCO", n=2))
    mol = load_molecule(heavy)
    assert mol.GetNumAtoms() == 9
    assert mol.GetNumConformers() == 2
    for cid in (0, 1):
        # every new H sits at a C-H or O-H bond length: 0.9-1.2 angstrom (common practice)
        assert bond_graph_from_coordinates(mol, cid) == bonds_of(mol)


def test_loading_twice_changes_nothing():
    once = load_molecule(BUTANOL_CONFS_SDF)
    twice = load_molecule(once)
    assert Chem.MolToSmiles(twice) == Chem.MolToSmiles(once)
    assert twice.GetNumConformers() == once.GetNumConformers() == 3
    np.testing.assert_allclose(twice.GetConformer(2).GetPositions(),
                               once.GetConformer(2).GetPositions(), rtol=0, atol=1e-12)
    triplet = load_molecule(load_molecule("O=O", multiplicity=3))
    assert triplet.GetIntProp("multiplicity") == 3


def test_sdf_single_record():
    mol = load_molecule(BUTANOL_SDF)
    reference = Chem.MolFromMolFile(str(BUTANOL_SDF), removeHs=False)  # RDKit's own reader
    assert mol.GetNumAtoms() == reference.GetNumAtoms() == 15
    assert mol.GetNumConformers() == 1
    np.testing.assert_allclose(mol.GetConformer(0).GetPositions(),
                               reference.GetConformer().GetPositions(), rtol=0, atol=1e-12)
    assert mol.GetProp("_Name") == "(R)-butan-2-ol"
    # C[C@@H](O)CC is (R)-butan-2-ol (PubChem isomeric SMILES of (R)-(-)-2-butanol) [from memory]
    assert cip_labels(mol)[0] == {1: "R"}


def test_sdf_many_records_become_conformers_with_their_data():
    mol = load_molecule(str(BUTANOL_CONFS_SDF))  # a str path works too
    records = list(Chem.SDMolSupplier(str(BUTANOL_CONFS_SDF), removeHs=False))
    assert mol.GetNumConformers() == len(records) == 3
    for cid, record in enumerate(records):
        np.testing.assert_allclose(mol.GetConformer(cid).GetPositions(),
                                   record.GetConformer().GetPositions(), rtol=0, atol=1e-12)
        conf = mol.GetConformer(cid)
        assert conf.GetProp("energy_invented") == record.GetProp("energy_invented")
        assert conf.GetProp("title") == "(R)-butan-2-ol"
    assert not mol.HasProp("energy_invented")  # per-record data live on the conformers


def test_sdf_records_in_another_atom_order_are_renumbered(tmp_path):
    first = embedded("C[C@@H](O)CC", seed=1)
    second = embedded("CC[C@@H](C)O", seed=2)  # same molecule, atoms written in another order
    path = tmp_path / "reordered.sdf"
    with Chem.SDWriter(str(path)) as writer:
        writer.write(first)
        writer.write(second)
    mol = load_molecule(path)
    assert [a.GetSymbol() for a in mol.GetAtoms()] == [a.GetSymbol() for a in first.GetAtoms()]
    # the second conformer's coordinates now follow the first record's atom order
    assert bond_graph_from_coordinates(mol, 1) == bonds_of(mol)
    assert stereo_signature(mol, 1) == stereo_signature(mol, 0) == (((1,), "R"),)


def test_mol_file_with_2d_coordinates_keeps_double_bond_stereo():
    mol = load_molecule(BUTENE_MOL)
    assert mol.GetNumConformers() == 0
    assert mol.GetNumAtoms() == 12  # but-2-ene, C4H8
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == "C/C=C/C"
    assert mol.GetProp("_Name") == "(E)-but-2-ene"


def test_xyz_single_frame_with_charge():
    mol = load_molecule(ACETATE_XYZ, charge=-1)
    assert mol.GetNumAtoms() == 7  # CH3COO-
    assert (mol.GetIntProp("charge"), mol.GetIntProp("multiplicity")) == (-1, 1)
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == "CC(=O)[O-]"
    reference = Chem.MolFromXYZFile(str(ACETATE_XYZ))  # RDKit's own reader
    np.testing.assert_allclose(mol.GetConformer(0).GetPositions(),
                               reference.GetConformer().GetPositions(), rtol=0, atol=1e-12)


def test_xyz_anion_without_charge_asks_for_it():
    # acetate has 31 electrons at charge 0: odd, so no closed-shell bond orders exist
    with pytest.raises(InputError, match=r"31 electrons.*--charge"):
        load_molecule(ACETATE_XYZ)


def test_xyz_wrong_even_charge_says_perception_failed():
    with pytest.raises(InputError, match=r"could not perceive the bonds.*charge 2.*--charge"):
        load_molecule(ETHANOL_XYZ, charge=2)


def test_xyz_multi_frame():
    mol = load_molecule(ETHANOL_XYZ)
    assert mol.GetNumAtoms() == 9
    assert mol.GetNumConformers() == 3
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == "CCO"
    assert mol.GetConformer(2).GetProp("title").startswith("ethanol frame 3")
    assert mol.GetProp("_Name") == "molecule_ethanol_frames"


def test_xyz_frame_with_a_broken_bond_is_refused(tmp_path):
    mol = embedded("CCO", n=2)
    rdMolTransforms.SetBondLength(mol.GetConformer(1), 1, 2, 3.0)
    path = tmp_path / "broken.xyz"
    write_xyz(path, mol, [0, 1])
    with pytest.raises(InputError, match=r"frame 2 .* other bonds than frame 1 \(no bond 2 \(C\)-3 \(O\)\)"):
        load_molecule(path)


def test_xyz_frames_with_other_atoms_are_refused(tmp_path):
    path = tmp_path / "mixed.xyz"
    ethanol = embedded("CCO")
    dimethyl_ether = embedded("COC")  # same formula, other atom order
    path.write_text(Chem.MolToXYZBlock(ethanol) + Chem.MolToXYZBlock(dimethyl_ether))
    # the second atom (numbered from 1, as in the file) is C in ethanol, O in the ether
    with pytest.raises(InputError, match=r"frame 2 .*atom 2 is O, in frame 1 it is C"):
        load_molecule(path)


@pytest.mark.parametrize("text, message", [
    ("3\n\nC 0 0 0\nO 1.4 0 0\n", r"declares 3 atoms but the file ends after 2"),
    ("2\n\nC 0 0\nO 1.4 0 0\n", r"line 3 .*expected 'element x y z'"),
    ("2\n\nQq 0 0 0\nO 1.4 0 0\n", r"line 3 .*unknown element 'Qq'"),
    ("two\n\nC 0 0 0\nO 1.4 0 0\n", r"line 1 .*expected the number of atoms"),
    ("2\n\nC 0 0 0\nO 1.4 zero 0\n", r"line 4 .*coordinates must be numbers"),
])
def test_malformed_xyz(tmp_path, text, message):
    path = tmp_path / "bad.xyz"
    path.write_text(text)
    with pytest.raises(InputError, match=message):
        load_molecule(path)


def test_smiles_file(tmp_path):
    path = tmp_path / "one.smi"
    path.write_text("# invented example\nOC1CCCCC1 cyclohexanol\n")
    mol = load_molecule(path)
    assert mol.GetProp("_Name") == "cyclohexanol"
    assert mol.GetNumAtoms() == 19  # C6H12O


# --------------------------------------------------------------------------------------
# files and strings that are not usable
# --------------------------------------------------------------------------------------

def test_sdf_with_two_molecules_names_the_record(tmp_path):
    path = tmp_path / "two.sdf"
    first, second = embedded("CCO"), embedded("CCCO")
    first.SetProp("_Name", "ethanol")
    second.SetProp("_Name", "propanol")
    with Chem.SDWriter(str(path)) as writer:
        writer.write(first)
        writer.write(second)
    with pytest.raises(InputError, match=r"record 2 \('propanol'\) .* different molecule"):
        load_molecule(path)


def test_sdf_with_two_stereoisomers_names_the_record(tmp_path):
    path = tmp_path / "enantiomers.sdf"
    with Chem.SDWriter(str(path)) as writer:
        writer.write(embedded("C[C@@H](O)CC"))
        writer.write(embedded("C[C@H](O)CC"))
    with pytest.raises(InputError, match=r"record 2 .* different stereoisomer"):
        load_molecule(path)


def test_sdf_record_with_a_valence_error(tmp_path):
    block = Chem.MolToMolBlock(embedded("CC"))
    # make the C-C bond double while both carbons keep three hydrogens: carbon 0 gets valence 5
    bad = block.replace("  1  2  1  0", "  1  2  2  0", 1)
    assert bad != block
    path = tmp_path / "valence.sdf"
    path.write_text(block + "$$$$\n" + bad + "$$$$\n")
    with pytest.raises(InputError, match=r"record 2 .*atom 1 \(C\) has valence 5, more than allowed"):
        load_molecule(path)


@pytest.mark.parametrize("source, message", [
    ("", r"empty input"),
    ("   ", r"empty input"),
    ("C1CC", r"ring bond 1 is opened but never closed"),
    ("CC(C", r"'\(' branch is never closed"),
    ("CC)C", r"'\)' closes a branch"),
    ("C[Xx]", r"unknown element symbol 'Xx'"),
    ("C(C)(C)(C)(C)C", r"atom 1 \(C\) has valence 5, more than allowed \(4\)"),
    ("CC[N](C)(C)(C)C", r"atom 3 \(N\) has valence 5, more than allowed"),
    ("c1cccc1", r"aromatic atoms 1 \(C\), 2 \(C\)"),
    ("*CC", r"atom 0 is a dummy atom"),
    (42, r"source must be a SMILES string, a file path or an RDKit Mol, got int"),
    (None, r"got NoneType"),
    ("no_such_file.sdf", r"file not found: no_such_file.sdf"),
    ("ensemble.mol2", r"MOL2 files are not supported"),
    ("dir/x", r"no file named 'dir/x' exists either"),
])
def test_unusable_input_gives_clear_error_and_no_rdkit_noise(capfd, source, message):
    with pytest.raises(InputError, match=message):
        load_molecule(source)
    captured = capfd.readouterr()
    assert captured.err == ""  # RDKit's own log lines are kept quiet
    assert captured.out == ""


def test_existing_file_of_unknown_type(tmp_path):
    path = tmp_path / "protein.pdb"
    path.write_text("ATOM\n")
    with pytest.raises(InputError, match=r"PDB files are not supported"):
        load_molecule(path)
    other = tmp_path / "notes.txt"
    other.write_text("CCO\n")
    with pytest.raises(InputError, match=r"unsupported file type '.txt'"):
        load_molecule(str(other))
    with pytest.raises(InputError, match=r"is a directory"):
        load_molecule(str(tmp_path))


def test_empty_files(tmp_path):
    for name in ("empty.sdf", "empty.xyz"):
        (tmp_path / name).write_text("\n")
        with pytest.raises(InputError, match=r"is empty: it holds no molecule"):
            load_molecule(tmp_path / name)
    (tmp_path / "junk.sdf").write_text("junk\n\n\n  x  y\n$$$$\n")
    with pytest.raises(InputError, match=r"record 1 .* not a readable MOL block"):
        load_molecule(tmp_path / "junk.sdf")


def test_overlapping_atoms_are_refused():
    mol = embedded("CCO")
    conf = mol.GetConformer()
    conf.SetAtomPosition(8, conf.GetAtomPosition(2))
    with pytest.raises(InputError, match=r"atoms 3 \(O\) and 9 \(H\) are 0.00 angstrom apart"):
        load_molecule(mol)


@pytest.mark.parametrize("kwargs, message", [
    ({"charge": 0.5}, r"charge must be an integer, got 0.5"),
    ({"charge": True}, r"charge must be an integer"),
    ({"multiplicity": 0}, r"multiplicity must be an integer >= 1"),
    ({"keep_largest_fragment": "yes"}, r"keep_largest_fragment must be True or False"),
    ({"stereo": "maybe"}, r"stereo must be one of 'refuse', 'ignore', got 'maybe'"),
    ({"name": 3}, r"name must be a string"),
])
def test_bad_arguments(kwargs, message):
    with pytest.raises(InputError, match=message):
        load_molecule("CCO", **kwargs)


# --------------------------------------------------------------------------------------
# charge and multiplicity
# --------------------------------------------------------------------------------------

@pytest.mark.parametrize("smiles, charge, multiplicity", [
    ("CC(=O)[O-]", -1, 1),        # acetate anion, closed shell
    ("C[NH3+]", 1, 1),            # methylammonium cation
    ("[NH3+]CC(=O)[O-]", 0, 1),   # glycine zwitterion: charges cancel
    ("[CH3]", 0, 2),              # methyl radical: one unpaired electron, doublet
    ("[CH2]", 0, 3),              # methylene: two unpaired electrons, high spin (triplet ground state [from memory])
    ("[O][O]", 0, 3),             # O2 written as a diradical: triplet
    ("[O-][N+](=O)[O-]", -1, 1),  # nitrate
])
def test_charge_and_multiplicity_are_inferred(smiles, charge, multiplicity):
    mol = load_molecule(smiles)
    assert mol.GetIntProp("charge") == charge
    assert mol.GetIntProp("multiplicity") == multiplicity


def test_overrides_that_fit_the_electron_count_are_kept():
    assert load_molecule("O=O", multiplicity=3).GetIntProp("multiplicity") == 3  # triplet O2
    assert load_molecule("[CH2]", multiplicity=1).GetIntProp("multiplicity") == 1  # singlet carbene
    assert load_molecule("[NH4+]", charge=1).GetIntProp("charge") == 1
    assert load_molecule("[H]", multiplicity=2).GetIntProp("multiplicity") == 2


@pytest.mark.parametrize("smiles, kwargs, message", [
    # ethanol has 26 electrons (6+6+8+6*1): an even count allows only odd multiplicities
    ("CCO", {"multiplicity": 2}, r"multiplicity=2 is impossible .* 26 electrons .* 1, 3, 5, ... up to 27"),
    # methyl radical has 9 electrons: a singlet is impossible
    ("[CH3]", {"multiplicity": 1}, r"multiplicity=1 is impossible .* 9 electrons .* 2, 4, 6, ... up to 10"),
    # one hydrogen atom has one electron: at most a doublet
    ("[H]", {"multiplicity": 4}, r"multiplicity=4 is impossible .* 1 electron \(charge 0\), which allows only multiplicity 2"),
    ("CCO", {"charge": 1}, r"charge=\+1 does not match .* formal charges add up to 0 \(no charged atoms\)"),
    ("CC(=O)[O-]", {"charge": 0}, r"charge=0 does not match .* add up to -1 \(4 \(O\) -1\)"),
])
def test_impossible_charge_or_multiplicity(smiles, kwargs, message):
    with pytest.raises(InputError, match=message):
        load_molecule(smiles, **kwargs)


# --------------------------------------------------------------------------------------
# fragments
# --------------------------------------------------------------------------------------

def test_salt_is_refused_by_default():
    with pytest.raises(InputError, match=r"2 disconnected fragments: CC\(=O\)\[O-\] \(4 heavy atoms\), "
                                         r"\[Na\+\] \(1 heavy atom\).*keep_largest_fragment=True"):
        load_molecule("CC(=O)[O-].[Na+]")


def test_keep_largest_fragment():
    mol = load_molecule("CC(=O)[O-].[Na+]", keep_largest_fragment=True)
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == "CC(=O)[O-]"
    assert mol.GetIntProp("charge") == -1  # the charge of what is kept
    assert mol.GetProp("removed_fragments") == "[Na+]"
    hydrochloride = load_molecule("C[C@@H](N)CC.Cl", keep_largest_fragment=True)
    assert hydrochloride.GetProp("removed_fragments") == "Cl"
    assert cip_labels(hydrochloride)[0] == cip_labels(load_molecule("C[C@@H](N)CC"))[0]


def test_keep_largest_fragment_keeps_3d_coordinates():
    salt = embedded("CC(=O)[O-].[Na+]", seed=3)
    mol = load_molecule(salt, keep_largest_fragment=True)
    assert mol.GetNumConformers() == 1
    np.testing.assert_allclose(mol.GetConformer(0).GetPositions(),
                               np.delete(salt.GetConformer().GetPositions(), 4, axis=0),
                               rtol=0, atol=1e-12)


def test_fragments_of_equal_size_cannot_be_chosen():
    with pytest.raises(InputError, match=r"same size"):
        load_molecule("CCO.COC", keep_largest_fragment=True)  # both C2H6O
    # identical copies are no choice: one is kept
    assert load_molecule("CCO.OCC", keep_largest_fragment=True).GetProp("removed_fragments") == "CCO"


# --------------------------------------------------------------------------------------
# elements a method has no parameters for
# --------------------------------------------------------------------------------------

def test_mmff_refuses_boron_and_names_the_atom():
    smiles = "OB(O)c1ccccc1"  # phenylboronic acid
    # RDKit's MMFF94 has no boron types (MMFF94 covers H C N O F Si P S Cl Br I + ions)
    assert not rdForceFieldHelpers.MMFFHasAllMoleculeParams(Chem.AddHs(Chem.MolFromSmiles(smiles)))
    for method in ("mmff94", "MMFF94s"):
        with pytest.raises(InputError, match=r"MMFF94s? has no parameters for atom 2 \(B\)"):
            load_molecule(smiles, method=method)
    for method in (None, "uff", "gfn2"):  # UFF and GFN2-xTB cover boron
        assert load_molecule(smiles, method=method).GetNumAtoms() == 16  # C6H7BO2


def test_mmff_refuses_tin_gfn_accepts_it():
    with pytest.raises(InputError, match=r"MMFF94 has no parameters for atom 2 \(Sn\)"):
        load_molecule("C[Sn](C)(C)C", method="mmff94")
    assert load_molecule("C[Sn](C)(C)C", method="gfn2").GetNumAtoms() == 17  # Sn is Z = 50


def test_mmff_typing_failure_without_foreign_element():
    # SF6: every element is in MMFF94, but hexavalent sulfur has no MMFF94 atom type
    with pytest.raises(InputError, match=r"MMFF94 has no atom types .* typing failed"):
        load_molecule("FS(F)(F)(F)(F)F", method="mmff94")


def test_uff_and_gfn_coverage():
    with pytest.raises(InputError, match=r"UFF has no parameters for atom 1 \(Xe\)"):
        load_molecule("[Xe]", method="uff")
    # uranium is Z = 92, beyond the GFN parametrization (Z = 1-86)
    with pytest.raises(InputError, match=r"GFN2 has no parameters for atom 2 \(U\) .* Z = 1-86"):
        load_molecule("F[U](F)(F)(F)(F)F", method="gfn2")
    assert load_molecule("F[U](F)(F)(F)(F)F").GetNumAtoms() == 7  # no method: no check


# --------------------------------------------------------------------------------------
# stereo
# --------------------------------------------------------------------------------------

def test_unassigned_stereo_is_refused_with_a_list_and_a_way_out():
    with pytest.raises(InputError) as info:
        load_molecule("CC(O)C=CC")
    message = str(info.value)
    assert "atom 2 (C): unassigned tetrahedral centre" in message
    assert "bond 4-5: unassigned double bond" in message
    assert "--enumerate-stereo" in message and "stereoisomers()" in message
    assert "stereo='ignore'" in message


@pytest.mark.parametrize("smiles", [
    "CC(=O)N",       # the two N-H of a primary amide
    "CC(C)O",        # a centre with two equal substituents
    "C1CCC=CC1",     # a double bond in a six-membered ring has no E isomer
    "CN(CC)CCC",     # an amine nitrogen inverts
    "CC(C)=CC",      # a double bond with two equal substituents on one end
    "OC(=O)C(C)(C)C",
])
def test_no_false_stereo_alarms(smiles):
    assert load_molecule(smiles).GetNumAtoms() > 0


@pytest.mark.parametrize("smiles, count", [
    ("CC1CCC(C)CC1", 2),   # cis/trans-1,4-dimethylcyclohexane are two diastereomers (textbook)
    ("C1CCCCCC=C1", 1),    # (E)-cyclooctene is an isolable isomer [from memory]
    ("CS(=O)CC", 1),       # sulfoxides are configurationally stable stereocentres [from memory]
])
def test_true_stereo_elements_are_found(smiles, count):
    with pytest.raises(InputError, match=rf"^{count} stereo element"):
        load_molecule(smiles)


@pytest.mark.parametrize("smiles", [
    "C1CC2CCC1C2",             # norbornane: the bridgeheads cannot be inverted independently
    "C1C2CC3CC1CC(C2)C3",      # adamantane
    "C1CN2CCC1CC2",            # quinuclidine (a bridgehead nitrogen)
    "CN1C2CCC1CCC2",           # tropane (meso)
    "CC1C2CC3CC(C2)CC1C3",     # 2-methyladamantane: C2 lies on a mirror plane
    "C12C3C4C1C5C2C3C45",      # cubane
])
def test_small_ring_systems_are_not_taken_for_stereoisomers(smiles):
    # each of these has exactly one stereoisomer (achiral, textbook); RDKit flags the
    # junction atoms, confpop assigns the only possible configuration
    mol = load_molecule(smiles)
    assert len(stereoisomers(smiles)) == 1
    params = AllChem.ETKDGv3()
    params.randomSeed = 1
    assert AllChem.EmbedMolecule(Chem.Mol(mol), params) == 0  # the configuration is feasible


def test_chiral_ring_system_is_one_open_element():
    with pytest.raises(InputError, match=r"^1 stereo element .*atoms 4 \(C\), 7 \(C\): unassigned "
                                         r"configuration of the ring system \(two mirror-image forms\)"):
        load_molecule("CC1(C)C2CCC1(C)C(=O)C2")  # camphor
    # camphor has two stereoisomers, (1R,4R) and (1S,4S) [from memory]
    camphor = stereoisomers("CC1(C)C2CCC1(C)C(=O)C2")
    assert len(camphor) == 2
    params = AllChem.ETKDGv3()
    params.randomSeed = 1
    for isomer in camphor:
        assert AllChem.EmbedMolecule(Chem.Mol(isomer), params) == 0
    # norbornan-2-ol: exo/endo, each as two enantiomers (textbook)
    assert len(stereoisomers("OC1CC2CCC1C2")) == 4
    # one bridgehead given fixes the other
    assert load_molecule("CC1(C)C2CC[C@@]1(C)C(=O)C2").GetNumAtoms() == 27  # C10H16O


def test_given_stereo_is_kept_after_adding_hydrogens():
    mol = load_molecule("C[C@@H](O)/C=C/C")
    atoms, bonds = cip_labels(mol)
    assert atoms == {1: "R"}
    assert list(bonds.values()) == ["E"]
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == "C/C=C/[C@@H](C)O"


def test_stereo_ignore_records_what_is_open(caplog):
    with caplog.at_level(logging.WARNING, logger="confpop.molecule"):
        mol = load_molecule("CC(O)CC", stereo="ignore")
    assert mol.GetProp("unassigned_stereo") == "atom 2 (C): unassigned tetrahedral centre"
    assert "pick each configuration at random" in caplog.text


def test_enumerate_is_not_a_load_molecule_policy():
    with pytest.raises(InputError, match=r"stereo='enumerate' is not accepted here; call "
                                         r"confpop.stereoisomers"):
        load_molecule("CC(O)CC", stereo="enumerate")


def test_allene_axis_cannot_be_recorded():
    with pytest.raises(InputError, match=r"allene/cumulene axis.*cannot record"):
        load_molecule("CC=C=CC")
    assert load_molecule("CC=C=CC", stereo="ignore").GetNumAtoms() == 13


def test_3d_input_takes_stereo_from_coordinates(tmp_path):
    source = embedded("C[C@@H](O)/C=C/C", seed=5)
    path = tmp_path / "chiral.xyz"
    write_xyz(path, source, [0])
    mol = load_molecule(path)  # XYZ has no stereo flags: no "unassigned" error
    atoms, bonds = cip_labels(mol)
    assert atoms == {1: "R"} and list(bonds.values()) == ["E"]


@pytest.mark.parametrize("smiles, centres", [
    ("C[N@@]1C[C@H]1C", 2),     # an aziridine nitrogen inverts slowly: a real centre [from memory]
    ("C1CN2CCC1CC2", 0),        # quinuclidine: cage junctions have no configuration of their own
    ("C1C2CC3CC1CC(C2)C3", 0),  # adamantane
    ("CC1(C)C2CC[C@@]1(C)C(=O)C2", 2),  # (1R,4R)-camphor: both bridgeheads carry CIP labels
])
def test_3d_input_reads_every_centre_from_coordinates(centres, smiles):
    mol = embedded(smiles, n=2, seed=3)
    Chem.RemoveStereochemistry(mol)  # only the coordinates tell
    loaded = load_molecule(mol)
    signature = stereo_signature(loaded, 0)
    assert len(signature) == centres
    assert "?" not in dict(signature).values()
    assert configuration_smiles(loaded, 1) == configuration_smiles(loaded, 0)


def test_conformers_of_different_configuration_are_refused():
    mol = embedded("C[C@@H](O)CC", n=2, seed=2)
    conf = mol.GetConformer(1)
    mirrored = conf.GetPositions() * np.array([-1.0, 1.0, 1.0])
    for i, xyz in enumerate(mirrored):
        conf.SetAtomPosition(i, xyz.tolist())
    with pytest.raises(InputError, match=r"conformer 1 is a different stereoisomer \(atom 2 \(C\) is S"):
        load_molecule(mol)


def mirrored_second_conformer(smiles):
    mol = embedded(smiles, n=2, seed=2)
    conf = mol.GetConformer(1)
    for i, xyz in enumerate(conf.GetPositions() * np.array([-1.0, 1.0, 1.0])):
        conf.SetAtomPosition(i, xyz.tolist())
    Chem.RemoveStereochemistry(mol)
    return mol


def test_mirror_image_conformers_of_a_meso_compound_are_one_stereoisomer():
    # meso-butane-2,3-diol equals its mirror image (its SMILES is unchanged by swapping @/@@);
    # the (R,R) isomer does not
    meso = load_molecule(mirrored_second_conformer("C[C@@H](O)[C@H](C)O"))
    assert meso.GetNumConformers() == 2
    canonical = Chem.MolToSmiles(Chem.MolFromSmiles("C[C@@H](O)[C@H](C)O"))
    assert configuration_smiles(meso, 0) == configuration_smiles(meso, 1) == canonical
    # per atom the labels are swapped: R,S in one conformer, S,R in the other
    assert sorted(dict(stereo_signature(meso, 0)).values()) == ["R", "S"]
    assert stereo_signature(meso, 0) != stereo_signature(meso, 1)
    with pytest.raises(InputError, match=r"conformer 1 is a different stereoisomer"):
        load_molecule(mirrored_second_conformer("C[C@@H](O)[C@@H](C)O"))


def test_flags_contradicting_coordinates_are_refused():
    mol = embedded("C[C@@H](O)CC", seed=2)
    conf = mol.GetConformer()
    for i, xyz in enumerate(conf.GetPositions() * np.array([-1.0, 1.0, 1.0])):
        conf.SetAtomPosition(i, xyz.tolist())
    with pytest.raises(InputError, match=r"stereo flags say atom 2 \(C\) is R, but the coordinates"):
        load_molecule(mol)


def test_stereoisomers_of_butan_2_ol():
    isomers = stereoisomers("CC(O)CC")
    assert len(isomers) == 2  # one centre: two enantiomers
    names = [m.GetProp("_Name") for m in isomers]
    assert sorted(names) == sorted(["CC[C@H](C)O", "CC[C@@H](C)O"])
    assert sorted(cip_labels(m)[0][1] for m in isomers) == ["R", "S"]
    for index, iso in enumerate(isomers):
        assert iso.GetIntProp("stereoisomer") == index
        assert iso.GetProp("parent_name") == "CC(O)CC"
        assert (iso.GetIntProp("charge"), iso.GetIntProp("multiplicity")) == (0, 1)
        # each isomer is fully assigned: it loads under the default policy
        assert Chem.MolToSmiles(load_molecule(iso)) == Chem.MolToSmiles(iso)


@pytest.mark.parametrize("smiles, count", [
    ("CC(O)C(O)C(O)C", 4),  # pentane-2,3,4-triol: two meso forms + one pair of enantiomers (textbook)
    ("CC1CCC(C)CC1", 2),    # cis and trans
    ("CC(O)C(O)C", 3),      # butane-2,3-diol: (R,R), (S,S), meso (textbook)
    ("CCO", 1),
])
def test_number_of_stereoisomers(smiles, count):
    isomers = stereoisomers(smiles)
    assert len(isomers) == count
    assert len({m.GetProp("_Name") for m in isomers}) == count


def test_stereoisomers_keep_what_the_input_assigned():
    isomers = stereoisomers("C[C@@H](O)C=CC")
    assert len(isomers) == 2
    for iso in isomers:
        assert cip_labels(iso)[0] == {1: "R"}
    assert sorted(list(cip_labels(m)[1].values())[0] for m in isomers) == ["E", "Z"]


def test_stereoisomers_limit_and_cumulenes():
    with pytest.raises(InputError, match=r"7 unassigned stereo elements, up to 128 .* max_isomers=16"):
        stereoisomers("CC(O)C(O)C(O)C(O)C(O)C(O)C(O)C", max_isomers=16)
    with pytest.raises(InputError, match=r"allene/cumulene axis"):
        stereoisomers("CC=C=CC")


# --------------------------------------------------------------------------------------
# stereo_signature and bond_graph_from_coordinates
# --------------------------------------------------------------------------------------

def test_stereo_signature_detects_an_inverted_centre_and_a_flipped_double_bond():
    mol = load_molecule(embedded("C[C@@H](O)/C=C/C", n=1, seed=4))
    reference = stereo_signature(mol, 0)
    assert reference == (((1,), "R"), ((3, 4), "E"))

    mirrored = Chem.Mol(mol)
    conf = mirrored.GetConformer(0)
    for i, xyz in enumerate(conf.GetPositions() * np.array([1.0, 1.0, -1.0])):
        conf.SetAtomPosition(i, xyz.tolist())
    # a mirror image inverts the centre; E/Z does not change under reflection
    assert stereo_signature(mirrored, 0) == (((1,), "S"), ((3, 4), "E"))

    twisted = Chem.Mol(mol)
    conf = twisted.GetConformer(0)
    angle = rdMolTransforms.GetDihedralDeg(conf, 1, 3, 4, 5)
    rdMolTransforms.SetDihedralDeg(conf, 1, 3, 4, 5, angle + 180.0)
    assert stereo_signature(twisted, 0) == (((1,), "R"), ((3, 4), "Z"))


def test_stereo_signature_ignores_flags_and_rigid_motion():
    mol = load_molecule(embedded("C[C@@H](O)CC", seed=9))
    moved = Chem.Mol(mol)
    rotation = np.array([[0.0, -1.0, 0.0], [1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])
    conf = moved.GetConformer()
    for i, xyz in enumerate(conf.GetPositions() @ rotation.T + 5.0):
        conf.SetAtomPosition(i, xyz.tolist())
    Chem.RemoveStereochemistry(moved)  # the flags are not what is read
    assert stereo_signature(moved) == stereo_signature(mol) == (((1,), "R"),)


def test_stereo_signature_errors():
    with pytest.raises(InputError, match=r"has no conformer"):
        stereo_signature(load_molecule("CCO"), 0)
    with pytest.raises(InputError, match=r"no conformer with id 5"):
        stereo_signature(load_molecule(embedded("CCO")), 5)
    with pytest.raises(InputError, match=r"mol must be an RDKit Mol"):
        stereo_signature("CCO")


def test_bond_graph_matches_bonds_and_rdkit_connectivity():
    for smiles in ("ClCC(=O)NCCS", "OC1CCCCC1", "C[Si](C)(C)OC(=O)c1ccc(Br)cc1"):
        mol = load_molecule(embedded(smiles, seed=3))
        graph = bond_graph_from_coordinates(mol, 0)
        assert graph == bonds_of(mol)
        # independent implementation: RDKit's DetermineConnectivity (covalent radii x 1.3)
        xyz = Chem.MolFromXYZBlock(Chem.MolToXYZBlock(mol))
        rdDetermineBonds.DetermineConnectivity(xyz, covFactor=1.3)
        assert graph == bonds_of(xyz)


def test_stretched_bond_disappears_from_the_graph():
    mol = load_molecule(embedded("CCO", seed=1))
    conf = mol.GetConformer(0)
    rdMolTransforms.SetBondLength(conf, 0, 1, 3.0)
    graph = bond_graph_from_coordinates(mol, 0)
    assert graph == bonds_of(mol) - {(0, 1)}
    # a C-C distance of 1.9 angstrom is still within 1.3 x (0.76 + 0.76) = 1.98 (RDKit radii)
    rdMolTransforms.SetBondLength(conf, 0, 1, 1.9)
    assert (0, 1) in bond_graph_from_coordinates(mol, 0)
    assert (0, 1) not in bond_graph_from_coordinates(mol, 0, tolerance=0.2)  # 1.82 angstrom


def test_bond_graph_tolerance_is_checked():
    mol = load_molecule(embedded("CCO"))
    with pytest.raises(InputError, match=r"tolerance must be in \[0, 1\)"):
        bond_graph_from_coordinates(mol, 0, tolerance=1.3)


# --------------------------------------------------------------------------------------
# summary
# --------------------------------------------------------------------------------------

@pytest.mark.parametrize("smiles, formula, heavy, rotatable, rings", [
    ("CCCC", "C4H10", 4, 1, []),              # butane: one rotatable C-C (PubChem count 1) [from memory]
    ("Cc1ccccc1", "C7H8", 7, 0, [6]),         # toluene: methyl rotation not counted (PubChem 0) [from memory]
    ("CCc1ccccc1", "C8H10", 8, 1, [6]),       # ethylbenzene (PubChem 1) [from memory]
    ("C1CC2CCC1C2", "C7H12", 7, 0, [5, 5]),   # norbornane: two five-membered rings in the SSSR
    ("OC1CCCCC1", "C6H12O", 7, 0, [6]),       # cyclohexanol: the C-O rotor ends in H (PubChem 0) [from memory]
])
def test_molecule_summary(smiles, formula, heavy, rotatable, rings):
    summary = molecule_summary(load_molecule(smiles))
    assert summary["formula"] == formula
    assert summary["heavy_atoms"] == heavy
    assert summary["rotatable_bonds"] == rotatable
    assert summary["ring_sizes"] == rings
    assert summary["charge"] == 0 and summary["multiplicity"] == 1


def test_molecule_summary_of_ions_radicals_and_ensembles():
    acetate = molecule_summary(load_molecule("CC(=O)[O-]"))
    assert (acetate["formula"], acetate["charge"], acetate["atoms"]) == ("C2H3O2-", -1, 7)
    assert molecule_summary(load_molecule("[CH3]"))["multiplicity"] == 2
    butanol = molecule_summary(load_molecule(BUTANOL_CONFS_SDF))
    assert butanol["conformers"] == 3
    assert butanol["stereo_elements"] == 1
    assert butanol["smiles"] == "CC[C@@H](C)O"
    assert butanol["name"] == "(R)-butan-2-ol"
