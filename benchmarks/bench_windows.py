"""Where the screening margin, the population cut and the duplicate criteria come from.

For molecules of different kinds (an alcohol, a drug in chloroform, an aryl ether-amide, a
sugar in water, an amino-acid zwitterion in water, a hydroxy-ester) this benchmark draws
trial structures exactly as ``confpop.search`` does (ETKDG + MMFF94s, default rounds), then
computes a GFN2 single point *and* a tight GFN2 optimization for every one of them (no
screening), groups the optimized structures into minima (the default duplicate criteria)
and prints:

1. **Single point -> optimized drops**: for every structure, how much its relative energy
   fell on optimization, d = (E_sp - E_sp,min) - (E_opt - E_opt,min), kcal/mol; quantiles,
   and the largest drop of a structure whose minimum ends within 3 kcal/mol.
2. **Population lost by a screen**: a minimum is lost when every structure that optimizes
   into it lies above the screening cut in single-point energy. For a cut of
   E_cut(T, share) + margin, with E_cut = RT ln(2 / share) (the energy above which even a
   doubly degenerate conformer holds less than ``share``), the population at T lost per
   margin.
3. **Population dropped by the final cut**: the summed population of the minima whose own
   share at T is below ``share``.
4. **Duplicate criteria**: the lowest minima are displaced (0.1 A random noise per atom) and
   re-optimized: RMSD (heavy atoms + polar H, symmetry-aware) and |dE| between a minimum and
   its re-optimized copy, against the same figures between neighbouring distinct minima.

    python benchmarks/bench_windows.py [--workers 2] [--only NAME] [--copies 12]

Runs for 10-40 minutes on 2 cores (every structure is optimized).
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402

from confpop.execution import run_units  # noqa: E402
from confpop.molecule import load_molecule  # noqa: E402
from confpop.pipeline import optimize_unit, single_point_unit  # noqa: E402
from confpop.prune import PruneSettings, automorphisms, best_rmsd, find_duplicates, is_achiral, rmsd_atoms  # noqa: E402
from confpop.sampling import sample_conformers  # noqa: E402
from confpop.thermo import boltzmann_weights  # noqa: E402
from confpop.units import convert, gas_constant  # noqa: E402

MOLECULES = {
    "hexanol": ("CCCCCCO", None),
    "propranolol": ("CC(C)NC[C@H](O)COc1cccc2ccccc12", "chloroform"),
    "etheramide": ("CN(C)C(=O)c1ccccc1OCCOC", "chloroform"),
    "glucoside": ("CO[C@@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O", "water"),
    "phenylalanine": ("[NH3+][C@@H](Cc1ccccc1)C(=O)[O-]", "water"),
    "hydroxyester": ("CCOC(=O)C[C@H](O)CCCOC", None),
}
TEMPERATURES = (298.15, 323.15)
SHARES = (1e-2, 1e-3, 1e-4)
MARGINS = (0.0, 1.0, 2.0, 3.0, 4.0, 5.0)


def run(name, smiles, solvent, workers, n_copies, seed=1):
    t0 = time.perf_counter()
    mol = load_molecule(smiles)
    sampled, _, _, _, srep = sample_conformers(mol, seed=seed, energy_window=10.0,
                                               max_rounds=20, target_completeness=0.85)
    base = {"mol": Chem.Mol(mol).ToBinary(), "method": "gfn2", "charge": Chem.GetFormalCharge(mol),
            "multiplicity": 1, "solvent": solvent, "options": {}}
    starts = [c.GetPositions() for c in sampled.GetConformers()]
    sp = run_units(single_point_unit, [{**base, "positions": p} for p in starts], workers=workers)
    opt = run_units(optimize_unit, [{**base, "positions": p, "convergence": "tight"} for p in starts],
                    workers=workers)
    ok = [i for i in range(len(starts)) if sp[i].ok and opt[i].ok]
    e_sp = np.array([sp[i].value["energy"] for i in ok])
    e_opt = np.array([opt[i].value["energy"] for i in ok])
    pos = [opt[i].value["positions"] for i in ok]
    rel_sp = convert(e_sp - e_sp.min(), "hartree", "kcal/mol")
    rel_opt = convert(e_opt - e_opt.min(), "hartree", "kcal/mol")
    drops = rel_sp - rel_opt
    achiral = is_achiral(mol)
    rep = find_duplicates(mol, pos, e_opt, PruneSettings(), achiral=achiral)
    members = {u: [u] for u in rep.unique}
    for dup, ref in rep.duplicate_of.items():
        members[ref].append(dup)
    groups = rep.unique
    g_e = np.array([rel_opt[u] for u in groups])
    g_sp = np.array([min(rel_sp[m] for m in members[u]) for u in groups])
    g_deg = np.array([2 if achiral and rep.chiral_conformer[u] else 1 for u in groups])
    print(f"\n== {name}: {smiles} ({solvent or 'gas'}); {srep.trials} trials -> {len(starts)} "
          f"MMFF94s conformers -> {len(groups)} GFN2 minima; {time.perf_counter() - t0:.0f} s")
    q = np.percentile(drops, [50, 90, 99, 100])
    low = [drops[m] for u in groups if rel_opt[u] <= 3.0 for m in members[u]]
    print(f"drops sp->opt, kcal/mol: median {q[0]:.2f}, p90 {q[1]:.2f}, p99 {q[2]:.2f}, "
          f"max {q[3]:.2f}; max for minima ending <= 3 kcal/mol: {max(low):.2f}")
    for t in TEMPERATURES:
        p = boltzmann_weights(g_e, t, degeneracy=g_deg)
        rt = gas_constant() * t
        for share in SHARES:
            e_cut = rt * np.log(2.0 / share)
            lost = [float(p[g_sp > e_cut + m].sum()) for m in MARGINS]
            screened = [int(sum(1 for i in range(len(rel_sp)) if rel_sp[i] > e_cut + m)) for m in MARGINS]
            final_drop = float(p[p < share].sum())
            print(f"T {t:.2f} share {share:g}: E_cut {e_cut:.2f}; final cut drops {int((p < share).sum())} "
                  f"minima, {100 * final_drop:.3f} % | screen margin " + ", ".join(
                      f"{m:g}: lost {100 * lo:.3f} % ({s} of {len(rel_sp)} screened)"
                      for m, lo, s in zip(MARGINS, lost, screened)))
    # duplicate criteria: re-optimized copies of the lowest minima vs neighbouring minima
    rng = np.random.default_rng(7)
    lowest = [groups[i] for i in np.argsort(g_e)[:n_copies]]
    kicked = [{**base, "positions": pos[u] + rng.normal(scale=0.1 / np.sqrt(3), size=pos[u].shape),
               "convergence": "tight"} for u in lowest]
    copies = run_units(optimize_unit, kicked, workers=workers)
    perms = automorphisms(mol, rmsd_atoms(mol))
    c_rmsd, c_de = [], []
    for u, c in zip(lowest, copies):
        if not c.ok:
            continue
        c_rmsd.append(min(best_rmsd(pos[u], c.value["positions"], perms, allow_reflection=r)
                          for r in (False, True)))
        c_de.append(abs(float(convert(c.value["energy"] - e_opt[u], "hartree", "kcal/mol"))))
    d_rmsd, d_de = [], []
    for a in range(len(groups)):
        for b in range(a + 1, len(groups)):
            de = abs(g_e[a] - g_e[b])
            if de > 1.0:
                continue
            d_rmsd.append(best_rmsd(pos[groups[a]], pos[groups[b]], perms, allow_reflection=True))
            d_de.append(de)
    d_rmsd, d_de = np.array(d_rmsd), np.array(d_de)
    print(f"copies ({len(c_rmsd)}): RMSD max {max(c_rmsd):.4f} A (median {np.median(c_rmsd):.4f}), "
          f"|dE| max {max(c_de):.4f} kcal/mol (median {np.median(c_de):.4f})")
    if len(d_rmsd):
        close = d_de[d_rmsd < 0.25]
        print(f"distinct minima within 1 kcal/mol ({len(d_rmsd)} pairs): smallest RMSD "
              f"{d_rmsd.min():.4f} A; pairs with RMSD < 0.25 A: {int((d_rmsd < 0.25).sum())}, "
              f"their smallest |dE| {close.min() if len(close) else float('nan'):.4f} kcal/mol; "
              f"RMSD quantiles 1/5/50 %: " + ", ".join(f"{x:.3f}" for x in np.percentile(d_rmsd, [1, 5, 50])))
    return {"drops": drops, "copies": (c_rmsd, c_de), "distinct": (d_rmsd, d_de)}


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--only", default=None)
    ap.add_argument("--copies", type=int, default=12)
    args = ap.parse_args()
    for name, (smiles, solvent) in MOLECULES.items():
        if args.only and name not in args.only.split(","):
            continue
        run(name, smiles, solvent, args.workers, args.copies)


if __name__ == "__main__":
    main()
