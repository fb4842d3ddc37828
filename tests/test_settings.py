"""One set of defaults: confpop.settings against the keywords of the functions it describes
and against the command line (an identity check of our own code; no outside values)."""

import dataclasses
import inspect
import subprocess
import sys

import pytest

from confpop import settings
from confpop.settings import (BATCH_DEFAULTS, SAMPLING_DEFAULTS, SCAN_DEFAULTS, SEARCH_DEFAULTS,
                              SearchSettings)


def _defaults(function):
    return {name: p.default for name, p in inspect.signature(function).parameters.items()
            if p.default is not inspect.Parameter.empty}


def _assert_same(instance, function):
    defaults = _defaults(function)
    for field in dataclasses.fields(instance):
        assert field.name in defaults, f"{function.__name__} has no keyword {field.name}"
        assert defaults[field.name] == getattr(instance, field.name), field.name


def test_search_defaults_are_the_settings():
    from confpop.pipeline import search
    _assert_same(SEARCH_DEFAULTS, search)


def test_sample_conformers_defaults_are_the_settings():
    from confpop.sampling import sample_conformers
    _assert_same(SAMPLING_DEFAULTS, sample_conformers)


def test_search_many_defaults_are_the_settings():
    from confpop.batch import search_many
    defaults = _defaults(search_many)
    _assert_same(BATCH_DEFAULTS, search_many)
    for name in ("method", "solvent", "seed", "temperatures"):
        assert defaults[name] == getattr(SEARCH_DEFAULTS, name), name


def test_scan_torsion_defaults_are_the_settings():
    from confpop.torsion_scan import scan_torsion
    _assert_same(SCAN_DEFAULTS, scan_torsion)


def test_duplicate_criteria_match_prune_settings():
    from confpop.prune import PruneSettings
    prune = PruneSettings()
    for name in ("rmsd", "energy_tolerance", "merge_mirror_images"):
        assert getattr(prune, name) == getattr(SEARCH_DEFAULTS, name), name


def test_command_line_defaults_are_the_settings():
    from confpop.cli import _build_parser
    parser = _build_parser()
    ens = vars(parser.parse_args(["ensemble", "CCO"]))
    s = SEARCH_DEFAULTS
    assert ens["method"] == s.method and ens["solvent"] == s.solvent and ens["seed"] == s.seed
    assert tuple(ens["temperature"]) == s.temperatures
    assert ens["trials"] == s.n_trials and ens["rounds"] == s.max_rounds
    assert ens["completeness"] == s.target_completeness
    assert ens["min_population"] == s.min_population and ens["screen_margin"] == s.screen_margin
    assert ens["energy_window"] == s.energy_window and ens["screen_window"] == s.screen_window
    assert ens["keep_mirror_images"] is (not s.merge_mirror_images)
    assert ens["no_minimum_check"] is (not s.check_minima)
    assert ens["keep_largest_fragment"] is s.keep_largest_fragment
    scan = vars(parser.parse_args(["scan", "CCCC", "--bond", "1", "2"]))
    assert scan["method"] == SCAN_DEFAULTS.method and scan["step"] == SCAN_DEFAULTS.step
    assert scan["convergence"] == SCAN_DEFAULTS.convergence and scan["unit"] == SCAN_DEFAULTS.unit
    assert scan["rigid"] is (not SCAN_DEFAULTS.relaxed)


def test_settings_are_frozen_and_replace_checks_names():
    s = SearchSettings()
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.seed = 3
    assert s.replace(seed=3).seed == 3 and s.seed == 0
    with pytest.raises(TypeError, match="no_such_field"):
        s.replace(no_such_field=1)
    assert set(s.keywords()) == {f.name for f in dataclasses.fields(s)}


def test_settings_module_imports_no_chemistry():
    code = ("import sys, confpop.settings; "
            "print(sorted(m for m in ('rdkit', 'numpy', 'pandas', 'scipy') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
    assert settings.__all__


def test_settings_drive_a_search_like_the_keywords():
    from confpop import search
    by_settings = search("CCO", **SEARCH_DEFAULTS.replace(method="mmff94s").keywords())
    by_keywords = search("CCO", method="mmff94s")
    assert by_settings.table()["relative_energy"].tolist() == pytest.approx(
        by_keywords.table()["relative_energy"].tolist(), abs=1e-9)
