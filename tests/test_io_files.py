"""Ensemble files: energies in other programs' files are never dropped or misread silently,
and confpop's own SDF is checked before it is trusted.

The molecule is n-butanol (MMFF94s search; a few conformers); the foreign files are written
here as another program might write them (invented property names and comment lines).
"""

import json
import math
import re

import numpy as np
import pytest
from rdkit import Chem

from confpop import read_ensemble, search
from confpop.errors import InputError
from confpop.io import write_xyz

R_KCAL = 1.987204258640832e-3  # kcal/(mol K): scipy.constants.R / 4184 (CODATA 2018)


@pytest.fixture(scope="module")
def butanol(tmp_path_factory):
    folder = tmp_path_factory.mktemp("files")
    ens = search("CCCCO", method="mmff94s", workers=1, merge_mirror_images=False)
    assert len(ens) >= 3
    ens.to_sdf(folder / "own.sdf")
    rel = ens.energies("kcal/mol")
    with Chem.SDWriter(str(folder / "foreign.sdf")) as writer:
        for cid in ens.ids():
            m = Chem.Mol(ens.mol)
            m.RemoveAllConformers()
            m.AddConformer(Chem.Conformer(ens.mol.GetConformer(cid)), assignId=True)
            m.SetProp("Energy", f"{rel[cid]:.6f}")
            writer.write(m)
    return ens, folder


def boltzmann(kcal, temperature=298.15):
    """Independent brute-force Boltzmann weights (all degeneracies 1)."""
    w = np.exp(-(np.asarray(kcal) - np.min(kcal)) / (R_KCAL * temperature))
    return w / w.sum()


def write_frames(path, ens, comments):
    symbols = [a.GetSymbol() for a in ens.mol.GetAtoms()]
    with open(path, "w") as handle:
        for cid, comment in zip(ens.ids(), comments):
            handle.write(f"{len(symbols)}\n{comment}\n")
            for s, (x, y, z) in zip(symbols, ens.positions(cid)):
                handle.write(f"{s} {x:.8f} {y:.8f} {z:.8f}\n")


# -- foreign SDF ------------------------------------------------------------------------------
def test_foreign_sdf_without_a_named_energy_is_refused(butanol):
    ens, folder = butanol
    with pytest.raises(InputError, match=rf"foreign.sdf holds {len(ens)} conformers but no "
                                         r"energy property was named \(record 1 has 'Energy'\)"):
        read_ensemble(folder / "foreign.sdf")
    uniform = read_ensemble(folder / "foreign.sdf", uniform_weights=True)
    np.testing.assert_allclose(uniform.populations(298.15)[298.15], 1 / len(ens), rtol=1e-12)


def test_foreign_sdf_energy_needs_its_unit_and_is_read_in_it(butanol):
    ens, folder = butanol
    with pytest.raises(InputError, match="give the unit of property 'Energy'"):
        read_ensemble(folder / "foreign.sdf", energy_property="Energy")
    back = read_ensemble(folder / "foreign.sdf", energy_property="Energy", unit="kcal/mol")
    expected = boltzmann(ens.energies("kcal/mol").to_numpy())
    np.testing.assert_allclose(back.populations(298.15)[298.15].to_numpy(), expected,
                               atol=1e-5)  # the file holds 6 decimals
    in_kj = read_ensemble(folder / "foreign.sdf", energy_property="Energy", unit="kJ/mol")
    assert in_kj.energies("kJ/mol").to_numpy() == pytest.approx(
        back.energies("kcal/mol").to_numpy(), abs=1e-9)


def test_foreign_sdf_non_numeric_energy_names_the_record(butanol, tmp_path):
    _, folder = butanol
    text = (folder / "foreign.sdf").read_text()
    records = text.split("$$$$\n")
    records[1] = re.sub(r"(>  <Energy>.*\n)(.*)\n", r"\1nan\n", records[1])
    (tmp_path / "bad.sdf").write_text("$$$$\n".join(records))
    with pytest.raises(InputError, match=r"bad.sdf: record 2: Energy='nan' is not a finite"):
        read_ensemble(tmp_path / "bad.sdf", energy_property="Energy", unit="kcal/mol")


# -- XYZ comment lines ------------------------------------------------------------------------
def test_xyz_comment_gives_an_energy_only_when_unambiguous(butanol, tmp_path):
    ens, _ = butanol
    rel = ens.energies("kcal/mol")
    n = len(ens)
    two = tmp_path / "two.xyz"  # "conformer 1 energy: -40.1" was read as 1 hartree
    write_frames(two, ens, [f"conformer {k + 1} energy: {-40.1 + rel[c] / 627.5:.8f}"
                            for k, c in enumerate(ens.ids())])
    with pytest.raises(InputError, match=rf"two.xyz holds {n} conformers but no comment line "
                                         r"gives an unambiguous energy"):
        read_ensemble(two)
    one_missing = tmp_path / "gap.xyz"  # one frame without a number dropped every energy
    write_frames(one_missing, ens, ["lowest"] + [f"E = {rel[c]:.6f}" for c in ens.ids()[1:]])
    with pytest.raises(InputError, match=r"gap.xyz: frame\(s\) 1 give no unambiguous energy"):
        read_ensemble(one_missing, unit="kcal/mol")
    plain = tmp_path / "plain.xyz"
    write_frames(plain, ens, [f"E = {rel[c]:.6f}" for c in ens.ids()])
    with pytest.raises(InputError, match="give the unit of the energies"):
        read_ensemble(plain)  # kcal/mol values were read as hartree
    back = read_ensemble(plain, unit="kcal/mol")
    np.testing.assert_allclose(back.populations(298.15)[298.15].to_numpy(),
                               boltzmann(rel.to_numpy()), atol=1e-5)


def test_confpop_xyz_names_its_unit(butanol, tmp_path):
    ens, _ = butanol
    path = tmp_path / "own.xyz"
    write_xyz(ens, path, unit="kJ/mol")
    back = read_ensemble(path)  # the unit is on every comment line
    np.testing.assert_allclose(back.energies("kcal/mol").to_numpy(),
                               ens.energies("kcal/mol").to_numpy(), atol=1e-8)
    with pytest.raises(InputError, match="energies in kJ/mol, but unit='hartree'"):
        read_ensemble(path, unit="hartree")


# -- confpop's own SDF, tampered --------------------------------------------------------------
def _tamper(source, target, record, edit):
    records = source.read_text().split("$$$$\n")
    records[record] = edit(records[record])
    target.write_text("$$$$\n".join(records))


def _edit_property(name, change):
    def edit(text):
        start = text.index(f"<{name}>")
        first = text.index("\n", start) + 1
        end = text.index("\n", first)
        return text[:first] + change(text[first:end]) + text[end:]
    return edit


def _move_first_atom(text):
    lines = text.split("\n")  # title, program, comment, counts, then the first atom line
    lines[4] = f"{float(lines[4][:10]) + 1.5:10.4f}" + lines[4][10:]
    return "\n".join(lines)


_B64 = "confpop_coordinates_angstrom_f8le_base64"


def _b64_xyz(text):
    import base64
    return np.frombuffer(base64.b64decode(text), dtype="<f8").reshape(-1, 3).copy()


def _b64_text(xyz):
    import base64
    return base64.b64encode(np.ascontiguousarray(xyz, dtype="<f8").tobytes()).decode()


def _set_nan(text):
    xyz = _b64_xyz(text)
    xyz[0][0] = math.nan
    return _b64_text(xyz)


@pytest.mark.parametrize("record, edit, message", [
    (1, _edit_property(_B64, lambda t: _b64_text(_b64_xyz(t)[:-3])),
     r"record 2: stored coordinates have shape \(12, 3\), expected \(15, 3\)"),
    (1, _edit_property(_B64, _set_nan), "record 2: stored coordinates are not all finite"),
    (1, _edit_property(_B64, lambda t: t[:-7] + "!!"), "record 2: stored coordinates are not "
                                                        "valid base64"),
    (1, lambda t: t.replace("<conformer_id>", "<conformer_ix>"), "record 2 has no conformer_id"),
    (1, _edit_property("confpop_row", lambda t: "[" * 50000 + "]" * 50000),
     "record 2: property confpop_row is not valid JSON"),
    (1, _move_first_atom, r"record 2: stored coordinates disagree with the visible ones by 1.5 "
                          r"angstrom \(atom 1\)"),
    (0, lambda t: t.replace('"columns": {', '"columnz": {'),
     "record 1: the confpop header lacks columns"),
    (1, _edit_property("confpop_row", lambda t: t.replace('"degeneracy": 1', '"degeneracy": -1')),
     "record 2: degeneracy -1 is not an integer >= 1"),
    (0, _edit_property("confpop_ensemble", lambda t: "[]"), "record 1: the confpop header is not"),
])
def test_a_tampered_confpop_sdf_gives_one_line_naming_file_and_record(butanol, tmp_path,
                                                                      record, edit, message):
    _, folder = butanol
    target = tmp_path / "tampered.sdf"
    _tamper(folder / "own.sdf", target, record, edit)
    with pytest.raises(InputError, match=message) as info:
        read_ensemble(target)
    assert str(info.value).startswith(f"{target}: ") and "\n" not in str(info.value)


def test_the_cli_names_the_problem_in_one_line(butanol, capsys):
    from confpop.cli import main

    _, folder = butanol
    assert main(["couplings", str(folder / "foreign.sdf")]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "--energy-property and --energy-unit" in err
    assert main(["couplings", str(folder / "foreign.sdf"), "--energy-property", "Energy",
                 "--energy-unit", "kcal/mol", "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["couplings"]


def test_sdf_coordinates_written_before_base64_are_still_read_exactly(butanol, tmp_path):
    """Files from before the base64 coordinates held them as JSON text: still read exactly."""
    import base64
    _, folder = butanol
    source = (folder / "own.sdf").read_text()
    old_style = []
    for record in source.split("$$$$\n"):
        if f"<{_B64}>" in record:
            start = record.index(f">  <{_B64}>")
            first = record.index("\n", start) + 1
            end = record.index("\n", first)
            xyz = np.frombuffer(base64.b64decode(record[first:end]), dtype="<f8").reshape(-1, 3)
            record = (record[:start] + ">  <confpop_coordinates_angstrom>  (1) \n"
                      + json.dumps(xyz.tolist()) + record[end:])
        old_style.append(record)
    path = tmp_path / "old.sdf"
    path.write_text("$$$$\n".join(old_style))
    new, old = read_ensemble(folder / "own.sdf"), read_ensemble(path)
    for cid in new.ids():
        np.testing.assert_array_equal(old.positions(cid), new.positions(cid))


# -- table.csv and its description in run.json ----------------------------------------------------
def test_every_csv_column_is_described_in_run_json_and_user_columns_pass_through(tmp_path):
    import pandas as pd

    from confpop.io import ensemble_json
    # cyclohexanol: distinguishing torsions, a ring pucker column and the H-bond column
    ens = search("OC1CCCCC1", method="mmff94s", workers=1)
    assert len(ens) >= 2
    ids = ens.ids(active=False)
    # a thermal correction column makes delta_g_<T>K (invented values, hartree) and a user's
    # own column rides along unchanged
    ens = ens.with_column("gcorr_298.15", {c: 0.1 + 1e-4 * k for k, c in enumerate(ids)})
    ens = ens.with_column("my_col", {c: 10.0 * k for k, c in enumerate(ids)})
    ens.to_csv(tmp_path / "table.csv", temperatures=[298.15])
    csv = pd.read_csv(tmp_path / "table.csv", index_col=0)
    assert csv.loc[ids, "my_col"].tolist() == [10.0 * k for k in range(len(ids))]
    described = ensemble_json(ens, [298.15])["table_columns"]
    assert set(described) == set(csv.columns)
    # every column confpop makes is declared in confpop.schema; only the user's is unknown
    assert [c for c, d in described.items() if d["unit"] == "unknown"] == ["my_col"]
    for prefix, unit in (("delta_g_298.15K", "kcal/mol"), ("torsion_", "degree"),
                         ("ring_", ""), ("hydrogen_bonds", "")):
        names = [c for c in csv.columns if c.startswith(prefix)]
        assert names, prefix
        assert all(described[c]["unit"] == unit for c in names)
