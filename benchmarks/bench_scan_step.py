"""How coarse may a relaxed torsion scan's grid be? Barrier and minimum errors against 5°.

For each torsion below, relaxed GFN2-xTB scans (gas phase, "tight", fitted extrema between
grid points added: ``refine=True``, the default) at steps of 10, 15, 20 and 30 degrees are
compared with a 5-degree scan of the same torsion from the same start: per step, the largest
absolute error of the barriers between neighbouring minima (forward and reverse), of the
full-rotation barrier, and of the minima's angles, with the CPU time of the scan (serial,
this process). The default step (``confpop.settings.ScanSettings.step``) is chosen from
these figures.

    nice -n 10 python benchmarks/bench_scan_step.py [--steps 10,15,20,30] [--only butane]

``--guesses A,B`` instead compares two initial Hessians of the scan's optimizations
(``confpop.optimize.DEFAULT_HESSIAN_GUESS`` and ``CONSTRAINED_HESSIAN_GUESS``) at the default step, torsion by
torsion (A then B for each torsion, in one run): the largest energy difference between the two profiles, the barrier differences,
the gradient calls (they do not drift with the machine's load) and the CPU ratio B / A.

Molecules: textbook torsions (n-butane's C2-C3, biphenyl's inter-ring bond, methyl
acetate's ester C-O, N-methylacetamide's amide C-N) and one invented hydroxy-ester's
C-C bond.
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import confpop as cp  # noqa: E402
import confpop.settings  # noqa: E402,F401
from confpop.molecule import load_molecule  # noqa: E402

# name: (SMILES, bond atoms (0-based heavy atoms), what it is)
TORSIONS = {
    "butane": ("CCCC", (1, 2), "n-butane C2-C3 (textbook)"),
    "biphenyl": ("c1ccccc1-c1ccccc1", (5, 6), "biphenyl inter-ring bond (textbook)"),
    "methyl acetate": ("CC(=O)OC", (1, 3), "ester C(=O)-O (textbook)"),
    "N-methylacetamide": ("CC(=O)NC", (1, 3), "amide C(=O)-N (textbook)"),
    "hydroxy-ester": ("CCOC(=O)C[C@H](O)CCCOC", (5, 6), "invented hydroxy-ester C6-C7"),
}


def _scan(smiles, bond, step):
    from confpop.torsion import torsion_for_bond

    mol = load_molecule(smiles)
    atoms = torsion_for_bond(mol, *bond).atoms
    t0 = time.process_time()
    profile = cp.scan_torsion(mol, atoms, method="gfn2", step=step)
    return profile, time.process_time() - t0


def _angle_gap(a, b):
    return abs((a - b + 180.0) % 360.0 - 180.0)


def _compare(profile, reference):
    """Largest |error| of the barriers (matched by their minima), the full-rotation barrier
    and the minima's angles, against the reference profile."""
    ref_b, b = reference.barriers(), profile.barriers()
    worst_barrier = 0.0
    matched = 0
    for r in ref_b.itertuples():
        near = [x for x in b.itertuples() if _angle_gap(x.from_min, r.from_min) < 25
                and _angle_gap(x.to_min, r.to_min) < 25]
        if not near:
            continue
        matched += 1
        x = near[0]
        worst_barrier = max(worst_barrier, abs(x.barrier_forward - r.barrier_forward),
                            abs(x.barrier_reverse - r.barrier_reverse))
    mins_ref = reference.minima()["angle"].to_numpy()
    mins = profile.minima()["angle"].to_numpy()
    worst_angle = max((min(_angle_gap(a, m) for m in mins) for a in mins_ref), default=np.nan)
    full = abs(profile.full_rotation_barrier() - reference.full_rotation_barrier())
    return worst_barrier, matched, len(ref_b), full, worst_angle


def compare_guesses(guesses, only):
    """Two initial Hessians for the scan's optimizations, at the default step."""
    import confpop.optimize as copt
    from bench_search import Meter  # counts the xtb-python backends' gradient calls

    meter = Meter()
    rows = []
    for name, (smiles, bond, what) in TORSIONS.items():
        if only and not any(p.strip() in name for p in only.split(",")):
            continue
        out, calls = {}, {}
        for guess in guesses:
            copt.DEFAULT_HESSIAN_GUESS = guess
            if hasattr(copt, "CONSTRAINED_HESSIAN_GUESS"):  # a scan's points are constrained
                copt.CONSTRAINED_HESSIAN_GUESS = guess
            meter.reset()
            out[guess] = _scan(smiles, bond, cp.settings.SCAN_DEFAULTS.step)
            calls[guess] = len(meter.gradient_times)
        (pa, ca), (pb, cb) = out[guesses[0]], out[guesses[1]]
        na, nb = calls[guesses[0]], calls[guesses[1]]
        same_grid = len(pa.angles) == len(pb.angles) and np.allclose(pa.angles, pb.angles)
        d_profile = float(np.max(np.abs(pa.energies - pb.energies))) if same_grid else np.nan
        worst, matched, total, full, angle = _compare(pb, pa)
        rows.append((name, d_profile, worst, matched, total, angle, cb / ca, na, nb))
        print(f"{name} ({what}): profiles differ by up to {d_profile:.3f} kcal/mol, barriers "
              f"{worst:.3f} ({matched}/{total} matched), minima {angle:.1f} deg; gradient calls "
              f"{na} vs {nb}; CPU {guesses[1]} / {guesses[0]} = {cb / ca:.2f} ({ca:.1f} s vs "
              f"{cb:.1f} s)", flush=True)
    print()
    print(f"{'torsion':20s} {'profile |dE|':>12} {'barrier |dE|':>12} {'matched':>8} "
          f"{'min angle':>9} {'calls A':>7} {'calls B':>7} {'CPU B/A':>7}")
    for r in rows:
        print(f"{r[0]:20s} {r[1]:>12.3f} {r[2]:>12.3f} {f'{r[3]}/{r[4]}':>8} {r[5]:>9.1f} "
              f"{r[7]:>7d} {r[8]:>7d} {r[6]:>7.2f}")
    print(f"A = {guesses[0]}, B = {guesses[1]}; |dE| in kcal/mol")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", default="10,15,20,30")
    ap.add_argument("--only", default=None, help="torsion names containing this (comma-separated)")
    ap.add_argument("--guesses", default=None,
                    help="two initial Hessians to compare at the default step, e.g. "
                         "lindh-primitive,lindh-primitive-soft")
    args = ap.parse_args()
    if args.guesses:
        guesses = [g.strip() for g in args.guesses.split(",")]
        if len(guesses) != 2:
            raise SystemExit(f"--guesses: two names, got {args.guesses!r}")
        compare_guesses(guesses, args.only)
        return
    steps = [float(s) for s in args.steps.split(",")]
    print(f"load average at start {os.getloadavg()[0]:.2f}", flush=True)
    rows = []
    for name, (smiles, bond, what) in TORSIONS.items():
        if args.only and not any(p.strip() in name for p in args.only.split(",")):
            continue
        reference, ref_cpu = _scan(smiles, bond, 5.0)
        print(f"{name} ({what}): 5-degree reference, {len(reference.angles)} points, "
              f"{ref_cpu:.1f} s CPU; minima at "
              + ", ".join(f"{a:.0f}" for a in reference.minima()["angle"])
              + f"; full-rotation barrier {reference.full_rotation_barrier():.2f} kcal/mol",
              flush=True)
        for step in steps:
            profile, cpu = _scan(smiles, bond, step)
            worst, matched, total, full, angle = _compare(profile, reference)
            rows.append((name, step, worst, matched, total, full, angle, cpu, ref_cpu))
            print(f"  step {step:g}: barriers worst |dE| {worst:.3f} kcal/mol ({matched}/{total} "
                  f"matched), full rotation |dE| {full:.3f}, minima angles worst {angle:.1f} deg, "
                  f"{cpu:.1f} s CPU ({cpu / ref_cpu:.2f} of the 5-degree scan)", flush=True)
    print()
    print(f"{'torsion':20s} {'step':>5} {'barrier |dE|':>12} {'matched':>8} {'full |dE|':>9} "
          f"{'min angle':>9} {'CPU/ref':>7}")
    for r in rows:
        print(f"{r[0]:20s} {r[1]:>5g} {r[2]:>12.3f} {f'{r[3]}/{r[4]}':>8} {r[5]:>9.3f} "
              f"{r[6]:>9.1f} {r[7] / r[8]:>7.2f}")
    print("|dE| in kcal/mol against the 5-degree scan; min angle: worst distance (degrees) of a "
          "reference minimum to the nearest minimum of the coarser scan")
    print(f"load average at end {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
