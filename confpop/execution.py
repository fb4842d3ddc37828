"""Running many independent calculations: serially, in local processes, or on any executor.

One function, :func:`run_units`, maps a module-level function over a list of items (one
optimization, single point, Hessian displacement or molecule each) and returns one
:class:`UnitOutcome` per item, in the order of the items. A unit that raises is retried and
then recorded as failed; the others go on. With a :class:`~confpop.store.ResultStore`,
finished results are written as they arrive and found again by the next run.

Where the work runs
-------------------
``workers=1``
    In this process, one unit after the other (no pickling, no pool; the fast path for tests
    and tiny jobs). A unit that kills its process kills the caller.
``executor=None`` (default)
    A pool of local worker processes (``workers``, default: the CPUs this process may use),
    started with the ``"forkserver"`` method (never ``"fork"``; see :data:`START_METHOD`).
    Each worker sets ``OMP_NUM_THREADS=1`` before it imports anything a unit needs, so every
    tight-binding engine runs on one thread and parallelism comes from processes; the
    caller's environment is left as it is. Inside :func:`pool_scope` every such call uses the
    scope's pool: one start-up for many calls (a search's stages).
``executor=...``
    Any :class:`concurrent.futures.Executor`, for example
    ``dask.distributed.Client(...).get_executor()``; a ``dask.distributed.Client`` itself is
    accepted too. The environment of those workers is the executor's business: start dask
    workers with ``OMP_NUM_THREADS=1`` (and one thread each) for tight-binding work.
"""

from __future__ import annotations

import contextlib
import ctypes
import importlib
import logging
import multiprocessing
import os
import pickle
import signal
import sys
import threading
import time
from collections import deque
from concurrent.futures import FIRST_COMPLETED, Executor, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Sequence

from .errors import InputError, StoreError

__all__ = ["UnitOutcome", "run_units", "pool_scope", "local_executor", "default_workers"]

logger = logging.getLogger(__name__)

#: multiprocessing start method of the local pool. Never "fork": a caller that has loaded an
#: OpenMP runtime (xtb, tblite) would hand it, with the caller's thread count, to every worker.
#: "forkserver" forks workers from a small server process started (fresh, by exec) on first
#: use, which has already imported the main script: measured here (benchmarks/bench_store.py),
#: a 2-worker pool returns its first units sooner than with "spawn", where every worker is a
#: new interpreter that imports everything again. Workers still get the caller's current
#: environment and working directory (see _init_worker). "spawn" where there is no forkserver.
START_METHOD = ("forkserver" if "forkserver" in multiprocessing.get_all_start_methods()
                else "spawn")
#: message of a unit whose worker process died while running it
WORKER_DIED = "worker process died"
# a pool that breaks this many times in a row with no unit running is given up
_MAX_IDLE_BREAKS = 3
_OPENMP_RUNTIMES = ("libgomp", "libiomp", "libomp")
#: what a script must do so that its workers can start (Python's multiprocessing rule: a
#: "forkserver" or "spawn" worker imports the main script before it runs anything)
MAIN_GUARD_HINT = ("if this runs from a script, put its confpop calls under "
                   "'if __name__ == \"__main__\":' (each worker process imports the script "
                   "first, and an unguarded call would start a search inside every worker), "
                   "or pass workers=1")


def _refuse_in_worker_start() -> None:
    """Stop a worker process that is importing the caller's script (see MAIN_GUARD_HINT)
    when that import reaches a confpop call that would start another pool.

    One line on stderr and the worker exits; without this the worker printed
    multiprocessing's 25-line bootstrapping traceback, and the caller saw only a broken pool.
    The caller's own error (the pool broke before any unit started) then carries the hint.
    """
    if getattr(multiprocessing.current_process(), "_inheriting", False):
        print(f"confpop: worker {os.getpid()} stopped: the script it imports calls confpop at "
              "its top level (put those calls under 'if __name__ == \"__main__\":')",
              file=sys.stderr, flush=True)
        raise SystemExit(1)


def _pool_broke_hint() -> str:
    """The hint for a pool whose workers never started, when the caller is a user's script
    (not the confpop command, whose entry point is guarded)."""
    main = sys.modules.get("__main__")
    spec = getattr(main, "__spec__", None)
    ours = (spec is not None and str(spec.name).startswith("confpop")) or \
        os.path.basename(sys.argv[0] if sys.argv else "") in ("confpop", "confpop.exe")
    if START_METHOD != "fork" and getattr(main, "__file__", None) and not ours:
        return f"; {MAIN_GUARD_HINT}"
    return ""


@dataclass(frozen=True)
class UnitOutcome:
    """What became of one unit of work.

    Attributes
    ----------
    index : int
        Position of the item in the input.
    ok : bool
        True if ``value`` holds the function's result.
    value : object
        The result (None when the unit failed).
    error_type : str or None
        Class name of the exception of the last attempt (``"BrokenProcessPool"`` when the
        worker process died), None when ``ok``.
    error_message : str or None
        Its message (``"worker process died"`` for a dead worker), None when ``ok``.
    attempts : int
        How many times the unit was run in this call (0 when it came from the store).
    from_store : bool
        True if the result was read from the result store instead of computed.
    seconds : float, seconds
        Wall time inside the function in the last attempt; for a result from the store, the
        time it took when it was computed (0.0 if unknown).
    """

    index: int
    ok: bool
    value: Any = None
    error_type: str | None = None
    error_message: str | None = None
    attempts: int = 0
    from_store: bool = False
    seconds: float = 0.0


# --------------------------------------------------------------------------------------------
# worker side
# --------------------------------------------------------------------------------------------
# Shared array of a local pool, one slot per worker process: marks[slot] = ticket of the
# unit the worker has taken and not yet returned (0: none). Tickets are numbered per pool, so
# one array serves every run_units call that uses the pool; after a worker died the parent
# reads which units were running.
_marks = None
_slot = -1


def _limit_loaded_openmp() -> tuple[list[str], list[str]]:
    """Set one thread in every OpenMP runtime already mapped into this process (Linux).

    A runtime reads OMP_NUM_THREADS once, when it loads; one loaded earlier (by a top-level
    import in the main script, which workers re-import) is told through its own
    ``omp_set_num_threads``. Returns (runtimes found, runtimes that could not be told).
    """
    try:
        with open("/proc/self/maps") as handle:
            lines = handle.read().splitlines()
    except OSError:  # not Linux: nothing to look at
        return [], []
    mapped = {parts[5] for parts in (line.split(maxsplit=5) for line in lines)
              if len(parts) == 6}  # address perms offset device inode path
    paths = sorted(p for p in mapped if os.path.basename(p).startswith(_OPENMP_RUNTIMES))
    failed = []
    for path in paths:
        try:
            ctypes.CDLL(path).omp_set_num_threads(1)
        except (OSError, AttributeError):
            failed.append(path)
    return paths, failed


def _one_line_warnings() -> None:
    """confpop's own warnings from a worker as one line on stderr, as the command prints them."""
    import warnings

    from .errors import ConfpopWarning

    default = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, ConfpopWarning):
            print(f"confpop: warning: {' '.join(str(message).split())}", file=sys.stderr)
        else:
            default(message, category, filename, lineno, file, line)

    warnings.showwarning = show


def _init_worker(marks=None, environ=None, counter=None, preload=()) -> None:
    """Initializer of local pool workers: one OpenMP thread, before any unit's imports.

    ``environ`` is the caller's environment when the pool was made: a forkserver worker
    would otherwise see the environment of the moment the server started. ``marks`` and
    ``counter`` are the pool's shared slot array and the counter that hands each worker its
    slot. ``preload`` names modules to import now, while the parent is busy elsewhere, so
    that the first unit does not wait for them (a module that fails to import is left to
    fail the units that need it, with their own error).
    """
    if environ is not None:
        for name in set(os.environ) - set(environ):
            del os.environ[name]
        os.environ.update(environ)
    os.environ["OMP_NUM_THREADS"] = "1"
    # Ctrl-C reaches the whole process group; the caller stops the workers (terminate_pool),
    # so a worker need not print its own traceback
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _one_line_warnings()
    global _marks, _slot
    _marks, _slot = None, -1
    if marks is not None and counter is not None:
        with counter.get_lock():
            slot = counter.value
            counter.value += 1
        if slot < len(marks):  # never otherwise: the pool starts at most len(marks) workers
            _marks, _slot = marks, slot
    found, failed = _limit_loaded_openmp()
    if found:
        logger.debug("worker %d: OpenMP runtime(s) loaded before the initializer, set to one "
                     "thread: %s", os.getpid(), found)
    if failed:
        logger.warning("worker %d: cannot set %s to one thread (loaded by a top-level import "
                       "in the main script?); engines may use several threads per worker",
                       os.getpid(), failed)
    for name in preload:
        try:
            importlib.import_module(name)
        except Exception as exc:  # the units that need it will say so
            logger.debug("worker %d: preloading %s failed: %s", os.getpid(), name, exc)


def _worker_ready(_=None) -> int:
    """A warm-up submission: makes the pool start a worker now; returns its process id."""
    return os.getpid()


def _run_unit(function, item):
    """Call ``function(item)``; return (ok, value, error_type, error_message, seconds)."""
    start = time.perf_counter()
    try:
        value = function(item)
    except Exception as exc:  # a unit's failure is data, not an exception of the run
        return (False, None, type(exc).__name__, str(exc), time.perf_counter() - start)
    return (True, value, None, None, time.perf_counter() - start)


_function_cache: dict[bytes, Callable] = {}


def _run_pooled_unit(function_blob: bytes, item_blob: bytes, ticket: int):
    """Local pool entry: mark the unit as taken, then unpickle and run it.

    Function and item travel pickled and are unpickled here, after the mark, so that a
    worker dying anywhere in a unit's handling (imports, unpickling, the calculation) is
    charged to that unit.
    """
    marks, slot = _marks, _slot
    if marks is not None:
        marks[slot] = ticket
    try:
        function = _function_cache.get(function_blob)
        if function is None:
            function = pickle.loads(function_blob)
            _function_cache.clear()
            _function_cache[function_blob] = function
        item = pickle.loads(item_blob)
    except Exception as exc:
        result = (False, None, type(exc).__name__,
                  f"cannot unpickle the unit in the worker process: {exc}", 0.0)
    else:
        result = _run_unit(function, item)
    if marks is not None:
        marks[slot] = 0
    return result


# --------------------------------------------------------------------------------------------
# parent side
# --------------------------------------------------------------------------------------------
def terminate_pool(pool) -> None:
    """Stop a local process pool without waiting for running units (after an interrupt).

    The interpreter would otherwise wait for long calculations at exit. Python 3.14 has
    ``terminate_workers()``; before it only the private process dict, which ``shutdown()``
    clears, so it is taken first.
    """
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        process.terminate()


def default_workers() -> int:
    """Number of CPUs this process may run on (its affinity mask), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # not Linux
        return max(1, os.cpu_count() or 1)


def local_executor(workers: int | None = None) -> ProcessPoolExecutor:
    """A local process pool set up like the one :func:`run_units` makes, for reuse.

    Its workers run with ``OMP_NUM_THREADS=1``. Pass it as ``executor=`` to several calls to
    save the pool start-up (~0.1 s); unlike the pool :func:`run_units` makes itself, a passed
    pool cannot be rebuilt when a worker dies, so the units left are then recorded as failed.
    :func:`pool_scope` shares one pool between calls and rebuilds it.

    Parameters
    ----------
    workers : int, optional
        Number of processes; default :func:`default_workers`.

    Returns
    -------
    concurrent.futures.ProcessPoolExecutor
        Shut it down (or use it in a ``with`` block) when done.
    """
    workers = default_workers() if workers is None else _check_workers(workers)
    _refuse_in_worker_start()
    return ProcessPoolExecutor(max_workers=workers,
                               mp_context=multiprocessing.get_context(START_METHOD),
                               initializer=_init_worker, initargs=(None, dict(os.environ)))


def _check_workers(workers) -> int:
    """An int >= 1, capped at :func:`default_workers` with a warning: more processes than
    CPUs only add memory (each worker holds ~180 MB once an engine is loaded) and switching."""
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise InputError(f"workers must be an int >= 1, got {workers!r}")
    cores = default_workers()
    if workers > cores:
        import warnings

        from .errors import ConfpopWarning
        warnings.warn(f"workers={workers} is more than the {cores} CPU(s) this process may use; "
                      f"using {cores}", ConfpopWarning, stacklevel=3)
        return cores
    return workers


#: Let the fork server import a scope's ``preload`` modules (when it is not running yet),
#: so that workers are forked with them loaded: one import for all workers instead of one
#: per worker. Measured with benchmarks/bench_pool.py (README example, 2 workers, a loaded
#: 2-CPU machine, two runs of 4-5 interleaved repeats), against workers that import what a
#: unit needs when it runs: CPU 0.92-0.93, wall 0.88-0.94; importing in each worker's
#: initializer instead gained nothing there (CPU 1.00-1.04, wall 1.02-1.06), as the
#: workers' imports compete with sampling for the CPUs. Off: the initializer imports them.
_FORKSERVER_PRELOAD = True


def _ask_forkserver_to_preload(modules: Sequence[str]) -> None:
    """Add ``modules`` to the fork server's preload list (the public
    ``set_forkserver_preload``; it takes effect only if the server has not started yet,
    otherwise each worker imports them in its initializer). The server sets one OpenMP
    thread (``confpop._forkserver_threads``) before it imports them."""
    from multiprocessing import forkserver

    server = getattr(forkserver, "_forkserver", None)
    # "__main__" (the default list) is left out: a fork server that imports the caller's
    # script itself (CPython 3.13.x/3.14) would run an unguarded script's confpop calls in
    # the server and die; the workers import the script as on other versions, where an
    # unguarded call is stopped with its hint (_refuse_in_worker_start)
    current = [m for m in (getattr(server, "_preload_modules", None) or []) if m != "__main__"]
    wanted = [m for m in ("confpop._forkserver_threads", *modules) if m not in current]
    if wanted:
        multiprocessing.set_forkserver_preload(current + wanted)


class _LocalPool:
    """A local process pool that can be rebuilt, with the bookkeeping that tells which unit
    a dead worker was running: one shared slot per worker and tickets numbered per pool.

    Made by :func:`pool_scope` (one for every call inside the scope) or by one
    :func:`run_units` call for itself.
    """

    def __init__(self, workers: int, preload: Sequence[str] = ()):
        self.workers = int(workers)
        self.preload = tuple(preload)
        self.context = multiprocessing.get_context(START_METHOD)
        self.executor: ProcessPoolExecutor | None = None
        self.marks = None
        self.pool_starts = 0  # how many executors this object has made (1 + rebuilds)
        self._tickets = 0
        self._warming: threading.Thread | None = None

    def get(self) -> ProcessPoolExecutor:
        """The running executor; a new one if there is none or the last one broke."""
        if self.executor is not None and getattr(self.executor, "_broken", False):
            self.discard()  # a worker died between two calls
        if self.executor is None:
            _refuse_in_worker_start()
            if self.preload and _FORKSERVER_PRELOAD and START_METHOD == "forkserver":
                _ask_forkserver_to_preload(self.preload)
            self.marks = self.context.RawArray("q", self.workers)
            counter = self.context.Value("i", 0)
            self.executor = ProcessPoolExecutor(
                max_workers=self.workers, mp_context=self.context, initializer=_init_worker,
                initargs=(self.marks, dict(os.environ), counter, self.preload))
            self.pool_starts += 1
        return self.executor

    def warm_up(self) -> None:
        """Start every worker now (each runs the initializer and its imports at once).

        The submissions run in a thread: each waits until the fork server has started and
        imported ``preload`` (0.7 s of the README example's wall time when it ran here),
        which can then overlap with this process's own work (sampling).
        """
        executor = self.get()

        def start():
            try:
                for _ in range(self.workers):  # a process starts per submission until all are up
                    executor.submit(_worker_ready)
            except Exception:  # shut down meanwhile (an interrupt): nothing left to start
                pass

        self._warming = threading.Thread(target=start, name="confpop-pool-warm-up", daemon=True)
        self._warming.start()

    def _warmed(self) -> None:
        """Wait for the warm-up thread, so that no worker starts after a shutdown."""
        warming, self._warming = self._warming, None
        if warming is not None:
            warming.join()

    def ticket(self) -> int:
        self._tickets += 1
        return self._tickets

    def running(self) -> set[int]:
        """Tickets of the units taken by a worker and not returned (after the pool broke)."""
        return {int(t) for t in self.marks if t} if self.marks is not None else set()

    def discard(self) -> None:
        """Shut down the executor and wait for its processes (after a break or at the end)."""
        self._warmed()
        if self.executor is not None:
            executor, self.executor = self.executor, None
            executor.shutdown(wait=True, cancel_futures=True)

    def terminate(self) -> None:
        """Stop the executor without waiting for running units (after an interrupt)."""
        self._warmed()
        if self.executor is not None:
            executor, self.executor = self.executor, None
            terminate_pool(executor)


_scopes = threading.local()


def _active_pool() -> _LocalPool | None:
    """The pool of the innermost :func:`pool_scope` opened in this thread, if any."""
    stack = getattr(_scopes, "stack", None)
    return stack[-1] if stack else None


@contextlib.contextmanager
def pool_scope(workers: int | None = None, *, preload: Sequence[str] = ()):
    """One local process pool for every :func:`run_units` call inside the ``with`` block.

    Without it each call that runs in a local pool starts its own (worker start-up and the
    engines' imports, about a second per stage of a search measured in
    ``benchmarks/bench_pool.py``). Inside it such calls share one set of workers, started
    at once (they import ``preload`` while this process does other work). A worker that
    dies inside a unit rebuilds the shared pool, as for a call's own pool (see
    :func:`run_units`). On leaving the block the workers are shut down; after an exception
    (Ctrl-C included) they are stopped without waiting.

    Calls with ``executor=`` or ``workers=1`` are not affected; a call with a smaller
    ``workers=`` keeps at most that many of its units in the pool at a time. A scope
    opened inside another one (in the same thread) uses the outer pool.

    Parameters
    ----------
    workers : int, optional
        Processes of the pool; default :func:`default_workers` (capped at it, with a
        warning). ``workers=1`` opens no pool: each call inside runs as it would outside
        the block (with its own ``workers=``).
    preload : sequence of str
        Modules every worker imports when it starts, e.g. ``["confpop.pipeline"]``.

    Yields
    ------
    object or None
        The shared pool (opaque), None when ``workers=1`` or when an outer scope's pool
        is used.

    Examples
    --------
    >>> import math
    >>> with pool_scope(workers=2):  # doctest: +SKIP
    ...     first = run_units(math.sqrt, [4.0, 9.0])   # these two calls run on the
    ...     second = run_units(math.log, [1.0, 2.0])   # same two worker processes
    """
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise InputError(f"workers must be an int >= 1, got {workers!r}")
    # capped silently: the call that asked for more workers says so (run_units, search)
    workers = default_workers() if workers is None else min(workers, default_workers())
    if workers == 1 or _active_pool() is not None:
        yield None
        return
    pool = _LocalPool(workers, preload)
    _scopes.stack = (getattr(_scopes, "stack", None) or []) + [pool]
    try:
        pool.warm_up()
        yield pool
    except BaseException:
        pool.terminate()
        raise
    finally:
        _scopes.stack = _scopes.stack[:-1]
        pool.discard()


class _NoBar:
    def update(self, n: int = 1) -> None:
        pass

    def close(self) -> None:
        pass


class _Heartbeat:
    """One line on stderr when a stage starts and one when it ends (``progress="lines"``:
    for logs, where a progress bar's carriage returns make one unreadable line)."""

    def __init__(self, total: int, description: str | None):
        import time
        self.total, self.done, self.started = total, 0, time.perf_counter()
        self.description = description or "calculations"
        print(f"confpop: [{time.strftime('%H:%M:%S')}] {self.description}: {total} to run",
              file=sys.stderr, flush=True)

    #: seconds between progress lines within a stage: the optimize stage of propranolol
    #: (222 GFN2 optimizations, 1 worker) ran 753 s between its start and end lines
    interval = 60.0

    def update(self, n: int = 1) -> None:
        import time
        self.done += n
        now = time.perf_counter()
        if self.done < self.total and now - getattr(self, "_last", self.started) >= self.interval:
            self._last = now
            print(f"confpop: [{time.strftime('%H:%M:%S')}] {self.description}: {self.done} of "
                  f"{self.total} done, {now - self.started:.0f} s", file=sys.stderr, flush=True)

    def close(self) -> None:
        import time
        print(f"confpop: [{time.strftime('%H:%M:%S')}] {self.description}: {self.done} of "
              f"{self.total} done in {time.perf_counter() - self.started:.1f} s",
              file=sys.stderr, flush=True)


def _progress_bar(progress, total: int, description: str | None):
    if not progress:
        return _NoBar()
    if progress == "lines":
        return _Heartbeat(total, description)
    from tqdm.auto import tqdm  # imported only when asked for

    return tqdm(total=total, desc=description, file=sys.stderr, unit="unit")


class _Run:
    """State of one :func:`run_units` call: attempts, outcomes, store writes, progress."""

    def __init__(self, function, items, retries, store, keys, bar):
        self.function = function
        self.items = items
        self.retries = retries
        self.store = store
        self.keys = keys
        self.bar = bar
        self.outcomes: list[UnitOutcome | None] = [None] * len(items)
        self.attempts = [0] * len(items)
        self._store_warned = False
        self.function_blob = b""  # the pickled function, for the local pool

    # -- bookkeeping -------------------------------------------------------------------------
    def succeeded(self, i: int, value, seconds: float) -> None:
        self.outcomes[i] = UnitOutcome(i, True, value, attempts=self.attempts[i],
                                       seconds=float(seconds))
        key = None if self.keys is None else self.keys[i]
        if key is not None:
            try:
                self.store.put(key, value, seconds=seconds)
            except (StoreError, InputError) as exc:  # keep the run going; say so once
                if not self._store_warned:
                    logger.warning("result not written to the store (the run goes on): %s", exc)
                    self._store_warned = True
        self.bar.update(1)

    def failed(self, i: int, error_type: str, message: str, seconds: float) -> None:
        logger.info("unit %d failed after %d attempt(s): %s: %s", i, self.attempts[i],
                    error_type, message)
        self.outcomes[i] = UnitOutcome(i, False, None, error_type, message,
                                       attempts=self.attempts[i], seconds=float(seconds))
        self.bar.update(1)

    def attempt_failed(self, i: int, error_type: str, message: str, seconds: float) -> bool:
        """Record a failed attempt; True if the unit is to be tried again."""
        if self.attempts[i] <= self.retries:
            logger.info("unit %d attempt %d failed (%s: %s); trying again", i, self.attempts[i],
                        error_type, message)
            return True
        self.failed(i, error_type, message, seconds)
        return False

    def handle(self, i: int, result) -> bool:
        """Take one attempt's result tuple; True if the unit is to be tried again."""
        ok, value, error_type, message, seconds = result
        if ok:
            self.succeeded(i, value, seconds)
            return False
        return self.attempt_failed(i, error_type, message, seconds)

    @staticmethod
    def result_of(future):
        """The worker's result tuple, or a failure tuple for an executor-level exception."""
        try:
            return future.result()
        except BrokenProcessPool:
            raise
        except Exception as exc:  # pickling errors, dask's KilledWorker, cancellation
            return (False, None, type(exc).__name__, str(exc) or repr(exc), 0.0)

    # -- the three ways to run ---------------------------------------------------------------
    def serial(self, todo: Sequence[int]) -> None:
        for i in todo:
            while True:
                self.attempts[i] += 1
                result = _run_unit(self.function, self.items[i])
                if not self.handle(i, result):
                    break

    def on_executor(self, executor: Executor, todo: Sequence[int]) -> None:
        queue = deque(todo)
        pending: dict = {}
        try:
            while queue or pending:
                while queue:
                    i = queue.popleft()
                    self.attempts[i] += 1
                    try:
                        future = executor.submit(_run_unit, self.function, self.items[i])
                    except Exception as exc:  # shut down or broken: nothing more can run here
                        self.attempts[i] -= 1
                        for j in (i, *queue):
                            self.failed(j, type(exc).__name__,
                                        f"the executor refused the unit: {exc}", 0.0)
                        queue.clear()
                        break
                    pending[future] = i
                if not pending:
                    break
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for future in done:
                    i = pending.pop(future)
                    try:
                        result = self.result_of(future)
                    except BrokenProcessPool as exc:  # a pool we do not own cannot be rebuilt
                        result = (False, None, type(exc).__name__, str(exc), 0.0)
                    if self.handle(i, result):
                        queue.append(i)
        except BaseException:
            for future in pending:
                future.cancel()
            raise

    def local_pool(self, todo: Sequence[int], workers: int, shared: _LocalPool | None = None,
                   limit: int | None = None) -> None:
        """Run on ``shared`` (a scope's pool, left running) or on a pool of this call's own.

        ``limit``: at most this many units in the pool at a time (None: all at once).
        """
        self.function_blob = pickle.dumps(self.function, protocol=pickle.HIGHEST_PROTOCOL)
        own = shared is None
        pool = _LocalPool(max(1, min(workers, len(todo)))) if own else shared
        queue = deque(todo)   # units to run, in parallel
        quarantine = deque()  # units suspected of killing a worker: run one at a time
        pending: dict = {}
        self.tickets: dict[int, int] = {}  # unit -> ticket of its current attempt
        idle_breaks = 0
        try:
            while queue or quarantine or pending:
                executor = pool.get()
                lost: list[int] = []
                try:
                    if quarantine:
                        if not pending:
                            self._submit(pool, executor, quarantine, pending)
                    else:
                        while queue and (limit is None or len(pending) < limit):
                            self._submit(pool, executor, queue, pending)
                except (BrokenProcessPool, EOFError, ConnectionError):
                    # the pool broke between two submissions; EOFError/ConnectionError: the
                    # fork server itself died while starting a worker
                    broken = True
                else:
                    broken = False
                    done, _ = wait(pending, return_when=FIRST_COMPLETED)
                    for future in done:
                        i = pending.pop(future)
                        try:
                            result = self.result_of(future)
                        except BrokenProcessPool:
                            lost.append(i)
                            broken = True
                            continue
                        if self.handle(i, result):
                            queue.append(i)
                if not broken:
                    continue
                # A worker died: the pool fails every unfinished future at once.
                wait(pending)
                for future, i in pending.items():
                    try:
                        result = self.result_of(future)
                    except BrokenProcessPool:
                        lost.append(i)
                        continue
                    if self.handle(i, result):
                        queue.append(i)
                pending.clear()
                running = pool.running()
                pool.discard()  # the next pass starts a new one
                idle_breaks = self._sort_lost(lost, running, queue, quarantine, idle_breaks)
                if idle_breaks >= _MAX_IDLE_BREAKS:
                    message = (f"{WORKER_DIED}: the local pool broke {idle_breaks} times in a row "
                               "before any unit started (can the workers import the function "
                               f"and unpickle the items?){_pool_broke_hint()}")
                    for i in (*quarantine, *queue):
                        self.failed(i, "BrokenProcessPool", message, 0.0)
                    queue.clear()
                    quarantine.clear()
        except BaseException:
            pool.terminate()  # a shared pool too: the exception ends its scope as well
            raise
        finally:
            if own:
                pool.discard()

    def _submit(self, pool: _LocalPool, executor, source: deque, pending: dict) -> None:
        i = source.popleft()
        try:
            item_blob = pickle.dumps(self.items[i], protocol=pickle.HIGHEST_PROTOCOL)
        except Exception as exc:  # deterministic: no point in trying again
            self.attempts[i] += 1
            self.failed(i, type(exc).__name__, f"the item cannot be pickled: {exc}", 0.0)
            return
        self.attempts[i] += 1
        ticket = pool.ticket()
        try:
            future = executor.submit(_run_pooled_unit, self.function_blob, item_blob, ticket)
        except BaseException:
            self.attempts[i] -= 1
            source.appendleft(i)
            raise
        self.tickets[i] = ticket
        pending[future] = i

    def _sort_lost(self, lost, running, queue, quarantine, idle_breaks) -> int:
        """After a worker died: charge the unit that was running, re-queue the rest.

        ``running``: tickets the workers had taken and not returned when the pool broke.
        """
        suspects = [i for i in lost if self.tickets.get(i) in running]
        requeue = [i for i in lost if i not in suspects]
        for i in requeue:  # never taken (or finished): that attempt does not count
            self.attempts[i] -= 1
        queue.extendleft(reversed(requeue))
        if len(suspects) == 1:
            # Alone in flight, or the only one running: it killed the worker.
            i = suspects[0]
            logger.info("unit %d: worker process died (attempt %d)", i, self.attempts[i])
            if self.attempt_failed(i, "BrokenProcessPool", WORKER_DIED, 0.0):
                quarantine.append(i)
            return 0
        if suspects:
            # Several were running; the others were stopped when the pool broke. Run each
            # alone to find the one that kills its worker; no attempt is charged yet.
            for i in suspects:
                self.attempts[i] -= 1
            quarantine.extend(suspects)
            return 0
        return idle_breaks + 1


def run_units(function: Callable[[Any], Any], items: Iterable, *,
              executor: Executor | None = None, workers: int | None = None, retries: int = 1,
              progress: bool = False, description: str | None = None, store=None,
              keys: Sequence[str | None] | None = None) -> list[UnitOutcome]:
    """Run ``function(item)`` for every item; each unit's failure is kept as data.

    Parameters
    ----------
    function : callable
        Takes one item, returns a result. For process pools and distributed executors it
        must be picklable (a module-level function, or :func:`functools.partial` of one)
        and so must the items and results (dicts/tuples of numbers, strings, numpy arrays).
    items : iterable
        One item per unit of work.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where to run the units (a ``Client`` is turned into ``client.get_executor()``). It is
        used, not shut down. Default: the pool of the enclosing :func:`pool_scope`, else a
        local process pool made (and shut down) by this call.
    workers : int, optional
        Processes of the local pool; default :func:`default_workers`, and never more (a
        larger number is capped with a :class:`~confpop.errors.ConfpopWarning`).
        ``workers=1`` runs every unit in this process, one after the other. Not allowed
        with ``executor``.
    retries : int
        How many times a failed unit is tried again (default 1, so at most two attempts).
    progress : bool or "lines"
        Show a progress bar (tqdm) on stderr; ``"lines"``: one line when the work starts and
        one when it ends (for logs). Nothing is printed otherwise.
    description : str, optional
        Label of the progress bar.
    store : confpop.store.ResultStore, optional
        Results already in the store (under ``keys``) are taken from it and not computed;
        each new successful result is written to it as soon as it arrives. Failures are not
        stored, so a later run tries them again.
    keys : sequence of str or None, optional
        One content key per item (see :func:`confpop.store.content_key`); None for an item
        that should not be stored. Needed with ``store`` and only with it.

    Returns
    -------
    list of UnitOutcome
        One per item, in the order of ``items``.

    Raises
    ------
    InputError
        If an argument is of the wrong kind, ``keys`` does not match ``items``, or
        ``function`` cannot be pickled for the local pool.

    Notes
    -----
    A unit that raises an ``Exception`` is retried ``retries`` times, then recorded with the
    exception's type and message; ``KeyboardInterrupt`` stops the whole run (after which the
    store holds every result finished so far).

    In the local pool, a worker process that dies inside a unit (``os._exit``, a signal, a
    crash in compiled code) does not cost the units already finished: the pool is rebuilt
    and the unfinished units run again. The unit that was running when the worker died is
    charged one attempt (when several were running, each is first run alone to find the
    culprit) and after its retries is recorded as failed with ``error_message ==
    "worker process died"``. A passed-in executor cannot be rebuilt: its failures are
    recorded per unit as they come.

    Workers are forked from a fresh server process (``"forkserver"``, see
    :data:`START_METHOD`) that imports the caller's main script without running its ``if
    __name__ == "__main__":`` block; a script must keep its work under that block. An OpenMP
    runtime that the script's top-level imports load before ``OMP_NUM_THREADS=1`` is set is
    told to use one thread through its ``omp_set_num_threads`` (a warning is logged if that
    fails).

    Each unit costs about 0.1-0.5 ms of pool traffic: make units of at least milliseconds
    (one optimization, one single point, one molecule), not single arithmetic operations.

    Examples
    --------
    >>> import math
    >>> outcomes = run_units(math.sqrt, [4.0, -1.0, 9.0], workers=1)
    >>> [o.value for o in outcomes]
    [2.0, None, 3.0]
    >>> outcomes[1].ok, outcomes[1].error_type, outcomes[1].attempts
    (False, 'ValueError', 2)
    """
    if not callable(function):
        raise InputError(f"function must be callable, got {type(function).__name__}")
    if isinstance(items, (str, bytes)):
        raise InputError("items must be a sequence of work items, got a single str/bytes")
    try:
        items = list(items)
    except TypeError:
        raise InputError(f"items must be iterable, got {type(items).__name__}") from None
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise InputError(f"retries must be an int >= 0, got {retries!r}")
    if executor is not None and workers is not None:
        raise InputError("give either executor= or workers= (workers sizes the local pool), "
                         "not both")
    serial = executor is None and workers == 1  # as asked: a pool capped to 1 stays a pool
    if workers is not None:
        workers = _check_workers(workers)
    if executor is not None and not isinstance(executor, Executor):
        if hasattr(executor, "get_executor"):  # a dask.distributed Client
            executor = executor.get_executor()
        if not callable(getattr(executor, "submit", None)):
            raise InputError("executor must be a concurrent.futures.Executor or a "
                             f"dask.distributed Client, got {type(executor).__name__}")
    if (store is None) != (keys is None):
        raise InputError("store= and keys= go together: give both or neither")
    if keys is not None:
        if isinstance(keys, str):
            raise InputError("keys must be a sequence of keys, one per item, got a single str")
        keys = list(keys)
        if len(keys) != len(items):
            raise InputError(f"keys must hold one key per item ({len(items)}), got {len(keys)}")
        for key in keys:
            if key is not None and (not isinstance(key, str) or not key):
                raise InputError(f"each key must be a non-empty str or None, got {key!r}")
        if not all(callable(getattr(store, name, None)) for name in ("record", "put")):
            raise InputError("store must be a confpop.store.ResultStore, "
                             f"got {type(store).__name__}")

    if not serial and (executor is None or isinstance(executor, ProcessPoolExecutor)):
        try:
            pickle.dumps(function)
        except Exception as exc:
            raise InputError(
                "function must be picklable to run in worker processes (a module-level "
                "function or functools.partial of one, not a lambda or a local function); "
                f"pickling {function!r} failed: {exc}. Use workers=1 to run in this process."
            ) from exc
        target = getattr(function, "func", function)  # functools.partial
        main = sys.modules.get("__main__")
        if getattr(target, "__module__", None) == "__main__" and \
                not getattr(main, "__file__", None):
            raise InputError(
                f"function {getattr(target, '__qualname__', target)!r} is defined interactively "
                "(a notebook or the interactive prompt), where worker processes cannot import "
                "it: move it into a module, or use workers=1 to run in this process")

    bar = _progress_bar(progress, len(items), description)
    try:
        run = _Run(function, items, retries, store, keys, bar)
        todo = []
        for i in range(len(items)):
            record = None if keys is None or keys[i] is None else store.record(keys[i])
            if record is None:
                todo.append(i)
            else:
                seconds = 0.0 if record.seconds is None else float(record.seconds)
                run.outcomes[i] = UnitOutcome(i, True, record.value, from_store=True,
                                              seconds=seconds)
        bar.update(len(items) - len(todo))
        if todo:
            if serial:
                run.serial(todo)
            elif executor is not None:
                run.on_executor(executor, todo)
            else:
                shared = _active_pool()
                if shared is None:
                    run.local_pool(todo, default_workers() if workers is None else workers)
                else:  # inside pool_scope: its workers, at most `workers` units at a time
                    limit = None if workers is None or workers >= shared.workers else workers
                    run.local_pool(todo, shared.workers, shared=shared, limit=limit)
    finally:
        bar.close()
    return list(run.outcomes)
