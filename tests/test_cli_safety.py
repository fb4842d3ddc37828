"""The command line is safe with users' files and machines: outputs are checked before any
work, nothing foreign is replaced, failed writes leave no partial file, SIGTERM and SIGHUP
stop the workers. Force fields and the model backend keep these tests fast; the molecules
are simple ones (ethanol) or invented inputs."""

import errno
import os
import re
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from processes import session_processes

from confpop.cli import main


def one_error_line(capsys):
    captured = capsys.readouterr()
    # stage lines ("confpop: [12:04:31] ...", printed when stderr is not a terminal) aside
    lines = [line for line in captured.err.strip().splitlines()
             if not re.match(r"confpop: \[\d\d:\d\d:\d\d\] ", line)]
    assert len(lines) == 1 and lines[0].startswith("confpop: error: "), captured.err
    return lines[0]


@pytest.fixture
def no_search(monkeypatch):
    """Fail the test if a conformer search starts."""
    import confpop.pipeline

    def forbidden(*args, **kwargs):
        raise AssertionError("the search started although the output cannot be written")

    monkeypatch.setattr(confpop.pipeline, "search", forbidden)


# -- outputs checked before any work ----------------------------------------------------------
def test_ensemble_out_under_a_file_fails_before_any_work(tmp_path, capsys, no_search):
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder\n")
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--out", str(blocker / "out")]) == 2
    assert "cannot create --out" in one_error_line(capsys)


def test_ensemble_out_into_a_foreign_folder_is_refused_before_any_work(tmp_path, capsys,
                                                                        no_search):
    (tmp_path / "table.csv").write_text("a user's table\n")
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--out", str(tmp_path)]) == 2
    line = one_error_line(capsys)
    assert "is not empty (table.csv) and was not written by confpop" in line
    assert (tmp_path / "table.csv").read_text() == "a user's table\n"


def test_ensemble_out_beside_foreign_files_keeps_them(tmp_path, capsys):
    (tmp_path / "table.csv").write_text("a user's table\n")
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--workers", "1", "--out",
                 str(tmp_path), "--into-nonempty-folder"]) == 0
    assert "wrote ensemble.sdf, table-2.csv, run.json" in capsys.readouterr().out
    assert (tmp_path / "table.csv").read_text() == "a user's table\n"
    assert (tmp_path / "table-2.csv").is_file()
    # a second run replaces only its own files
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--workers", "1", "--out",
                 str(tmp_path)]) == 0
    assert "wrote ensemble.sdf, table-2.csv, run.json" in capsys.readouterr().out
    assert (tmp_path / "table.csv").read_text() == "a user's table\n"


@pytest.mark.parametrize("plot, message", [
    ("no_such_folder/profile.png", "the folder '.*no_such_folder' does not exist"),
    (".", "is a folder"),
    ("profile.txt", "must end in one of .png"),
])
def test_plot_path_checked_before_any_work(tmp_path, capsys, monkeypatch, plot, message):
    import re

    import confpop.torsion

    def forbidden(*args, **kwargs):
        raise AssertionError("the scan started although the plot cannot be written")

    monkeypatch.setattr(confpop.torsion, "scan_torsion", forbidden)
    monkeypatch.chdir(tmp_path)
    assert main(["scan", "CCCC", "--bond", "1", "2", "--method", "mmff94s", "--plot", plot]) == 2
    assert re.search(message, one_error_line(capsys))


@pytest.mark.parametrize("option, name", [("--plot", "populations.png"),
                                          ("--report", "report.html")])
def test_plot_and_report_never_replace_a_file_confpop_did_not_write(tmp_path, capsys, option,
                                                                     name, no_search):
    target = tmp_path / name
    target.write_bytes(b"a user's file\n")
    assert main(["ensemble", "CCO", "--method", "mmff94s", option, str(target)]) == 2
    line = one_error_line(capsys)
    assert line == (f"confpop: error: {option} '{target}' exists and was not written by "
                    "confpop; choose another file name, or give --overwrite to replace it")
    assert target.read_bytes() == b"a user's file\n"


def test_plot_and_report_replace_their_own_files_and_foreign_ones_when_told(tmp_path, capsys):
    from confpop.outdir import written_by_confpop

    png, html = tmp_path / "p.png", tmp_path / "r.html"
    run = ["ensemble", "CCO", "--method", "mmff94s", "--workers", "1", "--plot", str(png),
           "--report", str(html)]
    assert main(run) == 0
    assert written_by_confpop(png) and written_by_confpop(html)
    assert main(run) == 0          # its own files: replaced without being told
    capsys.readouterr()
    png.write_bytes(b"a user's picture\n")
    assert main(run) == 2
    assert png.read_bytes() == b"a user's picture\n"
    capsys.readouterr()
    assert main(run + ["--overwrite"]) == 0
    assert written_by_confpop(png)


def test_scan_and_couplings_plots_are_checked_the_same_way(tmp_path, capsys):
    target = tmp_path / "profile.png"
    target.write_bytes(b"a user's file\n")
    assert main(["scan", "CCCC", "--bond", "2", "3", "--method", "model", "--rigid",
                 "--plot", str(target)]) == 2
    assert "was not written by confpop" in one_error_line(capsys)
    assert main(["scan", "CCCC", "--bond", "2", "3", "--method", "model", "--rigid",
                 "--step", "30", "--plot", str(target), "--overwrite"]) == 0
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_a_full_disk_names_the_file_and_leaves_no_partial_file(tmp_path, capsys, monkeypatch):
    from confpop.ensemble import Ensemble

    def full_disk(self, path):
        with open(path, "w") as handle:
            handle.write("$$$$ half a record")
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(Ensemble, "to_sdf", full_disk)
    out = tmp_path / "out"
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--workers", "1", "--out",
                 str(out)]) == 2
    line = one_error_line(capsys)
    assert f"cannot write '{out / 'ensemble.sdf'}': no space left on the device" in line
    assert sorted(p.name for p in out.iterdir()) == [".confpop-lock", ".confpop-manifest.json"]


# -- signals ----------------------------------------------------------------------------------
def test_help_states_the_exit_status(capsys):
    for argv in (["--help"], ["ensemble", "--help"], ["batch", "--help"]):
        assert main(argv) == 0
        text = " ".join(capsys.readouterr().out.split())
        assert "143 by SIGTERM" in text and "129 by SIGHUP" in text and "130" in text


def test_sigterm_in_a_command_ends_it_like_ctrl_c(capsys, monkeypatch):
    import confpop.cli

    def slow(args):
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(10)  # the handler interrupts this
        return 0

    monkeypatch.setattr(confpop.cli, "_COMMANDS", [("rates", confpop.cli._add_rates, slow, "x")])
    previous = signal.getsignal(signal.SIGTERM)
    started = time.monotonic()
    assert main(["rates", "1"]) == 128 + signal.SIGTERM
    assert time.monotonic() - started < 5
    assert "terminated by SIGTERM" in capsys.readouterr().err
    assert signal.getsignal(signal.SIGTERM) == previous  # handlers restored


SCRIPT = """
import os, sys, time
from confpop.cli import Terminated, _install_signal_handlers
from confpop.execution import run_units

def unit(seconds):
    with open(os.path.join(sys.argv[1], f"started-{os.getpid()}"), "w"):
        pass
    time.sleep(seconds)
    return seconds

if __name__ == "__main__":
    _install_signal_handlers()
    try:
        run_units(unit, [60.0, 60.0], workers=2)
    except Terminated as stop:
        sys.exit(128 + stop.signum)
    sys.exit(0)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGHUP])
@pytest.mark.slow
def test_a_terminated_run_leaves_no_process_behind(tmp_path, signum):
    script = tmp_path / "run.py"
    script.write_text(textwrap.dedent(SCRIPT))
    env = {**os.environ, "OMP_NUM_THREADS": "1"}
    process = subprocess.Popen([sys.executable, str(script), str(tmp_path)], env=env,
                               start_new_session=True)
    deadline = time.monotonic() + 60
    while len(list(tmp_path.glob("started-*"))) < 2 and time.monotonic() < deadline:
        time.sleep(0.1)
    assert len(list(tmp_path.glob("started-*"))) == 2, "the workers did not start"
    assert len(session_processes(process.pid)) >= 4  # main, forkserver, tracker, 2 workers
    process.send_signal(signum)
    assert process.wait(timeout=30) == 128 + signum
    deadline = time.monotonic() + 10
    while session_processes(process.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert session_processes(process.pid) == []


# -- runaway jobs and absurd values -----------------------------------------------------------
# an invented peptide-like chain of 170 heavy atoms (the 152-heavy-atom probe ran
# for 9 min in sampling with no warning)
PEPTIDE = "N" + "".join(["[C@@H](C)C(=O)N", "CC(=O)N", "[C@@H](CC(C)C)C(=O)N",
                         "[C@@H](Cc1ccccc1)C(=O)N"] * 6) + "C"


def test_a_search_far_above_the_cost_bound_is_refused_at_once(capsys, no_search):
    assert main(["ensemble", PEPTIDE]) == 2
    line = one_error_line(capsys)
    assert "would take too long: 343 atoms, 72 rotatable bonds, 300 trials per round" in line
    assert "--allow-long-run" in line


def test_allow_long_run_lets_it_start(capsys, monkeypatch):
    import confpop.pipeline

    def started(*args, **kwargs):
        raise KeyboardInterrupt  # it got past the check; stop here

    monkeypatch.setattr(confpop.pipeline, "search", started)
    assert main(["ensemble", PEPTIDE, "--allow-long-run"]) == 130


@pytest.mark.parametrize("argv, message", [
    (["ensemble", "CCO", "--trials", "200000"], "200000 trials per round is above the bound"),
    (["ensemble", "CCO", "--trials", "0"], "--trials must be >= 1"),
    (["ensemble", "CCO", "--energy-window", "-1"], "--energy-window must be > 0"),
    (["ensemble", "CCO", "--workers", "0"], "--workers must be >= 1"),
    (["scan", "CCCC", "--bond", "1", "2", "--step", "0.001"],
     "--step must be between 1 and 180 degrees, got 0.001"),
    (["rates", "20", "--transmission", "2"], "--transmission must be > 0 and <= 1"),
])
def test_absurd_option_values_are_refused(capsys, no_search, argv, message):
    assert main(argv) == 2
    assert message in one_error_line(capsys)


def test_a_fifo_as_store_is_refused_instead_of_hanging(tmp_path, capsys):
    fifo = tmp_path / "store"
    os.mkfifo(fifo)
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--workers", "1", "--store",
                 str(fifo)]) == 2
    assert "is not a regular file (a FIFO" in one_error_line(capsys)


def test_workers_are_capped_at_the_cpus_with_a_note(capsys):
    from confpop.errors import ConfpopWarning
    from confpop.execution import default_workers, run_units

    cores = default_workers()
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--workers", "1000", "--json"]) == 0
    assert f"--workers 1000 is more than the {cores} CPU(s)" in capsys.readouterr().err
    with pytest.warns(ConfpopWarning, match=f"workers=1000 is more than the {cores}"):
        outcomes = run_units(abs, [-1.0, -2.0, -3.0], workers=1000)
    assert [o.value for o in outcomes] == [1.0, 2.0, 3.0]


def test_embedding_that_keeps_failing_stops_with_one_line(monkeypatch):
    import confpop.sampling
    from confpop import search
    from confpop.errors import InputError

    calls = []

    def never(mol, n, **kwargs):
        calls.append(n)
        empty = confpop.sampling.Chem.Mol(mol)
        empty.RemoveAllConformers()
        return empty, n

    monkeypatch.setattr(confpop.sampling, "embed", never)
    with pytest.raises(InputError, match="ETKDG failed on all 3 probe trial structures"):
        search("CCCO", method="mmff94s", workers=1)
    assert calls == [3]  # no round of n_trials was drawn after the probe failed


# -- smaller silent errors --------------------------------------------------------------------
def test_values_that_used_to_pass_silently_are_refused():
    import numpy as np

    from confpop import search
    from confpop.errors import InputError
    from confpop.kinetics import eyring_rate
    from confpop.nmr.fit import _observation
    from confpop.thermo import boltzmann_weights

    with pytest.raises(InputError, match="got True"):
        boltzmann_weights([0.0, 1.0], True)  # was taken as 1 K
    with pytest.raises(InputError, match="transmission κ must be > 0 and <= 1"):
        eyring_rate(20.0, 298.15, transmission=2.0)
    for bad in (dict(rmsd=-1.0), dict(rmsd=float("nan")), dict(energy_tolerance=float("nan")),
                dict(energy_window=float("nan"))):
        with pytest.raises(InputError, match="must be"):
            search("CCCCO", method="mmff94s", workers=1, **bad)  # switched pruning off
    with pytest.raises(InputError, match="whole-number atom indices, got 1.5"):
        _observation("J", 1.5, 7, 7.0, None, "row 1")  # was truncated to 1
    assert _observation("J", np.float64(3.0), 7, 7.0, None, "row 1").atom_a == 3


def test_a_batch_smiles_is_never_read_as_a_file(tmp_path, monkeypatch):
    from confpop.batch import read_batch_input, search_many

    monkeypatch.chdir(tmp_path)
    (tmp_path / "CCO").write_text("a local file that happens to be called CCO\n")
    (tmp_path / "secret.sdf").write_text("private text\n")
    (tmp_path / "set.smi").write_text("CCO ethanol\nsecret.sdf leak\nCC \x1b[31mred\n")
    molecules = read_batch_input(tmp_path / "set.smi")
    assert list(molecules) == ["ethanol", "leak", "\\x1b[31mred"]
    result = search_many(molecules, method="mmff94s", workers=1)
    assert result.summary["status"].tolist() == ["ok", "failed", "ok"]
    message = result.failures.loc[0, "message"]
    assert "could not read SMILES 'secret.sdf'" in message and "private" not in message


def test_an_sd_multiplicity_field_does_not_change_the_spin_state_in_batch(tmp_path):
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from confpop.batch import read_batch_input, search_many

    mol = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    AllChem.EmbedMolecule(mol, randomSeed=3)
    mol.SetProp("_Name", "ethanol")
    mol.SetProp("multiplicity", "3")  # invented field of another program
    with Chem.SDWriter(str(tmp_path / "set.sdf")) as writer:
        writer.write(mol)
    result = search_many(read_batch_input(tmp_path / "set.sdf"), method="mmff94s", workers=1)
    assert result.ensembles["ethanol"].multiplicity == 1  # as the ensemble command reads it


def test_a_batch_molecule_above_the_cost_bound_fails_alone(tmp_path):
    from confpop.batch import search_many

    result = search_many({"ethanol": "CCO", "peptide": PEPTIDE}, method="mmff94s", workers=1,
                         n_trials=20_000)  # force-field cost: the trials bound applies
    assert result.summary["status"].tolist() == ["failed", "failed"]
    assert "20000 trials per round is above the bound" in result.failures.loc[0, "message"]
    result = search_many({"peptide": PEPTIDE}, method="gfn2", workers=1)
    assert result.summary["status"].tolist() == ["failed"]
    assert result.failures.loc[0, "error_type"] == "InputError"
    assert "would take too long" in result.failures.loc[0, "message"]
    assert "allow_long=True (--allow-long-run)" in result.failures.loc[0, "message"]


def test_report_and_plot_may_go_into_the_out_folder_this_run_creates(tmp_path, capsys):
    # found trying the CLI as a new user: `--out run --report run/report.html` was refused
    # because the folder did not exist yet; a report elsewhere in a missing folder still is
    out = tmp_path / "run"
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--workers", "1", "--out", str(out),
                 "--report", str(out / "report.html"), "--plot", str(out / "p.png")]) == 0
    assert (out / "report.html").read_text().lstrip().startswith("<")
    assert (out / "p.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (out / "table.csv").is_file()
    capsys.readouterr()
    elsewhere = tmp_path / "missing" / "report.html"
    assert main(["ensemble", "CCO", "--method", "mmff94s", "--out", str(out),
                 "--report", str(elsewhere)]) == 2
    assert "does not exist" in one_error_line(capsys)
