"""Cautions are warnings of our own classes (filterable, testable) and log lines as before."""

import logging
import warnings

import pytest

from confpop.errors import (ConfpopWarning, FrequencyWarning, LoggedWarning, ScanWarning,
                            StereoWarning, caution)
from confpop.loading import load_molecule
from confpop.nmr.cautions import MethodWarning
from confpop.nmr.identity import ProtonIdentityWarning


def test_every_caution_class_is_a_confpop_warning_and_a_user_warning():
    for category in (StereoWarning, ScanWarning, FrequencyWarning, MethodWarning,
                     ProtonIdentityWarning):
        assert issubclass(category, ConfpopWarning) and issubclass(category, UserWarning)
    for category in (StereoWarning, ScanWarning, FrequencyWarning):
        assert issubclass(category, LoggedWarning)


def test_caution_warns_and_logs_the_same_text(caplog):
    log = logging.getLogger("confpop.test")
    with caplog.at_level(logging.WARNING, logger="confpop.test"):
        with pytest.warns(ScanWarning, match="walks differ by 1.50 kcal/mol"):
            text = caution(log, ScanWarning, "walks differ by %.2f %s", 1.5, "kcal/mol")
    assert text == "walks differ by 1.50 kcal/mol"
    assert [r.getMessage() for r in caplog.records] == [text]


def test_open_stereo_gives_a_stereo_warning_that_can_be_filtered():
    with pytest.warns(StereoWarning, match="stereo left open"):
        load_molecule("CC(O)CC", stereo="ignore")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        warnings.filterwarnings("ignore", category=StereoWarning)
        mol = load_molecule("CC(O)CC", stereo="ignore")
    assert mol.HasProp("unassigned_stereo")
