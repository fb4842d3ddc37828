"""Where to draw the line between "same rotamer" and "different rotamer" for a torsion.

For a few small molecules (GFN2-xTB conformers in chloroform), every pairwise circular
difference of every rotatable torsion (canonical atoms, symmetric tops on their period) is
collected; the printed histogram shows the within-well scatter and the between-well gap that
fix confpop.describe.DISTINGUISHING_DEGREES. Run: python benchmarks/describe_threshold.py
"""

import numpy as np

import confpop as cp
from confpop.describe import distinguishing_torsions

MOLECULES = ["CN(C)C(=O)[C@@H](C)OC", "COC(=O)C[C@H](O)CCF", "OCC[C@H](C)O", "CCCCOC(C)=O",
             "CC(C)C[C@H](N)C(=O)OC"]

def main():
    diffs = []
    for smiles in MOLECULES:
        ens = cp.search(smiles, method="gfn2", solvent="chloroform", seed=1, workers=1)
        for t in distinguishing_torsions(ens.mol, ens.ids(), threshold=-1.0):
            if "*" in t.label:  # symmetric tops: compared on their own period, left out here
                continue
            v = np.array(list(t.values.values()))
            d = np.abs((v[:, None] - v[None, :] + 180.0) % 360.0 - 180.0)
            iu = np.triu_indices(len(v), 1)
            diffs.extend(d[iu].tolist())
        print(smiles, len(ens), "conformers", flush=True)
    diffs = np.array(diffs)
    edges = np.arange(0, 190, 10)
    counts, _ = np.histogram(diffs, edges)
    for lo, c in zip(edges[:-1], counts):
        print(f"{lo:4.0f}-{lo + 10:<4.0f} {c:5d} {'#' * min(c, 80)}")


if __name__ == "__main__":
    main()
