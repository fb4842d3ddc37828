"""The search cost estimate (confpop.budget) against measured searches.

The measured counts below are our own: ``search(smiles, method="gfn2", seed=0, workers=1)``
stopped before the GFN2 optimizations (MMFF94s sampling + GFN2 screen), with the defaults
("new": move search, two streams, overlap 0.9) and with ``moves=False,
target_overlap=None`` ("old"), December 2026 (confpop.budget module notes). The estimate
must stay an upper-ish bound on the structures that reach the GFN2 optimization: at or
above the measured count and not more than about an order of magnitude above it.
"""

import pytest
from rdkit import Chem

from confpop.budget import MAX_CPU_HOURS, check_search_budget, estimate_search
from confpop.errors import InputError

OLD = {"moves": False, "target_overlap": None}

# smiles: (structures optimized at GFN2, old path; new defaults), measured (module notes)
MEASURED = {
    "CCCCO": (12, 15),  # 1-butanol
    "CCOC(=O)[C@@H](C)CCOC": (111, 161),  # invented ester, 5 rotatable bonds
    "CC(C)NC[C@H](O)COc1cccc2ccccc12": (233, 468),  # propranolol (565 force-field conformers)
    "CC(C)[C@H]1CC[C@H](OCCO)CC1": (71, 149),  # invented cyclohexane ether
    # 1-decanol: 20 rounds (3,100 trials) on both paths, the two streams never agreed
    "CCCCCCCCCCO": (1788, 3413),
}


def _mol(smiles):
    return Chem.AddHs(Chem.MolFromSmiles(smiles))


@pytest.mark.parametrize("smiles", sorted(MEASURED))
def test_structure_count_is_an_upper_bound_of_the_measured_searches(smiles):
    for kwargs, measured in zip((OLD, {}), MEASURED[smiles]):
        if measured is None:
            continue
        est = estimate_search(_mol(smiles), **kwargs)
        # at or above what was measured, within about an order of magnitude (measured
        # ratios 1.08-6.8, module notes)
        assert measured <= est.structures <= 10 * measured, (kwargs, est, measured)


def test_the_former_estimate_missed_propranolol_by_nine_times():
    # the figure this module fixes: 50 optimizations assumed (min(n_trials, 3 ** 7)) where the
    # default search optimized 468 at GFN2; now 1,600 (20 rounds allowed)
    est = estimate_search(_mol("CC(C)NC[C@H](O)COc1cccc2ccccc12"))
    assert est.trials == 50 and est.rotatable_bonds == 7
    assert est.structures >= 468
    # the moves' relaxations are counted: 6,400 measured (400 parents x 16 moves)
    assert est.moves == 16 and est.relaxations >= 6400


def test_butanol_sampling_stays_inside_the_estimate():
    # an independent run of the sampler itself (smallest molecule with moves and two streams)
    from confpop.sampling import sample_conformers

    mol = _mol("CCCCO")
    est = estimate_search(mol)
    _, _, _, _, rep = sample_conformers(mol, seed=0, method="mmff94s", energy_window=10.0,
                                        moves=True, streams=2, target_overlap=0.9)
    assert rep.unique <= est.structures
    assert rep.trials + rep.move_relaxations <= est.relaxations


def test_moves_and_streams_raise_the_estimate_and_can_be_switched_off():
    mol = _mol("CCOC(=O)[C@@H](C)CCOC")
    new, no_moves = estimate_search(mol), estimate_search(mol, moves=False)
    assert no_moves.moves == 0 and no_moves.relaxations < new.relaxations
    assert no_moves.cpu_hours < new.cpu_hours
    # one stream stops on completeness and was measured up to 20 rounds (1-decanol)
    one_stream = estimate_search(mol, moves=False, target_overlap=None)
    assert one_stream.relaxations == 20 * one_stream.trials
    assert estimate_search(mol, moves=False, target_overlap=None, max_rounds=2).relaxations \
        == 2 * one_stream.trials
    # force fields cost nothing after sampling
    assert estimate_search(mol, method="mmff94s").optimization_seconds == 0.0


# an invented peptide-like chain (the one tests/test_cli_safety.py refuses on the command line)
PEPTIDE = "N" + "".join(["[C@@H](C)C(=O)N", "CC(=O)N", "[C@@H](CC(C)C)C(=O)N",
                         "[C@@H](Cc1ccccc1)C(=O)N"] * 6) + "C"


def test_refusal_names_the_counts_and_the_caller_s_options():
    mol = _mol(PEPTIDE)
    with pytest.raises(InputError) as cli:
        check_search_budget(mol)
    text = str(cli.value)
    assert "structures to optimize with gfn2" in text and "force-field relaxations" in text
    assert "--allow-long-run" in text and "--no-moves" in text
    with pytest.raises(InputError) as api:
        check_search_budget(mol, option="allow_long=True",
                            levers="moves=False, a smaller n_trials or a cheaper method")
    assert "allow_long=True" in str(api.value) and "--" not in str(api.value)
    assert check_search_budget(mol, allow_long=True).cpu_hours > MAX_CPU_HOURS


def test_a_flexible_drug_sized_molecule_needs_fewer_rounds_or_insisting():
    # an invented 12-rotor amide-ether (61 atoms): ~3.1 CPU hours with the defaults (20 rounds
    # allowed, as 1-decanol needed), ~0.8 with 3 rounds; propranolol stays below the bound
    mol = _mol("COc1ccc(CCN(C)CCCC(=O)NCc2ccc(OC)c(OC)c2)cc1")
    with pytest.raises(InputError, match=r"fewer --rounds or --trials, --no-moves"):
        check_search_budget(mol)
    assert check_search_budget(mol, max_rounds=3).cpu_hours < MAX_CPU_HOURS
    assert check_search_budget(_mol("CC(C)NC[C@H](O)COc1cccc2ccccc12")).cpu_hours < MAX_CPU_HOURS


def test_search_refuses_in_python_terms(monkeypatch):
    import confpop.budget
    from confpop.pipeline import search

    monkeypatch.setattr(confpop.budget, "MAX_CPU_HOURS", 1e-9)
    with pytest.raises(InputError,
                       match=r"allow_long=True to insist, or choose a smaller max_rounds"):
        search("CCCCO")
