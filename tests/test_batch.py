"""Batches of molecules: search_many, the batch file readers and the ``batch`` command.

MMFF94s keeps these tests fast: the point is the plumbing (one bad molecule, the files, the
ways of running), not the energies. Molecules are simple ones (ethanol, n-butane, dimethyl
ether) or invented broken inputs.
"""

import json
import os
import socket

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from confpop.backends.forcefield import MMFF94s
from confpop.batch import BatchResult, UnreadableRecord, read_batch_input, search_many
from confpop.errors import InputError
from confpop.units import convert

R_KCAL = 1.987204258640832e-3  # kcal/(mol K), scipy.constants.R / 4184 (CODATA)
BROKEN = "C1CC"  # invented broken input: ring bond 1 is never closed
MOLECULES = {"ethanol": "CCO", "broken": BROKEN, "butane": "CCCC", "ether": "COC"}
SUMMARY_KEYS = ["name", "smiles", "status", "conformers", "lowest_conformer",
                "effective_count", "population_top1_298.15K", "population_top2_298.15K",
                "population_top3_298.15K", "reason", "folder"]


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    """A serial batch with one broken molecule, written to a folder."""
    out = tmp_path_factory.mktemp("batch") / "out"
    result = search_many(MOLECULES, method="mmff94s", workers=1, out_dir=out,
                         temperatures=[298.15, 350.0])
    return result, out


def visible(folder):
    """Names in a folder, without confpop's hidden manifest and lock file."""
    return sorted(p.name for p in folder.iterdir() if not p.name.startswith("."))


def comparable(summary):
    """The summary without wall times, rounded far below any physical meaning."""
    return summary.drop(columns=["seconds"]).round(10)


# -- one bad molecule -------------------------------------------------------------------------
def test_one_bad_molecule_does_not_stop_the_others(batch):
    result, _ = batch
    assert isinstance(result, BatchResult)
    summary = result.summary
    assert summary["name"].tolist() == list(MOLECULES)  # input order
    assert summary["status"].tolist() == ["ok", "failed", "ok", "ok"]
    assert (result.n_ok, result.n_failed) == (3, 1)
    assert list(result.ensembles) == ["ethanol", "butane", "ether"]  # input order
    failures = result.failures
    assert failures.columns.tolist() == ["name", "input", "error_type", "message"]
    assert failures.loc[0, ["name", "input", "error_type"]].tolist() == \
        ["broken", BROKEN, "InputError"]
    assert "ring bond 1 is opened but never closed" in failures.loc[0, "message"]
    broken = summary.set_index("name").loc["broken"]
    assert broken["reason"].startswith("InputError: could not read SMILES")
    assert broken["conformers"] == 0 and pd.isna(broken["effective_count"])


def test_summary_numbers_follow_from_the_ensembles(batch):
    result, _ = batch
    row = result.summary.set_index("name").loc["butane"]
    ens = result.ensembles["butane"]
    assert row["smiles"] == "CCCC" and row["conformers"] == len(ens) == 2
    # independent Boltzmann weights p_i = g_i exp(-E_i/RT) / sum, from the relative energies
    energies = ens.energies("kcal/mol").to_numpy()
    g = ens.degeneracy.to_numpy()
    for temperature in (298.15, 350.0):
        w = g * np.exp(-energies / (R_KCAL * temperature))
        p = np.sort(w / w.sum())[::-1]
        assert row[f"population_top1_{temperature:g}K"] == pytest.approx(p[0], abs=1e-12)
        assert row[f"population_top2_{temperature:g}K"] == pytest.approx(p[1], abs=1e-12)
        assert pd.isna(row[f"population_top3_{temperature:g}K"])  # only two conformers
        # Kish's effective sample size 1/sum(p^2) (Kish 1965), at every temperature
        assert row[f"effective_count_{temperature:g}K"] == pytest.approx(1.0 / np.sum(p ** 2),
                                                                         rel=1e-12)
        if temperature == 298.15:
            assert row["effective_count"] == pytest.approx(1.0 / np.sum(p ** 2), rel=1e-12)
    assert row["lowest_conformer"] == int(ens.energies().idxmin())
    # n-butane gauche - anti 0.67 +/- 0.10 kcal/mol (Herrebout et al., J. Phys. Chem. 1995,
    # 99, 578); the tolerance allows MMFF94s's error of several tenths
    assert float(energies.max()) == pytest.approx(0.67, abs=0.4)
    assert sorted(g.tolist()) == [1, 2]  # gauche+/gauche- merged into one row
    assert result.summary.set_index("name").loc["ether", "conformers"] == 1


def test_out_dir_files_round_trip(batch):
    from confpop import read_ensemble

    result, out = batch
    assert visible(out) == \
        ["butane", "ethanol", "ether", "failures.csv", "summary.csv"]  # none for "broken"
    assert sorted(p.name for p in out.iterdir() if p.name.startswith(".")) == \
        [".confpop-lock", ".confpop-manifest.json"]
    for name, ens in result.ensembles.items():
        folder = out / name
        assert sorted(p.name for p in folder.iterdir()) == ["ensemble.sdf", "run.json", "table.csv"]
        back = read_ensemble(folder / "ensemble.sdf")
        assert back.ids() == ens.ids()
        np.testing.assert_allclose(back.raw_table[f"energy_{back.level}"],
                                   ens.raw_table[f"energy_{ens.level}"], rtol=0, atol=1e-12)
        assert back.degeneracy.tolist() == ens.degeneracy.tolist()
        for cid in ens.ids():
            np.testing.assert_array_equal(back.positions(cid), ens.positions(cid))
        run = json.loads((folder / "run.json").read_text())
        assert run["name"] == name and run["temperatures"] == [298.15, 350.0]
        assert len(run["conformers"]) == len(ens)
        table = pd.read_csv(folder / "table.csv", index_col=0)
        np.testing.assert_allclose(table["population_298.15K"].sum(), 1.0, rtol=0, atol=1e-9)
    summary = pd.read_csv(out / "summary.csv", keep_default_na=True)
    assert summary["name"].tolist() == result.summary["name"].tolist()
    np.testing.assert_allclose(summary["effective_count"], result.summary["effective_count"],
                               rtol=1e-12)
    failures = pd.read_csv(out / "failures.csv")
    assert failures["name"].tolist() == ["broken"]
    assert failures["error_type"].tolist() == ["InputError"]


# -- ways of running --------------------------------------------------------------------------
@pytest.mark.slow
def test_local_pool_gives_the_serial_summary_and_exact_geometries(batch):
    result, _ = batch
    pooled = search_many(MOLECULES, method="mmff94s", workers=2, temperatures=[298.15, 350.0])
    assert pooled.parallel == "molecules"
    pd.testing.assert_frame_equal(comparable(pooled.summary), comparable(result.summary))
    pd.testing.assert_frame_equal(pooled.failures, result.failures)
    for name, ens in result.ensembles.items():  # coordinates come back in double precision
        for cid in ens.ids():
            np.testing.assert_array_equal(pooled.ensembles[name].positions(cid), ens.positions(cid))


def test_dask_cluster_gives_the_serial_summary(batch):
    distributed = pytest.importorskip("distributed")  # in the "test" and "dask" extras
    result, _ = batch
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        by_molecule = search_many(MOLECULES, method="mmff94s", executor=client,
                                  temperatures=[298.15, 350.0])
        by_conformer = search_many(MOLECULES, method="mmff94s", executor=client,
                                   temperatures=[298.15, 350.0], parallel="conformers")
    assert (by_molecule.parallel, by_conformer.parallel) == ("molecules", "conformers")
    for other in (by_molecule, by_conformer):
        pd.testing.assert_frame_equal(comparable(other.summary), comparable(result.summary))
        pd.testing.assert_frame_equal(other.failures, result.failures)


class InterruptingMMFF94s(MMFF94s):
    """MMFF94s that stops the whole run (as Ctrl-C would) on molecules of 4+ heavy atoms."""

    name = "test-interrupting"

    def _compute(self, positions, gradient):
        if self.mol.GetNumHeavyAtoms() >= 4:
            raise KeyboardInterrupt
        return super()._compute(positions, gradient)


def test_an_interrupted_batch_keeps_what_finished(tmp_path):
    from confpop.backends import available_backends, register_backend

    if InterruptingMMFF94s.name not in available_backends():
        register_backend(InterruptingMMFF94s.name, InterruptingMMFF94s)
    out = tmp_path / "out"
    with pytest.raises(KeyboardInterrupt):
        search_many({"ethanol": "CCO", "butane": "CCCC", "ether": "COC"},
                    method=InterruptingMMFF94s.name, workers=1, out_dir=out)
    assert visible(out) == ["ethanol", "failures.csv", "summary.csv"]
    assert sorted(p.name for p in (out / "ethanol").iterdir()) == \
        ["ensemble.sdf", "run.json", "table.csv"]
    summary = pd.read_csv(out / "summary.csv")
    assert summary["name"].tolist() == ["ethanol"]
    assert summary["status"].tolist() == ["ok"]


def test_progress_only_when_asked(capsys):
    search_many(["CCO"], method="mmff94s", workers=1)
    assert capsys.readouterr() == ("", "")
    search_many(["CCO"], method="mmff94s", workers=1, progress=True)
    captured = capsys.readouterr()
    assert captured.out == ""
    assert "molecules" in captured.err and "1/1" in captured.err


def test_store_is_checked_before_any_work(tmp_path):
    from confpop import StoreError

    bad = tmp_path / "bad.sqlite"
    bad.write_text("not a database\n" * 10)
    with pytest.raises(StoreError, match="not a confpop result store"):
        search_many(["CCO"], method="mmff94s", workers=1, store=bad, out_dir=tmp_path / "out")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("call, message", [
    (lambda: search_many("CCO", method="mmff94s"), "must be a list of molecules"),
    (lambda: search_many([], method="mmff94s"), "molecules is empty"),
    (lambda: search_many(["CCO", "CC"], names=["a"], method="mmff94s"),
     r"one name per molecule \(2\), got 1"),
    (lambda: search_many(["CCO", "CC"], names=["a", "a"], method="mmff94s"), "repeated: a"),
    (lambda: search_many({"a": "CCO"}, names=["b"], method="mmff94s"), "keys are the names"),
    (lambda: search_many(["CCO"], method="mmff94s", energy_windw=3.0),
     "unknown or reserved option 'energy_windw'"),
    (lambda: search_many(["CCO"], method="mmff94s", temperatures=[-5.0]), r"> 0 K.*-5\.0"),
    (lambda: search_many(["CCO"], method="mmff94s", parallel="atoms"), "parallel must be one of"),
    (lambda: search_many(["CCO"], method="mmff94s", workers=0), "workers must be an int >= 1"),
    (lambda: search_many(["CCO"], method="nosuchmethod"), "method must be one of"),
    (lambda: search_many(["CCO"], method="mmff94s", solvent="water"), "no implicit solvent"),
])
def test_bad_arguments_raise_input_error_before_any_work(call, message):
    with pytest.raises(InputError, match=message):
        call()


# -- readers ----------------------------------------------------------------------------------
def test_smi_reader(tmp_path):
    path = tmp_path / "set.smi"
    path.write_text("SMILES Name\n# invented test set\n\nCCO ethanol\nC#N\n"
                    "  CCOC(=O)C  ethyl acetate \nCCO ethanol\n")
    entries = read_batch_input(path)
    # "#" starts a comment only at the start of a line (C#N is a triple bond)
    assert entries == {"ethanol": "CCO", "line5": "C#N", "ethyl acetate": "CCOC(=O)C",
                       "ethanol-2": "CCO"}


def test_csv_and_tsv_readers(tmp_path):
    path = tmp_path / "set.csv"
    path.write_text("ID,Weight,SMILES\nA1,46.07,CCO\n,16.04,C\nA3,0,\n")
    assert read_batch_input(path) == {"A1": "CCO", "row2": "C", "A3": ""}
    tsv = tmp_path / "set.tsv"
    tsv.write_text("smiles\tname\nCCO\tethanol\n")
    assert read_batch_input(tsv) == {"ethanol": "CCO"}
    result = search_many(read_batch_input(path), method="mmff94s", workers=1)
    assert result.summary["status"].tolist() == ["ok", "ok", "failed"]
    assert result.failures.loc[0, "message"].startswith("empty input")


def test_csv_without_a_smiles_column_names_its_columns(tmp_path):
    path = tmp_path / "set.csv"
    path.write_text("structure,label\nCCO,ethanol\n")
    with pytest.raises(InputError, match=r"no SMILES column.*'structure', 'label'"):
        read_batch_input(path)


def _mol_block(smiles, title, seed=1):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=seed)
    mol.SetProp("_Name", title)
    return Chem.MolToMolBlock(mol) + "$$$$\n"


def test_sdf_reader_one_molecule_per_record(tmp_path):
    path = tmp_path / "set.sdf"
    unreadable = "garbage\n  not a mol block\n\n  x  y  V2000\n$$$$\n"
    path.write_text(_mol_block("CCO", "ethanol") + _mol_block("CCCC", "butane", 1)
                    + _mol_block("CCCC", "butane", 2)  # a second conformer of the same one
                    + _mol_block("COC", "") + unreadable + _mol_block("CCC", "butane"))
    entries = read_batch_input(path)
    assert list(entries) == ["ethanol", "butane", "record4", "record5", "butane-2"]
    assert isinstance(entries["record5"], UnreadableRecord)
    assert Chem.MolToSmiles(Chem.RemoveHs(entries["butane-2"])) == "CCC"  # same title, not the same
    result = search_many(entries, method="mmff94s", workers=1)
    assert result.summary["status"].tolist() == ["ok", "ok", "ok", "failed", "ok"]
    assert result.summary["smiles"].tolist()[:3] == ["CCO", "CCCC", "COC"]
    failure = result.failures.iloc[0]
    assert failure["name"] == "record5" and failure["error_type"] == "InputError"
    assert "record 5 of set.sdf is not a readable MOL block" in failure["message"]
    assert result.failures.iloc[0]["input"] == "record 5 of set.sdf is not a readable MOL block " \
        "(check the counts line and the atom and bond lines)"


@pytest.mark.parametrize("name, text, message", [
    ("set.xlsx", "", r"must end in one of \.smi"),
    ("missing.smi", None, "does not exist"),
    ("empty.smi", "# only a comment\n", "holds no molecule"),
    ("empty.csv", "", "is empty"),
])
def test_reader_errors(tmp_path, name, text, message):
    path = tmp_path / name
    if text is not None:
        path.write_text(text)
    with pytest.raises(InputError, match=message):
        read_batch_input(path)


# -- the command line -------------------------------------------------------------------------
def test_cli_batch_prints_the_summary_and_fails_with_status_1(tmp_path, capsys):
    from confpop.cli import _ENSEMBLE_CAUTION, main

    smi = tmp_path / "set.smi"
    smi.write_text("CCO ethanol\nC1CC broken\nCOC ether\n")
    out = tmp_path / "out"
    assert main(["batch", str(smi), "--out", str(out), "--method", "mmff94s", "--workers", "1",
                 "-T", "298.15", "350"]) == 1
    text = capsys.readouterr().out
    assert "3 molecules from" in text and "2 ok, 1 failed" in text
    assert "top-3 p(350 K)" in text
    assert "broken: InputError: could not read SMILES 'C1CC'" in text
    assert _ENSEMBLE_CAUTION in text
    assert (out / "ethanol" / "ensemble.sdf").is_file()

    smi.write_text("CCO ethanol\nCOC ether\n")
    assert main(["batch", str(smi), "--out", str(out), "--method", "mmff94s", "--workers", "1",
                 "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert [m["name"] for m in payload["molecules"]] == ["ethanol", "ether"]
    assert payload["failed"] == 0 and payload["failures"] == []
    assert payload["molecules"][1]["population_top2_298.15K"] is None  # one conformer only
    assert payload["molecules"][0]["population_top1_298.15K"] == pytest.approx(
        pd.read_csv(out / "summary.csv")["population_top1_298.15K"][0], rel=1e-12)


def _free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@pytest.mark.parametrize("extra, message", [
    (["--scheduler", f"tcp://127.0.0.1:{_free_port()}", "--scheduler-timeout", "1"],
     "cannot connect to the dask scheduler at 'tcp://127.0.0.1:"),
    (["--scheduler", "tcp://127.0.0.1:1", "--workers", "2"], "either --scheduler or --workers"),
    (["--method", "nosuchmethod"], "method must be one of"),
])
def test_cli_batch_errors_are_one_line_with_status_2(tmp_path, capsys, extra, message):
    from confpop.cli import main

    smi = tmp_path / "set.smi"
    smi.write_text("CCO ethanol\n")
    assert main(["batch", str(smi), "--out", str(tmp_path / "out"), *extra]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("confpop: error: ")
    assert message in lines[0]


def test_cli_batch_csv_without_smiles_column(tmp_path, capsys):
    from confpop.cli import main

    path = tmp_path / "set.csv"
    path.write_text("structure,label\nCCO,ethanol\n")
    assert main(["batch", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err
    assert "no SMILES column" in err and "'structure', 'label'" in err


# -- the output folder: never delete or overwrite what confpop did not write ------------------
def test_a_foreign_nonempty_folder_is_refused_before_any_work(tmp_path):
    out = tmp_path / "out"
    (out / "Documents").mkdir(parents=True)
    (out / "Documents" / "thesis.txt").write_text("a user's file\n")
    with pytest.raises(InputError, match=r"is not empty \(Documents\) and was not written by "
                                         r"confpop.*--into-nonempty-folder"):
        search_many({"Documents": "CCO"}, method="mmff94s", workers=1, out_dir=out)
    assert visible(out) == ["Documents"] and not (out / ".confpop-manifest.json").exists()


def test_a_molecule_never_replaces_a_folder_or_table_confpop_did_not_write(tmp_path):
    out = tmp_path / "out"
    (out / "Documents").mkdir(parents=True)
    (out / "Documents" / "thesis.txt").write_text("a user's file\n")
    (out / "summary.csv").write_text("the user's own summary\n")
    result = search_many({"Documents": "CCO", "documents-2": "CC"}, method="mmff94s",
                         workers=1, out_dir=out, into_nonempty_folder=True)
    assert (out / "Documents" / "thesis.txt").read_text() == "a user's file\n"
    assert sorted(p.name for p in (out / "Documents").iterdir()) == ["thesis.txt"]
    assert (out / "summary.csv").read_text() == "the user's own summary\n"
    assert result.summary["folder"].tolist() == ["Documents-2", "documents-2-2"]
    assert (out / "Documents-2" / "ensemble.sdf").is_file()
    written = pd.read_csv(out / "summary-2.csv")
    assert written["folder"].tolist() == ["Documents-2", "documents-2-2"]


def test_a_rerun_keeps_earlier_rows_and_files_a_user_added(tmp_path):
    from confpop.backends import available_backends, register_backend

    if InterruptingMMFF94s.name not in available_backends():
        register_backend(InterruptingMMFF94s.name, InterruptingMMFF94s)
    out = tmp_path / "out"
    three = {"ethanol": "CCO", "butane": "CCCC", "ether": "COC"}
    search_many(three, method="mmff94s", workers=1, out_dir=out)
    (out / "ethanol" / "notes.txt").write_text("my notes\n")
    with pytest.raises(KeyboardInterrupt):  # stops at butane, after ethanol is rewritten
        search_many(three, method=InterruptingMMFF94s.name, workers=1, out_dir=out)
    summary = pd.read_csv(out / "summary.csv")
    assert summary["name"].tolist() == ["ethanol", "butane", "ether"]  # not 1 row
    assert summary["status"].tolist() == ["ok", "ok", "ok"]
    assert (out / "ethanol" / "notes.txt").read_text() == "my notes\n"
    # another molecule list: the earlier molecules stay listed beside their folders
    search_many({"propane": "CCC"}, method="mmff94s", workers=1, out_dir=out)
    summary = pd.read_csv(out / "summary.csv")
    assert summary["name"].tolist() == ["propane", "ethanol", "butane", "ether"]
    assert sorted(summary["folder"]) == [p for p in visible(out) if not p.endswith(".csv")]


def test_a_second_run_on_the_same_folder_gets_a_clear_error(tmp_path):
    from confpop.outdir import OutputFolder

    out = tmp_path / "out"
    with OutputFolder(out, kind="batch"):  # another run holds the folder
        with pytest.raises(InputError, match=rf"in use by another confpop run \(process "
                                             rf"{os.getpid()}\)"):
            search_many(["CCO"], method="mmff94s", workers=1, out_dir=out)
    search_many(["CCO"], method="mmff94s", workers=1, out_dir=out)  # free again


def test_a_failed_write_names_the_file_and_leaves_no_partial_file(tmp_path, monkeypatch):
    import errno

    from confpop.ensemble import Ensemble
    from confpop.errors import OutputError

    def full_disk(self, path):
        with open(path, "w") as handle:
            handle.write("half a file")
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(Ensemble, "to_sdf", full_disk)
    out = tmp_path / "out"
    with pytest.raises(OutputError, match=r"cannot write '.*ethanol/ensemble.sdf': no space "
                                          r"left on the device"):
        search_many({"ethanol": "CCO"}, method="mmff94s", workers=1, out_dir=out)
    assert visible(out) == []  # the molecule folder came first and was not kept
    assert not [p for p in out.rglob("*partial*")]


def test_temporary_files_of_a_killed_run_are_cleaned_only_when_ours(tmp_path):
    out = tmp_path / "out"
    search_many({"ethanol": "CCO"}, method="mmff94s", workers=1, out_dir=out)
    left = [out / ".summary.partial-99999.csv", out / "ethanol" / ".table.partial-99999.csv"]
    foreign = [out / ".notes.partial-99999.txt", out / ".summary.partial-1x.csv"]
    for path in left + foreign:
        path.write_text("left by a killed run, or a user's file\n")
    search_many({"ethanol": "CCO"}, method="mmff94s", workers=1, out_dir=out)
    assert [p.exists() for p in left] == [False, False]
    assert [p.exists() for p in foreign] == [True, True]


@pytest.mark.skipif(len(os.sched_getaffinity(0)) < 2, reason="needs 2 usable cores")
def test_conformer_parallel_batch_runs_every_search_on_one_pool_with_the_serial_result(monkeypatch):
    # parallel="conformers" shares one pool_scope between the molecules' searches (a worker
    # that dies is replaced there); the summary equals the serial batch's (the same GFN2
    # calculations in another process)
    pytest.importorskip("xtb.interface")
    import confpop.execution as execution

    starts = []
    original = execution._LocalPool.get

    def counting(self):
        if self.executor is None:
            starts.append(self)
        return original(self)

    monkeypatch.setattr(execution._LocalPool, "get", counting)
    molecules = {"ethanol": "CCO", "ether": "COC"}
    pooled = search_many(molecules, method="gfn2", workers=2, parallel="conformers", seed=3)
    serial = search_many(molecules, method="gfn2", workers=1, parallel="conformers", seed=3)
    assert pooled.parallel == "conformers"
    assert len(starts) == 1  # one pool for both molecules and all their stages
    pd.testing.assert_frame_equal(comparable(pooled.summary), comparable(serial.summary))
