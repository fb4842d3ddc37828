"""Cost and catch rate of the minimum check (symmetric saddles re-optimized off symmetry).

For small molecules whose force-field structures are often symmetric (aryl rotors,
carboxylates, esters, alkyl chains), two default GFN2 searches run, with and without the
check (``check_minima``), on the same seed. For every final conformer of both a full
numerical GFN2 Hessian is computed (confpop.frequencies; the independent arbiter) and the
conformers with an imaginary mode below -10 cm-1 are counted. Printed per molecule:

* saddles kept without the check and with it (the catch rate is 1 - after / before);
* the check's gradient calls as a share of all gradient calls of the search (optimizations
  + check), and the wall-time share of the "minimum-check" stage;
* the lowest-energy conformer and the effective free-energy gap that changed.

    python benchmarks/bench_minimum.py [--only NAME] [--seed 1]

Goal: cost <= 15 % of a default search; no saddle left that the Hessian sees.
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import confpop as cp  # noqa: E402

MOLECULES = {
    "phenylcyclohexane": ("C1CCC(CC1)c1ccccc1", None),
    "propanoate": ("CCC(=O)[O-]", "water"),
    "cumene": ("CC(C)c1ccccc1", None),
    "biphenyl": ("c1ccc(cc1)-c1ccccc1", None),
    "ethyl acetate": ("CCOC(=O)C", None),
    "pentane": ("CCCCC", None),
    "dimethylbenzamide": ("CN(C)C(=O)c1ccccc1", "chloroform"),
    "diphenylmethane": ("c1ccccc1Cc1ccccc1", None),
}


def _saddles(ens, solvent):
    out = []
    for cid in ens.ids():
        f = cp.frequencies(ens.mol, solvent=solvent, conf_id=cid)
        if f.min() < -10.0:
            out.append((cid, round(float(f.min()), 1)))
    return out


def _stage(ens, name):
    return [p for p in ens.provenance if p["step"] == name]


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--only", default=None)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    total_before = total_after = 0
    shares = []
    for name, (smiles, solvent) in MOLECULES.items():
        if args.only and name not in args.only.split(","):
            continue
        t0 = time.perf_counter()
        kw = dict(solvent=solvent, seed=args.seed, min_population=1e-4)
        off = cp.search(smiles, check_minima=False, **kw)
        on = cp.search(smiles, **kw)
        before, after = _saddles(off, solvent), _saddles(on, solvent)
        total_before += len(before)
        total_after += len(after)
        check = _stage(on, "minimum-check")[0]
        opt_calls = int(on.raw_table["gradient_calls"].sum()) - check["gradient_calls"]
        share = check["gradient_calls"] / max(1, opt_calls + check["gradient_calls"])
        t_stage = check["seconds"]
        t_all = [p for p in on.provenance if p["step"] == "summary"][0]["seconds"]
        shares.append(share)
        gap = lambda e: float(e.free_energy_gaps(298.15)["effective_gap"].max())  # noqa: E731
        print(f"{name:18s} rows {len(off):2d} -> {len(on):2d}; symmetric {check['symmetric']}, "
              f"saddles left by the check {check['saddles']}; Hessian saddles without/with "
              f"check {before} / {after}; check calls {check['gradient_calls']} = "
              f"{100 * share:.0f} % of calls, {100 * t_stage / t_all:.0f} % of wall; largest "
              f"effective gap {gap(off):.2f} -> {gap(on):.2f} kcal/mol "
              f"({time.perf_counter() - t0:.0f} s)", flush=True)
    if shares:
        print(f"\nsaddles (full Hessian) without the check {total_before}, with it {total_after}; "
              f"check cost: median {100 * sorted(shares)[len(shares) // 2]:.0f} %, "
              f"max {100 * max(shares):.0f} % of gradient calls")


if __name__ == "__main__":
    main()
