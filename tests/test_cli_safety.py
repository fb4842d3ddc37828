"""The command line is safe with users' files and machines: outputs are checked before any
work, nothing foreign is replaced, failed writes leave no partial file, SIGTERM and SIGHUP
stop the workers. Force fields and the model backend keep these tests fast; the molecules
are simple ones (ethanol) or invented inputs."""

import errno
import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from confpop.cli import main


def one_error_line(capsys):
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
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


def _session_processes(sid: int) -> list[int]:
    found = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                if os.getsid(int(entry)) == sid:
                    found.append(int(entry))
            except OSError:
                pass
    return found


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGHUP])
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
    assert len(_session_processes(process.pid)) >= 4  # main, forkserver, tracker, 2 workers
    process.send_signal(signum)
    assert process.wait(timeout=30) == 128 + signum
    deadline = time.monotonic() + 10
    while _session_processes(process.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert _session_processes(process.pid) == []
