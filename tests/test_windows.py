"""Cuts by population at the temperatures asked for, not by fixed energy windows."""

import numpy as np
import pytest
from scipy import constants as sc

import confpop as cp
from confpop.pipeline import MIN_POPULATION, SCREEN_MARGIN, population_energy_cut


def test_population_energy_cut_is_rt_ln_g_over_share():
    # R from CODATA (scipy.constants), in kcal/(mol K): an independent evaluation
    r = sc.R / sc.calorie / 1000.0
    assert population_energy_cut(298.15, 1e-3) == pytest.approx(r * 298.15 * np.log(2e3), rel=1e-9)
    assert population_energy_cut(323.15, 1e-4, degeneracy=1) == pytest.approx(
        r * 323.15 * np.log(1e4), rel=1e-9)
    # a conformer exactly at the cut holds at most the share, whatever the others are
    w = cp.boltzmann_weights([0.0, population_energy_cut(298.15, 1e-3)], 298.15, degeneracy=[1, 2])
    assert w[1] <= 1e-3


@pytest.mark.parametrize("bad", [0.0, 1.0, -0.1, float("nan")])
def test_bad_share_is_named(bad):
    with pytest.raises(cp.InputError, match="min_population"):
        population_energy_cut(298.15, bad)


def test_final_cut_follows_the_highest_temperature():
    kw = dict(method="mmff94s", seed=3, min_population=0.02)
    cold = cp.search("CCCCCO", temperatures=[250.0], **kw)
    hot = cp.search("CCCCCO", temperatures=[250.0, 400.0], **kw)
    for ens, t_max in ((cold, 250.0), (hot, 400.0)):
        prune = [p for p in ens.provenance if p["step"] == "prune"][0]
        assert prune["population_temperature"] == t_max
        # what was dropped held less than the share each
        assert prune["population_dropped"] < 0.02 * max(prune["below_min_population"], 1)
        # every conformer kept holds at least the share (after renormalisation even more)
        p = ens.populations(t_max)[t_max]
        assert p.min() >= 0.02
    assert len(hot) > len(cold)                      # warmer: more conformers matter


def test_screen_window_is_the_population_cut_plus_the_margin():
    ens = cp.search("CCCO", seed=1, temperatures=[298.15, 323.15])
    screen = [p for p in ens.provenance if p["step"] == "screen"][0]
    assert screen["window_kcal"] == pytest.approx(
        population_energy_cut(323.15, MIN_POPULATION) + SCREEN_MARGIN)


def test_plain_search_refuses_a_runaway_job():
    # a 30-residue peptide-like chain (invented): far above the 2 CPU-hour estimate bound
    chain = "N" + "CC(=O)N" * 60 + "C"
    with pytest.raises(cp.InputError, match="would take too long.*allow_long=True"):
        cp.search(chain)


def test_provenance_names_the_software_and_the_cut():
    from importlib.metadata import version
    ens = cp.search("CCO", method="mmff94s", seed=1, temperatures=[250.0, 300.0])
    first = ens.provenance[0]
    assert first["confpop"] == cp.__version__
    assert first["libraries"]["rdkit"] == version("rdkit")      # importlib.metadata, independent
    assert first["temperatures"] == [250.0, 300.0] and first["min_population"] == MIN_POPULATION
