"""Cost of the result store and of the local process pool, beside one GFN2 single point.

Run: OMP_NUM_THREADS=1 python benchmarks/bench_store.py [--records N]

Prints
- store overhead per record (put + get of a typical result: a 50-atom positions array and a
  few floats), in microseconds, and as a fraction of one GFN2-xTB single point of a 30-atom
  molecule (1-nonanol, C9H20O) measured in the same run;
- the start-up of a 2-worker local pool (time until its first two trivial units are back)
  with the "spawn" and "forkserver" start methods: cold (a fresh process, so forkserver must
  start its server too) and warm (later pools in the same process);
- GFN2 single points through run_units, serial against a 2-worker pool;
- the per-unit overhead of run_units on the local pool against a serial loop.
Timings are medians of interleaved repeats; the machine may be shared, so compare ratios.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import statistics
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor

os.environ.setdefault("OMP_NUM_THREADS", "1")  # before any engine loads

import numpy as np  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))

from confpop import execution  # noqa: E402
from confpop.store import ResultStore, content_key  # noqa: E402


def trivial(x):
    return x


def gfn2_unit(item):
    """One GFN2 single point + gradient: item = (MOL block with H, positions in angstrom)."""
    from rdkit import Chem

    from confpop.backends import get_backend

    molblock, positions = item
    mol = Chem.MolFromMolBlock(molblock, removeHs=False)
    return get_backend("gfn2", mol).compute(positions, gradient=True).energy


def nonanol():
    from rdkit import Chem
    from rdkit.Chem import AllChem

    mol = Chem.AddHs(Chem.MolFromSmiles("CCCCCCCCCO"))
    AllChem.EmbedMolecule(mol, randomSeed=11)
    AllChem.MMFFOptimizeMolecule(mol)
    assert mol.GetNumAtoms() == 30
    return mol


def bench_gfn2_throughput(n_units: int) -> tuple[float, float]:
    """Wall time per GFN2 unit through run_units: serial, and a 2-worker local pool."""
    from rdkit import Chem

    mol = nonanol()
    base = mol.GetConformer().GetPositions()
    rng = np.random.default_rng(3)
    items = [(Chem.MolToMolBlock(mol), base + rng.normal(scale=0.01, size=base.shape))
             for _ in range(n_units)]
    t0 = time.perf_counter()
    serial = execution.run_units(gfn2_unit, items, workers=1)
    t_serial = (time.perf_counter() - t0) / n_units
    t0 = time.perf_counter()
    pooled = execution.run_units(gfn2_unit, items, workers=2)
    t_pool = (time.perf_counter() - t0) / n_units
    assert [o.value for o in serial] == [o.value for o in pooled]
    return t_serial, t_pool


def typical_result(rng) -> dict:
    """What an optimization unit returns: final positions and a few numbers."""
    return {"positions": rng.normal(scale=3.0, size=(50, 3)), "energy": -45.123456789,
            "gradient_norm": 1.2e-4, "max_gradient": 3.1e-4, "converged": True, "steps": 37}


def bench_store(n_records: int) -> dict:
    rng = np.random.default_rng(7)
    numbers = rng.integers(1, 9, size=50)
    values = [typical_result(rng) for _ in range(n_records)]
    settings = {"convergence": "tight", "max_steps": None}
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "bench.sqlite")
        t0 = time.perf_counter()
        keys = [content_key(numbers, v["positions"], charge=0, multiplicity=1, method="gfn2",
                            solvent=None, settings=settings, kind="optimize") for v in values]
        t_key = (time.perf_counter() - t0) / n_records
        with ResultStore(path) as store:
            t0 = time.perf_counter()
            for key, value in zip(keys, values):
                store.put(key, value, seconds=0.5)
            t_put = (time.perf_counter() - t0) / n_records
            t0 = time.perf_counter()
            for key in keys:
                store.get(key)
            t_get = (time.perf_counter() - t0) / n_records
            t0 = time.perf_counter()
            for key in keys:
                _ = key in store
            t_contains = (time.perf_counter() - t0) / n_records
        size = sum(os.path.getsize(os.path.join(tmp, f)) for f in os.listdir(tmp))
    return {"key": t_key, "put": t_put, "get": t_get, "contains": t_contains,
            "bytes": size / n_records}


def gfn2_single_point() -> tuple[float, str]:
    """Median wall time of one GFN2 single point of 1-nonanol (30 atoms), and how it ran."""
    mol = nonanol()
    positions = mol.GetConformer().GetPositions()
    backend_file = os.path.join(os.path.dirname(HERE), "confpop", "backends", "xtb.py")
    if os.path.exists(backend_file):
        from confpop.backends import get_backend

        backend = get_backend("gfn2", mol)
        how = "confpop gfn2 backend (confpop/backends/xtb.py)"

        def call():
            backend.compute(positions, gradient=True)
    else:
        from xtb.interface import Calculator, Param
        from xtb.libxtb import VERBOSITY_MUTED

        from confpop.units import ANGSTROM_BOHR

        numbers = np.array([a.GetAtomicNum() for a in mol.GetAtoms()])
        how = ("xtb-python directly: confpop/backends/xtb.py does not exist yet "
               "(new Calculator per call, as a backend without caching would)")

        def call():
            calc = Calculator(Param.GFN2xTB, numbers, positions * ANGSTROM_BOHR)
            calc.set_verbosity(VERBOSITY_MUTED)
            calc.singlepoint()

    call()  # warm-up (library load, parameter files)
    times = []
    for _ in range(7):
        t0 = time.perf_counter()
        call()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), how


def pool_once(method: str, workers: int = 2) -> float:
    t0 = time.perf_counter()
    with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context(method),
                             initializer=execution._init_worker) as pool:
        list(pool.map(trivial, range(workers)))
        elapsed = time.perf_counter() - t0
    return elapsed


def bench_pools(repeats: int) -> dict:
    cold: dict[str, list[float]] = {"spawn": [], "forkserver": []}
    for _ in range(repeats):
        for method in cold:
            out = subprocess.run([sys.executable, __file__, "--cold-pool", method],
                                 capture_output=True, text=True, check=True)
            cold[method].append(float(out.stdout.split()[-1]))
    warm: dict[str, list[float]] = {"spawn": [], "forkserver": []}
    pool_once("forkserver")  # start the server
    for _ in range(repeats):
        for method in warm:
            warm[method].append(pool_once(method))
    return {m: (statistics.median(cold[m]), statistics.median(warm[m])) for m in cold}


def bench_run_units(n: int) -> tuple[float, float]:
    t0 = time.perf_counter()
    execution.run_units(trivial, range(n), workers=1)
    serial = (time.perf_counter() - t0) / n
    execution.run_units(trivial, range(4), workers=2)  # pool start-up excluded below
    t0 = time.perf_counter()
    with execution.local_executor(2) as pool:
        list(pool.map(trivial, range(2)))
        t1 = time.perf_counter()
        execution.run_units(trivial, range(n), executor=pool)
        pooled = (time.perf_counter() - t1) / n
    return serial, pooled


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--records", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--gfn2-units", type=int, default=16)
    parser.add_argument("--cold-pool", choices=["spawn", "forkserver"], help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.cold_pool:
        print(f"{pool_once(args.cold_pool):.6f}")
        return
    print(f"machine: {execution.default_workers()} CPUs usable, load average "
          f"{os.getloadavg()[0]:.2f}; python {sys.version.split()[0]}")

    s = bench_store(args.records)
    per_record = s["put"] + s["get"]
    print(f"\nresult store, {args.records} records of a 50-atom result (one commit per put):")
    print(f"  content_key {s['key'] * 1e6:8.1f} us   put {s['put'] * 1e6:8.1f} us   "
          f"get {s['get'] * 1e6:8.1f} us   contains {s['contains'] * 1e6:6.1f} us")
    print(f"  put + get   {per_record * 1e6:8.1f} us/record   file {s['bytes']:.0f} bytes/record")

    sp, how = gfn2_single_point()
    print(f"\nGFN2 single point + gradient, 1-nonanol (30 atoms), 1 thread: {sp * 1e3:.1f} ms "
          f"(median of 7; {how})")
    print(f"  store overhead per record / single point = {per_record / sp:.4f} "
          f"({100 * per_record / sp:.2f} %); with content_key: "
          f"{100 * (per_record + s['key']) / sp:.2f} %")

    pools = bench_pools(args.repeats)
    print(f"\nlocal pool start-up, 2 workers, until 2 trivial units are back "
          f"(median of {args.repeats}):")
    for method, (cold, warm) in pools.items():
        print(f"  {method:10s} cold {cold * 1e3:7.1f} ms   warm {warm * 1e3:7.1f} ms")
    print(f"  run_units uses START_METHOD = {execution.START_METHOD!r}")

    n_gfn2 = args.gfn2_units
    t_serial, t_pool = bench_gfn2_throughput(n_gfn2)
    print(f"\n{n_gfn2} GFN2 single points of 1-nonanol through run_units (pool start-up "
          f"included): serial {t_serial * 1e3:.1f} ms/unit, 2-worker pool "
          f"{t_pool * 1e3:.1f} ms/unit, speed-up {t_serial / t_pool:.2f}")

    serial, pooled = bench_run_units(400)
    print(f"\nrun_units per-unit overhead, trivial function, 400 units: serial "
          f"{serial * 1e6:.1f} us/unit, 2-worker pool {pooled * 1e6:.1f} us/unit")


if __name__ == "__main__":
    main()
