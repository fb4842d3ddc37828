"""Chemical shifts: accuracy against experiment by level, and the cost of GIAO shieldings.

    python benchmarks/bench_shifts.py accuracy [LEVEL ...]   # e.g. b3lyp/def2-svp pbe0/def2-svp
    python benchmarks/bench_shifts.py cost [--basis def2-svp def2-tzvp]   # PBE0

``accuracy``: GFN2-xTB geometries of the rigid molecules of
confpop.nmr.calibration.CALIBRATION_SET, gas-phase GIAO shieldings at each level, the linear
scaling fitted by confpop.nmr.shifts.fit_scaling; prints slope, intercept, MAE, leave-one-
molecule-out MAE and the largest error per nucleus, the wall time of the whole set, and the
SCALING entries to paste into confpop/nmr/shifts.py.

``cost``: seconds per conformer (SCF + shieldings, one thread) by molecule size and basis,
and the wall time of the shieldings of one ensemble through confpop's execution layer on 1
and 2 worker processes.

Run under ``nice -n 10`` with OMP_NUM_THREADS=1, one benchmark at a time; timings on a
shared machine drift, so compare ratios measured within one run.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402


def _gfn2_geometry(smiles: str, seed: int = 11):
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from confpop.optimize import optimize_structure

    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=seed)
    return optimize_structure(mol, "gfn2")


def accuracy(levels) -> None:
    from confpop.backends.shielding import compute_shieldings
    from confpop.nmr.calibration import CALIBRATION_SET
    from confpop.nmr.shifts import calibration_table, fit_scaling

    geoms = {e["name"]: _gfn2_geometry(e["smiles"]) for e in CALIBRATION_SET}
    entries = {}
    for level in levels:
        functional, basis = level.split("/")
        t0 = time.perf_counter()
        sig = {}
        for name, mol in geoms.items():
            r = compute_shieldings([a.GetSymbol() for a in mol.GetAtoms()],
                                   mol.GetConformer().GetPositions(), functional=functional,
                                   basis=basis)
            sig[name] = (mol, r["shielding_ppm"])
        wall = time.perf_counter() - t0
        table = calibration_table(sig)
        fit = fit_scaling(table)
        for nucleus, p in fit.items():
            print(f"{level:<22} {nucleus:>4}  slope {p['slope']:8.4f}  intercept "
                  f"{p['intercept']:8.3f}  MAE {p['mae']:5.2f}  LOO-MAE {p['loo_mae']:5.2f}  "
                  f"max {p['max']:5.2f}  n {p['n']}")
        print(f"{level:<22} wall {wall:6.1f} s for {len(geoms)} molecules", flush=True)
        entries[(functional, basis)] = fit
        worst = table.assign(err=np.nan)
        for nucleus, p in fit.items():
            m = worst["nucleus"] == nucleus
            worst.loc[m, "err"] = p["intercept"] + p["slope"] * worst.loc[m, "sigma_ppm"] \
                - worst.loc[m, "measured_ppm"]
        top = worst.reindex(worst["err"].abs().sort_values(ascending=False).index).head(4)
        for row in top.itertuples(index=False):
            print(f"    largest: {row.name:<24} {row.signal:<4} {row.err:+6.2f} ppm")
    print("\nSCALING entries:")
    for key, fit in entries.items():
        print(f"    {key!r}: {{")
        for nucleus, p in fit.items():
            print(f"        {nucleus!r}: {{'slope': {p['slope']:.5f}, 'intercept': "
                  f"{p['intercept']:.4f}, 'mae': {p['mae']:.3f}, 'loo_mae': {p['loo_mae']:.3f}, "
                  f"'max': {p['max']:.3f}, 'n': {p['n']}}},")
        print("    },")


def cost(bases, only=None) -> None:
    from confpop import Ensemble
    from confpop.backends.shielding import compute_shieldings
    from confpop.nmr.shifts import conformer_shieldings

    molecules = [("methanol", "CO"), ("propan-2-ol", "CC(C)O"), ("butan-2-one", "CCC(C)=O"),
                 ("toluene", "Cc1ccccc1"), ("isopropoxybenzene", "CC(C)Oc1ccccc1")]
    if only:
        molecules = [m for m in molecules if m[0] in only]
    print(f"{'molecule':<20}{'atoms':>6}{'level':>18}{'SCF s':>9}{'shield s':>10}{'total s':>9}")
    for name, smi in molecules:
        mol = _gfn2_geometry(smi)
        symbols = [a.GetSymbol() for a in mol.GetAtoms()]
        levels = [("pbe0", b) for b in bases]
        if name == "butan-2-one":  # the two functionals of the accuracy table cost the same
            levels.append(("b3lyp", "def2-svp"))
        for functional, basis in levels:
            r = compute_shieldings(symbols, mol.GetConformer().GetPositions(),
                                   functional=functional, basis=basis)
            print(f"{name:<20}{len(symbols):>6}{functional + '/' + basis:>18}"
                  f"{r['scf_seconds']:9.1f}{r['shielding_seconds']:10.1f}"
                  f"{r['scf_seconds'] + r['shielding_seconds']:9.1f}", flush=True)
    # 1 vs 2 workers: four conformers of butan-2-one through the execution layer
    from rdkit import Chem
    from rdkit.Chem import AllChem
    mol = Chem.AddHs(Chem.MolFromSmiles("CCC(C)=O"))
    AllChem.EmbedMultipleConfs(mol, 4, randomSeed=5)
    ens = Ensemble.from_mol(mol)
    walls = {}
    for workers in (1, 2):
        t0 = time.perf_counter()
        conformer_shieldings(ens, workers=workers)
        walls[workers] = time.perf_counter() - t0
        print(f"4 conformers of butan-2-one, def2-svp, workers={workers}: {walls[workers]:.1f} s",
              flush=True)
    print(f"speed-up 1 -> 2 workers: {walls[1] / walls[2]:.2f}x")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="what", required=True)
    a = sub.add_parser("accuracy")
    a.add_argument("levels", nargs="*", default=["b3lyp/def2-svp"])
    c = sub.add_parser("cost")
    c.add_argument("--basis", nargs="+", default=["def2-svp", "def2-tzvp"])
    c.add_argument("--only", nargs="+", default=None, metavar="NAME",
                   help="only these molecules of the size series (the 1-vs-2-worker part runs always)")
    args = parser.parse_args(argv)
    if args.what == "accuracy":
        accuracy(args.levels)
    else:
        cost(args.basis, args.only)
    return 0


if __name__ == "__main__":
    sys.exit(main())
