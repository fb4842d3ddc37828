"""Multi-level search vs optimizing every sampled structure at GFN2-xTB (run through bench_search.py --versus-all, or directly).

For three invented flexible molecules (5-8 rotatable bonds, 30-50 atoms; invented for this
benchmark, not taken from any data set) this prints, side by side and measured in one run:

* wall time of ``confpop.search`` (sample, MMFF94s relax, GFN2 single-point screen, tight
  GFN2 optimization of the survivors, prune);
* wall time of a baseline that optimizes *every* sampled trial structure at GFN2 with the
  same optimizer and settings and no screening, then removes duplicates and applies the same
  final window. Its starts are the search's own trial structures: the same ETKDG seeds and
  rounds, each relaxed with MMFF94s exactly as the search's sampling stage does, before any
  duplicate removal or window (``--baseline-starts raw`` starts from the unrelaxed ETKDG
  structures instead). The baseline's time includes drawing and relaxing the structures;
* the lowest energy each found, and the population overlap sum_i min(p_i, q_i) at 298.15 K
  (conformers matched by symmetry-aware RMSD < 0.25 A, mirror images included): this
  measures what the screening lost;
* the same two figures between the search and a second search with another seed (seed + 1):
  the reproducibility of the sampling itself, which bounds any comparison of two ensembles;
* median gradient calls per optimization for geomeTRIC (ours) and for scipy's L-BFGS-B in
  Cartesian coordinates, from the same starting structures (a sample of them).

With ``--screen-windows 6,4,3`` the search runs once per single-point screening window
(kcal/mol) and each run is compared with the same baseline: the trade between work saved
and population lost.

Targets: search >= 5x faster than the baseline, the same global minimum within 0.1
kcal/mol, overlap >= 0.9; median gradient calls <= 60 at 48 atoms.

    python benchmarks/bench_search.py [--trials N] [--rounds R] [--workers 2] [--only NAME]
                                      [--baseline-starts relaxed|raw] [--no-reseed]
                                      [--screen-windows 6,4,3]

Without ``--trials``/``--rounds`` the search runs with its defaults (trials per round by
flexibility, rounds until the completeness target); the baseline then optimizes as many
structures as the search drew, which takes 10-30 minutes per molecule on 2 cores.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402

import confpop as cp  # noqa: E402
from confpop.backends import get_backend  # noqa: E402
from confpop.backends.forcefield import minimize_conformers  # noqa: E402
from confpop.molecule import load_molecule  # noqa: E402
from confpop.optimize import optimize_positions  # noqa: E402
from confpop.pipeline import optimize_unit  # noqa: E402
from confpop.prune import PruneSettings, automorphisms, best_rmsd, find_duplicates, rmsd_atoms  # noqa: E402
from confpop.sampling import embed  # noqa: E402
from confpop.units import convert  # noqa: E402

# invented molecules (names are descriptions, not real compounds of any project)
MOLECULES = {
    "invented hydroxy-ester": "CC(C)OC(=O)C[C@H](O)CCOC",
    "invented ether-amide": "COCCN(C)C(=O)CC[C@@H](C)OC",
    "invented aryl ester": "CCOC(=O)CCc1ccc(OC[C@H](C)CC)cc1",
}


def _overlap(ens_a, ens_b, mol) -> float:
    """sum_i min(p_i, q_i) at 298.15 K, conformers matched by RMSD < 0.25 A (with mirrors)."""
    pa = ens_a.populations(298.15)[298.15]
    pb = ens_b.populations(298.15)[298.15]
    perms = automorphisms(mol, rmsd_atoms(mol))
    total = 0.0
    used = set()
    for ia in pa.index:
        for ib in pb.index:
            if ib in used:
                continue
            if best_rmsd(ens_a.positions(ia), ens_b.positions(ib), perms, allow_reflection=True) < 0.25:
                total += min(pa[ia], pb[ib])
                used.add(ib)
                break
    return total


def _e_min(ens) -> float:
    return float(ens.raw_table.loc[ens.ids(), f"energy_{ens.level}"].min())


def _trial_structures(mol, trials, rounds, seed, starts):
    """The search's trial structures: same seeds and rounds; MMFF94s-relaxed or raw."""
    structures = []
    for rnd in range(rounds):
        trial, _ = embed(mol, trials, seed=seed, round_index=rnd)
        if starts == "relaxed":
            trial, _ = minimize_conformers(trial, method="mmff94s", max_iterations=2000)
        structures += [c.GetPositions() for c in trial.GetConformers()]
    return structures


def _baseline(mol, trials, rounds, seed, workers, starts):
    """Optimize every sampled trial structure at GFN2 (same optimizer), prune, window."""
    t0 = time.perf_counter()
    structures = _trial_structures(mol, trials, rounds, seed, starts)
    item = {"mol": Chem.Mol(mol).ToBinary(), "method": "gfn2", "charge": 0, "multiplicity": 1,
            "solvent": None, "options": {}, "convergence": "tight", "engine": "geometric"}
    outcomes = cp.run_units(optimize_unit, [{**item, "positions": p} for p in structures],
                            workers=workers)
    ok = [o.value for o in outcomes if o.ok]
    e = np.array([v["energy"] for v in ok])
    rep = find_duplicates(mol, [v["positions"] for v in ok], e, PruneSettings())
    keep = [u for u in rep.unique if convert(e[u] - e.min(), "hartree", "kcal/mol") <= 5.0]
    out = Chem.Mol(mol)
    out.RemoveAllConformers()
    for u in keep:
        conf = Chem.Conformer(mol.GetNumAtoms())
        for a, xyz in enumerate(ok[u]["positions"]):
            conf.SetAtomPosition(a, tuple(float(x) for x in xyz))
        out.AddConformer(conf, assignId=True)
    deg = [2 if rep.chiral_conformer[u] else 1 for u in keep]
    ens = cp.Ensemble.from_mol(out, [e[u] for u in keep], level="gfn2", degeneracy=deg)
    calls = [v["gradient_calls"] for v in ok]
    return (ens, time.perf_counter() - t0, len(structures), statistics.median(calls),
            structures, len(outcomes) - len(ok))


def _lbfgs_calls(mol, structures, n):
    backend = get_backend("gfn2", mol)
    calls_g, calls_l = [], []
    step = max(1, len(structures) // max(n, 1))
    for pos in structures[::step][:n]:
        calls_g.append(optimize_positions(backend, pos, convergence="tight").gradient_calls)
        calls_l.append(optimize_positions(backend, pos, convergence="tight", engine="lbfgs").gradient_calls)
    return statistics.median(calls_g), statistics.median(calls_l)


def _stage_counts(ens) -> str:
    steps = {p["step"]: p for p in ens.provenance}
    return " -> ".join(f"{name} {steps[name]['n_out']}" for name in ("sample", "screen", "optimize", "prune")
                       if name in steps)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=None, help="trial structures per round (default: the search's)")
    ap.add_argument("--rounds", type=int, default=None, help="largest number of rounds (default: the search's)")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--calls-sample", type=int, default=4,
                    help="structures per molecule for the geomeTRIC vs L-BFGS-B call count")
    ap.add_argument("--only", default=None,
                    help="run only molecules whose name contains this (several: comma-separated)")
    ap.add_argument("--baseline-starts", choices=("relaxed", "raw"), default="relaxed",
                    help="baseline starts: MMFF94s-relaxed trial structures (the search's) or raw ETKDG")
    ap.add_argument("--no-reseed", action="store_true", help="skip the second search (seed + 1)")
    ap.add_argument("--screen-windows", default="6",
                    help="comma-separated single-point screening windows in kcal/mol (default 6, "
                         "the search's default); the first one is the reference run")
    args = ap.parse_args()
    print(f"load average at start: {os.getloadavg()[0]:.2f} ({os.cpu_count()} cores)", flush=True)
    search_kw = {"method": "gfn2", "workers": args.workers}
    if args.trials is not None:
        search_kw["n_trials"] = args.trials
    if args.rounds is not None:
        search_kw["max_rounds"] = args.rounds
    rows = []
    for name, smiles in MOLECULES.items():
        if args.only and not any(part.strip() in name for part in args.only.split(",")):
            continue
        mol = load_molecule(smiles)
        windows = [float(w) for w in args.screen_windows.split(",")]
        runs = []
        for w in windows:
            t0 = time.perf_counter()
            ens = cp.search(smiles, seed=args.seed, screen_window=w, **search_kw)
            runs.append((w, ens, time.perf_counter() - t0))
        ens = runs[0][1]
        sample = next(p for p in ens.provenance if p["step"] == "sample")
        trials = sample["trials"] // sample["rounds"]
        base, t_base, n_struct, base_calls, structures, base_failed = _baseline(
            mol, trials, sample["rounds"], args.seed, args.workers, args.baseline_starts)
        if args.no_reseed:
            t_again, overlap_seed, d_e_seed = float("nan"), float("nan"), float("nan")
        else:
            t0 = time.perf_counter()
            again = cp.search(smiles, seed=args.seed + 1, screen_window=windows[0], **search_kw)
            t_again = time.perf_counter() - t0
            overlap_seed = _overlap(ens, again, mol)
            d_e_seed = convert(_e_min(again) - _e_min(ens), "hartree", "kcal/mol")
        med_geo, med_lbfgs = _lbfgs_calls(mol, structures, args.calls_sample)
        rot = cp.molecule.molecule_summary(mol)["rotatable_bonds"]
        print(f"{name}: baseline {t_base:.1f} s ({n_struct} {args.baseline_starts} starts optimized, "
              f"{base_failed} failed, {len(base)} conformers, median {base_calls:.0f} calls) | "
              f"second search (seed {args.seed + 1}) {t_again:.1f} s: overlap {overlap_seed:.3f}, "
              f"E_min difference {d_e_seed:+.3f} kcal/mol | median gradient calls geomeTRIC "
              f"{med_geo:.0f}, L-BFGS-B {med_lbfgs:.0f}", flush=True)
        for k, (w, run, t_search) in enumerate(runs):
            d_e = convert(_e_min(run) - _e_min(base), "hartree", "kcal/mol")
            overlap = _overlap(run, base, mol)
            rows.append((name, mol.GetNumAtoms(), rot, w, t_search, t_base, n_struct, d_e, overlap,
                         overlap_seed if k == 0 else float("nan"),
                         d_e_seed if k == 0 else float("nan"), med_geo, med_lbfgs))
            print(f"  screen window {w:g} kcal/mol: search {t_search:.1f} s ({_stage_counts(run)}; "
                  f"{len(run)} conformers, completeness {sample['completeness']:.2f}) | speed-up "
                  f"{t_base / t_search:.1f}x | E_min(search) - E_min(baseline) {d_e:+.3f} kcal/mol | "
                  f"overlap {overlap:.3f}", flush=True)
    print()
    print(f"{'molecule':24s} {'atoms':>5} {'rot':>3} {'screen':>6} {'search s':>9} {'baseline s':>10} {'starts':>6} "
          f"{'speed-up':>8} {'dEmin':>7} {'overlap':>7} {'seed ovl':>8} {'seed dE':>7} "
          f"{'calls geo':>9} {'calls LBFGS':>11}")
    for r in rows:
        print(f"{r[0]:24s} {r[1]:>5d} {r[2]:>3d} {r[3]:>6g} {r[4]:>9.1f} {r[5]:>10.1f} {r[6]:>6d} "
              f"{r[5] / r[4]:>7.1f}x {r[7]:>+7.3f} {r[8]:>7.3f} {r[9]:>8.3f} {r[10]:>+7.3f} "
              f"{r[11]:>9.0f} {r[12]:>11.0f}")
    print("screen = single-point screening window, kcal/mol; dEmin, seed dE in kcal/mol; overlap = "
          "sum min(p, q) at 298.15 K vs the baseline; seed ovl = the same between two searches "
          "with different seeds (first window only)")
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
