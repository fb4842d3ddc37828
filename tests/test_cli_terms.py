"""Command-line errors in the user's terms: option names (--solvent, --step, --charge), not
the Python arguments of the library underneath, and before any work starts."""

from __future__ import annotations

import pytest

from confpop.cli import main


def _error(capsys) -> str:
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.startswith("confpop: error:")]
    assert len(lines) == 1, err
    return lines[0], err


@pytest.mark.parametrize("command", [["ensemble", "CCO"], ["scan", "CCCC", "--bond", "2", "3"]])
def test_solvent_without_a_solvent_model_is_refused_before_any_work(command, capsys):
    assert main(command + ["--method", "mmff94s", "--solvent", "water"]) == 2
    line, err = _error(capsys)
    assert line == ("confpop: error: --method mmff94s has no implicit solvent model; got "
                    "--solvent water (leave out --solvent, or choose a method with one, e.g. "
                    "gfn2)")
    assert "sampling" not in err and "scanning" not in err   # no work started


def test_batch_solvent_checked_before_reading_the_input(tmp_path, capsys):
    # the input file does not even exist: the option clash is the first thing said
    assert main(["batch", str(tmp_path / "none.smi"), "--out", str(tmp_path / "o"),
                 "--method", "mmff94s", "--solvent", "water"]) == 2
    line, _ = _error(capsys)
    assert "got --solvent water" in line and "solvent=" not in line


@pytest.mark.parametrize("step, expected", [
    ("120", "a full-turn scan needs at least 4 points (step <= 90), got --step 120.0"),
    ("25", "--step must divide 360 degrees for a full-turn scan, got 25.0"),
])
def test_scan_step_errors_name_the_option(step, expected, capsys):
    assert main(["scan", "CCCC", "--bond", "2", "3", "--method", "model", "--rigid",
                 "--step", step]) == 2
    line, _ = _error(capsys)
    assert line == "confpop: error: " + expected


def test_charge_error_names_the_option(tmp_path, capsys):
    # water has 10 electrons (8 + 1 + 1): a charge of +12 leaves a negative count
    xyz = tmp_path / "w.xyz"
    xyz.write_text("3\nwater (invented geometry)\nO 0 0 0\nH 0.96 0 0\nH -0.24 0.93 0\n")
    assert main(["ensemble", str(xyz), "--charge", "12", "--method", "mmff94s"]) == 2
    line, _ = _error(capsys)
    assert line == f"confpop: error: --charge 12 removes more electrons than {xyz} has (10)"
