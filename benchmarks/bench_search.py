"""Speed of a GFN2 search: gradient calls per optimization and CPU against the engine floor.

Invented molecules (names are descriptions, not compounds of any project). In one run and
one process (serial, ``OMP_NUM_THREADS=1``), per molecule:

1. **Optimizer paths, interleaved** (``--starts N``, default 30): the search's own
   MMFF94s-relaxed ETKDG structures are optimized ("tight") by each path in ``--paths``
   (default ``reference,default``: geomeTRIC's own guess Hessian with fresh SCF guesses and
   its own step work, as before, and the search's defaults: Lindh's force constants, SCF
   restarts, the accelerated step work; see :mod:`confpop.geometric_fast` and
   :mod:`confpop.optimize`; "@tight/drms=1/dmax=1" after a path changes the
   convergence criteria),
   start by start, one path after the other, and
   once by the reference path at "verytight" (the yardstick). Printed per path: median and
   p90 gradient calls per optimization, CPU per optimization, the engine floor (gradient
   calls x the CPU time of one gradient, measured on the same molecule in the same run) and
   the ratio CPU / floor, and the starts that ended more than 0.05 kcal/mol above the
   verytight energy (a neighbouring minimum or a saddle) or failed; and where the end
   structures lie (:func:`geometry_check`): RMSD to the verytight end structure of the same
   start (median, largest, count above 0.05 angstrom) and the starts whose end structure is
   no longer a duplicate of the ``default`` path's (or the first path's) under the search's
   duplicate criteria.
2. **Whole search** (``--search``): ``confpop.search`` with its defaults (``--trials`` and
   ``--rounds`` to make it smaller, ``--move-parents`` and ``--move-iterations`` to limit
   the move search), once per path in ``--paths``, with the CPU of the search,
   the number of gradient calls, the engine floor and the ratio, and median/p90 calls of
   the tight optimizations (minimum check included), and the CPU spent inside engine calls
   against the rest (sampling, screening bookkeeping, geomeTRIC's own step work, pruning).

Goals (issue "Speed"): CPU / floor <= 1.3; median calls <= 16 at 31 atoms.

    nice -n 10 python benchmarks/bench_search.py [--starts 30] [--only ester] [--paths reference,model]
                                                 [--search] [--trials 60 --rounds 1
                                                  --move-parents 10 --move-iterations 1]

The ``--converged`` mode (:func:`converged`) measures the CPU time to a converged ensemble
against the brute force of ``benchmarks/bench_sampling.py``, per optimizer path:

    nice -n 15 python benchmarks/bench_search.py --converged [--only ether-ester,ether-amide]
                 [--paths reference,default] [--seeds 0,1] [--brute run|cache]
                 [--run-id ID]

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
#: end structures farther than this from the "verytight" one of the same start are counted,
#: angstrom (a quarter of the duplicate check's 0.2 angstrom)
RMSD_LIMIT = 0.05
# the library's own initial Hessian, before set_path changes it
_LIBRARY_GUESS = getattr(copt, "DEFAULT_HESSIAN_GUESS", "geometric")
# the library's own Hessian update (steps in its multi-secant update), read at the first
# set_path
_LIBRARY_SECANT_PAIRS = None


def path_convergence(path: str):
    """The convergence of a path: "@preset" at its end, optionally with "/key=value"
    overrides of single criteria (e.g. "default@tight/drms=1/dmax=1": no displacement criterion); else the
    search's own preset ("tight")."""
    from confpop.settings import SEARCH_DEFAULTS

    spec = path.partition("@")[2] or SEARCH_DEFAULTS.convergence
    preset, *overrides = spec.split("/")
    if not overrides:
        return preset
    criteria = dict(copt.CONVERGENCE_PRESETS[preset])
    for item in overrides:
        key, _, value = item.partition("=")
        criteria[key] = float(value)
    return criteria




def set_path(path: str) -> None:
    """Select an optimizer path: an initial Hessian, "+norestart" for fresh SCF guesses,
    "+oldsteps" for geomeTRIC's own step work (before the accelerated step work), "+msec"
    for the multi-secant Hessian update over the last 3 steps or "+bfgs" for geomeTRIC's
    one-step BFGS update (:data:`confpop.geometric_fast._SECANT_PAIRS`), "@preset" for the
    convergence preset (see :func:`path_convergence`).

    "reference" is geomeTRIC's own guess Hessian with a fresh SCF guess at every step (the
    optimizer before this work); old confpop versions only have that one. "default" is the
    search's defaults (initial Hessian and convergence preset).
    """
    global _CONTINUATION
    import contextlib

    from confpop.backends.base import Backend

    path = path.partition("@")[0]
    guess, *flags = path.split("+")
    if guess == "default":
        guess = _LIBRARY_GUESS
    restart = "norestart" not in flags
    if guess == "reference":  # the yardstick stays what it was before the step work too
        flags += ["oldsteps", "bfgs"]
    try:  # "+oldsteps": geomeTRIC's own step work (confpop.geometric_fast._FAST_STEPS)
        import confpop.geometric_fast as fast
        if hasattr(fast, "_FAST_STEPS"):
            fast._FAST_STEPS = "oldsteps" not in flags
        elif "oldsteps" in flags:
            sys.exit(f"this confpop has no optimizer path {path!r}")
        # "+msec": the multi-secant Hessian update over the last 3 steps, "+bfgs": geomeTRIC's
        # one-step BFGS update; neither: the library's own (_SECANT_PAIRS)
        secant = [f for f in flags if f in ("msec", "bfgs")]
        if secant and not hasattr(fast, "_SECANT_PAIRS"):
            sys.exit(f"this confpop has no optimizer path {path!r}")
        if hasattr(fast, "_SECANT_PAIRS"):
            global _LIBRARY_SECANT_PAIRS
            if _LIBRARY_SECANT_PAIRS is None:
                _LIBRARY_SECANT_PAIRS = fast._SECANT_PAIRS
            fast._SECANT_PAIRS = (3 if "msec" in secant else 1 if "bfgs" in secant
                                  else _LIBRARY_SECANT_PAIRS)
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


def geometry_check(mol, paths, positions, energies, reference_positions, baseline):
    """Where each path's end structures lie, per path: RMSD to the "verytight" end structure of
    the same start, and the starts whose end no longer matches the ``baseline`` path's end
    structure of the same start under the search's duplicate criteria.

    RMSD: :func:`confpop.prune.best_rmsd` over :func:`confpop.prune.rmsd_atoms` (heavy atoms
    and polar hydrogens) with the molecule's automorphisms, as the duplicate check aligns.
    Mismatch: :func:`confpop.prune.find_duplicates` with the search's
    :class:`~confpop.prune.PruneSettings` (0.2 angstrom, 0.05 kcal/mol, mirror images merged
    for achiral molecules) on the two end structures of one start keeps both.

    Returns {path: (RMSDs in angstrom, one per start with both structures; mismatches;
    starts compared)}.
    """
    from confpop.prune import (PruneSettings, automorphisms, best_rmsd, find_duplicates,
                               is_achiral, rmsd_atoms)

    settings = PruneSettings()
    perms = automorphisms(mol, rmsd_atoms(mol), settings.max_automorphisms)
    achiral = is_achiral(mol)
    out = {}
    for p in paths:
        rmsd, mismatch, compared = [], 0, 0
        for i, pos in enumerate(positions[p]):
            if pos is None:
                continue
            if reference_positions[i] is not None:
                rmsd.append(best_rmsd(reference_positions[i], pos, perms))
            base = positions[baseline][i]
            if p != baseline and base is not None:
                compared += 1
                report = find_duplicates(mol, [base, pos],
                                         [energies[baseline][i], energies[p][i]], settings,
                                         achiral=achiral)
                mismatch += len(report.unique) > 1
        out[p] = (np.array(rmsd), mismatch, compared)
    return out


def optimizer_paths(name, smiles, paths, n_starts, seed, meter):
    mol = load_molecule(smiles)
    starts = starts_of(mol, n_starts, seed)
    backend = get_backend("gfn2", mol)
    rows = {p: {"calls": [], "cpu": [], "energy": [], "positions": [], "failed": 0}
            for p in paths}
    reference_energy, reference_positions = [], []
    for start in starts:
        set_path("reference")
        try:
            ref = copt.optimize_positions(backend, start, convergence="verytight", max_steps=600)
            reference_energy.append(ref.energy)
            reference_positions.append(np.array(ref.positions))
        except cp.errors.ConfpopError:
            reference_energy.append(np.nan)
            reference_positions.append(None)
        for p in paths:
            set_path(p)
            t0 = time.process_time()
            try:
                res = copt.optimize_positions(backend, start, convergence=path_convergence(p))
            except cp.errors.ConfpopError:
                rows[p]["failed"] += 1
                rows[p]["energy"].append(np.nan)
                rows[p]["positions"].append(None)
                continue
            rows[p]["cpu"].append(time.process_time() - t0)
            rows[p]["calls"].append(res.gradient_calls if res.converged else res.gradient_calls)
            rows[p]["energy"].append(res.energy if res.converged else np.nan)
            rows[p]["positions"].append(np.array(res.positions) if res.converged else None)
            if not res.converged:
                rows[p]["failed"] += 1
    set_path("reference")
    t_grad = one_gradient(mol, starts[0])
    # the baseline of the duplicate check: the search's default path when it is measured
    baseline = "default" if "default" in paths else paths[0]
    geometry = geometry_check(mol, paths, {p: rows[p]["positions"] for p in paths},
                              {p: rows[p]["energy"] for p in paths}, reference_positions,
                              baseline)
    out = []
    for p in paths:
        r = rows[p]
        de = convert(np.array(r["energy"]) - np.array(reference_energy), "hartree", "kcal/mol")
        high = int(np.sum(de > 0.05))
        floor = np.array(r["calls"]) * t_grad
        cpu = np.array(r["cpu"])
        rmsd, mismatch, compared = geometry[p]
        out.append((name, mol.GetNumAtoms(), p, len(starts), statistics.median(r["calls"]),
                    p90(r["calls"]), float(np.median(cpu)), float(np.sum(cpu) / np.sum(floor)),
                    float(np.nanmax(de)), high, r["failed"], t_grad,
                    float(np.median(rmsd)) if len(rmsd) else float("nan"),
                    float(np.max(rmsd)) if len(rmsd) else float("nan"),
                    int(np.sum(rmsd > RMSD_LIMIT)),
                    f"{mismatch}/{compared} vs {baseline}" if p != baseline else "(baseline)"))
    return out


def whole_search(name, smiles, paths, seed, trials, rounds, meter, move_parents=None,
                 move_iterations=None):
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
        if move_parents or move_iterations:
            from confpop.moves import MoveSettings

            limits = {}
            if move_parents:
                limits["max_parents"] = move_parents
            if move_iterations:
                limits["max_iterations"] = move_iterations
            kw["moves"] = MoveSettings(**limits)
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


# ------------------------------------------------------------- CPU to a converged ensemble
#: the molecules of the --converged mode: bench_sampling.py's invented molecules with 4-5
#: rotatable bonds, cheapest brute force first (the 7-rotor hydroxy-ester on request:
#: --only hydroxy-ester)
CONVERGED_DEFAULT = ("glycol-ester", "ether-amide", "ether-ester", "oxane-ether")
CONVERGED_TARGET_OVERLAP = 0.9  # two seeds (issue "Speed")
CONVERGED_TARGET_RATIO = 1 / 3  # of the brute force's CPU (issue "Speed")


def _read_json(path):
    import json

    return json.loads(path.read_text()) if path.exists() else None


def _write_json(path, data):
    import json

    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(data))
    tmp.replace(path)


def _one_search(smiles, path, seed, meter=None):
    """One default search (workers=1) on optimizer ``path``: its process CPU and result.

    With a :class:`Meter`, the CPU inside engine calls (GFN2 gradients and single points)
    and their counts are recorded too, and each stage's wall seconds from the provenance."""
    from bench_sampling import _ensemble_arrays

    set_path(path)
    if meter is not None:
        meter.reset()
    load0 = os.getloadavg()[0]
    t0, w0 = time.process_time(), time.perf_counter()
    ens = cp.search(smiles, "gfn2", seed=seed, workers=1, convergence=path_convergence(path))
    cpu, wall = time.process_time() - t0, time.perf_counter() - w0
    set_path("reference")
    pos, e, deg = _ensemble_arrays(ens)
    summary = next(s for s in ens.provenance if s["step"] == "summary")
    sample = next(s for s in ens.provenance if s["step"] == "sample")
    extra = {"stage_wall": {s["step"]: s["seconds"] for s in ens.provenance if "seconds" in s},
             "trials": sample.get("trials"), "ff_conformers": sample.get("unique")}
    if meter is not None:
        extra.update(gradients=len(meter.gradient_times), single_points=len(meter.energy_times),
                     engine_cpu=sum(meter.gradient_times) + sum(meter.energy_times),
                     optimizations=len(meter.optimizations))
    return {"path": path, "seed": seed, "cpu": cpu, "wall": wall, **extra,
            "load": [round(load0, 2), round(os.getloadavg()[0], 2)],
            "when": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "stream_overlap": summary.get("stream_overlap"), "stop": summary.get("sampling_stop"),
            "energies": e.tolist(), "positions": [p.tolist() for p in pos],
            "degeneracy": deg.tolist()}


def converged(names, paths, seeds, brute_source, run_id, log=print):
    """CPU time to a converged ensemble, per optimizer path, against the brute force.

    **Measure.** "CPU to a converged ensemble" is the process CPU time (``time.process_time``
    of this process; ``workers=1``, ``OMP_NUM_THREADS=1``, so every engine call is counted)
    of ``confpop.search(smiles, "gfn2", seed=s, workers=1)`` with its defaults, summed over
    the two seeds (0 and 1): two independent searches are what it takes to *show* that the
    ensemble converged. Each search already runs two sampling streams and stops its rounds
    when their force-field populations overlap by 0.9; the measure asks the same at the
    final level: the two seeds' GFN2 populations at 298.15 K overlap by >= 0.9 (sum_i
    min(p_i, q_i), conformers matched by :func:`confpop.moves.match_conformers`: RMSD < 0.2 A
    and |dE| < 0.05 kcal/mol, mirror images merged). A pair below 0.9 is reported as not
    converged (no more seeds are tried). The ratio to the brute force is this pair's CPU
    over the brute force's (goal <= 1/3); one search's CPU (the mean of the two) over the
    brute force's is printed too: what a user pays for one ensemble without the check.

    **Agreement with the brute force.** Population overlap with it and lowest energy minus
    its lowest, kcal/mol, per search (bench_sampling.py's brute force: 2,000 ETKDGv3
    embeddings, MMFF94s, every distinct minimum optimized at GFN2 "tight" on today's default
    optimizer path).

    **Before/after.** Each search runs once per optimizer path in ``paths`` (default
    "reference": geomeTRIC's own guess Hessian with a fresh SCF guess at every step, its own
    step work, the optimizer before the speed work; "default": the search's defaults, Lindh
    guess, SCF restarts, the accelerated step work), interleaved seed
    by seed in this one process; the sampling is the same on both paths (it does not use
    the optimizer), so the columns differ by the optimizer only. The numpy primitives of
    :mod:`confpop.geometric_fast` are on in both; its step work only on the default path.

    **Brute force.** ``brute_source="run"``: built in this run, before the searches of its
    molecule, in ``benchmarks/cache/run-<run_id>/`` (an interrupted run resumes with the same
    ``--run-id``; the rows then say which process measured what); ``"cache"``: read from bench_sampling.py's
    cache (built by ``bench_sampling.py --brute-only``), labelled with when it was built and
    the load meanwhile.
    """

    import bench_sampling as bs

    meter = Meter()
    run_dir = bs.CACHE / f"run-{run_id}"
    run_dir.mkdir(parents=True, exist_ok=True)
    started = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    log(f"run {run_id} ({run_dir}); started {started}; load {os.getloadavg()[0]:.2f}; paths "
        f"{', '.join(paths)}; seeds {seeds}; brute force: {brute_source}")
    rows = []
    for name in names:
        smiles = bs.MOLECULES[name]
        mol = load_molecule(smiles)
        # the brute force on the library's default optimizer path
        set_path("default")
        if brute_source == "run":
            earlier = (run_dir / f"{name}.brute.json").exists()
            resumed = not earlier and (run_dir / f"{name}.partial.json").exists()
            brute = bs.brute_force(name, smiles, log=log, cache=run_dir)
            brute_label = ("an earlier process of this run" if earlier else "this process"
                           + (" (resumed: CPU summed over processes)" if resumed else ""))
            brute_label += ", " + bs.load_summary(brute)
        else:
            cached = bs.CACHE / f"{name}.brute.json"
            if not cached.exists():
                sys.exit(f"--brute cache: no {cached}; build it with "
                         f"'python benchmarks/bench_sampling.py --brute-only --only {name}'")
            brute = bs.brute_force(name, smiles, log=log)
            brute_label = "cache, " + bs.load_summary(brute)
        set_path("reference")
        ref = ([np.array(p) for p in brute["positions"]], np.array(brute["energies"]),
               np.array(brute["degeneracy"]))
        rel = convert(ref[1] - ref[1].min(), "hartree", "kcal/mol")
        log(f"== {name} {smiles}: brute force {brute['cpu_seconds']:.0f} s CPU ({brute_label}), "
            f"{len(ref[1])} GFN2 minima ({int((rel <= 3).sum())} within 3 kcal/mol)")
        searches = {}
        for seed in seeds:
            for p in paths:
                f = run_dir / f"{name}.{p}.seed{seed}.json"
                res = _read_json(f)
                if res is None or res.get("smiles") != smiles:
                    res = {"smiles": smiles, "pid": os.getpid(), **_one_search(smiles, p, seed, meter)}
                    _write_json(f, res)
                label = ("this process" if res.get("pid") == os.getpid()
                         else f"process {res.get('pid')} of this run")
                res["label"] = label
                arrays = (res["positions"], np.array(res["energies"]), np.array(res["degeneracy"]))
                res["overlap_brute"] = bs._overlap(mol, arrays, ref)
                res["d_lowest"] = float(convert(arrays[1].min() - ref[1].min(), "hartree", "kcal/mol"))
                searches[p, seed] = (res, arrays)
                if "engine_cpu" in res:
                    log(f"  [{p}] seed {seed}: {res['trials']} trials, {res['ff_conformers']} "
                        f"MMFF94s conformers, {res['optimizations']} optimizations, "
                        f"{res['gradients']} gradients + {res['single_points']} single points "
                        f"= {res['engine_cpu']:.0f} s CPU in the engine, the rest "
                        f"{res['cpu'] - res['engine_cpu']:.0f} s; stage wall s {res['stage_wall']}")
                log(f"  [{p}] seed {seed}: CPU {res['cpu']:.0f} s (wall {res['wall']:.0f} s, load "
                    f"{res['load'][0]:.1f}->{res['load'][1]:.1f}, {label}, ended {res['when']}), {len(arrays[1])} "
                    f"conformers, overlap with brute force {res['overlap_brute']:.3f}, lowest "
                    f"{res['d_lowest']:+.2f} kcal/mol, streams {res['stream_overlap']} ({res['stop']})")
        # where the searches find minima the brute force lacks, it is an incomplete yardstick:
        # the union of the brute force and every search of this molecule is printed as well
        from confpop.prune import PruneSettings, find_duplicates, is_achiral

        pos = list(ref[0]) + [q for _, a in searches.values() for q in a[0]]
        e = np.concatenate([ref[1]] + [a[1] for _, a in searches.values()])
        deg = np.concatenate([ref[2]] + [a[2] for _, a in searches.values()])
        rep = find_duplicates(mol, [np.asarray(q) for q in pos], e, PruneSettings(),
                              achiral=is_achiral(mol))
        union = ([np.asarray(pos[u]) for u in rep.unique], e[rep.unique], deg[rep.unique])
        brute_union = bs._overlap(mol, ref, union)
        for res, arrays in searches.values():
            res["overlap_union"] = bs._overlap(mol, arrays, union)
        rel = convert(union[1] - union[1].min(), "hartree", "kcal/mol")
        log(f"  union of the brute force and the searches: {len(union[1])} minima "
            f"({int((rel <= 3).sum())} within 3 kcal/mol); the brute force's overlap with it "
            f"{brute_union:.3f}; lowest of the union {float(convert(union[1].min() - ref[1].min(), 'hartree', 'kcal/mol')):+.2f} kcal/mol vs the brute force")
        for p in paths:
            pair = [searches[p, s] for s in seeds]
            seed_overlap = bs._overlap(mol, pair[0][1], pair[1][1])
            cpu = sum(r["cpu"] for r, _ in pair)
            row = {"molecule": name, "path": p, "brute_cpu": brute["cpu_seconds"],
                   "brute_label": brute_label, "brute_minima": len(ref[1]),
                   "cpu": [r["cpu"] for r, _ in pair], "pair_cpu": cpu,
                   "pair_ratio": cpu / brute["cpu_seconds"],
                   "single_ratio": cpu / len(pair) / brute["cpu_seconds"],
                   "seed_overlap": seed_overlap,
                   "converged": seed_overlap >= CONVERGED_TARGET_OVERLAP,
                   "overlap_brute": [r["overlap_brute"] for r, _ in pair],
                   "overlap_union": [r["overlap_union"] for r, _ in pair],
                   "brute_union": brute_union,
                   "d_lowest": [r["d_lowest"] for r, _ in pair],
                   "labels": sorted({r["label"] for r, _ in pair})}
            rows.append(row)
            log(f"  [{p}] seeds {seeds[0]}/{seeds[1]}: overlap {seed_overlap:.3f} "
                f"({'converged' if row['converged'] else 'NOT converged'}), CPU {cpu:.0f} s = "
                f"{row['pair_ratio']:.2f} x brute force (one search {row['single_ratio']:.2f} x)")
        if len(paths) > 1:
            for seed in seeds:
                a, b = searches[paths[0], seed][1], searches[paths[1], seed][1]
                log(f"  seed {seed}: population overlap between paths {paths[0]} and {paths[1]}: "
                    f"{bs._overlap(mol, a, b):.3f}")
    _converged_table(rows, paths, seeds)
    _write_json(run_dir / f"table-{'+'.join(names)}.json", {"run_id": run_id, "started": started,
                                         "finished": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                                         "rows": rows})
    return rows


def _converged_table(rows, paths, seeds):
    print()
    print(f"{'molecule':12s} {'brute s':>7} {'path':>16} {'CPU s seed ' + '/'.join(map(str, seeds)):>18} "
          f"{'pair s':>7} {'pair/brute':>10} {'one/brute':>9} {'seeds ovl':>9} "
          f"{'ovl brute':>11} {'ovl union':>11} {'dE lowest':>11} {'after/before':>12}")
    by = {(r["molecule"], r["path"]): r for r in rows}
    for r in rows:
        before = by.get((r["molecule"], paths[0]))
        change = (f"{r['pair_cpu'] / before['pair_cpu']:.2f}" if before is not None
                  and r["path"] != paths[0] else "")
        print(f"{r['molecule']:12s} {r['brute_cpu']:>7.0f} {r['path']:>16} "
              f"{'/'.join(f'{c:.0f}' for c in r['cpu']):>18} {r['pair_cpu']:>7.0f} "
              f"{r['pair_ratio']:>10.2f} {r['single_ratio']:>9.2f} "
              f"{r['seed_overlap']:>8.3f}{'' if r['converged'] else '!'} "
              f"{'/'.join(f'{o:.3f}' for o in r['overlap_brute']):>11} "
              f"{'/'.join(f'{o:.3f}' for o in r['overlap_union']):>11} "
              f"{'/'.join(f'{d:+.2f}' for d in r['d_lowest']):>11} {change:>12}")
    print(f"pair = CPU of the two seeds' searches (workers=1) = CPU to a converged ensemble when "
          f"seeds ovl >= {CONVERGED_TARGET_OVERLAP} ('!': not reached); goal pair/brute <= "
          f"{CONVERGED_TARGET_RATIO:.2f}; one = the mean single search; ovl brute, dE lowest "
          f"(kcal/mol) per seed; ovl union: with the union of the brute force and every search of "
          f"the molecule; after/before = pair CPU over the first path's")
    for r in rows:
        if r["path"] == paths[0]:
            labels = sorted({x for q in rows if q["molecule"] == r["molecule"] for x in q["labels"]})
            print(f"  {r['molecule']}: brute force from {r['brute_label']}; its overlap with "
                  f"the union {r['brute_union']:.3f}"
                  + ("" if labels == ["this process"] else "; searches: " + ", ".join(labels)))


def main() -> None:
    if "--converged" in sys.argv:
        ap = argparse.ArgumentParser(description=converged.__doc__.splitlines()[0])
        ap.add_argument("--converged", action="store_true",
                        help="CPU to a converged ensemble against the brute force (this mode)")
        ap.add_argument("--only", default=None,
                        help="bench_sampling.py molecule names, comma-separated (default "
                             + ", ".join(CONVERGED_DEFAULT) + ")")
        ap.add_argument("--paths", default="reference,default",
                        help="optimizer paths, the 'before' first (see --paths of the default mode)")
        ap.add_argument("--seeds", default="0,1", help="the two search seeds")
        ap.add_argument("--brute", choices=("run", "cache"), default="run",
                        help="build the brute force in this run (default) or read "
                             "bench_sampling.py's cache")
        ap.add_argument("--run-id", default=time.strftime("%Y%m%dT%H%M%S", time.gmtime()),
                        help="resume an interrupted run by its id (benchmarks/cache/run-<id>)")
        args = ap.parse_args()
        import bench_sampling

        names = [n.strip() for n in args.only.split(",")] if args.only else list(CONVERGED_DEFAULT)
        for n in names:
            if n not in bench_sampling.MOLECULES:
                sys.exit(f"--only: unknown molecule {n!r}; choose from "
                         f"{', '.join(bench_sampling.MOLECULES)}")
        seeds = [int(s) for s in args.seeds.split(",")]
        if len(seeds) != 2:
            sys.exit(f"--seeds: two seeds, got {args.seeds!r}")
        paths = [p.strip() for p in args.paths.split(",") if p.strip()]
        print(f"confpop from {os.path.dirname(cp.__file__)}", flush=True)
        converged(names, paths, seeds, args.brute, args.run_id,
                  log=bench_sampling._log_to(str(bench_sampling.CACHE / f"run-{args.run_id}" / "log.txt")))
        return
    if "--versus-all" in sys.argv:  # every other option belongs to the earlier benchmark
        from bench_search_all import main as versus_all
        sys.argv = [a for a in sys.argv if a != "--versus-all"]
        versus_all()
        return
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--starts", type=int, default=30, help="starts per molecule for the paths")
    ap.add_argument("--paths", default="reference,default",
                    help="optimizer paths, comma-separated: an initial Hessian (geometric, lindh, "
                         "lindh-primitive, lindh-primitive-soft) with '+norestart' for fresh SCF "
                         "guesses, '+oldsteps' for geomeTRIC's own step work, '+msec' for the "
                         "multi-secant Hessian update over the last 3 steps, '+bfgs' for "
                         "geomeTRIC's one-step BFGS update and '@preset[/key=value...]' for the "
                         "convergence (default: the search's, tight); reference = "
                         "geometric+norestart+oldsteps, the optimizer before the speed work; "
                         "default = the search's defaults")
    ap.add_argument("--only", default=None, help="molecules whose name contains this (comma-separated)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--search", action="store_true", help="also run whole searches per path")
    ap.add_argument("--no-paths", action="store_true", help="skip the optimizer-path comparison")
    ap.add_argument("--trials", type=int, default=None, help="search: trials per round")
    ap.add_argument("--rounds", type=int, default=None, help="search: largest number of rounds")
    ap.add_argument("--move-parents", type=int, default=None,
                    help="search: most conformers the move search moves (MoveSettings.max_parents)")
    ap.add_argument("--move-iterations", type=int, default=None,
                    help="search: most move iterations (MoveSettings.max_iterations)")
    ap.add_argument("--converged", action="store_true",
                    help="CPU to a converged ensemble (two seeds) against bench_sampling.py's "
                         "brute force, per optimizer path; 'bench_search.py --converged --help' "
                         "lists its options")
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
                      f"one gradient {1000 * r[11]:.1f} ms; RMSD to verytight median {r[12]:.3f}, "
                      f"largest {r[13]:.3f} A, {r[14]} > {RMSD_LIMIT}; dedup mismatches {r[15]}",
                      flush=True)
            opt_rows += rows
        if args.search:
            rows = whole_search(name, smiles, paths, args.seed, args.trials, args.rounds, meter,
                                args.move_parents, args.move_iterations)
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
              f"{'CPU s/opt':>9} {'CPU/floor':>9} {'worst dE':>8} {'>0.05':>5} {'failed':>6} "
              f"{'RMSD med':>8} {'RMSD max':>8} {'>0.05A':>6} {'dedup mismatch':>22}")
        for r in opt_rows:
            print(f"{r[0]:28s} {r[1]:>5d} {r[2]:>26s} {r[3]:>6d} {r[4]:>6.0f} {r[5]:>5.0f} "
                  f"{r[6]:>9.2f} {r[7]:>9.2f} {r[8]:>+8.3f} {r[9]:>5d} {r[10]:>6d} "
                  f"{r[12]:>8.3f} {r[13]:>8.3f} {r[14]:>6d} {r[15]:>22s}")
        print("median/p90 = gradient calls per tight optimization; floor = calls x CPU of one "
              "gradient; dE vs geomeTRIC 'verytight' from the same start, kcal/mol; RMSD "
              "(angstrom, the duplicate check's atoms and symmetry) of each end structure to the "
              "verytight "
              "one of the same start; dedup mismatch: starts whose end structure and the "
              "baseline path's of the same start are two conformers under the search's duplicate "
              "criteria (0.2 A, 0.05 kcal/mol)")
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
