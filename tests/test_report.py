"""The HTML report opens in a real browser (headless Chromium from the system packages) with
its pictures, and needs nothing from the network; the CLI writes it and the plots."""

import json
import re
import shutil
import subprocess

import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms

from confpop.cli import main
from confpop.ensemble import Ensemble
from confpop.report import write_report

_BROWSER = next((shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome")
                 if shutil.which(n)), None)

_PROBE = ("<script>window.addEventListener('load',function(){var r=[];"
          "document.querySelectorAll('img').forEach(function(i){r.push(i.naturalWidth)});"
          "var d=document.createElement('pre');d.id='probe';d.textContent='WIDTHS:'+r.join(',')"
          "+':TABLES:'+document.querySelectorAll('table').length+':END';"
          "document.body.appendChild(d);});</script>")


@pytest.fixture(scope="module")
def butane():
    """Butane anti and gauche with invented energies (0 and 0.6 kcal/mol)."""
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    AllChem.EmbedMolecule(mol, randomSeed=2)
    base = Chem.Conformer(mol.GetConformer())
    mol.RemoveAllConformers()
    for angle in (180.0, 65.0):
        conf = Chem.Conformer(base)
        rdMolTransforms.SetDihedralDeg(conf, 0, 1, 2, 3, angle)
        mol.AddConformer(conf, assignId=True)
    return Ensemble.from_mol(mol, [0.0, 0.6], level="invented", unit="kcal/mol",
                             degeneracy=[1, 2], name="butane")


def _rendered(path):
    """(image widths, table count) after Chromium loaded the report."""
    probe = path.with_name("probe.html")
    probe.write_text(path.read_text().replace("</body>", _PROBE + "</body>"))
    run = subprocess.run([_BROWSER, "--headless", "--no-sandbox", "--disable-gpu",
                          "--disable-dev-shm-usage", "--virtual-time-budget=5000",
                          "--dump-dom", probe.as_uri()],
                         capture_output=True, text=True, timeout=120)
    found = re.search(r"WIDTHS:([\d,]*):TABLES:(\d+):END", run.stdout)
    assert found, run.stderr[-500:]
    widths = [int(w) for w in found.group(1).split(",") if w]
    return widths, int(found.group(2))


def test_the_report_is_self_contained(butane, tmp_path):
    path = tmp_path / "report.html"
    write_report(butane, path, temperatures=[273.15, 298.15], input_text="CCCC",
                 cautions=["invented energies"])
    text = path.read_text()
    # every picture is embedded; nothing is fetched (no src/href to another place)
    sources = re.findall(r'(?:src|href)="([^"]*)"', text)
    assert sources and all(s.startswith("data:image/png;base64,") for s in sources)
    assert "http://" not in text and "https://" not in text
    assert "C1-C2-C3-C4" in text and "atoms numbered from 1" in text
    assert "invented energies" in text and "Kish" in text


def test_the_report_shows_rates_when_a_scan_is_given(butane, tmp_path):
    import numpy as np

    from confpop.torsion import TorsionProfile

    phi = np.arange(-180.0, 180.0, 15.0)
    # an invented threefold profile with 3 kcal/mol barriers
    profile = TorsionProfile.from_energies(phi, 1.5 * (1 + np.cos(np.radians(3 * phi))),
                                           label="C0-C1-C2-C3")
    path = tmp_path / "report.html"
    write_report(butane, path, temperatures=[298.15], profile=profile)
    text = path.read_text()
    assert "Torsion scan and rates" in text and text.count("data:image/png;base64,") == 3
    # the profile's label numbers atoms from 0 (library); the report, from 1
    assert "Torsion scan and rates: C1-C2-C3-C4" in text and "C0-C1" not in text


@pytest.mark.skipif(_BROWSER is None, reason="no chromium binary on this machine "
                                             "(apt-get install chromium) to render the report")
def test_the_report_renders_in_a_browser_with_its_pictures(butane, tmp_path):
    path = tmp_path / "report.html"
    write_report(butane, path, temperatures=[298.15], input_text="CCCC")
    widths, tables = _rendered(path)
    assert len(widths) == 2 and all(w > 300 for w in widths)  # two pictures, decoded
    assert tables >= 1


def test_cli_writes_report_and_plot(tmp_path, capsys):
    report, png = tmp_path / "r.html", tmp_path / "p.png"
    assert main(["ensemble", "CCCC", "--method", "mmff94s", "-T", "25C", "50C",
                 "--report", str(report), "--plot", str(png), "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out
    assert "p(298.15 K)" in out and "p(323.15 K)" in out  # °C written with the unit
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "C1-C2-C3-C4" in report.read_text()
    payload = json.loads((tmp_path / "o" / "run.json").read_text())
    assert payload["settings"]["--method"] == "mmff94s"
    assert set(payload["effective_conformers"]) == {"298.15", "323.15"}
    header = (tmp_path / "o" / "table.csv").read_text().splitlines()[0].split(",")
    energy = [h for h in header if "energy" in h]
    assert energy and all(h.endswith("_kcal_mol") for h in energy)
    # a report path that is not .html is refused before any work
    assert main(["ensemble", "CCCC", "--method", "mmff94s", "--report", str(tmp_path / "r.txt")]) == 2
    assert "--report" in capsys.readouterr().err


def test_notebook_views_name_units_and_temperature(butane):
    from confpop.torsion import TorsionProfile

    view = butane._repr_html_()
    assert "298.15 K" in view and "kcal/mol" in view and "C1-C2-C3-C4" in view
    assert "<table" in view
    import numpy as np
    phi = np.arange(-180.0, 180.0, 30.0)
    profile = TorsionProfile.from_energies(phi, 1.5 * (1 + np.cos(np.radians(3 * phi))),
                                           label="C0-C1-C2-C3")
    view = profile._repr_html_()
    assert "C1-C2-C3-C4" in view and "minima" in view and "kcal/mol" in view
    # without a label the atoms are listed from 1 too, under the same caption
    unlabelled = TorsionProfile.from_energies(phi, 1.5 * (1 + np.cos(np.radians(3 * phi))),
                                              atoms=(0, 1, 2, 3))
    view = unlabelled._repr_html_()
    assert "Torsion profile atoms 1, 2, 3, 4 (atoms numbered from 1" in view


def test_conformer_picture_draws_every_shown_bond_and_atom(butane, tmp_path):
    # one panel per conformer; in each, one line per C-C bond (butane's three; hydrogens
    # on carbon are not drawn) and one marker per carbon, grey as in the element table
    from matplotlib.collections import LineCollection, PathCollection
    from matplotlib.colors import to_rgba

    from confpop.plot import draw_conformers

    path = tmp_path / "conformers.png"
    fig = draw_conformers(butane, path=path)
    panels = [ax for ax in fig.axes if ax.collections]
    assert len(panels) == 2
    for ax in panels:
        lines = [c for c in ax.collections if isinstance(c, LineCollection)]
        atoms = [c for c in ax.collections if isinstance(c, PathCollection)]
        assert sum(len(c.get_segments()) for c in lines) == 3
        assert len(atoms) == 1 and len(atoms[0].get_offsets()) == 4
        # not colour-mapped: "0.25" is a grey level, not a value on a colour scale
        assert all(tuple(c) == to_rgba("0.25") for c in atoms[0].get_facecolors())
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
