"""Scaling of the conformer search: workers, the library's own overhead, batches of molecules.

Run: OMP_NUM_THREADS=1 python benchmarks/bench_scaling.py [--parts abc]
     [--method gfn2] [--quick]

(a) Speed-up from 1 to 2 workers on the GFN2-xTB search of one invented flexible molecule
    (5 rotatable bonds; target >= 1.8x on 2 cores): serial, ``search(workers=2)`` (a new
    local pool for each stage, as the command line runs it) and ``search(executor=pool)``
    with one pool kept for the whole search.
(b) The library's overhead: wall time minus the time spent inside engine calls, measured in
    the serial run of (a) with a registered backend that times every ``compute`` call
    (target <= 10 % of the wall time). The rest is split into sampling (RDKit ETKDG + MMFF94s,
    which is engine work of another kind), the optimizers' own work (geomeTRIC's internal
    coordinates, L-BFGS) and everything else (pruning, checks, tables, pickling).
(c) A batch of 20 small molecules (C2-C6 alcohols, ethers, esters; written below) with
    ``search_many``: 1 worker, 2 workers with whole molecules as units, 2 workers with the
    conformers as units, and a local dask cluster of 2 single-threaded worker processes; the
    summaries must agree.

The machine is shared: every figure is printed with the 1-minute load average beside it and
with the CPU time the run's whole process tree got (this process, the forkserver, pool
workers, dask nannies and workers; sampled from /proc). On 2 cores with other jobs running a
serial run gets less than one core and two workers get less than two, so the measured
speed-up understates what free cores would give. The "idle-core estimate" divides the serial
run's CPU time by the CPU time on the busiest path of the parallel run (this process + the
busiest worker): the speed-up if every process had a core of its own and nothing waited.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")  # before any engine loads

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
sys.path.insert(0, HERE)  # the registry imports the timing backend from this file

#: (a), (b): an ether-ester with 5 rotatable bonds (RDKit count), invented for this benchmark
FLEXIBLE = "CCOC(=O)CCOC(C)C"
#: (c): 20 small molecules (common C2-C6 alcohols, ethers, esters)
SMALL = {
    "ethanol": "CCO", "1-propanol": "CCCO", "2-propanol": "CC(C)O", "1-butanol": "CCCCO",
    "isobutanol": "CC(C)CO", "tert-butanol": "CC(C)(C)O", "(R)-2-butanol": "C[C@@H](O)CC",
    "cyclopentanol": "OC1CCCC1", "dimethyl ether": "COC", "ethyl methyl ether": "CCOC",
    "diethyl ether": "CCOCC", "methyl propyl ether": "CCCOC", "tetrahydrofuran": "C1CCOC1",
    "1,2-dimethoxyethane": "COCCOC", "2-methoxyethanol": "COCCO", "methyl acetate": "COC(C)=O",
    "ethyl acetate": "CCOC(C)=O", "methyl propanoate": "CCC(=O)OC", "ethyl formate": "CCOC=O",
    "propyl formate": "CCCOC=O",
}
TIMED = "timed-gfn2"


def load() -> str:
    return f"load {os.getloadavg()[0]:.1f}"


class TreeCPU:
    """CPU seconds used by this process and all its descendants during a ``with`` block.

    A thread reads /proc/<pid>/stat (Linux) of the process tree every ``interval`` seconds
    and keeps the last value seen per process; pool workers, the forkserver and dask's
    nannies and workers are all descendants. A process that ends loses at most its last
    ``interval`` of CPU time; the sampler's own CPU time is taken off this process's.
    """

    def __init__(self, interval: float = 0.5):
        import threading

        self.interval = interval
        self.tick = os.sysconf("SC_CLK_TCK")
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        self.seen: dict[int, float] = {}
        self.base: dict[int, float] = {}
        self.own = 0.0

    def _snapshot(self) -> dict[int, float]:
        parent_of, cpu = {}, {}
        for entry in os.listdir("/proc"):
            if not entry.isdigit():
                continue
            try:
                with open(f"/proc/{entry}/stat") as handle:
                    text = handle.read()
            except OSError:
                continue
            fields = text[text.rindex(")") + 2:].split()  # fields 3.. of proc(5)
            parent_of[int(entry)] = int(fields[1])
            cpu[int(entry)] = (int(fields[11]) + int(fields[12])) / self.tick  # utime + stime
        tree, grew = {os.getpid()}, True
        while grew:
            grew = False
            for pid, parent in parent_of.items():
                if parent in tree and pid not in tree:
                    tree.add(pid)
                    grew = True
        return {pid: cpu[pid] for pid in tree if pid in cpu}

    def _loop(self) -> None:
        start = time.thread_time()
        while not self._stop.wait(self.interval):
            self.seen.update(self._snapshot())
        self.own = time.thread_time() - start

    def __enter__(self):
        self.base = self._snapshot()
        self.seen = dict(self.base)
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()
        self.seen.update(self._snapshot())

    def used(self) -> dict[int, float]:
        return {pid: max(0.0, value - self.base.get(pid, 0.0)) for pid, value in self.seen.items()}

    @property
    def total(self) -> float:
        return sum(self.used().values()) - self.own

    @property
    def parent(self) -> float:
        return self.used().get(os.getpid(), 0.0) - self.own

    def critical(self, workers: int = 2) -> float:
        """CPU time on the busiest path: this process + the busiest worker (or an even share
        of all the others' CPU when that is more: several short-lived pools)."""
        others = [v for pid, v in self.used().items() if pid != os.getpid()]
        return self.parent + max(max(others, default=0.0), sum(others) / workers)


# ------------------------------------------------------------------------- timing backend
def _timed_class():
    from confpop.backends.xtb import GFN2

    class TimedGFN2(GFN2):
        """GFN2-xTB that adds up the wall and CPU time of every compute call."""

        wall = 0.0
        cpu = 0.0
        calls = 0
        events: list = []

        def _compute(self, positions, gradient):
            t0, c0 = time.perf_counter(), time.process_time()
            try:
                return super()._compute(positions, gradient)
            finally:
                dt, dc = time.perf_counter() - t0, time.process_time() - c0
                cls = type(self)
                cls.wall += dt
                cls.cpu += dc
                cls.calls += 1
                cls.events.append((t0, dt))

    return TimedGFN2


def __getattr__(name):  # the class is made on first use, so that importing this is cheap
    if name == "TimedGFN2":
        cls = _timed_class()
        cls.__module__, cls.__qualname__ = __name__, "TimedGFN2"
        globals()["TimedGFN2"] = cls
        return cls
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def register_timed():
    """Register the timing backend; return the class the registry hands out (its counters
    are the ones that count)."""
    from confpop.backends import available_backends, backend_class, register_backend

    if TIMED not in available_backends():
        # by module name: the class is made on first use (module __getattr__ above)
        register_backend(TIMED, "bench_scaling:TimedGFN2")
    return backend_class(TIMED)


# ------------------------------------------------------------------------- (a) and (b)
def same_ensemble(a, b) -> bool:
    import numpy as np

    if a.ids() != b.ids() or a.degeneracy.tolist() != b.degeneracy.tolist():
        return False
    ea = a.raw_table.loc[a.ids(), f"energy_{a.level}"].to_numpy(float)
    eb = b.raw_table.loc[b.ids(), f"energy_{b.level}"].to_numpy(float)
    return bool(np.allclose(ea, eb, rtol=0, atol=1e-8))


def part_a_b(smiles: str, rows: list) -> None:
    from confpop import search
    from confpop.execution import local_executor

    timed = register_timed()
    # serial, with engine calls timed
    t0 = time.perf_counter()
    with TreeCPU() as cpu:
        serial = search(smiles, method=TIMED, seed=0, workers=1)
    wall1, cpu1 = time.perf_counter() - t0, cpu.total
    rows.append(("a", "serial (workers=1)", wall1, 1.0,
                 f"{len(serial)} conformers; CPU {cpu1:.0f} s, share {cpu1 / wall1:.2f} core; "
                 f"{load()}"))
    print(f"  serial: {wall1:.1f} s, {len(serial)} conformers, {load()}", flush=True)

    # workers=2: run_units makes a pool per stage (what `confpop ensemble --workers 2` does)
    t0 = time.perf_counter()
    with TreeCPU() as cpu:
        two = search(smiles, method="gfn2", seed=0, workers=2)
    wall2 = time.perf_counter() - t0
    rows.append(("a", "search(workers=2)", wall2, wall1 / wall2,
                 f"same ensemble: {same_ensemble(two, serial)}; CPU {cpu.total:.0f} s, share "
                 f"{cpu.total / wall2:.2f}; idle-core estimate {cpu1 / cpu.critical():.2f}x; "
                 f"{load()}"))
    print(f"  workers=2: {wall2:.1f} s, {load()}", flush=True)

    # one pool kept for the whole search
    t0 = time.perf_counter()
    with TreeCPU() as cpu:
        with local_executor(2) as pool:
            kept = search(smiles, method="gfn2", seed=0, executor=pool)
    wall3 = time.perf_counter() - t0
    rows.append(("a", "search(executor=one 2-worker pool)", wall3, wall1 / wall3,
                 f"same ensemble: {same_ensemble(kept, serial)}; CPU {cpu.total:.0f} s, share "
                 f"{cpu.total / wall3:.2f}; idle-core estimate {cpu1 / cpu.critical():.2f}x; "
                 f"{load()}"))
    print(f"  one pool: {wall3:.1f} s, {load()}", flush=True)

    # (b) overhead of the serial run: wall minus time inside engine calls
    engine = timed.wall
    stage = {p["step"]: float(p.get("seconds", 0.0)) for p in serial.provenance if "n_in" in p}
    # the screen stage starts with the first engine call; everything after it is the two
    # optimization stages plus the (short) pruning and checks
    first = timed.events[0][0]
    in_opt = sum(dt for t, dt in timed.events if t >= first + stage.get("screen", 0.0))
    opt_wall = stage.get("preoptimize", 0.0) + stage.get("optimize", 0.0)
    sampling = stage.get("sample", 0.0)
    optimizer_own = max(0.0, opt_wall - in_opt)
    rest = wall1 - engine - sampling - optimizer_own
    rows.append(("b", "time inside GFN2 engine calls", engine, engine / wall1,
                 f"{timed.calls} calls; share of the serial wall time"))
    rows.append(("b", "overhead = wall - engine", wall1 - engine, (wall1 - engine) / wall1,
                 "target <= 0.10"))
    rows.append(("b", "  of which sampling (RDKit ETKDG+MMFF94s)", sampling, sampling / wall1, ""))
    rows.append(("b", "  of which optimizers' own work", optimizer_own, optimizer_own / wall1,
                 "geomeTRIC coordinates + L-BFGS, outside engine calls"))
    rows.append(("b", "  of which the rest", rest, rest / wall1,
                 "pruning, checks, tables, imports, unit traffic"))


# ------------------------------------------------------------------------- (c)
def part_c(method: str, rows: list) -> None:
    import numpy as np

    from confpop.batch import search_many

    def summary_of(result):
        return result.summary.drop(columns=["seconds"])

    def agree(a, b) -> bool:
        num = [c for c in a.columns if a[c].dtype.kind == "f"]
        other = [c for c in a.columns if c not in num]
        return bool(a[other].astype(str).equals(b[other].astype(str)) and
                    np.allclose(a[num].to_numpy(float), b[num].to_numpy(float), rtol=0,
                                atol=1e-6, equal_nan=True))

    runs = []
    for label, kwargs in (("1 worker", {"workers": 1}),
                          ("2 workers, molecules as units", {"workers": 2, "parallel": "molecules"}),
                          ("2 workers, conformers as units", {"workers": 2, "parallel": "conformers"})):
        t0 = time.perf_counter()
        with TreeCPU() as cpu:
            result = search_many(SMALL, method=method, **kwargs)
        wall = time.perf_counter() - t0
        runs.append((label, wall, result, cpu.total))
        print(f"  {label}: {wall:.1f} s, {result.n_ok} ok, {load()}", flush=True)
        estimate = "" if len(runs) == 1 else \
            f"; idle-core estimate {runs[0][3] / cpu.critical():.2f}x"
        rows.append(("c", f"batch of 20, {label}", wall, runs[0][1] / wall,
                     f"{result.n_ok} ok; same summary as 1 worker: "
                     f"{agree(summary_of(result), summary_of(runs[0][2]))}; CPU {cpu.total:.0f} s, "
                     f"share {cpu.total / wall:.2f}{estimate}; {load()}"))
    try:
        import distributed
    except ImportError:
        rows.append(("c", "dask cluster", float("nan"), float("nan"), "distributed not installed"))
        return
    t0 = time.perf_counter()
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        started = time.perf_counter() - t0
        t0 = time.perf_counter()
        with TreeCPU() as cpu:
            result = search_many(SMALL, method=method, executor=client, parallel="molecules")
        wall = time.perf_counter() - t0
    print(f"  dask: {wall:.1f} s (+{started:.1f} s cluster start), {load()}", flush=True)
    rows.append(("c", "batch of 20, dask LocalCluster 2x1", wall, runs[0][1] / wall,
                 f"cluster start {started:.1f} s not included; same summary: "
                 f"{agree(summary_of(result), summary_of(runs[0][2]))}; CPU {cpu.total:.0f} s "
                 f"(with the scheduler's), share {cpu.total / wall:.2f}; {load()}"))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--parts", default="abc", help="which parts to run (default abc)")
    parser.add_argument("--method", default="gfn2", help="method of the batch in (c)")
    parser.add_argument("--quick", action="store_true",
                        help="a smaller molecule in (a)/(b) (invented, 4 rotatable bonds)")
    args = parser.parse_args()
    from rdkit import Chem
    from rdkit.Chem import rdMolDescriptors

    smiles = "CC(C)OCCOC(C)=O" if args.quick else FLEXIBLE
    rows: list = []
    t_start = time.perf_counter()
    print(f"confpop scaling benchmark; {os.cpu_count()} CPUs; {load()}", flush=True)
    if "a" in args.parts or "b" in args.parts:
        n_rot = rdMolDescriptors.CalcNumRotatableBonds(Chem.MolFromSmiles(smiles))
        print(f"(a)/(b) {smiles} (invented, {n_rot} rotatable bonds), gfn2", flush=True)
        part_a_b(smiles, rows)
    if "c" in args.parts:
        print(f"(c) batch of {len(SMALL)} small molecules, {args.method}", flush=True)
        part_c(args.method, rows)
    print()
    print(f"{'part':<4}  {'what':<42}  {'seconds':>8}  {'ratio':>6}  notes")
    for part, what, seconds, ratio, notes in rows:
        print(f"{part:<4}  {what:<42}  {seconds:>8.1f}  {ratio:>6.2f}  {notes}")
    print("ratio: (a), (c) speed-up against the serial run; (b) share of the serial wall time")
    print(f"total {time.perf_counter() - t_start:.0f} s; {load()}")


if __name__ == "__main__":
    main()
