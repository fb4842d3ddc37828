"""Species (conformers separated by slow bond rotations), per-species NMR averages, the
slow-bond path of interconversion, and method cautions.

Outside references: room-temperature barrier classes (tertiary amide C-N 15-23 kcal/mol,
from memory of the physical-organic literature; N,N-dimethylacetamide 15.6 kcal/mol in the
gas phase as quoted in issue 14); the rest are brute-force recomputations of the same
averages from the per-conformer couplings and populations.
"""

import warnings

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from confpop.nmr import (MethodWarning, average_couplings, couplings, fit_populations,
                         method_cautions)
from confpop.species import slow_bonds, species_populations, species_table
from confpop.torsion import interconversion, torsion_changes
from nmr_molecules import mmff_ensemble


@pytest.mark.parametrize("smiles, kinds", [
    ("CC(=O)N(C)Cc1ccccc1", ["amide"]),          # tertiary amide, two different N-substituents
    ("CC(=O)NC", ["amide"]),                      # secondary amide: cis/trans
    ("CC(=O)N(C)C", []),                          # NMe2: both rotamers are the same molecule
    ("CC(N)=O", []),                              # NH2
    ("COC(=O)NC", ["carbamate"]),
    ("CC(=S)N(C)CC", ["thioamide"]),
    ("CNC(=O)NC", []),                            # urea: fast (~10-13 kcal/mol, from memory)
    ("Cc1ccccc1-c1ccccc1C", ["hindered biaryl"]), # 2,2'-dimethylbiphenyl
    ("c1ccccc1-c1ccccc1", []),                    # biphenyl: fast
    ("Cc1ccccc1-c1ccccc1", []),                   # one ortho substituent: fast (common practice)
    ("Cc1cccc(C)c1-c1ccccc1", []),                # both rings locally symmetric: no isomers
    ("CCCC", []),
])
def test_slow_bond_classes(smiles, kinds):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert [b.kind for b in slow_bonds(mol)] == kinds


@pytest.fixture(scope="module")
def amide():
    # N-(2-methoxyethyl)-N-methylacetamide: E and Z amide rotamers plus chain rotamers
    return mmff_ensemble("CC(=O)N(C)CCOC")


def test_species_column_and_shares(amide):
    table = amide.table()
    assert {"species", "species_label"} <= set(table.columns)
    assert table["species"].nunique() == 2
    assert table["species"].iloc[0] == 0          # species 0 holds the lowest conformer
    labels = set(table["species_label"])
    # 1-based like every label users see (and like the torsion labels of the same table):
    # CC(=O)N(C)CCOC has C2 carbonyl, O3, N4, C5 N-methyl, C6 N-CH2 (count the SMILES atoms)
    assert labels == {"C2-N4 O3 cis to C6", "C2-N4 O3 trans to C6"}
    # shares = sums of conformer populations (brute force), summing to 1
    temps = [273.15, 298.15]
    shares = amide.species(temps)
    pops = amide.populations(temps)
    for t in temps:
        brute = pops[t].groupby(table["species"]).sum()
        np.testing.assert_allclose(shares[t].to_numpy(), brute.sort_index().to_numpy(), atol=1e-12)
        assert shares[t].sum() == pytest.approx(1.0, abs=1e-12)
    assert list(shares["n_conformers"]) == list(table["species"].value_counts().sort_index())
    # within each species the conformer populations sum to 1 and keep their ratios
    within = amide.species(temps, within=True)
    for t in temps:
        np.testing.assert_allclose(within.groupby("species")[t].sum().to_numpy(), 1.0, atol=1e-12)
        for s in (0, 1):
            ids = within.index[within["species"] == s]
            np.testing.assert_allclose(within.loc[ids, t], pops.loc[ids, t] / pops.loc[ids, t].sum(),
                                       atol=1e-12)


def test_couplings_are_averaged_within_species(amide):
    table = average_couplings(amide, [298.15])
    per_conf = couplings(amide)
    pops = amide.populations([298.15])[298.15]
    sp = species_table(amide)["species"]
    assert sorted(table["species"].unique()) == [0, 1]
    for s in (0, 1):
        ids = [i for i in pops.index if sp[i] == s]
        w = pops[ids] / pops[ids].sum()
        block = table[table["species"] == s].reset_index(drop=True)
        brute = per_conf[ids].to_numpy() @ w.to_numpy()
        np.testing.assert_allclose(block[298.15].to_numpy(), brute, atol=1e-12)
        share = table.attrs["species"][s]["share"][298.15]
        assert share == pytest.approx(float(pops[ids].sum()), abs=1e-12)
    # species=False pools everything, as if all exchange were fast
    pooled = average_couplings(amide, [298.15], species=False)
    assert set(pooled["species"]) == {0}
    np.testing.assert_allclose(pooled[298.15].to_numpy(),
                               per_conf[list(pops.index)].to_numpy() @ pops.to_numpy(), atol=1e-12)


def test_fit_one_species(amide):
    table = average_couplings(amide, [298.15])
    row = table[table["species"] == 0].iloc[0]
    observed = {(int(row.atom_a), int(row.atom_b)): float(row[298.15])}
    fit = fit_populations(amide, observed, n_bootstrap=0, species=0)
    sp = species_table(amide)["species"]
    assert set(fit.populations.index) == {i for i in amide.ids() if sp[i] == 0}
    pooled = fit_populations(amide, observed, n_bootstrap=0)
    assert "2 species" in pooled.warning
    with pytest.raises(ValueError, match="species must be one of"):
        fit_populations(amide, observed, n_bootstrap=0, species=5)


@pytest.mark.slow
def test_interconversion_across_the_slow_bond(amide):
    # species 0 and 1 conformers that also differ in other torsions: before, this was refused
    # ("differ in 3 torsions"); now the amide C-N is scanned (MMFF94s, relaxed) and the others
    # relax along it. The barrier must fall in the tertiary-amide class range, 15-23 kcal/mol
    # [from memory], with 1.5 kcal/mol allowed for the force field.
    table = amide.table()
    a = int(table.index[table["species"] == 0][0])
    b = None
    for cand in table.index[table["species"] == 1]:
        if (torsion_changes(amide, a, int(cand))["difference"] > 60).sum() >= 2:
            b = int(cand)
            break
    assert b is not None
    ic = interconversion(amide, a, b, method="mmff94s", step=30.0)
    assert ic.single_torsion
    assert ic.label == "O2-C1-N3-C5"
    assert "relax along the scan" in ic.message
    assert 13.5 <= ic.barrier_forward <= 24.5
    assert ic.barrier_reverse < ic.barrier_forward       # from the lower species
    # single points at the scan's extrema with the scan's own method change nothing (identity);
    # the scan-point barrier agrees with the fitted one to the grid's resolution
    from confpop.torsion import rescore_barrier
    same = rescore_barrier(ic.profile, method="mmff94s")
    assert same.correction == pytest.approx(0.0, abs=1e-6)
    assert same.barrier_scan == pytest.approx(ic.barrier_forward, abs=1.5)


def test_no_species_split_without_slow_bonds():
    ens = mmff_ensemble("OCCC", n=20)
    assert set(ens.table()["species"]) == {0}
    assert set(ens.table()["species_label"]) == {""}
    shares = species_populations(ens, 298.15)
    assert shares[298.15].tolist() == [pytest.approx(1.0)]


def test_method_cautions():
    # polyol in water at a tight-binding level: warned, with the measured size
    glycerol = mmff_ensemble("OCC(O)CO", n=10, level="gfn2", solvent="water")
    [c] = method_cautions(glycerol)
    assert c.key == "polyol-water" and "2.3-6.0 Hz" in c.message
    with pytest.warns(MethodWarning, match="polyol and sugar"):
        table = average_couplings(glycerol, [298.15])
    assert table.attrs["cautions"] == [c.message]
    # the same numbers at a level that is not tight binding: nothing to say
    dft = mmff_ensemble("OCC(O)CO", n=10, level="dft", solvent="water")
    assert method_cautions(dft) == []
    with warnings.catch_warnings():
        warnings.simplefilter("error", MethodWarning)
        average_couplings(dft, [298.15])
    # fluorine gauche effect, gas phase only
    dfe = mmff_ensemble("FCCF", n=6, level="gfn2")
    assert [c.key for c in method_cautions(dfe)] == ["fluorine-gauche-gas"]
    assert method_cautions(mmff_ensemble("FCCF", n=6, level="gfn2", solvent="water")) == []


def test_amide_barrier_caution_from_a_tight_binding_scan():
    from confpop.nmr.cautions import amide_barrier_caution
    assert amide_barrier_caution("gfn2", "amide").key == "amide-barrier"
    assert "1.4-3.2 kcal/mol" in amide_barrier_caution("gfn2", "carbamate").message
    assert amide_barrier_caution("mmff94s", "amide") is None
    assert amide_barrier_caution("gfn2", "hindered biaryl") is None


def test_couplings_command_shows_species_and_cautions(amide, tmp_path, capsys):
    import json

    from confpop.cli import main
    sdf = tmp_path / "amide.sdf"
    amide.to_sdf(sdf)
    assert main(["couplings", str(sdf)]) == 0
    out = capsys.readouterr().out
    # atoms numbered from 1 on the screen, as the header says (C2 carbonyl C, N4, O3, C6)
    assert "species 0 (C2-N4 O3 cis to C6)" in out and "species 1 (C2-N4 O3 trans to C6)" in out
    assert main(["couplings", str(sdf), "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert {s["label"] for s in payload["species"]} == {"C2-N4 O3 cis to C6",
                                                        "C2-N4 O3 trans to C6"}
    assert [s["species"] for s in payload["species"]] == [0, 1]
    assert {r["species"] for r in payload["couplings"]} == {0, 1}
    observed = tmp_path / "observed.csv"   # any well-formed file: the species check comes first
    observed.write_text("atom_i,atom_j,J\n1,2,7.0\n")
    assert main(["couplings", str(sdf), "--species", "7", "--observed", str(observed)]) == 2
    assert "--species must be one of [0, 1]" in capsys.readouterr().err
    assert main(["couplings", str(sdf), "--species", "1"]) == 2
    assert "needs --observed" in capsys.readouterr().err
    # a tight-binding polyol in water: the caution is printed
    glycerol = mmff_ensemble("OCC(O)CO", n=10, level="gfn2", solvent="water")
    gsdf = tmp_path / "glycerol.sdf"
    glycerol.to_sdf(gsdf)
    assert main(["couplings", str(gsdf)]) == 0
    out = capsys.readouterr().out
    assert "method caution: GFN2-xTB with implicit water" in out


def test_mixed_configurations_split_into_species():
    # an ensemble embedded without stereo (as stereo="ignore" allows) mixes E/Z imines and
    # both configurations of a stereocentre: isomers that never average on the NMR time scale
    # (imine C=N isomerization 15-27 kcal/mol, from memory; a stereocentre not at all)
    from confpop.species import configuration_elements
    for smiles, kind in (("CC=NC", "imine E/Z"), ("CC=CC", "alkene E/Z"),
                         ("CC(O)CC", "stereocentre"), ("CC=NO", "oxime/hydrazone E/Z")):
        mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
        AllChem.EmbedMultipleConfs(mol, 12, randomSeed=2)
        assert [b.kind for b in configuration_elements(mol)] == [kind]
        states = {b.state(np.stack([c.GetPositions() for c in mol.GetConformers()]))[0]
                  for b in configuration_elements(mol)}
        table = species_table(mol)
        assert table["species"].nunique() == 2, smiles
        assert states <= {"cis", "trans", "+", "-"}
    # a configuration shared by every conformer adds nothing (the amide tests' labels hold)
    mol = Chem.AddHs(Chem.MolFromSmiles("C/C=N/C"))
    AllChem.EmbedMultipleConfs(mol, 6, randomSeed=2)
    assert set(species_table(mol)["species_label"]) == {""}


def test_noe_and_spread_within_species(amide):
    from confpop.nmr import coupling_spread, noe_distances
    # the acetyl CH3 (C0) to the N-CH2 (C5): near in one amide rotamer, far in the other
    noe = noe_distances(amide, [298.15], pairs=[(9, 15)])
    assert sorted(noe["species"]) == [0, 1]
    pops = amide.populations([298.15])[298.15]
    sp = species_table(amide)["species"]
    pos = {c: amide.positions(c) for c in pops.index}
    for s in (0, 1):
        ids = [i for i in pops.index if sp[i] == s]
        w = pops[ids] / pops[ids].sum()
        # brute force: group sums r^-6 over the methyl's and the CH2's protons, then r^-6 mean
        methyl = [9, 10, 11]      # on C0
        ch2 = [15, 16]            # on C5
        s6 = [sum(np.linalg.norm(pos[c][a] - pos[c][b]) ** -6 for a in methyl for b in ch2)
              for c in ids]
        expected = float(np.dot(w, s6)) ** (-1 / 6)
        got = float(noe.loc[noe["species"] == s, 298.15].iloc[0])
        assert got == pytest.approx(expected, rel=1e-9)
    spread = coupling_spread(amide, [298.15], energy_sigma=0.0, n_samples=20, by="group")
    table = average_couplings(amide, [298.15], by="group")
    merged = spread.merge(table, on=["group", "species"])
    np.testing.assert_allclose(merged["value"], merged[298.15], atol=1e-12)
    np.testing.assert_allclose(merged["mean"], merged[298.15], atol=1e-12)


@pytest.mark.slow
def test_exchange_summary_scans_the_slow_bond_once(amide):
    # three conformers: the lowest of species 0 and two of species 1 that differ from it in
    # the amide and other torsions. Before, every such pair was skipped ("differ in several
    # torsions"); now the amide bond is scanned once from species 0's lowest conformer and
    # both cross-species pairs get its barrier. Reference class range as above.
    from confpop.torsion import exchange_summary
    table = amide.table()
    a = int(table.index[table["species"] == 0][0])
    ones = [int(c) for c in table.index[table["species"] == 1]]
    picked = [c for c in ones if (torsion_changes(amide, a, c)["difference"] > 60).sum() >= 2]
    b = picked[0]
    c = next((x for x in picked[1:]
              if (torsion_changes(amide, b, x)["difference"] > 60).sum() >= 2), None)
    assert c is not None
    small = amide.select([a, b, c])
    with warnings.catch_warnings():
        warnings.simplefilter("error", MethodWarning)   # a force-field scan: no GFN2 caution
        out = exchange_summary(small, [298.15], delta_nu_hz=50.0, method="mmff94s")
    cross = out[out["species_a"] != out["species_b"]]
    assert len(cross) == 2
    assert set(cross["torsion"]) == {"O2-C1-N3-C5"}
    assert (cross["barrier_ab"] > 13.5).all() and (cross["barrier_ab"] < 24.5).all()
    assert cross["note"].str.contains("slow bond scanned from conformer").all()
    assert set(cross["regime"]) <= {"slow", "intermediate"}
    # the pair inside species 1 differs in several fast torsions only: skipped, as before
    assert [tuple(s[:2]) for s in out.attrs["skipped"]] == [(b, c)] or \
        [tuple(s[:2]) for s in out.attrs["skipped"]] == [(c, b)]


def test_ensemble_command_shows_species(capsys):
    # a tertiary amide: E and Z exchange slowly (two NMR signal sets; amide C-N barriers
    # ~15-21 kcal/mol, from memory), so the ensemble table shows them as two species
    from confpop.cli import main
    assert main(["ensemble", "CC(=O)N(C)Cc1ccccc1", "--method", "mmff94s", "--seed", "1"]) == 0
    out = capsys.readouterr().out
    assert "species" in out.splitlines()[2]  # the header, after the numbering line
    # atoms from 1: C2 carbonyl, N4, O3, C6 the benzylic CH2
    assert "species (slow exchange" in out and "C2-N4 O3 cis to C6" in out and "trans to C6" in out


def test_screen_and_sdf_species_labels_are_numbered_from_one(amide, tmp_path):
    # the ensemble screen's species line and the SDF species_label number atoms from 1, like
    # the torsion labels beside them (CC(=O)N(C)CCOC: C2 carbonyl, O3, N4, C6 N-CH2)
    from rdkit import Chem

    from confpop.cli import _ensemble_table_text
    text = _ensemble_table_text(amide, [298.15])
    assert "atoms numbered from 1" in text
    assert "conformer ids from 0, the same in every file and in Python" in text.splitlines()[0]
    # no free energies here: the header names ΔE only (it said "ΔE, ΔG" without any ΔG)
    assert text.splitlines()[0].startswith("conformers (ΔE in kcal/mol;")
    assert "ΔG" not in text.splitlines()[0] and "ΔG" not in text.splitlines()[1]
    assert "C2-N4 O3 cis to C6" in text and "C2-N4 O3 trans to C6" in text
    path = tmp_path / "amide.sdf"
    amide.to_sdf(path)
    labels = {m.GetProp("species_label") for m in Chem.SDMolSupplier(str(path), removeHs=False)}
    assert labels == {"C2-N4 O3 cis to C6", "C2-N4 O3 trans to C6"}
