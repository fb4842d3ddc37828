"""What the command line shows: temperatures in °C when written with the unit, the solvent
model named, errors in command-line terms, one timestamped line per stage in a log."""

import re

import pytest

from confpop.cli import _temperature_arg, main


@pytest.mark.parametrize("text, kelvin", [
    ("298.15", 298.15), ("298.15K", 298.15), ("25C", 298.15), ("25degC", 298.15),
    ("25°C", 298.15), ("-40C", 233.15), ("0 C", 273.15)])  # 0 °C = 273.15 K (definition)
def test_temperatures_in_celsius_need_the_unit(text, kelvin):
    assert _temperature_arg(text) == pytest.approx(kelvin, abs=1e-9)


def test_an_unknown_temperature_unit_is_one_line(capsys):
    assert main(["rates", "20", "-T", "77F"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("confpop: error:") and "unknown temperature unit" in err


def test_help_names_the_solvent_models(capsys):
    assert main(["ensemble", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "GBSA with gfn2/gfn1/gfnff" in text and "ALPB with tblite" in text


def test_errors_name_options_not_python_arguments(capsys):
    assert main(["ensemble", "CC.O", "--method", "mmff94s"]) == 2
    err = capsys.readouterr().err
    assert "--keep-largest-fragment" in err and "keep_largest_fragment=" not in err
    assert main(["ensemble", "CC(O)CC", "--method", "mmff94s"]) == 2
    err = capsys.readouterr().err
    assert "--enumerate-stereo" in err and "stereo=" not in err
    assert main(["ensemble", "CCCC", "--method", "mmff94s", "-T", "300", "-5"]) == 2
    assert "value 2 of -T/--temperature" in capsys.readouterr().err


def test_a_log_gets_one_timestamped_line_per_stage(capsys):
    # under pytest stderr is not a terminal, as in a batch job's log
    assert main(["ensemble", "CCCC", "--method", "mmff94s", "--free-energy"]) == 0
    captured = capsys.readouterr()
    stages = re.findall(r"^confpop: \[\d\d:\d\d:\d\d\] (.*)$", captured.err, re.M)
    assert stages[0].startswith("sampling conformers of CCCC")
    assert any(s.startswith("free energies: 2 to run") for s in stages)
    assert any(s.startswith("free energies: 2 of 2 done") for s in stages)
    assert "gas phase" in captured.out.splitlines()[0]
    assert "ΔG(298.15 K)" in captured.out  # --free-energy shows the ΔG column
    assert "conformers (ΔE, ΔG in kcal/mol;" in captured.out  # and the header names it
    assert main(["ensemble", "CCCC", "--method", "mmff94s", "--quiet"]) == 0
    assert "confpop: [" not in capsys.readouterr().err


def test_couplings_out_folder_and_plot_with_band(tmp_path, capsys):
    from pathlib import Path

    sdf = Path(__file__).parent / "data" / "molecule_butanol_conformers.sdf"
    out, png = tmp_path / "j", tmp_path / "j.png"
    assert main(["couplings", str(sdf), "--uniform-weights", "-T", "0C", "25C", "--out", str(out),
                 "--energy-sigma", "1", "--plot", str(png)]) == 0
    text = capsys.readouterr().out
    assert "atoms numbered from 1" in text
    header = (out / "couplings.csv").read_text().splitlines()[0]
    assert "J_273.15K_hz" in header and "J_298.15K_hz" in header
    # the file's atom 1 is a methyl carbon (C1) carrying hydrogens 6-8 (MOL block order)
    assert "H6/H7/H8(C1)" in (out / "couplings.csv").read_text()
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_coupling_band_is_drawn_per_line():
    import pandas as pd

    from confpop.plot import coupling_temperature_plot

    averages = pd.DataFrame({"group": ["a", "b"], "species": [0, 0], 280.0: [5.0, 7.0],
                             300.0: [5.2, 7.1]})
    spread = pd.DataFrame({"group": ["a", "a", "b", "b"], "species": 0,
                           "temperature": [280.0, 300.0, 280.0, 300.0],
                           "p05": [4.5, 4.7, 6.5, 6.6], "p95": [5.5, 5.7, 7.5, 7.6]})
    fig = coupling_temperature_plot(averages, spread=spread, title="invented")
    ax = fig.axes[0]
    assert len(ax.collections) == 3  # one band per line plus the legend's empty band
    assert ax.get_title() == "invented"


def test_an_observed_pair_without_a_coupling_is_named_as_the_user_numbered_it(tmp_path, capsys):
    from pathlib import Path

    sdf = Path(__file__).parent / "data" / "molecule_butanol_conformers.sdf"
    csv = tmp_path / "observed.csv"
    csv.write_text("atom_a,atom_b,J_hz\n8,10,4.2\n")  # H8 (methyl) and H10 (on O3): no 3J(H,H)
    assert main(["couplings", str(sdf), "--uniform-weights", "--observed", str(csv)]) == 2
    err = capsys.readouterr().err
    assert "--observed pair 8-10" in err and "H10(O3)" in err and "confpop.nmr" not in err
