"""Speed of a GFN2 search: gradient calls per optimization and CPU against the engine floor.

Invented molecules (names are descriptions, not compounds of any project). In one run and
one process (serial, ``OMP_NUM_THREADS=1``), per molecule:

1. **Optimizer paths, interleaved** (``--starts N``, default 30): the search's own
   MMFF94s-relaxed ETKDG structures are optimized ("tight") by each path in ``--paths``
   (default ``reference,default``: geomeTRIC's own guess Hessian with fresh SCF guesses and
   "tight" convergence, as before, and the search's defaults: Lindh's force constants, SCF
   restarts, "tight-gradient" convergence; see :mod:`confpop.geometric_fast` and
   :mod:`confpop.optimize`),
   start by start, one path after the other, and
   once by the reference path at "verytight" (the yardstick). Printed per path: median and
   p90 gradient calls per optimization, CPU per optimization, the engine floor (gradient
   calls x the CPU time of one gradient, measured on the same molecule in the same run) and
   the ratio CPU / floor, and the starts that ended more than 0.05 kcal/mol above the
   verytight energy (a neighbouring minimum or a saddle) or failed.
2. **Whole search** (``--search``): ``confpop.search`` with its defaults (``--trials`` and
   ``--rounds`` to make it smaller), once per path in ``--paths``, with the CPU of the search,
   the number of gradient calls, the engine floor and the ratio, and median/p90 calls of
   the tight optimizations (minimum check included), and the CPU spent inside engine calls
   against the rest (sampling, screening bookkeeping, geomeTRIC's own step work, pruning).

Goals (issue "Speed"): CPU / floor <= 1.3; median calls <= 16 at 31 atoms.

    nice -n 10 python benchmarks/bench_search.py [--starts 30] [--only ester] [--paths reference,model]
                                                 [--search] [--trials 60 --rounds 1]

The ``--versus-all`` mode keeps the earlier comparison of the multi-level search with
optimizing every trial structure (see :func:`versus_all`).
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import confpop as cp  # noqa: E402
import confpop.optimize as copt  # noqa: E402
from confpop.backends import get_backend  # noqa: E402
from confpop.molecule import load_molecule  # noqa: E402
from confpop.units import convert  # noqa: E402

# invented molecules (names are descriptions, not real compounds of any project)
MOLECULES = {
    "invented hydroxy-ester 31": "CCOC(=O)C[C@H](O)CCCOC",
    "invented ether-amide 35": "COCCN(C)C(=O)CC[C@@H](C)OC",
    "invented aryl ester 43": "CCOC(=O)CCc1ccc(OC[C@H](C)CC)cc1",
}


class Meter:
    """Counts and times (process CPU) every engine call of the xtb-python backends."""

    def __init__(self):
        import confpop.backends.xtb as xtb_backends

        self.cls = xtb_backends._XTBBackend
        self.original = self.cls._compute
        self.gradient_times: list[float] = []
        self.energy_times: list[float] = []
        self.optimizations: list[tuple[str, int]] = []
        meter = self

        def timed(backend, positions, gradient):
            t0 = time.process_time()
            try:
                return meter.original(backend, positions, gradient)
            finally:
                (meter.gradient_times if gradient else meter.energy_times).append(
                    time.process_time() - t0)

        self.cls._compute = timed
        self.original_optimize = copt.optimize_positions

        def counted(*args, **kwargs):
            res = meter.original_optimize(*args, **kwargs)
            meter.optimizations.append((str(kwargs.get("convergence", "tight")),
                                        res.gradient_calls))
            return res

        copt.optimize_positions = counted

    def reset(self):
        self.gradient_times.clear()
        self.energy_times.clear()
        self.optimizations.clear()


def one_gradient(mol, positions, repeats=15) -> float:
    """Median CPU seconds of one GFN2 energy+gradient from a fresh SCF guess."""
    backend = get_backend("gfn2", mol)
    backend.compute(positions, gradient=True)
    times = []
    for _ in range(repeats):
        t0 = time.process_time()
        backend.compute(positions, gradient=True)
        times.append(time.process_time() - t0)
    return statistics.median(times)


_CONTINUATION = None
# the library's own initial Hessian, before set_path changes it
_LIBRARY_GUESS = getattr(copt, "DEFAULT_HESSIAN_GUESS", "geometric")


def path_convergence(path: str) -> str:
    """The convergence preset of a path: "@preset" at its end; else "tight", the preset of
    every search before "tight-gradient"; "default" is the search's own default."""
    if path == "default":
        from confpop.settings import SEARCH_DEFAULTS
        return SEARCH_DEFAULTS.convergence
    return path.partition("@")[2] or "tight"


def set_path(path: str) -> None:
    """Select an optimizer path: an initial Hessian, "+norestart" for fresh SCF guesses,
    "+oldsteps" for geomeTRIC's own step work (before the accelerated step work), "@preset"
    for the convergence preset (see :func:`path_convergence`).

    "reference" is geomeTRIC's own guess Hessian with a fresh SCF guess at every step (the
    optimizer before this work); old confpop versions only have that one. "default" is the
    search's defaults (initial Hessian and convergence preset).
    """
    global _CONTINUATION
    import contextlib

    from confpop.backends.base import Backend

    path = path.partition("@")[0]
    if path == "default":
        path = _LIBRARY_GUESS
    guess, *flags = path.split("+")
    restart = "norestart" not in flags
    if guess == "reference":  # the yardstick stays what it was before the step work too
        flags.append("oldsteps")
    try:  # "+oldsteps": geomeTRIC's own step work (confpop.geometric_fast._FAST_STEPS)
        import confpop.geometric_fast as fast
        if hasattr(fast, "_FAST_STEPS"):
            fast._FAST_STEPS = "oldsteps" not in flags
        elif "oldsteps" in flags:
            sys.exit(f"this confpop has no optimizer path {path!r}")
    except ImportError:
        pass
    if guess == "reference":
        guess, restart = "geometric", False
    if hasattr(copt, "DEFAULT_HESSIAN_GUESS"):
        copt.DEFAULT_HESSIAN_GUESS = guess
    elif guess != "geometric":
        sys.exit(f"this confpop has no optimizer path {path!r}")
    if hasattr(Backend, "continuation"):
        if _CONTINUATION is None:
            _CONTINUATION = Backend.continuation
        Backend.continuation = (_CONTINUATION if restart
                                else lambda self: contextlib.nullcontext(self))


def p90(values) -> float:
    return float(np.percentile(values, 90)) if len(values) else float("nan")


def starts_of(mol, n, seed):
    from confpop.sampling import sample_conformers

    sampled = sample_conformers(mol, n_trials=max(2 * n, 40), seed=seed, max_rounds=1)
    sampled = sampled[0] if isinstance(sampled, tuple) else sampled
    smol = sampled.mol if hasattr(sampled, "mol") else sampled
    confs = list(smol.GetConformers())
    step = max(1, len(confs) // n) if len(confs) >= n else 1
    return [c.GetPositions() for c in confs[::step][:n]]


def optimizer_paths(name, smiles, paths, n_starts, seed, meter):
    mol = load_molecule(smiles)
    starts = starts_of(mol, n_starts, seed)
    backend = get_backend("gfn2", mol)
    rows = {p: {"calls": [], "cpu": [], "energy": [], "failed": 0} for p in paths}
    reference_energy = []
    for start in starts:
        set_path("reference")
        try:
            ref = copt.optimize_positions(backend, start, convergence="verytight", max_steps=600)
            reference_energy.append(ref.energy)
        except cp.errors.ConfpopError:
            reference_energy.append(np.nan)
        for p in paths:
            set_path(p)
            t0 = time.process_time()
            try:
                res = copt.optimize_positions(backend, start, convergence=path_convergence(p))
            except cp.errors.ConfpopError:
                rows[p]["failed"] += 1
                rows[p]["energy"].append(np.nan)
                continue
            rows[p]["cpu"].append(time.process_time() - t0)
            rows[p]["calls"].append(res.gradient_calls if res.converged else res.gradient_calls)
            rows[p]["energy"].append(res.energy if res.converged else np.nan)
            if not res.converged:
                rows[p]["failed"] += 1
    set_path("reference")
    t_grad = one_gradient(mol, starts[0])
    out = []
    for p in paths:
        r = rows[p]
        de = convert(np.array(r["energy"]) - np.array(reference_energy), "hartree", "kcal/mol")
        high = int(np.sum(de > 0.05))
        floor = np.array(r["calls"]) * t_grad
        cpu = np.array(r["cpu"])
        out.append((name, mol.GetNumAtoms(), p, len(starts), statistics.median(r["calls"]),
                    p90(r["calls"]), float(np.median(cpu)), float(np.sum(cpu) / np.sum(floor)),
                    float(np.nanmax(de)), high, r["failed"], t_grad))
    return out


def whole_search(name, smiles, paths, seed, trials, rounds, meter):
    out = []
    mol = load_molecule(smiles)
    for p in paths:
        set_path(p)
        meter.reset()
        kw = {"workers": 1, "seed": seed, "convergence": path_convergence(p)}
        if trials:
            kw["n_trials"] = trials
        if rounds:
            kw["max_rounds"] = rounds
        t0, w0 = time.process_time(), time.perf_counter()
        ens = cp.search(smiles, **kw)
        cpu, wall = time.process_time() - t0, time.perf_counter() - w0
        calls = [c for conv, c in meter.optimizations if conv != "loose"]
        n_grad = len(meter.gradient_times)
        t_grad = one_gradient(mol, ens.positions(ens.ids()[0]))
        floor = n_grad * t_grad
        out.append((name, p, cpu, wall, n_grad, len(meter.energy_times), floor, cpu / floor,
                    len(calls), statistics.median(calls) if calls else float("nan"), p90(calls),
                    len(ens), sum(meter.gradient_times) + sum(meter.energy_times)))
    set_path("reference")
    return out


def main() -> None:
    if "--versus-all" in sys.argv:  # every other option belongs to the earlier benchmark
        from bench_search_all import main as versus_all
        sys.argv = [a for a in sys.argv if a != "--versus-all"]
        versus_all()
        return
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--starts", type=int, default=30, help="starts per molecule for the paths")
    ap.add_argument("--paths", default="reference,default",
                    help="optimizer paths, comma-separated: an initial Hessian (geometric, lindh, "
                         "lindh-primitive) with '+norestart' for fresh SCF guesses, '+oldsteps' for "
                         "geomeTRIC's own step work and '@preset' for the convergence preset "
                         "(default tight); reference = geometric+norestart+oldsteps@tight, the "
                         "optimizer before the speed work; default = the search's defaults")
    ap.add_argument("--only", default=None, help="molecules whose name contains this (comma-separated)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--search", action="store_true", help="also run whole searches per path")
    ap.add_argument("--no-paths", action="store_true", help="skip the optimizer-path comparison")
    ap.add_argument("--trials", type=int, default=None, help="search: trials per round")
    ap.add_argument("--rounds", type=int, default=None, help="search: largest number of rounds")
    ap.add_argument("--versus-all", action="store_true",
                    help="run the earlier comparison with optimizing every trial structure "
                         "(benchmarks/bench_search_all.py) with the other options")
    args = ap.parse_args()
    paths = [p.strip() for p in args.paths.split(",") if p.strip()]
    print(f"confpop from {os.path.dirname(cp.__file__)}; load average at start "
          f"{os.getloadavg()[0]:.2f} ({len(os.sched_getaffinity(0))} usable cores)", flush=True)
    meter = Meter()
    opt_rows, search_rows = [], []
    for name, smiles in MOLECULES.items():
        if args.only and not any(part.strip() in name for part in args.only.split(",")):
            continue
        if not args.no_paths:
            rows = optimizer_paths(name, smiles, paths, args.starts, args.seed, meter)
            for r in rows:
                print(f"  {r[0]} [{r[2]}]: median {r[4]:.0f} calls (p90 {r[5]:.0f}), "
                      f"{r[6]:.2f} s CPU per optimization, CPU/floor {r[7]:.2f}, worst dE "
                      f"{r[8]:+.3f} kcal/mol, {r[9]} above +0.05, {r[10]} failed/unconverged; "
                      f"one gradient {1000 * r[11]:.1f} ms", flush=True)
            opt_rows += rows
        if args.search:
            rows = whole_search(name, smiles, paths, args.seed, args.trials, args.rounds, meter)
            for r in rows:
                print(f"  {r[0]} search [{r[1]}]: CPU {r[2]:.1f} s (wall {r[3]:.1f} s), "
                      f"{r[4]} gradient calls + {r[5]} single points, floor {r[6]:.1f} s, "
                      f"CPU/floor {r[7]:.2f}, {r[8]} optimizations median {r[9]:.0f} "
                      f"(p90 {r[10]:.0f}) calls, {r[11]} conformers; engine calls took "
                      f"{r[12]:.1f} s, the rest {r[2] - r[12]:.1f} s", flush=True)
            search_rows += rows
    if opt_rows:
        print()
        print(f"{'molecule':28s} {'atoms':>5} {'path':>26} {'starts':>6} {'median':>6} {'p90':>5} "
              f"{'CPU s/opt':>9} {'CPU/floor':>9} {'worst dE':>8} {'>0.05':>5} {'failed':>6}")
        for r in opt_rows:
            print(f"{r[0]:28s} {r[1]:>5d} {r[2]:>26s} {r[3]:>6d} {r[4]:>6.0f} {r[5]:>5.0f} "
                  f"{r[6]:>9.2f} {r[7]:>9.2f} {r[8]:>+8.3f} {r[9]:>5d} {r[10]:>6d}")
        print("median/p90 = gradient calls per tight optimization; floor = calls x CPU of one "
              "gradient; dE vs geomeTRIC 'verytight' from the same start, kcal/mol")
    if search_rows:
        print()
        print(f"{'molecule':28s} {'path':>26} {'CPU s':>7} {'wall s':>7} {'gradients':>9} "
              f"{'SPs':>5} {'floor s':>7} {'CPU/floor':>9} {'opts':>5} {'median':>6} {'p90':>5} "
              f"{'confs':>5} {'engine s':>8} {'rest s':>7}")
        for r in search_rows:
            print(f"{r[0]:28s} {r[1]:>26s} {r[2]:>7.1f} {r[3]:>7.1f} {r[4]:>9d} {r[5]:>5d} "
                  f"{r[6]:>7.1f} {r[7]:>9.2f} {r[8]:>5d} {r[9]:>6.0f} {r[10]:>5.0f} {r[11]:>5d} "
                  f"{r[12]:>8.1f} {r[2] - r[12]:>7.1f}")
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
