"""The ``confpop`` command line: the registry, one-line errors and the ``rates`` command."""

import json
import re
import math
import subprocess
import sys

import pytest
import scipy.constants as sc

from confpop import __version__, cli
from confpop.kinetics import eyring_rate, half_life
from reference_values import value as refval


def run(capsys, *argv):
    status = cli.main(list(argv))
    out, err = capsys.readouterr()
    return status, out, err


def test_rates_text_table(capsys):
    status, out, err = run(capsys, "rates", "5", "20", "30", "--temperature", "298.15")
    assert status == 0
    assert err == ""
    lines = out.splitlines()
    # one row per barrier; Eyring half-lives (computed from the Eyring equation, table entries
    # half_life_20_kcal_298 / half_life_30_kcal_298): 20 -> ~51 s, 30 -> ~34.6 yr
    row20 = next(line for line in lines if line.strip().startswith("20.00"))
    row30 = next(line for line in lines if line.strip().startswith("30.00"))
    assert "51 s" in row20 and "slow" in row20
    assert "35 yr" in row30
    row5 = next(line for line in lines if line.strip().startswith("5.00"))
    assert " ps" in row5 and "fast" in row5  # ~5 kcal/mol: sub-nanosecond (common practice)
    assert "Δν = 100 Hz" in out  # the stated default
    assert lines[-1].startswith("Caution:") and "1-2 kcal/mol" in lines[-1]


def test_rates_json_output(capsys):
    status, out, err = run(capsys, "rates", "20", "30", "-T", "298.15", "310.15", "--json",
                           "--delta-nu", "250")
    assert status == 0 and err == ""
    data = json.loads(out)  # stdout holds JSON and nothing else
    assert data["unit"] == "kcal/mol"
    assert data["delta_nu_hz"] == 250.0
    assert "caution" in data
    results = data["results"]
    assert [(r["barrier"], r["temperature_K"]) for r in results] == [
        (20.0, 298.15), (20.0, 310.15), (30.0, 298.15), (30.0, 310.15)]
    for r in results:
        assert r["rate_per_s"] == pytest.approx(eyring_rate(r["barrier"], r["temperature_K"]), rel=1e-14)
        assert r["half_life_s"] == pytest.approx(half_life(r["barrier"], r["temperature_K"]), rel=1e-14)
        assert r["mean_residence_time_s"] == pytest.approx(1.0 / r["rate_per_s"], rel=1e-14)
    # Eyring equation, computed: 310.15 K, 20 -> 13.3 s, 30 -> 4.68 yr (tests/reference_values.py)
    assert results[1]["half_life_s"] == pytest.approx(refval("half_life_20_kcal_310"), rel=2e-3)
    assert results[3]["half_life_s"] == pytest.approx(
        refval("half_life_30_kcal_310") * sc.Julian_year, rel=2e-3)
    # LaPlante classes at 37 °C (J. Med. Chem. 2011, 54, 7005): 13 s -> 1, 4.7 yr -> 3
    assert [r["atropisomer_class_37C"] for r in results] == [1, 1, 3, 3]


def test_rates_json_writes_null_for_an_infinite_half_life(capsys):
    status, out, _ = run(capsys, "rates", "100000", "--json")
    assert status == 0
    row = json.loads(out)["results"][0]
    assert row["rate_per_s"] == 0.0
    assert row["half_life_s"] is None and row["half_life"] == "inf"


def test_rates_units_and_default_temperature(capsys):
    _, out, _ = run(capsys, "rates", "83.68", "--unit", "kJ/mol", "--json")
    row = json.loads(out)["results"][0]
    assert row["temperature_K"] == 298.15
    assert row["rate_per_s"] == pytest.approx(eyring_rate(20.0, 298.15), rel=1e-13)


@pytest.mark.parametrize(
    "argv, message",
    [
        (["rates", "20", "--temperature", "-5"], "confpop: error: --temperature must be > 0 K, got -5"),
        (["rates", "-3"], "confpop: error: BARRIER must be >= 0, got -3"),
        (["rates", "twenty"], "confpop: error: argument BARRIER: expected a number, got 'twenty'"),
        (["rates", "nan"], "confpop: error: argument BARRIER: expected a finite number, got 'nan'"),
        (["rates", "20", "--delta-nu", "0"], "confpop: error: --delta-nu must be > 0 Hz, got 0"),
        (["rates", "20", "--unit", "kcal/mole"],
         "confpop: error: unit must be one of ['cm-1', 'eV', 'hartree', 'kJ/mol', 'kcal/mol'], got 'kcal/mole'"),
        (["rates", "20", "--frobnicate"], "confpop: error: unrecognized arguments: --frobnicate"),
        ([], "confpop: error: a command is required: one of .*rates"),
    ],
)
def test_errors_are_one_line_with_status_2(capsys, argv, message):
    status, out, err = run(capsys, *argv)
    assert status == 2
    assert out == ""
    assert err.count("\n") == 1
    assert re.match(re.escape(message).replace(r"\.\*", ".*"), err)
    assert "Traceback" not in err


def test_version(capsys):
    status, out, _ = run(capsys, "--version")
    assert status == 0
    assert out.strip() == f"confpop {__version__}"


def test_help_exits_zero(capsys):
    status, out, _ = run(capsys, "rates", "--help")
    assert status == 0
    assert "--temperature" in out and "--delta-nu" in out


def test_command_registry_shape():
    names = [entry[0] for entry in cli._COMMANDS]
    assert "rates" in names
    assert len(names) == len(set(names))
    for name, add_arguments, run_command, help_text in cli._COMMANDS:
        assert callable(add_arguments) and callable(run_command)
        assert isinstance(help_text, str) and help_text


def test_module_entry_point_in_a_subprocess():
    # the real process: exit status 2 and one line on stderr, no traceback
    bad = subprocess.run([sys.executable, "-m", "confpop", "rates", "20", "-T", "-5"],
                         capture_output=True, text=True, timeout=60)
    assert bad.returncode == 2
    assert bad.stdout == ""
    assert bad.stderr == "confpop: error: --temperature must be > 0 K, got -5\n"
    good = subprocess.run([sys.executable, "-m", "confpop", "rates", "20", "--json"],
                          capture_output=True, text=True, timeout=60)
    assert good.returncode == 0
    assert json.loads(good.stdout)["results"][0]["half_life_s"] == pytest.approx(51.0, rel=2e-3)
    assert math.isfinite(json.loads(good.stdout)["results"][0]["rate_per_s"])
