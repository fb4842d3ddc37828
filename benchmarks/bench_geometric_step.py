"""geomeTRIC's own work per optimization step: the accelerated step work against before.

Invented molecules (names are descriptions, not compounds of any project): the three of
``bench_search.py`` and a 22-atom methoxy-amide (the lead's profile molecule). In one run and one process (serial,
``OMP_NUM_THREADS=1``), per molecule, the search's own MMFF94s-relaxed ETKDG starts are
optimized with GFN2-xTB ("tight", the default initial Hessian and SCF restarts) by each
path, start by start, one path after the other:

- ``before``: the accelerated coordinates without the step work of
  :class:`confpop.geometric_fast` (geomeTRIC's own ``Optimizer`` methods, an
  eigendecomposition for every G inverse): ``geometric_fast._FAST_STEPS = False``;
- ``after``: as shipped.

Printed per path: median gradient calls and steps; CPU per optimization; CPU spent in the
engine (xtb-python's calls, timed around each); geomeTRIC's own CPU (the rest) per
optimization and per step; CPU / floor (floor = gradient calls x the CPU of one fresh-guess
gradient, measured in the same run, as ``bench_search.py``). Then, against ``before`` start
by start: the largest difference of final positions (angstrom) and energies (hartree), and
whether gradient calls agree. ``--reference`` adds geomeTRIC's own coordinate classes with
geomeTRIC's guess Hessian, compared with both paths given the same guess.

    nice -n 10 python benchmarks/bench_geometric_step.py [--starts 10] [--only amide]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import confpop as cp  # noqa: E402
import confpop.geometric_fast as fast  # noqa: E402
import confpop.optimize as copt  # noqa: E402
from bench_search import MOLECULES, one_gradient, starts_of  # noqa: E402
from confpop.backends import get_backend  # noqa: E402
from confpop.molecule import load_molecule  # noqa: E402

# invented (a description, not a compound of any project)
ALL = dict(MOLECULES, **{"invented methoxy-amide 22": "CN(C)C(=O)[C@@H](C)OC"})


class EngineClock:
    """Process CPU spent inside xtb-python's calls (patched around the backend's _compute)."""

    def __init__(self):
        import confpop.backends.xtb as xtb_backends

        cls = xtb_backends._XTBBackend
        original = cls._compute
        self.total = 0.0
        clock = self

        def timed(backend, positions, gradient):
            t0 = time.process_time()
            try:
                return original(backend, positions, gradient)
            finally:
                clock.total += time.process_time() - t0

        cls._compute = timed


def set_path(path: str) -> None:
    fast._FAST_STEPS = path != "before"
    copt._ACCELERATE_GEOMETRIC = path != "geomeTRIC"


def run(name, smiles, paths, n_starts, seed, clock, guess):
    mol = load_molecule(smiles)
    starts = starts_of(mol, n_starts, seed)
    backend = get_backend("gfn2", mol)
    rows = {p: {"cpu": [], "engine": [], "steps": [], "calls": [], "x": [], "e": []}
            for p in paths}
    for start in starts:
        for p in paths:
            set_path(p)
            e0, t0 = clock.total, time.process_time()
            try:
                res = copt.optimize_positions(backend, start, convergence="tight",
                                              hessian_guess=guess)
            except cp.errors.ConfpopError as exc:
                print(f"    {name} [{p}]: failed: {exc}", flush=True)
                res = None
            cpu, engine = time.process_time() - t0, clock.total - e0
            r = rows[p]
            r["cpu"].append(cpu)
            r["engine"].append(engine)
            r["steps"].append(res.steps if res else 0)
            r["calls"].append(res.gradient_calls if res else 0)
            r["x"].append(np.array(res.positions) if res else None)
            r["e"].append(res.energy if res else np.nan)
    set_path("after")
    t_grad = one_gradient(mol, starts[0])
    out = []
    base = paths[0]
    for p in paths:
        r = rows[p]
        cpu, engine = np.array(r["cpu"]), np.array(r["engine"])
        steps, calls = np.array(r["steps"]), np.array(r["calls"])
        own = cpu - engine
        dx = max((float(np.max(np.abs(a - b))) for a, b in zip(r["x"], rows[base]["x"])
                  if a is not None and b is not None), default=float("nan"))
        de = float(np.nanmax(np.abs(np.array(r["e"]) - np.array(rows[base]["e"]))))
        same_calls = int(np.sum(calls == np.array(rows[base]["calls"])))
        out.append(dict(name=name, atoms=mol.GetNumAtoms(), path=p, starts=len(starts),
                        calls=statistics.median(calls), steps=statistics.median(steps),
                        cpu=float(np.median(cpu)), own_opt=float(np.median(own)),
                        own_step=float(np.sum(own) / np.sum(steps)),
                        engine_share=float(np.sum(engine) / np.sum(cpu)),
                        floor_ratio=float(np.sum(cpu) / (np.sum(calls) * t_grad)),
                        dx=dx, de=de, same_calls=same_calls, t_grad=t_grad,
                        own_total=float(np.sum(own))))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--starts", type=int, default=10)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--only", default=None, help="molecules whose name contains this (comma-separated)")
    ap.add_argument("--reference", action="store_true",
                    help="also geomeTRIC's own classes (all paths with geomeTRIC's guess Hessian)")
    args = ap.parse_args()
    paths = ["before", "after"] + (["geomeTRIC"] if args.reference else [])
    guess = "geometric" if args.reference else None
    print(f"confpop from {os.path.dirname(cp.__file__)}; load average at start "
          f"{os.getloadavg()[0]:.2f}", flush=True)
    clock = EngineClock()
    rows = []
    for name, smiles in ALL.items():
        if args.only and not any(part.strip() in name for part in args.only.split(",")):
            continue
        got = run(name, smiles, paths, args.starts, args.seed, clock, guess)
        for r in got:
            print(f"  {r['name']} [{r['path']}]: geomeTRIC {1000 * r['own_step']:.2f} ms/step, "
                  f"{1000 * r['own_opt']:.0f} ms/opt; CPU/floor {r['floor_ratio']:.3f}", flush=True)
        rows += got
    print()
    print(f"{'molecule':26s} {'atoms':>5} {'path':>9} {'starts':>6} {'calls':>5} {'steps':>5} "
          f"{'CPU s/opt':>9} {'own ms/opt':>10} {'own ms/step':>11} {'engine %':>8} "
          f"{'CPU/floor':>9} {'max|dx| A':>9} {'max|dE| Eh':>10} {'same calls':>10}")
    for r in rows:
        print(f"{r['name']:26s} {r['atoms']:>5d} {r['path']:>9s} {r['starts']:>6d} "
              f"{r['calls']:>5.0f} {r['steps']:>5.0f} {r['cpu']:>9.3f} {1000 * r['own_opt']:>10.1f} "
              f"{1000 * r['own_step']:>11.2f} {100 * r['engine_share']:>8.1f} "
              f"{r['floor_ratio']:>9.3f} {r['dx']:>9.1e} {r['de']:>10.1e} "
              f"{r['same_calls']:>4d}/{r['starts']:<5d}")
    print("own = CPU per optimization minus CPU inside xtb-python's calls (geomeTRIC's step "
          "work, coordinate build, confpop's adapter); floor = calls x one fresh-guess gradient; "
          f"dx, dE against '{paths[0]}' from the same start")
    by = {}
    for r in rows:
        by.setdefault(r["name"], {})[r["path"]] = r
    for name, d in by.items():
        if "before" in d and "after" in d:
            print(f"{name}: geomeTRIC's own CPU after/before {d['after']['own_total'] / d['before']['own_total']:.2f}; "
                  f"CPU/floor {d['before']['floor_ratio']:.3f} -> {d['after']['floor_ratio']:.3f}")
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
