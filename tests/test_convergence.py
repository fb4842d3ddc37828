"""Two-stream convergence: what the search reports, and the Good–Turing tally."""

import json
import inspect

import numpy as np
import pytest
from rdkit import Chem

from confpop import search
from confpop.cli import main
from confpop.sampling import sample_conformers
from confpop.units import convert
from test_moves import _grid_ensemble


def _mol(smiles):
    return Chem.AddHs(Chem.MolFromSmiles(smiles))


def test_defaults_of_library_and_command_line_agree():
    from confpop import cli, pipeline

    params = inspect.signature(search).parameters
    assert params["target_overlap"].default == pipeline.TARGET_OVERLAP == cli._TARGET_OVERLAP
    assert params["moves"].default is True


def test_search_reports_stream_agreement_and_why_it_stopped():
    ens = search("CCCCO", "mmff94s", seed=3)
    summary = next(p for p in ens.provenance if p["step"] == "summary")
    sample = next(p for p in ens.provenance if p["step"] == "sample")
    assert summary["stream_overlap"] >= 0.9 and summary["sampling_converged"]
    assert summary["sampling_stop"] == "streams agree" and summary["target_overlap"] == 0.9
    assert sample["streams"] == 2 and len(sample["overlap_per_round"]) == sample["rounds"]
    # independent reference: the systematic grid of 3 x 3 x 3 staggered starts of C-C-C-C,
    # C-C-C-O and C-C-O-H relaxed with RDKit's MMFF94s directly (15 minima, mirror images
    # merged): the same minima with the same relative energies
    mol = _mol("CCCCO")
    n = mol.GetNumAtoms()
    _, grid_e, _ = _grid_ensemble(mol, [(0, 1, 2, 3), (1, 2, 3, 4), (2, 3, 4, n - 1)])
    rel = ens.table()["relative_energy"].to_numpy()
    assert len(rel) == len(grid_e) == 15
    np.testing.assert_allclose(rel, convert(np.sort(grid_e) - grid_e.min(), "hartree", "kcal/mol"),
                               atol=0.02)


def test_round_budget_is_reported_when_streams_disagree():
    # one trial per stream and round, no moves, one round: 1-hexanol's streams cannot agree
    _, _, _, _, rep = sample_conformers(_mol("CCCCCCO"), n_trials=2, seed=1, max_rounds=1,
                                        streams=2, target_overlap=0.9)
    assert not rep.converged and rep.stop_reason == "round budget"
    assert rep.stream_overlap < 0.9 and rep.trials == 2


def test_good_turing_counts_etkdg_draws_only():
    # a conformer only a move produced was never drawn: times_found 0 and outside the tally
    # (Good 1953: n1 / N over the draws)
    _, _, times, _, rep = sample_conformers(_mol("COC1COC1"), n_trials=40, seed=0, max_rounds=1,
                                            moves=True, threads=1)
    assert list(times) == [40, 0]
    assert rep.in_window == 40 and rep.found_once == 0 and rep.completeness == 1.0
    assert rep.found_by_moves == 1


def test_command_line_options_reach_the_search(capsys):
    assert main(["ensemble", "CCCCO", "--method", "mmff94s", "--no-moves", "--agreement", "0",
                 "--rounds", "2", "--json"]) == 0
    sample = next(p for p in json.loads(capsys.readouterr().out)["provenance"]
                  if p["step"] == "sample")
    assert sample["streams"] == 1 and sample["move_relaxations"] == 0
    assert main(["ensemble", "CCCCO", "--method", "mmff94s"]) == 0
    out = capsys.readouterr().out
    assert "two sampling streams agree to" in out and "reached" in out
    assert main(["ensemble", "CCCC", "--method", "mmff94s", "--agreement", "1.5"]) == 2
    assert "--agreement must be >= 0 and <= 1, got 1.5" in capsys.readouterr().err
