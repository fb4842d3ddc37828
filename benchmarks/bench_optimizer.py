"""Benchmark: GFN2 geometry optimization with geomeTRIC (ours) vs Cartesian L-BFGS-B.

For each test molecule, several ETKDG conformers are optimized with GFN2-xTB (xtb-python)
by (a) geomeTRIC/TRIC at the default "tight" preset, (b) geomeTRIC at "verytight" (the
reference energy), and (c) scipy's L-BFGS-B in Cartesian coordinates with the same gradient
and energy thresholds. Printed: gradient calls per optimization (median), final-energy
differences to the verytight reference (with the heavy-atom RMSD between the tight and
verytight end points: a large one means the two runs ended at different stationary points,
e.g. tight stopped on a saddle that verytight slid off), CPU time per optimization and the share spent in
the engine, and the cost of one GFN2 single point with each engine.

Target (DESIGN.md): median <= 60 gradient calls at ~48 atoms; tight within 0.05 kcal/mol of
verytight.

Run:  OMP_NUM_THREADS=1 python benchmarks/bench_optimizer.py [--conformers 5] [--mmff]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402
from rdkit.Chem import AllChem, rdMolAlign  # noqa: E402

from confpop.backends import get_backend  # noqa: E402
from confpop.optimize import optimize_positions  # noqa: E402
from confpop.units import convert  # noqa: E402

# Invented molecules (not taken from any data set): flexible ester/amide chains.
MOLECULES = {
    "invented ester-amide A": "CCOC(=O)CCC(=O)NCCOC",             # 31 atoms
    "invented ester-amide B": "CC(C)COC(=O)CCCC(=O)N(C)CCOCC",    # 46 atoms
}


def kcal(hartree: float) -> float:
    return convert(hartree, "hartree", "kcal/mol")


class Timed:
    """Counts CPU seconds spent inside backend.compute."""

    def __init__(self, backend):
        self.backend = backend
        self.seconds = 0.0
        inner = backend.compute

        def compute(*args, **kwargs):
            t0 = time.process_time()
            try:
                return inner(*args, **kwargs)
            finally:
                self.seconds += time.process_time() - t0

        backend.compute = compute


def conformers(smiles: str, n: int, seed: int, mmff: bool) -> tuple[Chem.Mol, list[np.ndarray]]:
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    params = AllChem.ETKDGv3()
    params.randomSeed = seed
    ids = list(AllChem.EmbedMultipleConfs(mol, n, params))
    if mmff:
        AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)
    return mol, [mol.GetConformer(i).GetPositions() for i in ids]


def heavy_atom_rmsd(mol, a, b) -> float:
    """Best-fit RMSD (angstrom, heavy atoms, symmetry-aware) between two geometries."""
    frames = []
    for pos in (a, b):
        copy = Chem.Mol(mol)
        copy.RemoveAllConformers()
        conf = Chem.Conformer(mol.GetNumAtoms())
        for i, xyz in enumerate(pos):
            conf.SetAtomPosition(i, xyz.tolist())
        copy.AddConformer(conf)
        frames.append(Chem.RemoveHs(copy))
    return rdMolAlign.GetBestRMS(frames[0], frames[1])


def single_point_cost(mol, x, method, repeats=10):
    backend = get_backend(method, mol)
    backend.compute(x)  # engine set-up excluded
    t0 = time.process_time()
    for _ in range(repeats):
        backend.compute(x)
    return (time.process_time() - t0) / repeats


def run(n_conformers: int, seed: int, mmff: bool) -> None:
    print(f"GFN2-xTB (xtb-python), {n_conformers} ETKDG conformers per molecule, seed {seed}, "
          f"start: {'MMFF94-relaxed' if mmff else 'raw ETKDG'}")
    header = (f"{'molecule':<24}{'atoms':>6}{'conf':>5}{'calls tight':>12}{'calls vtight':>13}"
              f"{'calls lbfgs':>12}{'dE tight':>10}{'dE lbfgs':>10}{'cpu s tight':>12}"
              f"{'engine %':>9}{'rmsd t-vt':>10}")
    summary = []
    for name, smiles in MOLECULES.items():
        mol, starts = conformers(smiles, n_conformers, seed, mmff)
        n_atoms = mol.GetNumAtoms()
        sp = {m: single_point_cost(mol, starts[0], m) for m in ("gfn2", "tblite-gfn2")}
        print(f"\n{name}: {smiles}, {n_atoms} atoms; GFN2 single point + gradient: "
              f"xtb-python {sp['gfn2'] * 1000:.0f} ms, tblite {sp['tblite-gfn2'] * 1000:.0f} ms "
              f"(CPU)")
        print(header)
        rows = []
        for k, x in enumerate(starts):
            backend = get_backend("gfn2", mol)
            timer = Timed(backend)
            t0 = time.process_time()
            tight = optimize_positions(backend, x, convergence="tight")
            cpu_tight = time.process_time() - t0
            engine_share = timer.seconds / cpu_tight
            ref = optimize_positions(get_backend("gfn2", mol), x, convergence="verytight")
            lbfgs = optimize_positions(get_backend("gfn2", mol), x, convergence="tight",
                                       engine="lbfgs", max_steps=2000)
            row = dict(tight=tight.gradient_calls, vtight=ref.gradient_calls,
                       lbfgs=lbfgs.gradient_calls, de_tight=kcal(tight.energy - ref.energy),
                       de_lbfgs=kcal(lbfgs.energy - ref.energy), cpu=cpu_tight,
                       share=engine_share, rmsd=heavy_atom_rmsd(mol, tight.positions,
                                                                ref.positions),
                       ok=tight.converged and ref.converged and lbfgs.converged)
            rows.append(row)
            flag = "" if row["ok"] else "  (not all converged)"
            print(f"{name:<24}{n_atoms:>6}{k:>5}{row['tight']:>12}{row['vtight']:>13}"
                  f"{row['lbfgs']:>12}{row['de_tight']:>10.4f}{row['de_lbfgs']:>10.4f}"
                  f"{row['cpu']:>12.1f}{100 * row['share']:>9.0f}{row['rmsd']:>10.3f}{flag}")
        med = {key: statistics.median(r[key] for r in rows)
               for key in ("tight", "vtight", "lbfgs", "cpu", "share")}
        worst_tight = max(abs(r["de_tight"]) for r in rows)
        lbfgs_range = (min(r["de_lbfgs"] for r in rows), max(r["de_lbfgs"] for r in rows))
        summary.append((name, n_atoms, med, worst_tight, lbfgs_range))
    print("\nSummary (medians over conformers; dE = E - E(verytight), kcal/mol)")
    print(f"{'molecule':<24}{'atoms':>6}{'tight':>7}{'vtight':>8}{'lbfgs':>7}"
          f"{'max|dE tight|':>15}{'dE lbfgs min..max':>20}{'cpu s/opt':>10}{'engine %':>9}")
    for name, n_atoms, med, worst, (lo, hi) in summary:
        print(f"{name:<24}{n_atoms:>6}{med['tight']:>7.0f}{med['vtight']:>8.0f}"
              f"{med['lbfgs']:>7.0f}{worst:>15.4f}{f'{lo:.3f}..{hi:.3f}':>20}"
              f"{med['cpu']:>10.1f}{100 * med['share']:>9.0f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--conformers", type=int, default=5)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--mmff", action="store_true", help="MMFF94-relax the starts first")
    args = parser.parse_args()
    run(args.conformers, args.seed, args.mmff)


if __name__ == "__main__":
    main()
