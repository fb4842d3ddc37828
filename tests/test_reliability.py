"""Reliability of the conformer search at scale: the same answer wherever it runs, the result
store reused across processes, a killed run resumed, a corrupt store refused clearly.

The checks are identities of the run, not chemistry: a seeded search is deterministic, so the
serial run is the reference for the local pool and the dask cluster (energies to 1e-8
hartree, far below any chemical meaning; GFN2-xTB SCF energies are converged to ~1e-10 by
the engine's default accuracy [from memory]). Engine calls are counted by a GFN2 backend that
appends one line to a file per call, so calls made in worker processes count too.
"""

import multiprocessing
import os
import signal
import subprocess
import sys
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

from confpop.backends.xtb import GFN2

MOLECULE = "CCCC"  # n-butane: anti + gauche (a mirror pair), every search stage runs
COUNTING = "counting-gfn2"
COUNT_ENV = "CONFPOP_TEST_ENGINE_CALLS"
HERE = os.path.dirname(os.path.abspath(__file__))


class CountingGFN2(GFN2):
    """GFN2-xTB that appends one line per engine call to the file named by $COUNT_ENV."""

    def _compute(self, positions, gradient):
        path = os.environ.get(COUNT_ENV)
        if path:
            with open(path, "a") as handle:  # O_APPEND: lines from several processes interleave
                handle.write("1\n")
        return super()._compute(positions, gradient)


def register_counting(count_file=None):
    """Register the counting backend here (and in a worker, as its initializer)."""
    from confpop.backends import available_backends, register_backend

    os.environ["OMP_NUM_THREADS"] = "1"
    if count_file is not None:
        os.environ[COUNT_ENV] = str(count_file)
    if COUNTING not in available_backends():
        register_backend(COUNTING, CountingGFN2)


def calls(path) -> int:
    try:
        with open(path) as handle:
            return sum(1 for _ in handle)
    except FileNotFoundError:
        return 0


def counting_pool(count_file, workers=2):
    """A local process pool whose workers know the counting backend."""
    return ProcessPoolExecutor(max_workers=workers,
                               mp_context=multiprocessing.get_context("forkserver"),
                               initializer=register_counting, initargs=(str(count_file),))


def assert_same_ensemble(ens, ref):
    """Same conformers, energies (1e-8 hartree), degeneracies, status and geometries."""
    assert len(ens) == len(ref)
    assert ens.ids() == ref.ids()
    np.testing.assert_allclose(ens.raw_table.loc[ens.ids(), f"energy_{ens.level}"].to_numpy(float),
                               ref.raw_table.loc[ref.ids(), f"energy_{ref.level}"].to_numpy(float),
                               rtol=0, atol=1e-8)  # hartree
    assert ens.degeneracy.tolist() == ref.degeneracy.tolist()
    assert ens.raw_table["status"].tolist() == ref.raw_table["status"].tolist()
    for cid in ref.ids():
        np.testing.assert_allclose(ens.positions(cid), ref.positions(cid), rtol=0, atol=1e-6)


@pytest.fixture(scope="module")
def reference():
    """The serial search: the reference every other way of running must reproduce."""
    from confpop import search

    ens = search(MOLECULE, method="gfn2", seed=0, workers=1)
    # n-butane has two distinct conformers: anti and the gauche mirror pair (one row,
    # degeneracy 2) (common practice; gauche - anti 0.67 +/- 0.10 kcal/mol, Herrebout et
    # al., J. Phys. Chem. 1995, 99, 578: the tolerance allows GFN2-xTB's known error)
    assert len(ens) == 2
    assert sorted(ens.degeneracy.tolist()) == [1, 2]
    assert float(ens.energies("kcal/mol").iloc[1]) == pytest.approx(0.67, abs=0.5)
    return ens


@pytest.fixture(scope="module")
def cluster():
    """A real dask.distributed cluster of two single-threaded worker processes."""
    distributed = pytest.importorskip("distributed")  # in the "test" and "dask" extras
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as local, \
            distributed.Client(local) as client:
        yield client


@pytest.fixture(scope="module")
def counted(tmp_path_factory):
    """An uninterrupted serial search with a fresh store: (ensemble, engine calls, store)."""
    from confpop import search

    folder = tmp_path_factory.mktemp("counted")
    count_file = folder / "calls.log"
    previous = os.environ.get(COUNT_ENV)
    register_counting(count_file)
    try:
        ens = search(MOLECULE, method=COUNTING, seed=0, workers=1, store=folder / "full.sqlite")
    finally:
        if previous is None:
            os.environ.pop(COUNT_ENV, None)
        else:
            os.environ[COUNT_ENV] = previous
    return ens, calls(count_file), folder / "full.sqlite"


# -- the same answer wherever it runs ---------------------------------------------------------
@pytest.mark.slow
def test_local_pool_gives_the_serial_ensemble(reference):
    from confpop import search

    assert_same_ensemble(search(MOLECULE, method="gfn2", seed=0, workers=2), reference)


@pytest.mark.slow
def test_dask_cluster_gives_the_serial_ensemble(reference, cluster):
    from confpop import search

    assert_same_ensemble(search(MOLECULE, method="gfn2", seed=0, executor=cluster), reference)


# -- the store --------------------------------------------------------------------------------
def test_second_run_with_the_store_makes_no_engine_calls(counted, reference, cluster, tmp_path,
                                                         monkeypatch):
    from confpop import ResultStore, search

    ens, n_calls, store_path = counted
    assert n_calls > 10  # every stage called the engine: single points + two optimizations
    assert_same_ensemble(ens, reference)  # the counting backend is plain GFN2
    count_file = tmp_path / "calls.log"
    monkeypatch.setenv(COUNT_ENV, str(count_file))
    cluster.run(register_counting, str(count_file))
    # without the store the cluster's worker processes make as many calls as the serial
    # run: the counter sees calls made in other processes
    assert_same_ensemble(search(MOLECULE, method=COUNTING, seed=0, executor=cluster), reference)
    assert calls(count_file) == n_calls
    count_file.unlink()
    with ResultStore(store_path) as store:
        rows = len(store)
        # the second run: in this process, in a local pool, on the cluster
        again = [search(MOLECULE, method=COUNTING, seed=0, workers=1, store=store)]
        with counting_pool(count_file) as pool:
            again.append(search(MOLECULE, method=COUNTING, seed=0, executor=pool, store=store))
        again.append(search(MOLECULE, method=COUNTING, seed=0, executor=cluster, store=store))
        assert len(store) == rows
    assert calls(count_file) == 0
    for ens in again:
        assert_same_ensemble(ens, reference)


_KILLED_RUN = """
import sys
sys.path.insert(0, {here!r})
from test_reliability import MOLECULE, COUNTING, register_counting
register_counting()
from confpop import search
search(MOLECULE, method=COUNTING, seed=0, workers=1, store=sys.argv[1])
"""


@pytest.mark.slow
def test_a_killed_run_resumes_to_the_uninterrupted_result(counted, tmp_path, monkeypatch):
    from confpop import ResultStore, search

    full, full_calls, full_store = counted
    with ResultStore(full_store) as store:
        full_rows = len(store)
    script = tmp_path / "killed_run.py"
    script.write_text(_KILLED_RUN.format(here=HERE))
    store_path = tmp_path / "resumable.sqlite"
    env = {**os.environ, "OMP_NUM_THREADS": "1", COUNT_ENV: str(tmp_path / "killed.log")}
    process = subprocess.Popen([sys.executable, str(script), str(store_path)], env=env,
                               stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    rows = 0
    try:
        deadline = time.monotonic() + 300
        while time.monotonic() < deadline and process.poll() is None:
            if store_path.exists():
                with ResultStore(store_path) as store:
                    rows = len(store)
                if rows >= 3:  # the single points and part of the optimizations are stored
                    break
            time.sleep(0.02)
        assert process.poll() is None, \
            f"the search ended before it could be killed: {process.stderr.read().decode()[-500:]}"
        os.kill(process.pid, signal.SIGKILL)
    finally:
        if process.poll() is None:
            process.kill()
        process.wait()
        process.stderr.close()
    assert process.returncode == -signal.SIGKILL
    with ResultStore(store_path) as store:
        rows_at_kill = len(store)
    assert 3 <= rows_at_kill < full_rows

    count_file = tmp_path / "resumed.log"
    monkeypatch.setenv(COUNT_ENV, str(count_file))
    register_counting()
    resumed = search(MOLECULE, method=COUNTING, seed=0, workers=1, store=store_path)
    assert_same_ensemble(resumed, full)
    assert 0 < calls(count_file) < full_calls
    with ResultStore(store_path) as store:
        assert len(store) == full_rows


# -- a corrupt store --------------------------------------------------------------------------
def test_a_corrupt_store_gives_a_clear_store_error(tmp_path, capsys):
    from confpop import StoreError, search
    from confpop.cli import main

    path = tmp_path / "results.sqlite"
    junk = b"these bytes are not an SQLite database\n" * 20
    path.write_bytes(junk)
    with pytest.raises(StoreError, match="is not a confpop result store: it is not an SQLite"):
        search("CCO", method="mmff94s", workers=1, store=path)
    assert path.read_bytes() == junk  # left alone

    for argv in (["ensemble", "CCO", "--method", "mmff94s", "--store", str(path)],
                 ["batch", str(_smi_file(tmp_path)), "--out", str(tmp_path / "out"),
                  "--method", "mmff94s", "--workers", "1", "--store", str(path)]):
        assert main(argv) == 2
        captured = capsys.readouterr()
        assert captured.out == ""
        lines = captured.err.strip().splitlines()
        assert len(lines) == 1
        assert lines[0].startswith("confpop: error: ")
        assert "is not a confpop result store" in lines[0]
    assert not (tmp_path / "out" / "summary.csv").exists()  # refused before any work
    assert path.read_bytes() == junk


def _smi_file(folder):
    path = folder / "two.smi"
    path.write_text("CCO ethanol\nCCC propane\n")
    return path
