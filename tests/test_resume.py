"""Free energies, rescoring and torsion scans run through the execution layer and the store:
a second run with the same store recomputes nothing (the computing function is replaced by
one that fails, and the results still come back equal), and a failing unit is retried and
then reported. Identity checks of our own code; the numbers themselves are checked against
outside values in test_freeenergy.py and test_torsion.py."""

import json

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

import confpop.freeenergy
import confpop.torsion_scan
from confpop.ensemble import Ensemble
from confpop.errors import CalculationFailed
from confpop.store import ResultStore


def _fail(*args, **kwargs):
    raise AssertionError("computed again although the store holds the result")


def _water():
    mol = Chem.AddHs(Chem.MolFromSmiles("O"))
    AllChem.EmbedMolecule(mol, randomSeed=1)
    AllChem.MMFFOptimizeMolecule(mol, maxIters=2000)
    return Ensemble.from_mol(mol, level="mmff94")


def _ethanol():
    mol = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    AllChem.EmbedMultipleConfs(mol, 2, randomSeed=1)
    return Ensemble.from_mol(mol)


def test_free_energies_resume_from_the_store(tmp_path, monkeypatch):
    path = tmp_path / "results.sqlite"
    ens = _water()
    first = ens.add_free_energies(method="mmff94", temperatures=[298.15], workers=1,
                                  store=str(path))
    with ResultStore(path) as store:
        assert len(store) == len(ens.ids())
    monkeypatch.setattr(confpop.freeenergy, "free_energy_unit", _fail)
    again = ens.add_free_energies(method="mmff94", temperatures=[298.15], workers=1,
                                  store=str(path))
    cols = ["gcorr_298.15", "zpe", "symmetry_number"]
    assert np.allclose(again.table()[cols].astype(float), first.table()[cols].astype(float),
                       rtol=0, atol=0)
    # another temperature is another calculation: not taken from the store (so it fails here)
    other = ens.add_free_energies(method="mmff94", temperatures=[310.0], workers=1,
                                  store=str(path))
    assert other.raw_table["status"].eq("failed").all()


def test_rescoring_resumes_from_the_store(tmp_path, monkeypatch):
    path = tmp_path / "results.sqlite"
    ens = _ethanol()
    first = ens.rescore("mmff94", workers=1, store=str(path))
    monkeypatch.setattr(confpop.freeenergy, "single_point_unit", _fail)
    again = ens.rescore("mmff94", workers=1, store=str(path))
    assert again.column("energy_mmff94").tolist() == first.column("energy_mmff94").tolist()
    # the ranking (rank=False keeps the old level) does not change the stored calculation
    kept = ens.rescore("mmff94", workers=1, store=str(path), rank=False)
    assert kept.column("energy_mmff94").tolist() == first.column("energy_mmff94").tolist()


def test_torsion_scan_resumes_from_the_store(tmp_path, monkeypatch):
    path = tmp_path / "results.sqlite"
    first = confpop.torsion_scan.scan_torsion("CCCC", (0, 1, 2, 3), method="model", step=60,
                                              store=str(path))
    with ResultStore(path) as store:
        stored = len(store)
    assert stored >= 3  # the starting optimization and the two walks, plus extrema points
    monkeypatch.setattr(confpop.torsion_scan, "_walk", _fail)
    monkeypatch.setattr(confpop.torsion_scan, "_start_unit", _fail)
    again = confpop.torsion_scan.scan_torsion("CCCC", (0, 1, 2, 3), method="model", step=60,
                                              store=str(path))
    np.testing.assert_array_equal(again.angles, first.angles)
    np.testing.assert_array_equal(again.energies, first.energies)
    assert again.gradient_calls == first.gradient_calls


def test_a_failing_walk_is_retried_then_reported(monkeypatch):
    calls = []

    def broken(*args, **kwargs):
        calls.append(1)
        raise RuntimeError("engine crashed")

    monkeypatch.setattr(confpop.torsion_scan, "_walk", broken)
    with pytest.raises(CalculationFailed, match=r"the rigid scan failed \(2 attempts\): "
                                                r"RuntimeError: engine crashed"):
        confpop.torsion_scan.scan_torsion("CCCC", (0, 1, 2, 3), method="model", step=60,
                                          relaxed=False)
    assert len(calls) == 2


def test_scan_command_writes_and_reuses_its_store(tmp_path, monkeypatch, capsys):
    from confpop.cli import main

    path = tmp_path / "scan.sqlite"
    argv = ["scan", "CCCC", "--bond", "2", "3", "--method", "model", "--step", "60",
            "--workers", "1", "--store", str(path), "--json"]
    assert main(argv) == 0
    first = capsys.readouterr().out
    with ResultStore(path) as store:
        assert len(store) >= 3
    monkeypatch.setattr(confpop.torsion_scan, "_walk", _fail)
    monkeypatch.setattr(confpop.torsion_scan, "_start_unit", _fail)
    assert main(argv) == 0
    again = json.loads(capsys.readouterr().out)
    first = json.loads(first)
    for payload in (first, again):
        payload.pop("seconds", None)
    assert again == first


def test_interconversion_passes_the_store_to_its_scan(tmp_path, monkeypatch):
    from confpop.interconversion import interconversion

    from rdkit.Chem import rdMolTransforms

    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    AllChem.EmbedMultipleConfs(mol, 2, randomSeed=7)
    rdMolTransforms.SetDihedralDeg(mol.GetConformer(0), 0, 1, 2, 3, 180.0)
    rdMolTransforms.SetDihedralDeg(mol.GetConformer(1), 0, 1, 2, 3, 65.0)
    ens = Ensemble.from_mol(mol)
    path = tmp_path / "results.sqlite"
    first = interconversion(ens, 0, 1, method="model", store=str(path))
    with ResultStore(path) as store:
        assert len(store) >= 3
    monkeypatch.setattr(confpop.torsion_scan, "_walk", _fail)
    monkeypatch.setattr(confpop.torsion_scan, "_start_unit", _fail)
    again = interconversion(ens, 0, 1, method="model", store=str(path))
    assert first.single_torsion and np.isfinite(first.barrier_forward)
    assert again.barrier_forward == first.barrier_forward
