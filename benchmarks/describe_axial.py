"""Where to draw the line between an axial and an equatorial ring substituent.

For a few small molecules with six-membered rings (MMFF94s ensembles, fast), the angle
between every non-hydrogen substituent bond and the normal of its ring's Cremer-Pople mean
plane is collected, separately for chairs and for other non-planar puckers; the printed
histograms show the axial and equatorial clusters and the gap between them that fixes
confpop.describe.AXIAL_DEGREES.

Run: nice -n 10 python benchmarks/describe_axial.py [--method mmff94s]
"""

import argparse

import numpy as np

import confpop as cp
from confpop.describe import ring_puckers, ring_substituents

# N-cyclohexyl-2-hydroxybenzamide, methylcyclohexane, cis- and trans-1,4-dimethylcyclohexane,
# methyl beta-D-glucopyranoside, trans-cyclohexane-1,2-diol, N-methylpiperidine, tert-butyl
# cyclohexane (ring flips give a twist-boat), 1,1-dimethylcyclohexane
MOLECULES = ["O=C(NC1CCCCC1)c1ccccc1O", "CC1CCCCC1", "C[C@H]1CC[C@@H](C)CC1", "C[C@H]1CC[C@H](C)CC1",
             "CO[C@@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O", "O[C@@H]1CCCC[C@H]1O", "CN1CCCCC1",
             "CC(C)(C)C1CCCCC1", "CC1(C)CCCCC1"]


def _histogram(title, angles):
    angles = np.asarray(angles)
    counts, edges = np.histogram(angles, np.arange(0, 95, 5))
    print(f"{title}: {len(angles)} substituent bonds")
    for lo, c in zip(edges[:-1], counts):
        print(f"{lo:4.0f}-{lo + 5:<4.0f} {c:5d} {'#' * min(c, 80)}")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--method", default="mmff94s")
    args = parser.parse_args()
    chair, other, n_conf = [], [], 0
    for smiles in MOLECULES:
        ens = cp.search(smiles, method=args.method, seed=1, workers=1, min_population=1e-9)
        ids = ens.ids()
        n_conf += len(ids)
        shape = ring_puckers(ens.mol, ids).set_index(["conformer", "ring"])["pucker"]
        subs = ring_substituents(ens.mol, ids)
        for r in subs.itertuples():
            (chair if shape[(r.conformer, r.ring)] == "chair" else other).append(r.angle_deg)
        print(f"{smiles}: {len(ids)} conformers")
    print(f"{len(MOLECULES)} molecules, {n_conf} conformers ({args.method})")
    _histogram("chairs", chair)
    _histogram("other non-planar 6-rings", other)
    chair = np.asarray(chair)
    ax, eq = chair[chair < 45], chair[chair >= 45]
    print(f"chairs: axial {ax.min():.1f}-{ax.max():.1f}, equatorial {eq.min():.1f}-{eq.max():.1f}, "
          f"none in {ax.max():.1f}-{eq.min():.1f}")


if __name__ == "__main__":
    main()
