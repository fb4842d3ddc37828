"""Sampling and force-field ranking against experiment and handbook values."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import rdMolTransforms as T

from confpop.errors import InputError
from confpop.sampling import default_trials, flexibility, sample_conformers
from confpop.units import convert
from reference_values import value as refval


def _mol(smiles):
    return Chem.AddHs(Chem.MolFromSmiles(smiles))


@pytest.fixture(scope="module")
def butane():
    return sample_conformers(_mol("CCCC"), seed=1)


def test_butane_anti_and_gauche_mmff94s(butane):
    mol, e, times, chiral, rep = butane
    assert mol.GetNumConformers() == 2
    dihedrals = [abs(T.GetDihedralDeg(c, 0, 1, 2, 3)) for c in mol.GetConformers()]
    assert dihedrals[0] == pytest.approx(180.0, abs=5.0)   # anti lowest
    assert dihedrals[1] == pytest.approx(65.0, abs=10.0)   # gauche
    assert list(chiral) == [False, True]                   # gauche has a mirror image
    gap = convert(e[1] - e[0], "hartree", "kcal/mol")
    # experiment: gauche - anti 0.67 +- 0.10 kcal/mol (Herrebout et al., J. Phys. Chem. 1995,
    # 99, 578); MMFF94s errs by a few tenths here, tolerance = the force field's error
    assert gap == pytest.approx(0.67, abs=0.5)
    assert rep.saturated and rep.completeness == pytest.approx(1.0)


def test_methylcyclohexane_equatorial_chair_and_twist_boat():
    mol, e, times, chiral, rep = sample_conformers(_mol("CC1CCCCC1"), seed=2)
    rel = convert(e - e[0], "hartree", "kcal/mol")
    # ring C-C-C-C dihedrals ~ +-55 in chairs; twist-boats have one near 30 or smaller
    def is_chair(conf):
        ring = [1, 2, 3, 4, 5, 6]
        d = [abs(T.GetDihedralDeg(conf, ring[i], ring[(i + 1) % 6], ring[(i + 2) % 6],
                                  ring[(i + 3) % 6])) for i in range(6)]
        return min(d) > 45
    def methyl_axial(conf):
        # axial methyl: dihedral CH3-C1-C2-C3 near 75, equatorial near 180
        return abs(T.GetDihedralDeg(conf, 0, 1, 2, 3)) < 120
    confs = list(mol.GetConformers())
    assert is_chair(confs[0]) and not methyl_axial(confs[0])   # global minimum: eq chair
    axial = [k for k, c in enumerate(confs) if is_chair(c) and methyl_axial(c)]
    assert len(axial) == 1
    # A-value of CH3 1.74 kcal/mol (Eliel, Wilen & Mander 1994, Table 11.7) [from memory];
    # a force field within 0.8
    assert rel[axial[0]] == pytest.approx(refval("a_value_methyl"), abs=0.8)
    boats = [rel[k] for k, c in enumerate(confs) if not is_chair(c)]
    # twist-boat ~5.5 kcal/mol above the chair (Anet & Bourn, JACS 1967, 89, 760) [from memory]
    assert min(boats) == pytest.approx(refval("cyclohexane_twist_boat_above_chair"), abs=1.5)


def test_same_seed_same_ensemble(butane):
    again = sample_conformers(_mol("CCCC"), seed=1)
    np.testing.assert_allclose(again[1], butane[1], rtol=0, atol=1e-12)
    np.testing.assert_allclose(again[0].GetConformer(1).GetPositions(),
                               butane[0].GetConformer(1).GetPositions(), atol=1e-10)


def test_trial_counts_scale_with_flexibility():
    assert default_trials(_mol("CCCC")) < default_trials(_mol("CCCCCCCCCCCC"))
    macro = _mol("C1CCCCCCCCCCC1")
    assert flexibility(macro)["macrocycle"]
    assert default_trials(macro) >= 2 * 20


def test_bad_settings_are_named():
    with pytest.raises(InputError, match="n_trials must be >= 1, got 0"):
        sample_conformers(_mol("CCCC"), n_trials=0)
    with pytest.raises(InputError, match="energy_window must be > 0"):
        sample_conformers(_mol("CCCC"), energy_window=-1)
    with pytest.raises(InputError, match="target_completeness must lie between 0 and 1"):
        sample_conformers(_mol("CCCC"), target_completeness=1.5)
    with pytest.raises(InputError, match="max_rounds must be >= 1, got 0"):
        sample_conformers(_mol("CCCC"), max_rounds=0)


def test_completeness_target_stops_rounds_early():
    # without a target, 1-hexanol's chain runs all 8 rounds of 10 trials (completeness 0.49
    # at seed 2); with one, rounds stop at the first round (after the second) whose
    # Good-Turing estimate (Good 1953) reaches it (0.37 after round 3 at seed 2)
    mol = _mol("CCCCCCO")
    *_, unlimited = sample_conformers(mol, n_trials=10, seed=2, max_rounds=8)
    *_, report = sample_conformers(mol, n_trials=10, seed=2, max_rounds=8, target_completeness=0.35)
    assert unlimited.rounds == 8 and unlimited.completeness < 0.5
    assert report.completeness >= 0.35 and report.stop_reason == "completeness target"
    # "saturated" means the last round found nothing new, not that a target stopped the rounds
    assert report.saturated == (report.new_per_round[-1] == 0)
    assert 2 <= report.rounds < unlimited.rounds
    *_, one_less = sample_conformers(mol, n_trials=10, seed=2, max_rounds=report.rounds - 1)
    assert one_less.completeness < 0.35


@pytest.mark.parametrize("seed", [0, 1, -1, -12345, 2**31 - 1, 2**31, 2**31 + 5, 2**70])
def test_every_integer_seed_gives_distinct_trials(seed):
    # RDKit 2026.09 (measured here, plain EmbedMultipleConfs): randomSeed 0 and 2**31 - 1
    # return one structure repeated, -1 is "random", >= 2**31 raises OverflowError
    from confpop.sampling import distinct_structures, embed, round_seed
    mol = _mol("CCCCO")
    seeds = [round_seed(seed, r) for r in range(3)]
    assert len(set(seeds)) == 3 and all(1 <= s <= 2**31 - 2 for s in seeds)
    trial, failed = embed(mol, 10, seed=seed)
    assert failed == 0 and len(distinct_structures(trial)) == 10
    again, _ = embed(mol, 10, seed=seed)          # reproducible
    np.testing.assert_array_equal(trial.GetConformer(3).GetPositions(),
                                  again.GetConformer(3).GetPositions())


def test_non_integer_seed_is_refused():
    from confpop.sampling import round_seed
    with pytest.raises(InputError, match="seed must be an integer"):
        round_seed(1.5, 0)


def test_repeated_structures_are_not_counted_as_found_again():
    from confpop.sampling import distinct_structures
    mol = _mol("CCO")
    from rdkit.Chem import AllChem
    AllChem.EmbedMolecule(mol, randomSeed=7)
    for _ in range(3):
        mol.AddConformer(Chem.Conformer(mol.GetConformer(0)), assignId=True)
    assert mol.GetNumConformers() == 4 and distinct_structures(mol) == [0]


@pytest.mark.slow
def test_seed_zero_samples_as_deeply_as_other_seeds():
    # 1-hexanol: with the seed passed raw, seed 0 found 38 distinct MMFF94s conformers
    # against 58-72 at seeds 1-3 (its first round collapsed to one structure). Seed 0 must
    # now behave like any other seed; the bound (>= 80 % of the smallest of seeds 1-2) is
    # ours, from the seed-to-seed spread measured here (57-72).
    counts = {}
    for seed in (0, 1, 2):
        _, _, times, _, rep = sample_conformers(_mol("CCCCCCO"), seed=seed, max_rounds=20,
                                                target_completeness=0.85)
        assert rep.repeated_embeddings == 0
        assert rep.new_per_round[0] > 10                 # the first round is not wasted
        assert times.sum() == rep.in_window
        counts[seed] = rep.unique
    assert counts[0] >= 0.8 * min(counts[1], counts[2])
