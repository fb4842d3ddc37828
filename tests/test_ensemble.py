"""The Ensemble table, populations and files."""

import json

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from confpop.ensemble import Ensemble
from confpop.errors import InputError
from confpop.io import read_ensemble, write_xyz
from reference_values import value as refval


@pytest.fixture()
def three():
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCO"))
    AllChem.EmbedMultipleConfs(mol, 3, randomSeed=5)
    # three states G = (0, 0.5, 1.2) kcal/mol with g = (1, 2, 1): worked values in
    # tests/reference_values.py (three_state_*)
    return Ensemble.from_mol(mol, [0.0, 0.5, 1.2], level="test", unit="kcal/mol",
                             degeneracy=[1, 2, 1])


def test_populations_match_worked_three_state_values(three):
    pops = three.populations([298.15])
    # computed from the Boltzmann formula (tests/reference_values.py)
    np.testing.assert_allclose(pops[298.15].to_numpy(), refval("three_state_populations"), atol=1e-7)
    assert list(pops.columns) == [298.15]


def test_populations_several_temperatures_and_limits(three):
    pops = three.populations([1.0, 298.15, 1e7])
    np.testing.assert_allclose(pops.sum().to_numpy(), 1.0, atol=1e-12)
    assert pops.loc[0, 1.0] == pytest.approx(1.0, abs=1e-12)          # T -> 0: the minimum
    np.testing.assert_allclose(pops[1e7].to_numpy(), [0.25, 0.5, 0.25], atol=1e-4)  # T -> inf: g


def test_duplicate_row_equals_degeneracy_two():
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCO"))
    AllChem.EmbedMultipleConfs(mol, 3, randomSeed=5)
    two_rows = Ensemble.from_mol(mol, [0.0, 0.7, 0.7], unit="kcal/mol")
    merged = two_rows.select([0, 1]).with_column("degeneracy", {0: 1, 1: 2})
    p3 = two_rows.populations(310.0)[310.0]
    p2 = merged.populations(310.0)[310.0]
    assert p2[1] == pytest.approx(p3[1] + p3[2], rel=1e-12)


def test_free_energy_gaps_and_effective_count(three):
    gaps = three.free_energy_gaps(298.15)
    assert gaps.loc[1, "gap"] == pytest.approx(0.5)
    rt = 0.59248495  # RT at 298.15 K, kcal/mol [C]
    assert gaps.loc[1, "effective_gap"] == pytest.approx(0.5 - rt * np.log(2), abs=1e-6)
    p = three.populations(298.15)[298.15].to_numpy()
    assert three.effective_count(298.15) == pytest.approx(1 / np.sum(p ** 2))


def test_failed_rows_stay_in_table_but_not_in_populations(three):
    table = three.raw_table
    table.loc[2, ["status", "reason"]] = ["failed", "integrity: bond broken: C1-O3"]
    ens = Ensemble(three.mol, table, level="test")
    assert len(ens) == 2 and ens.ids() == [0, 1] and ens.ids(active=False) == [0, 1, 2]
    assert list(ens.populations(298.15).index) == [0, 1]
    shown = ens.table()
    assert shown.loc[2, "reason"].startswith("integrity") and np.isnan(shown.loc[2, "relative_energy"])
    assert "failed" in repr(ens) and "<table" in ens._repr_html_()


def test_steps_return_new_ensembles(three):
    new = three.with_column("note", {0: "x"})
    assert "note" not in three.raw_table.columns and "note" in new.raw_table.columns


def test_bad_input_named(three):
    with pytest.raises(InputError, match="temperature must be finite and > 0 K"):
        three.populations([-5.0])
    with pytest.raises(InputError, match="one value per conformer"):
        Ensemble.from_mol(three.mol, [0.0])
    with pytest.raises(InputError, match="no free-energy correction at 298.15 K"):
        three.populations(298.15, energy="free")
    with pytest.raises(InputError, match="conf_id must be one of"):
        three.positions(99)


def test_sdf_round_trip_is_exact(tmp_path, three):
    ens = three.with_column("dipole_debye", {0: 1.25, 1: np.nan, 2: 2.5})
    ens.provenance.append({"step": "test", "n_in": 3, "n_out": 3})
    path = tmp_path / "e.sdf"
    ens.to_sdf(path)
    back = read_ensemble(path)
    pd.testing.assert_frame_equal(back.raw_table, ens.raw_table)
    for cid in ens.ids():
        np.testing.assert_array_equal(back.positions(cid), ens.positions(cid))
    assert back.level == "test" and back.provenance == ens.provenance
    text = path.read_text()
    assert "energy_test_hartree" in text and "relative_energy_kcal_per_mol" in text


def test_foreign_sdf_with_energy_property(tmp_path, three):
    path = tmp_path / "foreign.sdf"
    with Chem.SDWriter(str(path)) as w:
        for k, conf in enumerate(three.mol.GetConformers()):
            m = Chem.Mol(three.mol)
            m.RemoveAllConformers()
            m.AddConformer(Chem.Conformer(conf), assignId=True)
            m.SetProp("E_kcal", str([0.0, 0.5, 1.2][k]))
            w.write(m)
    ens = read_ensemble(path, energy_property="E_kcal", unit="kcal/mol")
    np.testing.assert_allclose(ens.energies().to_numpy(), [0.0, 0.5, 1.2], atol=1e-9)
    with pytest.raises(InputError, match="has no property 'nope'"):
        read_ensemble(path, energy_property="nope")


def test_xyz_and_json(tmp_path, three):
    path = tmp_path / "e.xyz"
    write_xyz(three, path, unit="kcal/mol")
    text = path.read_text().splitlines()
    assert text[1].startswith("0.0000000000 kcal/mol")
    data = json.loads(three.to_json(temperatures=[273.15, 298.15]))
    assert {"input", "method", "solvent", "solvent_model", "temperatures", "conformers",
            "provenance", "versions", "effective_conformers"} <= set(data)
    assert set(data["effective_conformers"]) == {"273.15", "298.15"}
    assert data["conformers"][1]["degeneracy"] == 2 and len(data["conformers"][0]["population"]) == 2
