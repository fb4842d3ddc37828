"""Tests of confpop.execution: order, retries, dead workers, one OpenMP thread, the store.

The functions run by the pool are at module level (spawned workers import this module to
unpickle them). Calls are counted with files because workers are separate processes.
"""

from __future__ import annotations

import concurrent.futures
import os
import pickle

import pytest

from confpop.errors import InputError
from confpop.execution import UnitOutcome, WORKER_DIED, local_executor, run_units

# confpop.store (and so numpy) is imported inside the tests that need it: every worker
# process imports this module, and a light import keeps pool start-up short.


# -- unit functions (module level: picklable) -------------------------------------------------
def square_or_fail(x):
    """x**2; a negative x is an invented bad input."""
    if x < 0:
        raise ValueError(f"negative item {x}")
    return x * x


def omp_threads(_):
    return os.environ.get("OMP_NUM_THREADS")


def read_env(name):
    return os.environ.get(name)


def fail_first_call(item):
    """Fails on the first call for this item, succeeds on the second (a file counts calls)."""
    counter_path, value = item
    with open(counter_path, "a") as handle:
        handle.write("x")
    with open(counter_path) as handle:
        calls = len(handle.read())
    if calls == 1:
        raise RuntimeError(f"invented transient failure of item {value}")
    return value


def die_or_double(item):
    value, die = item
    if die:
        os._exit(1)  # the worker process vanishes without a word
    return 2 * value


def counted_square(item):
    """x**2, appending one line per call to a shared log file (O_APPEND: no lost lines)."""
    log_path, value = item
    with open(log_path, "a") as handle:
        handle.write(f"{value}\n")
    return value * value


def interrupt_at(item):
    value, stop = item
    if stop:
        raise KeyboardInterrupt  # stands in for Ctrl-C during a long run
    return value + 0.5


def read_store(item):
    store, key = item
    return store.get(key)


def _calls(log_path) -> int:
    if not os.path.exists(log_path):
        return 0
    with open(log_path) as handle:
        return sum(1 for _ in handle)


def _summary(outcomes):
    return [(o.index, o.ok, o.value, o.error_type, o.error_message, o.attempts, o.from_store)
            for o in outcomes]


# -- order and failures -----------------------------------------------------------------------
def test_serial_results_come_in_item_order():
    outcomes = run_units(square_or_fail, [3, 1, 2, 0], workers=1)
    assert [o.index for o in outcomes] == [0, 1, 2, 3]
    assert [o.value for o in outcomes] == [9, 1, 4, 0]
    assert all(o.ok and o.attempts == 1 and not o.from_store for o in outcomes)
    assert all(isinstance(o, UnitOutcome) and o.seconds >= 0.0 for o in outcomes)


def test_pool_gives_the_same_outcomes_as_serial():
    items = [5, -1, 3, 0, -7, 2, 11]
    serial = run_units(square_or_fail, items, workers=1)
    pooled = run_units(square_or_fail, items, workers=2)
    assert _summary(pooled) == _summary(serial)
    assert [o.value for o in pooled] == [25, None, 9, 0, None, 4, 121]
    assert pooled[1].error_type == "ValueError"
    assert pooled[1].error_message == "negative item -1"
    assert pooled[1].attempts == 2  # tried once more (retries=1), then recorded


@pytest.mark.parametrize("retries", [0, 2])
def test_failure_recorded_after_the_given_retries(retries):
    (outcome,) = run_units(square_or_fail, [-2], workers=1, retries=retries)
    assert not outcome.ok
    assert outcome.value is None
    assert outcome.attempts == retries + 1


def test_transient_failure_retried_once_in_serial_and_pool(tmp_path):
    for workers in (1, 2):
        items = [(str(tmp_path / f"counter_{workers}_{i}"), i) for i in range(3)]
        outcomes = run_units(fail_first_call, items, workers=workers)
        assert [o.value for o in outcomes] == [0, 1, 2]
        assert all(o.ok and o.attempts == 2 for o in outcomes)
        # no retries allowed: the first failure is final
        items = [(str(tmp_path / f"again_{workers}_{i}"), i) for i in range(2)]
        if workers == 1:
            outcomes = run_units(fail_first_call, items, workers=workers, retries=0)
            assert [(o.ok, o.attempts, o.error_type) for o in outcomes] == \
                [(False, 1, "RuntimeError")] * 2
            assert outcomes[0].error_message == "invented transient failure of item 0"


def test_a_unit_that_kills_its_worker_costs_only_itself():
    items = [(i, i == 2) for i in range(6)]
    outcomes = run_units(die_or_double, items, workers=2)
    assert [o.value for o in outcomes] == [0, 2, None, 6, 8, 10]
    dead = outcomes[2]
    assert not dead.ok
    assert dead.error_message == WORKER_DIED == "worker process died"
    assert dead.error_type == "BrokenProcessPool"
    assert dead.attempts == 2  # the default retries=1: two tries, each killed the worker
    assert all(o.attempts == 1 for i, o in enumerate(outcomes) if i != 2)


class DiesWhenUnpickled:
    """An item whose unpickling ends the process that unpickles it (a worker)."""

    def __reduce__(self):
        return (os._exit, (1,))


def test_death_while_unpickling_an_item_is_charged_to_that_unit_and_unpicklable_items_fail():
    items = [3, DiesWhenUnpickled(), lambda: 0, 4]
    outcomes = run_units(square_or_fail, items, workers=2, retries=0)
    assert [(o.ok, o.value, o.attempts) for o in outcomes] == \
        [(True, 9, 1), (False, None, 1), (False, None, 1), (True, 16, 1)]
    assert outcomes[1].error_message == "worker process died"
    assert "the item cannot be pickled" in outcomes[2].error_message


# -- one OpenMP thread per worker --------------------------------------------------------------
def test_workers_run_one_openmp_thread_and_the_caller_keeps_its_setting(monkeypatch):
    # DESIGN.md "Threads": OMP_NUM_THREADS=1 in workers, parallelism from processes
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    outcomes = run_units(omp_threads, range(3), workers=2)
    assert [o.value for o in outcomes] == ["1", "1", "1"]
    assert os.environ["OMP_NUM_THREADS"] == "3"
    with local_executor(workers=1) as pool:
        assert pool.submit(omp_threads, None).result() == "1"
    assert os.environ["OMP_NUM_THREADS"] == "3"


# -- other executors ---------------------------------------------------------------------------
def test_thread_pool_executor_gives_the_serial_outcomes():
    items = [4, -3, 6]
    with concurrent.futures.ThreadPoolExecutor(max_workers=2) as pool:
        outcomes = run_units(square_or_fail, items, executor=pool)
    assert _summary(outcomes) == _summary(run_units(square_or_fail, items, workers=1))


def test_a_shut_down_executor_fails_the_units_with_a_reason():
    pool = concurrent.futures.ThreadPoolExecutor(max_workers=1)
    pool.shutdown()
    outcomes = run_units(square_or_fail, [1, 2], executor=pool)
    assert [o.ok for o in outcomes] == [False, False]
    assert outcomes[0].error_type == "RuntimeError"
    assert "executor refused" in outcomes[1].error_message


def test_dask_local_cluster_gives_the_serial_outcomes():
    distributed = pytest.importorskip("distributed")  # in the "test" and "dask" extras
    items = [2, -5, 7, 1]
    expected = _summary(run_units(square_or_fail, items, workers=1))
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        via_executor = run_units(square_or_fail, items, executor=client.get_executor())
        via_client = run_units(square_or_fail, items, executor=client)
    assert _summary(via_executor) == expected
    assert _summary(via_client) == expected


# -- the result store -------------------------------------------------------------------------
def test_second_run_with_the_store_calls_nothing(tmp_path):
    from confpop.store import ResultStore

    log = str(tmp_path / "calls.log")
    items = [(log, v) for v in (3, 4, 5, 6)]
    keys = [f"key-{v}" for v in (3, 4, 5, 6)]
    with ResultStore(tmp_path / "results.sqlite") as store:
        first = run_units(counted_square, items, workers=2, store=store, keys=keys)
        assert _calls(log) == 4
        assert len(store) == 4
        second = run_units(counted_square, items, workers=2, store=store, keys=keys)
        third = run_units(counted_square, items, workers=1, store=store, keys=keys)
    assert _calls(log) == 4  # zero calls in the second and third runs
    assert [o.value for o in first] == [o.value for o in second] == [9, 16, 25, 36]
    assert all(o.from_store and o.attempts == 0 for o in second + third)
    assert not any(o.from_store for o in first)
    assert second[0].seconds == pytest.approx(first[0].seconds, rel=1e-12)


def test_only_missing_and_unkeyed_units_are_computed(tmp_path):
    from confpop.store import ResultStore

    log = str(tmp_path / "calls.log")
    with ResultStore(tmp_path / "results.sqlite") as store:
        store.put("a", 100)
        outcomes = run_units(counted_square, [(log, 1), (log, 2), (log, 3)], workers=1,
                             store=store, keys=["a", "b", None])
        assert [o.value for o in outcomes] == [100, 4, 9]  # "a" is taken as stored
        assert [o.from_store for o in outcomes] == [True, False, False]
        assert _calls(log) == 2
        assert sorted(store.keys()) == ["a", "b"]


def test_failures_are_not_stored(tmp_path):
    from confpop.store import ResultStore

    with ResultStore(tmp_path / "results.sqlite") as store:
        outcomes = run_units(square_or_fail, [2, -2], workers=1, store=store, keys=["p", "n"])
        assert [o.ok for o in outcomes] == [True, False]
        assert "p" in store and "n" not in store


def test_interrupted_run_keeps_every_finished_result(tmp_path):
    from confpop.store import ResultStore

    path = tmp_path / "results.sqlite"
    items = [(0, False), (1, False), (2, True), (3, False)]
    keys = ["k0", "k1", "k2", "k3"]
    with ResultStore(path) as store, pytest.raises(KeyboardInterrupt):
        run_units(interrupt_at, items, workers=1, store=store, keys=keys)
    with ResultStore(path) as store:
        assert store.keys() == ["k0", "k1"]  # written as they arrived, before the stop
        resumed = run_units(interrupt_at, [(v, False) for v, _ in items], workers=1,
                            store=store, keys=keys)
    assert [o.from_store for o in resumed] == [True, True, False, False]
    assert [o.value for o in resumed] == [0.5, 1.5, 2.5, 3.5]


def test_store_objects_travel_to_workers_by_path(tmp_path):
    from confpop.store import ResultStore

    path = tmp_path / "results.sqlite"
    with ResultStore(path) as store:
        store.put("x", {"energy": -5.07})
        items = [(store, "x"), (store, "missing")]
        outcomes = run_units(read_store, items, workers=2)
    assert [o.value for o in outcomes] == [{"energy": -5.07}, None]
    clone = pickle.loads(pickle.dumps(ResultStore(path)))
    assert clone.get("x") == {"energy": -5.07}
    clone.close()


# -- progress and silence ---------------------------------------------------------------------
def test_silent_by_default_and_progress_goes_to_stderr(capsys):
    run_units(square_or_fail, [1, -1], workers=1)
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""
    run_units(square_or_fail, [1, 2], workers=1, progress=True, description="invented units")
    captured = capsys.readouterr()
    assert captured.out == ""
    assert "invented units" in captured.err


# -- bad input --------------------------------------------------------------------------------
def test_bad_arguments_raise_input_error(tmp_path):
    from confpop.store import ResultStore

    with pytest.raises(InputError, match="either executor= or workers="):
        run_units(square_or_fail, [1], executor=concurrent.futures.ThreadPoolExecutor(1),
                  workers=2)
    with pytest.raises(InputError, match="workers must be an int >= 1, got 0"):
        run_units(square_or_fail, [1], workers=0)
    with pytest.raises(InputError, match="retries must be an int >= 0, got -1"):
        run_units(square_or_fail, [1], workers=1, retries=-1)
    with pytest.raises(InputError, match="function must be picklable"):
        run_units(lambda x: x, [1], workers=2)
    with pytest.raises(InputError, match="executor must be a concurrent.futures.Executor"):
        run_units(square_or_fail, [1], executor="local")
    with pytest.raises(InputError, match="store= and keys= go together"):
        run_units(square_or_fail, [1], workers=1, keys=["a"])
    with ResultStore(tmp_path / "s.sqlite") as store:
        with pytest.raises(InputError, match=r"one key per item \(2\), got 1"):
            run_units(square_or_fail, [1, 2], workers=1, store=store, keys=["a"])
    with pytest.raises(InputError, match="function must be callable"):
        run_units(3, [1], workers=1)


def test_no_items_no_work():
    assert run_units(square_or_fail, [], workers=2) == []


def test_an_openmp_runtime_loaded_before_the_initializer_is_set_to_one_thread():
    # libgomp reads OMP_NUM_THREADS only when it loads (GCC libgomp manual, "OMP_NUM_THREADS"
    # [from memory]); a runtime already loaded must be told through omp_set_num_threads.
    import ctypes.util
    import subprocess
    import sys

    gomp = ctypes.util.find_library("gomp")
    if gomp is None:
        pytest.skip("no system libgomp to load")
    code = ("import ctypes; from confpop.execution import _init_worker\n"
            f"g = ctypes.CDLL({gomp!r}); before = g.omp_get_max_threads()\n"
            "_init_worker(); print(before, g.omp_get_max_threads())")
    env = dict(os.environ, OMP_NUM_THREADS="3")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                         text=True, check=True, cwd=os.path.dirname(os.path.dirname(__file__)))
    assert out.stdout.split() == ["3", "1"]


def test_workers_see_the_callers_current_environment(monkeypatch):
    # a forkserver started earlier must not hand workers its old environment
    run_units(omp_threads, [0], workers=2)  # starts the forkserver if not yet running
    monkeypatch.setenv("CONFPOP_INVENTED_SETTING", "on")
    outcomes = run_units(read_env, ["CONFPOP_INVENTED_SETTING", "OMP_NUM_THREADS"], workers=2)
    assert [o.value for o in outcomes] == ["on", "1"]
