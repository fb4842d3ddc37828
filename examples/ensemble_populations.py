"""Invented scenario: which shapes of a fluorinated hydroxy-ester matter at 0, 25 and 50 °C?

A (fictional) process group makes methyl (3S)-5-fluoro-3-hydroxypentanoate as an
intermediate and wants to know which conformers its variable-temperature NMR spectra
average over. The molecule, the project and the question are invented for this example.

    python examples/ensemble_populations.py [--method gfn2|mmff94s] [--solvent chloroform]
"""

from __future__ import annotations

import argparse

import confpop as cp

SMILES = "COC(=O)C[C@H](O)CCF"  # invented scenario's intermediate
TEMPERATURES = [273.15, 298.15, 323.15]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--method", default="gfn2")
    ap.add_argument("--solvent", default="chloroform")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    solvent = None if args.method.startswith(("mmff", "uff")) else args.solvent

    ens = cp.search(SMILES, method=args.method, solvent=solvent, seed=args.seed)
    pops = ens.populations(TEMPERATURES)
    rel = ens.energies("kcal/mol")
    print(f"{ens.name}: {len(ens)} conformers ({args.method}{', ' + solvent if solvent else ''})")
    print(f"{'conf':>4} {'dE/kcal':>8} {'g':>2} " + " ".join(f"{t:>8.2f}K" for t in TEMPERATURES))
    for cid in pops.index[:8]:
        print(f"{cid:>4} {rel[cid]:>8.2f} {ens.degeneracy[cid]:>2} "
              + " ".join(f"{pops.loc[cid, t]:>9.3f}" for t in TEMPERATURES))
    for t in TEMPERATURES:
        top = pops[t].sort_values(ascending=False)
        share = top.cumsum()
        n90 = int((share < 0.9).sum()) + 1
        print(f"{t:.2f} K: effective number of conformers {ens.effective_count(t):.1f}; "
              f"{n90} conformers hold 90 % of the population")
    print("Populations rest on GFN2-xTB energies (typical error 0.5-1.5 kcal/mol): treat the "
          "ranking of conformers within ~1 kcal/mol as uncertain and check against NMR.")


if __name__ == "__main__":
    main()
