"""Multi-level search vs optimizing every sampled structure at GFN2-xTB.

For three invented flexible molecules (5-8 rotatable bonds, 30-50 atoms; invented for this
benchmark, not taken from any data set) this prints, side by side and measured in one run:

* wall time of ``confpop.search`` (sample, MMFF94s relax, GFN2 screen, loose + tight GFN2
  optimization of the survivors, prune);
* wall time of a baseline that optimizes *every* sampled trial structure (the same ETKDG
  trials the search drew) at GFN2 with the same optimizer and settings, no screening, then
  removes duplicates;
* the lowest energy each found, and the population overlap sum_i min(p_i, q_i) at 298.15 K
  (conformers matched by symmetry-aware RMSD);
* median gradient calls per optimization for geomeTRIC (ours) and for scipy's L-BFGS-B in
  Cartesian coordinates, from the same starting structures (a sample of them).

Targets: search >= 5x faster than the baseline, the same global minimum within 0.1
kcal/mol, overlap >= 0.9; median gradient calls <= 60 at 48 atoms.

    python benchmarks/bench_search.py [--trials 30] [--rounds 3] [--workers 2] [--only NAME]
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
from confpop.molecule import load_molecule  # noqa: E402
from confpop.optimize import optimize_positions  # noqa: E402
from confpop.pipeline import optimize_unit  # noqa: E402
from confpop.prune import PruneSettings, automorphisms, best_rmsd, find_duplicates, rmsd_atoms  # noqa: E402
from confpop.sampling import embed  # noqa: E402
from confpop.thermo import boltzmann_weights  # noqa: E402
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


def _baseline(smiles, trials, rounds, seed, workers):
    """Optimize every sampled trial structure at GFN2 (same optimizer), prune, return ensemble."""
    mol = load_molecule(smiles)
    structures = []
    for rnd in range(rounds):
        trial, _ = embed(mol, trials, seed=seed + 7919 * rnd)
        structures += [c.GetPositions() for c in trial.GetConformers()]
    item = {"mol": Chem.Mol(mol).ToBinary(), "method": "gfn2", "charge": 0, "multiplicity": 1,
            "solvent": None, "options": {}, "convergence": "tight", "engine": "geometric"}
    t0 = time.perf_counter()
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
    return ens, time.perf_counter() - t0, len(structures), statistics.median(calls), structures, mol


def _lbfgs_calls(mol, structures, n):
    backend = get_backend("gfn2", mol)
    calls_g, calls_l = [], []
    for pos in structures[:n]:
        calls_g.append(optimize_positions(backend, pos, convergence="tight").gradient_calls)
        calls_l.append(optimize_positions(backend, pos, convergence="tight", engine="lbfgs").gradient_calls)
    return statistics.median(calls_g), statistics.median(calls_l)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=30, help="trial structures per round")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--calls-sample", type=int, default=4,
                    help="structures per molecule for the geomeTRIC vs L-BFGS-B call count")
    ap.add_argument("--only", default=None, help="run only molecules whose name contains this")
    args = ap.parse_args()
    print(f"load average at start: {os.getloadavg()[0]:.2f} (2-core machine)")
    rows = []
    for name, smiles in MOLECULES.items():
        if args.only and args.only not in name:
            continue
        t0 = time.perf_counter()
        ens = cp.search(smiles, method="gfn2", seed=args.seed, n_trials=args.trials,
                        max_rounds=args.rounds, workers=args.workers)
        t_search = time.perf_counter() - t0
        trials_used = next(p for p in ens.provenance if p["step"] == "sample")
        base, t_base, n_struct, base_calls, structures, mol = _baseline(
            smiles, args.trials, trials_used["rounds"], args.seed, args.workers)
        e_ours = float(ens.raw_table.loc[ens.ids(), "energy_gfn2"].min())
        e_base = float(base.raw_table["energy_gfn2"].min())
        overlap = _overlap(ens, base, mol)
        med_geo, med_lbfgs = _lbfgs_calls(mol, structures, args.calls_sample)
        rows.append((name, mol.GetNumAtoms(), t_search, t_base, n_struct,
                     convert(e_ours - e_base, "hartree", "kcal/mol"), overlap, len(ens), len(base),
                     med_geo, med_lbfgs, cp.molecule.molecule_summary(mol)["rotatable_bonds"]))
        print(f"{name}: search {t_search:.1f} s ({len(ens)} conformers) | baseline {t_base:.1f} s "
              f"({n_struct} optimizations, {len(base)} conformers) | speed-up {t_base / t_search:.1f}x | "
              f"E_min(ours) - E_min(baseline) {rows[-1][5]:+.3f} kcal/mol | overlap {overlap:.3f} | "
              f"median gradient calls geomeTRIC {med_geo:.0f}, L-BFGS-B {med_lbfgs:.0f}", flush=True)
    print()
    print(f"{'molecule':24s} {'atoms':>5} {'rot':>3} {'search s':>9} {'baseline s':>10} {'speed-up':>8} "
          f"{'dEmin kcal':>10} {'overlap':>7} {'calls TRIC':>10} {'calls LBFGS':>11}")
    for r in rows:
        print(f"{r[0]:24s} {r[1]:>5d} {r[11]:>3d} {r[2]:>9.1f} {r[3]:>10.1f} {r[3] / r[2]:>7.1f}x "
              f"{r[5]:>+10.3f} {r[6]:>7.3f} {r[9]:>10.0f} {r[10]:>11.0f}")
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
