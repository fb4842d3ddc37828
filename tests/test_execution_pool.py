"""Tests of confpop.execution.pool_scope: one set of worker processes for many run_units calls.

Checked: the calls share the workers (process ids), a worker that dies in a later call is
charged to its unit and the pool is rebuilt, a worker killed between calls costs no unit,
an interrupt (in a unit or in the caller) leaves no worker behind, the workers run one
OpenMP thread after preloading an engine, and a search gives the same ensemble with one
pool as in one process.

The unit functions are at module level (workers import this module to unpickle them).
"""

from __future__ import annotations

import os
import signal
import time

import pytest

from processes import alive, session_processes

from confpop.execution import WORKER_DIED, _active_pool, pool_scope, run_units


# -- unit functions (module level: picklable) -------------------------------------------------
def pid_after(seconds):
    time.sleep(seconds)
    return os.getpid()


def die_or_pid(item):
    value, die = item
    if die:
        os._exit(1)  # the worker process vanishes without a word
    time.sleep(0.02)
    return value, os.getpid()


def sleep_or_interrupt(item):
    seconds, stop = item
    if stop:
        time.sleep(0.3)  # the other unit has started by now
        raise KeyboardInterrupt  # stands in for Ctrl-C during a long run
    time.sleep(seconds)
    return seconds


def openmp_after_a_gfn2_single_point(_):
    """OpenMP threads allowed and threads running in this worker after one GFN2 call."""
    import ctypes

    import numpy as np
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from confpop.backends import get_backend

    mol = Chem.AddHs(Chem.MolFromSmiles("O"))
    AllChem.EmbedMolecule(mol, randomSeed=3)
    get_backend("gfn2", mol).compute(np.array(mol.GetConformer().GetPositions()))
    with open("/proc/self/maps") as handle:
        paths = {line.split()[5] for line in handle if len(line.split()) == 6}
    gomp = sorted(p for p in paths if os.path.basename(p).startswith("libgomp"))
    with open("/proc/self/status") as handle:
        threads = next(int(line.split()[1]) for line in handle if line.startswith("Threads:"))
    return [ctypes.CDLL(p).omp_get_max_threads() for p in gomp], threads


def _wait_gone(pids, seconds=15.0) -> list[int]:
    deadline = time.monotonic() + seconds
    while any(alive(p) for p in pids) and time.monotonic() < deadline:
        time.sleep(0.05)
    return [p for p in pids if alive(p)]


# -- sharing --------------------------------------------------------------------------------
def test_calls_inside_a_scope_run_on_the_same_workers():
    with pool_scope(2) as pool:
        first = {o.value for o in run_units(pid_after, [0.05] * 4)}
        second = {o.value for o in run_units(pid_after, [0.05] * 4)}
        third = {o.value for o in run_units(pid_after, [0.05] * 4, workers=2)}
        serial = {o.value for o in run_units(pid_after, [0.0] * 2, workers=1)}
        assert pool.pool_starts == 1  # no new pool for the later calls
    assert len(first | second | third) <= 2  # one set of two workers served all three
    assert os.getpid() not in first | second | third
    assert serial == {os.getpid()}  # workers=1 still runs in this process
    assert _wait_gone(first | second | third) == []  # shut down when the scope ends
    assert _active_pool() is None


def test_a_nested_scope_uses_the_outer_pool_and_outside_calls_get_their_own():
    with pool_scope(2) as outer:
        with pool_scope(2) as inner:
            assert inner is None and _active_pool() is outer
            inside = {o.value for o in run_units(pid_after, [0.05] * 2)}
        assert _active_pool() is outer
        again = {o.value for o in run_units(pid_after, [0.05] * 2)}
    assert len(inside | again) <= 2 and outer.pool_starts == 1
    outside = {o.value for o in run_units(pid_after, [0.05] * 2, workers=2)}
    assert not outside & (inside | again)  # a call outside the scope made its own pool


def test_a_scope_of_one_worker_opens_no_pool():
    with pool_scope(1) as pool:
        assert pool is None and _active_pool() is None


def timed_sleep(item):
    """Sleeps; returns (start, end) on the monotonic clock (shared by the processes)."""
    seconds = item
    start = time.monotonic()
    time.sleep(seconds)
    return start, time.monotonic()


def _most_at_once(spans) -> int:
    return max(sum(1 for s, e in spans if s <= t < e) for t, _ in spans)


def test_a_call_asking_for_fewer_workers_keeps_that_many_units_in_the_scope_pool(monkeypatch):
    from confpop import execution

    monkeypatch.setattr(execution, "default_workers", lambda: 3)  # as on a 3-CPU machine
    with pool_scope(3) as pool:
        run_units(pid_after, [0.0] * 3)  # the three workers are up
        limited = [o.value for o in run_units(timed_sleep, [0.5] * 6, workers=2)]
        full = [o.value for o in run_units(timed_sleep, [0.5] * 6)]
        assert pool.pool_starts == 1
    assert _most_at_once(limited) == 2
    assert _most_at_once(full) == 3


# -- a dead worker ---------------------------------------------------------------------------
def test_a_worker_death_in_a_later_call_is_charged_to_its_unit_and_the_pool_rebuilt():
    with pool_scope(2) as pool:
        first = run_units(die_or_pid, [(i, False) for i in range(4)])
        assert all(o.ok and o.attempts == 1 for o in first)
        second = run_units(die_or_pid, [(i, i == 2) for i in range(6)])
        assert [o.value[0] if o.ok else None for o in second] == [0, 1, None, 3, 4, 5]
        dead = second[2]
        assert (dead.ok, dead.error_type, dead.error_message, dead.attempts) == \
            (False, "BrokenProcessPool", WORKER_DIED, 2)  # retries=1: two tries, both died
        assert all(o.attempts == 1 for i, o in enumerate(second) if i != 2)
        third = run_units(die_or_pid, [(i, False) for i in range(4)])
        assert all(o.ok and o.attempts == 1 for o in third)
        assert pool.pool_starts >= 3  # rebuilt after each death
    old = {o.value[1] for o in first}
    assert not old & {o.value[1] for o in third}  # the workers of the first call are gone
    assert _wait_gone(old | {o.value[1] for o in third}) == []


def test_a_worker_killed_between_calls_costs_no_unit():
    with pool_scope(2):
        pids = {o.value for o in run_units(pid_after, [0.1] * 2)}
        os.kill(min(pids), signal.SIGKILL)  # an idle worker ends (out of memory, say)
        time.sleep(0.2)
        outcomes = run_units(die_or_pid, [(i, False) for i in range(4)])
    assert [(o.ok, o.attempts) for o in outcomes] == [(True, 1)] * 4
    assert min(pids) not in {o.value[1] for o in outcomes}


# -- interrupts ------------------------------------------------------------------------------
def test_an_interrupt_in_a_unit_stops_every_worker_without_waiting():
    start = time.monotonic()
    with pytest.raises(KeyboardInterrupt):
        with pool_scope(2):
            pids = {o.value for o in run_units(pid_after, [0.05] * 4)}
            run_units(sleep_or_interrupt, [(60.0, False), (0.0, True)])
    assert time.monotonic() - start < 30  # the 60 s unit was not waited for
    assert _wait_gone(pids) == []
    assert _active_pool() is None


def test_an_interrupt_in_the_caller_between_calls_stops_the_workers():
    with pytest.raises(KeyboardInterrupt):
        with pool_scope(2):
            pids = {o.value for o in run_units(pid_after, [0.05] * 4)}
            raise KeyboardInterrupt  # Ctrl-C while this process samples, say
    assert _wait_gone(pids) == []
    assert _active_pool() is None


# -- engines in preloaded workers --------------------------------------------------------------
def test_preloaded_workers_run_one_openmp_thread(monkeypatch):
    # DESIGN.md "Threads": OMP_NUM_THREADS=1 in workers, parallelism from processes; the
    # caller's larger setting must not reach an engine imported at worker start
    pytest.importorskip("xtb.interface")
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    with pool_scope(2, preload=("confpop.backends.xtb", "xtb.interface")):
        outcomes = run_units(openmp_after_a_gfn2_single_point, [0, 1])
    for outcome in outcomes:
        assert outcome.ok, outcome.error_message
        max_threads, threads = outcome.value
        assert max_threads and set(max_threads) == {1}  # libgomp is loaded, one thread
        assert threads == 1  # no OpenMP or BLAS helper thread in the worker
    assert os.environ["OMP_NUM_THREADS"] == "3"


def test_a_failing_preload_leaves_the_units_to_fail_with_their_own_error():
    with pool_scope(2, preload=("confpop_no_such_module_invented",)):
        outcomes = run_units(pid_after, [0.0, 0.0])
    assert all(o.ok for o in outcomes)


# -- a search ---------------------------------------------------------------------------------
def test_a_search_runs_all_its_stages_on_one_pool_and_gives_the_serial_ensemble(monkeypatch):
    # the model potential (confpop.backends.model) stands in for an engine: cheap units
    import numpy as np

    import confpop
    from confpop import execution

    serial = confpop.search("CCCCCC", method="model", seed=4, workers=1)
    made = []

    class CountedPool(execution._LocalPool):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            made.append(self)

    monkeypatch.setattr(execution, "_LocalPool", CountedPool)
    pooled = confpop.search("CCCCCC", method="model", seed=4, workers=2)
    assert len(made) == 1 and made[0].pool_starts == 1  # one pool, never rebuilt
    steps = {p["step"]: p for p in pooled.provenance}
    units = steps["screen"]["n_in"] + steps["optimize"]["n_in"] + \
        steps["minimum-check"]["symmetric"]
    assert units >= 8 and made[0]._tickets == units  # every unit went through that pool
    assert made[0].executor is None  # shut down at the end of the search
    np.testing.assert_allclose(pooled.raw_table["energy_model"], serial.raw_table["energy_model"],
                               rtol=0, atol=1e-12)
    assert list(pooled.raw_table["status"]) == list(serial.raw_table["status"])


def parent_maps_engine(_):
    """Whether this worker's parent (the fork server) has xtb loaded, and this worker's
    OpenMP threads allowed and threads running after one GFN2 call."""
    with open(f"/proc/{os.getppid()}/maps") as handle:
        server_has_xtb = any("libxtb" in line for line in handle)
    return server_has_xtb, *openmp_after_a_gfn2_single_point(None)


FRESH_PROCESS = """
import sys
sys.path.insert(0, {tests!r})
from confpop.execution import pool_scope, run_units
from test_execution_pool import parent_maps_engine

if __name__ == "__main__":
    with pool_scope(2, preload=("confpop.backends.xtb", "xtb.interface")):
        print([o.value if o.ok else o.error_message for o in run_units(parent_maps_engine, [0, 1])])
"""


@pytest.mark.skipif(not os.path.exists("/proc/self/maps"), reason="reads /proc")
def test_a_fresh_fork_server_preloads_the_engine_with_one_openmp_thread(tmp_path):
    # In a fresh process the fork server imports the engine once and forks the workers
    # from it; a caller's OMP_NUM_THREADS=3 must reach neither the server's engine nor
    # the workers (DESIGN.md "Threads").
    import ast
    import subprocess
    import sys

    pytest.importorskip("xtb.interface")
    script = tmp_path / "fresh.py"
    script.write_text(FRESH_PROCESS.format(tests=os.path.dirname(os.path.abspath(__file__))))
    env = {**os.environ, "OMP_NUM_THREADS": "3"}
    out = subprocess.run([sys.executable, str(script)], env=env, capture_output=True, text=True,
                         timeout=300, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-2000:]
    for server_has_xtb, max_threads, threads in ast.literal_eval(out.stdout.strip()):
        assert server_has_xtb  # loaded once, in the fork server
        assert max_threads and set(max_threads) == {1}
        assert threads == 1


SCOPED_SCRIPT = """
import os, sys, time
from confpop.cli import Terminated, _install_signal_handlers
from confpop.execution import pool_scope, run_units

def unit(seconds):
    with open(os.path.join(sys.argv[1], f"started-{os.getpid()}"), "w"):
        pass
    time.sleep(seconds)
    return seconds

if __name__ == "__main__":
    _install_signal_handlers()
    try:
        with pool_scope(2, preload=("confpop.pipeline",)):
            run_units(unit, [0.0, 0.0])  # a first stage
            run_units(unit, [60.0, 60.0])  # the second, stopped by the signal
    except Terminated as stop:
        sys.exit(128 + stop.signum)
    sys.exit(0)
"""


@pytest.mark.skipif(not os.path.exists("/proc/self/stat"), reason="reads /proc")
@pytest.mark.slow
def test_sigterm_in_a_later_stage_of_a_scope_leaves_no_process_behind(tmp_path):
    import subprocess
    import sys

    script = tmp_path / "run.py"
    script.write_text(SCOPED_SCRIPT)
    env = {**os.environ, "OMP_NUM_THREADS": "1"}
    process = subprocess.Popen([sys.executable, str(script), str(tmp_path)], env=env,
                               start_new_session=True)
    deadline = time.monotonic() + 60
    while len(list(tmp_path.glob("started-*"))) < 2 and time.monotonic() < deadline:
        time.sleep(0.1)
    time.sleep(0.5)  # the 60 s units have started too
    assert len(session_processes(process.pid)) >= 4  # main, fork server, tracker, 2 workers
    process.send_signal(signal.SIGTERM)
    assert process.wait(timeout=30) == 128 + signal.SIGTERM
    deadline = time.monotonic() + 10
    while session_processes(process.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert session_processes(process.pid) == []


@pytest.mark.slow
@pytest.mark.skipif(not os.path.isdir("/proc") or len(os.sched_getaffinity(0)) < 2,
                    reason="needs Linux /proc and two CPUs")
def test_ctrl_c_while_the_fork_server_loads_the_engines_prints_no_traceback(tmp_path):
    # A terminal's Ctrl-C reaches the whole process group, fork server and workers included;
    # they ignore it (the command stops them), so the user sees one line, no traceback
    import subprocess
    import sys

    env = {**os.environ, "OMP_NUM_THREADS": "1"}
    proc = subprocess.Popen([sys.executable, "-m", "confpop", "ensemble", "CCCCOC(=O)C",
                             "--method", "gfn2", "--workers", "2", "--quiet"],
                            env=env, cwd=tmp_path, start_new_session=True, text=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)

    def forkserver_up():
        for pid in session_processes(proc.pid):
            try:
                with open(f"/proc/{pid}/cmdline", "rb") as handle:
                    if b"forkserver" in handle.read():
                        return True
            except OSError:
                pass
        return False

    deadline = time.monotonic() + 60
    while not forkserver_up() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    assert proc.poll() is None, "the search ended before its pool started"
    time.sleep(0.2)  # the fork server is importing the engines now
    os.killpg(proc.pid, signal.SIGINT)
    err = proc.communicate(timeout=120)[1]
    assert proc.returncode == 130
    assert "Traceback" not in err and "Fatal Python error" not in err, err[-2000:]
    assert "interrupted" in err
    deadline = time.monotonic() + 15
    while session_processes(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert session_processes(proc.pid) == []


def test_pool_scope_caps_workers_silently_and_the_asking_call_warns_once():
    # the scope is capped at the CPUs without a warning of its own: a search asked for too
    # many workers warned twice, once from contextlib's frame
    import warnings

    from confpop.errors import ConfpopWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pool_scope(workers=10_000):
            out = run_units(abs, [-1, -2], workers=10_000)
    about_workers = [w for w in caught if issubclass(w.category, ConfpopWarning)
                     and "workers=10000" in str(w.message)]
    assert len(about_workers) == 1
    assert about_workers[0].filename == __file__
    assert [o.value for o in out] == [1, 2]
    with pytest.raises(Exception, match="workers must be an int"):
        with pool_scope(workers=0):
            pass


UNGUARDED_SCRIPT = """
from confpop.execution import run_units

outcomes = run_units(abs, [-1, -2], workers=2)  # at the top level: no __main__ guard
print("RESULT", outcomes[0].ok, outcomes[0].error_message)
"""


@pytest.mark.skipif(len(os.sched_getaffinity(0)) < 2, reason="needs 2 usable cores")
def test_a_script_without_the_main_guard_gets_one_line_per_worker_and_the_fix_in_its_error(tmp_path):
    # Python's multiprocessing rule ("Safe importing of main module", its documentation):
    # a forkserver or spawn worker imports the caller's script first. An unguarded call
    # used to kill every worker with multiprocessing's bootstrapping traceback and leave the
    # caller with "the local pool broke"; now each worker says why in one line and the
    # caller's error names the fix.
    import subprocess
    import sys

    script = tmp_path / "unguarded.py"
    script.write_text(UNGUARDED_SCRIPT)
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                         timeout=120, cwd=tmp_path)
    assert out.returncode == 0, out.stderr[-2000:]
    assert "Traceback" not in out.stderr, out.stderr[-2000:]
    worker_lines = [line for line in out.stderr.splitlines() if "stopped: the script" in line]
    assert worker_lines and all("__name__ == \"__main__\"" in line for line in worker_lines)
    result = next(line for line in out.stdout.splitlines() if line.startswith("RESULT"))
    assert result.startswith("RESULT False")
    assert "if __name__ == \"__main__\":" in result and "workers=1" in result
    # the guarded script runs (the same call under the guard)
    guarded = tmp_path / "guarded.py"
    guarded.write_text("from confpop.execution import run_units\n"
                       "if __name__ == '__main__':\n"
                       "    print('RESULT', [o.value for o in run_units(abs, [-1, -2], workers=2)])\n")
    out = subprocess.run([sys.executable, str(guarded)], capture_output=True, text=True,
                         timeout=120, cwd=tmp_path)
    assert out.returncode == 0 and "RESULT [1, 2]" in out.stdout, out.stderr[-2000:]
