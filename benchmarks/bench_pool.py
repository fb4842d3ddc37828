"""One process pool per search (execution.pool_scope) against one pool per stage.

Run: OMP_NUM_THREADS=1 python benchmarks/bench_pool.py [--repeats N] [--large-repeats N]
     [--old /work/main] [--parts readme,preload,pictures,small,large]

Prints, each part with the candidates interleaved in one run (the machine may be shared:
compare ratios, not absolute times):

readme   the README example (``confpop ensemble "CN(C)C(=O)[C@@H](C)OC" --solvent chloroform
         -T 273.15 298.15 323.15 --out DIR``), a fresh command each time, ``old`` (the tree
         given by --old: one pool per stage) against ``new`` (this tree): wall time from
         launch to exit, CPU time (user + sys of the command and of every process it started,
         worker processes included: this script is their subreaper and reaps them all), and
         the stage times from run.json (``rest`` = wall - search: start-up, imports, writing).
preload  the same command with this tree and three ways to ready the workers: ``none`` (a
         shared pool, nothing imported ahead), ``initializer`` (each worker imports the engine
         modules when it starts), ``forkserver`` (the default: the engine modules imported
         once in the fork server, ``multiprocessing.set_forkserver_preload``, and the workers
         forked from it).
pictures the same command with matplotlib imported in a background thread while the search
         runs (the default) and without.
small    8 GFN2 single points (the README example's screen) and 8 GFN2 optimizations in
         chloroform, in this process (workers=1) against a warm shared 2-worker pool and a
         fresh 2-worker pool per call (the former per-stage cost; here its fork server already
         holds the preloaded modules, so it is cheaper than before).
large    ``confpop.search("CCOC(=O)C[C@H](O)CCCOC", "gfn2", n_trials=60, max_rounds=1,
         workers=2)`` (invented hydroxy-ester), old against new: wall, CPU and whether the
         energies agree.
"""

from __future__ import annotations

# Light imports only: the fork server of the worker processes imports this script again.
import argparse
import ctypes
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
NEW = os.path.dirname(HERE)
README = ["ensemble", "CN(C)C(=O)[C@@H](C)OC", "--solvent", "chloroform",
          "-T", "273.15", "298.15", "323.15"]
LARGE = "CCOC(=O)C[C@H](O)CCCOC"  # invented hydroxy-ester


# ------------------------------------------------------------------------ measuring a command
def _become_subreaper() -> None:
    """Orphaned descendants (the fork server's workers) are re-parented to this process, so
    that reaping them adds their CPU time to RUSAGE_CHILDREN (Linux prctl)."""
    libc = ctypes.CDLL(None, use_errno=True)
    if libc.prctl(36, 1, 0, 0, 0) != 0:  # PR_SET_CHILD_SUBREAPER
        raise OSError(ctypes.get_errno(), "prctl(PR_SET_CHILD_SUBREAPER) failed")


def _reap_all() -> None:
    while True:
        try:
            os.waitpid(-1, 0)
        except ChildProcessError:
            return


def measure(argv: list[str], tree: str) -> dict:
    """Wall and CPU seconds of one command and everything it started."""
    env = {**os.environ, "OMP_NUM_THREADS": "1", "PYTHONPATH": tree}
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    # cwd: not a source tree (``python -m`` puts the working directory first on sys.path)
    process = subprocess.Popen(argv, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True, cwd=tempfile.gettempdir())
    out, err = process.communicate()
    wall = time.perf_counter() - start
    _reap_all()  # the fork server and any worker it did not reap
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if process.returncode != 0:
        raise RuntimeError(f"{argv} failed ({process.returncode}): {err[-2000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return {"wall": wall, "cpu": cpu, "stdout": out, "stderr": err}


def readme_run(tree: str, variant: str | None = None) -> dict:
    with tempfile.TemporaryDirectory(prefix="bench-pool-") as folder:
        out = os.path.join(folder, "out")
        if variant is None:
            argv = [sys.executable, "-m", "confpop.cli", *README, "--out", out]
        else:
            argv = [sys.executable, os.path.abspath(__file__), "--drive", variant, "--",
                    *README, "--out", out]
        result = measure(argv, tree)
        with open(os.path.join(out, "run.json")) as handle:
            run = json.load(handle)
    stages = {p["step"]: p["seconds"] for p in run["provenance"] if p.get("seconds") is not None}
    result["stages"] = stages
    result["rest"] = result["wall"] - stages.get("summary", 0.0)
    result["energies"] = [(c["relative_energy"], c["population"]) for c in run["conformers"]]
    return result


def drive(variant: str, argv: list[str]) -> int:
    """Run the command line with the workers readied one way (``--preload`` part)."""
    from confpop import pipeline

    from confpop import execution

    if variant == "none":  # a shared pool; each worker imports what a unit needs, when it runs
        pipeline._WORKER_MODULES, pipeline._ENGINE_MODULES = (), {}
    elif variant == "initializer":  # each worker imports the engine modules when it starts
        execution._FORKSERVER_PRELOAD = False
    elif variant == "no background import":  # matplotlib imported when the pictures are drawn
        import confpop.cli
        confpop.cli._import_in_background = lambda *modules: None
    elif variant != "forkserver":  # the default: imported once, in the fork server
        raise SystemExit(f"unknown variant {variant!r}")
    from confpop.cli import main
    return main(argv)


def drive_large(path: str) -> None:
    import confpop

    ens = confpop.search(LARGE, "gfn2", n_trials=60, max_rounds=1, workers=2)
    table = ens.raw_table
    with open(path, "w") as handle:
        json.dump({"energies": [float(e) for e in table["energy_gfn2"]],
                   "status": [str(s) for s in table["status"]],
                   "stages": {p["step"]: p.get("seconds") for p in ens.provenance}}, handle)


# ------------------------------------------------------------------------ parts
def _median(values):
    return statistics.median(values)


def _show(name, runs, baseline=None):
    wall, cpu = _median([r["wall"] for r in runs]), _median([r["cpu"] for r in runs])
    line = f"  {name:<12} wall {wall:6.2f} s (min {min(r['wall'] for r in runs):5.2f})  " \
           f"CPU {cpu:6.2f} s"
    if baseline is not None:
        line += f"   wall ratio {wall / _median([r['wall'] for r in baseline]):.2f}" \
                f"  CPU ratio {cpu / _median([r['cpu'] for r in baseline]):.2f}"
    print(line)
    if "stages" in runs[0]:
        keys = ("sample", "screen", "optimize", "minimum-check", "summary")
        stage = "  ".join(f"{k} {_median([r['stages'].get(k, 0.0) for r in runs]):.2f}"
                          for k in keys)
        print(f"  {'':<12} stages (median s): {stage}  rest {_median([r['rest'] for r in runs]):.2f}")


def part_readme(old: str, repeats: int) -> None:
    print(f"\nREADME example, {repeats} runs each, old={old} new={NEW}, interleaved")
    runs = {"old": [], "new": []}
    for _ in range(repeats):
        for name, tree in (("old", old), ("new", NEW)):
            runs[name].append(readme_run(tree))
    first = runs["old"][0]["energies"]
    same_count = all(len(r["energies"]) == len(first) for r in runs["old"] + runs["new"])
    # relative energies (kcal/mol) and populations, largest difference from the first old run
    # (another optimizer path moves them by SCF-noise amounts, not by conformers)
    d_energy = max((abs(a[0] - b[0]) for r in runs["old"] + runs["new"] if len(r["energies"]) ==
                    len(first) for a, b in zip(r["energies"], first)), default=float("nan"))
    d_pop = max((max(abs(x - y) for x, y in zip(a[1], b[1])) for r in runs["old"] + runs["new"]
                 if len(r["energies"]) == len(first) for a, b in zip(r["energies"], first)),
                default=float("nan"))
    _show("old", runs["old"])
    _show("new", runs["new"], runs["old"])
    print(f"  same number of conformers in every run: {same_count}; largest difference from the "
          f"first old run: {d_energy:.4f} kcal/mol, population {d_pop:.4f}")


def part_preload(repeats: int) -> None:
    print(f"\nreadying the workers (README example, this tree), {repeats} runs each, interleaved")
    names = ("none", "initializer", "forkserver")
    runs = {n: [] for n in names}
    for _ in range(repeats):
        for name in names:
            runs[name].append(readme_run(NEW, variant=name))
    for name in names:
        _show(name, runs[name], runs["none"] if name != "none" else None)


def part_pictures(repeats: int) -> None:
    print(f"\nmatplotlib imported in a background thread during the search (README example, "
          f"this tree), {repeats} runs each, interleaved")
    names = ("no background import", "forkserver")
    runs = {n: [] for n in names}
    for _ in range(repeats):
        for name in names:
            runs[name].append(readme_run(NEW, variant=name))
    _show("without", runs[names[0]])
    _show("with", runs[names[1]], runs[names[0]])


def part_small(repeats: int) -> None:
    import numpy as np
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from confpop import execution, pipeline

    print(f"\nsmall stages: 8 units of the README molecule, GFN2/GBSA(chloroform), medians of "
          f"{repeats}")
    mol = Chem.AddHs(Chem.MolFromSmiles("CN(C)C(=O)[C@@H](C)OC"))
    ids = list(AllChem.EmbedMultipleConfs(mol, numConfs=8, randomSeed=7))
    AllChem.MMFFOptimizeMoleculeConfs(mol)
    base = {"mol": Chem.Mol(mol).ToBinary(), "method": "gfn2", "charge": 0, "multiplicity": 1,
            "solvent": "chloroform", "options": {}}
    items = [{**base, "positions": np.array(mol.GetConformer(c).GetPositions())} for c in ids]
    pipeline.single_point_unit(items[0])  # the engine loaded here, as search() does
    modules = (*pipeline._WORKER_MODULES, "confpop.backends.xtb", "xtb.interface")
    for function, label in ((pipeline.single_point_unit, "single points"),
                            (pipeline.optimize_unit, "optimizations")):
        times = {"in process": [], "warm pool": [], "fresh pool": []}
        values = {}
        for _ in range(repeats):
            start = time.perf_counter()
            values["in process"] = execution.run_units(function, items, workers=1)
            times["in process"].append(time.perf_counter() - start)
            with execution.pool_scope(2, preload=modules):
                execution.run_units(execution._worker_ready, [0, 1])  # the workers are up
                time.sleep(1.0)  # and have imported (as during sampling)
                start = time.perf_counter()
                values["warm pool"] = execution.run_units(function, items)
                times["warm pool"].append(time.perf_counter() - start)
            start = time.perf_counter()
            values["fresh pool"] = execution.run_units(function, items, workers=2)
            times["fresh pool"].append(time.perf_counter() - start)
        energies = {k: [o.value["energy"] for o in v] for k, v in values.items()}
        agree = energies["in process"] == energies["warm pool"] == energies["fresh pool"]
        print(f"  8 {label}: " + "  ".join(f"{k} {_median(v):.3f} s" for k, v in times.items())
              + f"  (same energies: {agree})")


def part_large(old: str, repeats: int) -> None:
    print(f"\nlarger search: confpop.search({LARGE!r}, 'gfn2', n_trials=60, max_rounds=1, "
          f"workers=2), {repeats} runs each, interleaved")
    runs = {"old": [], "new": []}
    with tempfile.TemporaryDirectory(prefix="bench-pool-") as folder:
        for k in range(repeats):
            for name, tree in (("old", old), ("new", NEW)):
                path = os.path.join(folder, f"{name}-{k}.json")
                result = measure([sys.executable, os.path.abspath(__file__), "--drive-large",
                                  path], tree)
                with open(path) as handle:
                    result.update(json.load(handle))
                result["rest"] = result["wall"] - (result["stages"].get("summary") or 0.0)
                runs[name].append(result)
                print(f"    {name}: wall {result['wall']:.2f} s, CPU {result['cpu']:.2f} s",
                      flush=True)
    _show("old", runs["old"])
    _show("new", runs["new"], runs["old"])
    reference = runs["old"][0]
    same_rows = all(r["status"] == reference["status"] for r in runs["old"] + runs["new"])
    largest = max(max(abs(a - b) for a, b in zip(r["energies"], reference["energies"]))
                  for r in runs["old"] + runs["new"]) if same_rows else float("nan")
    print(f"  {len(reference['energies'])} rows; same rows and status in every run: {same_rows}; "
          f"largest energy difference from the first old run {largest:.2e} hartree")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--old", default="/work/main", help="tree with one pool per stage")
    parser.add_argument("--parts", default="readme,preload,pictures,small,large")
    parser.add_argument("--large-repeats", type=int, default=2)
    parser.add_argument("--drive", help=argparse.SUPPRESS)
    parser.add_argument("--drive-large", help=argparse.SUPPRESS)
    args, rest = parser.parse_known_args()
    if args.drive:
        sys.exit(drive(args.drive, [a for a in rest if a != "--"]))
    if args.drive_large:
        drive_large(args.drive_large)
        return
    os.environ["OMP_NUM_THREADS"] = "1"
    _become_subreaper()
    print(f"CPUs available: {len(os.sched_getaffinity(0))}; load average "
          f"{os.getloadavg()[0]:.2f}")
    for name, tree in (("old", args.old), ("new", NEW)):
        found = measure([sys.executable, "-c", "import confpop, confpop.execution as e; "
                         "print(confpop.__file__, hasattr(e, 'pool_scope'))"], tree)
        print(f"{name}: {found['stdout'].strip()}")
    parts = args.parts.split(",")
    if "readme" in parts:
        part_readme(args.old, args.repeats)
    if "preload" in parts:
        part_preload(args.repeats)
    if "pictures" in parts:
        part_pictures(args.repeats)
    if "small" in parts:
        sys.path.insert(0, NEW)
        part_small(args.repeats)
    if "large" in parts:
        part_large(args.old, args.large_repeats)


if __name__ == "__main__":
    main()
