"""Where to draw the line between "same rotamer" and "different rotamer" for a torsion.

For a few small molecules (GFN2-xTB conformers in chloroform), every pairwise circular
difference of every rotatable torsion (canonical atoms; a torsion with a symmetric top at an
end, marked "*", on its period: 120 degrees for a CH3 end, 360/lcm(n1, n2) with two) is
collected; the printed histogram shows the within-well scatter and the between-well gap that
fix confpop.describe.DISTINGUISHING_DEGREES, first for every torsion, then for the
symmetric-top ones alone.

Run: nice -n 10 python benchmarks/describe_threshold.py [--store FILE.sqlite]
(the store keeps finished GFN2 calculations, so an interrupted run resumes)
"""

import argparse

import numpy as np

import confpop as cp
from confpop.describe import distinguishing_torsions

MOLECULES = ["CN(C)C(=O)[C@@H](C)OC", "COC(=O)C[C@H](O)CCF", "OCC[C@H](C)O", "CCCCOC(C)=O",
             "CC(C)C[C@H](N)C(=O)OC"]

def _histogram(title, diffs):
    diffs = np.array(diffs)
    edges = np.arange(0, 190, 10)
    counts, _ = np.histogram(diffs, edges)
    print(f"{title}: {len(diffs)} pairwise differences")
    for lo, c in zip(edges[:-1], counts):
        print(f"{lo:4.0f}-{lo + 10:<4.0f} {c:5d} {'#' * min(c, 80)}")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--store", default=None)
    args = parser.parse_args()
    diffs, top_diffs, n_conf = [], [], 0
    for smiles in MOLECULES:
        ens = cp.search(smiles, method="gfn2", solvent="chloroform", seed=1, workers=1,
                        store=args.store)
        n_conf += len(ens)
        for t in distinguishing_torsions(ens.mol, ens.ids(), threshold=-1.0):
            v = np.array(list(t.values.values()))
            p = t.period  # 360, or the symmetric-top period
            d = np.abs((v[:, None] - v[None, :] + p / 2) % p - p / 2)
            iu = np.triu_indices(len(v), 1)
            diffs.extend(d[iu].tolist())
            if "*" in t.label:
                top_diffs.extend(d[iu].tolist())
        print(smiles, len(ens), "conformers", flush=True)
    print(f"{len(MOLECULES)} molecules, {n_conf} conformers")
    _histogram("every torsion (symmetric tops on their period)", diffs)
    _histogram("symmetric-top torsions alone", top_diffs)


if __name__ == "__main__":
    main()
