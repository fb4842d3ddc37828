"""Duplicate removal on 1,000 conformers of a 30-heavy-atom molecule.

Prints the wall time of confpop's pruning (energy-ordered greedy search, symmetry-aware
Kabsch RMSD over heavy atoms + polar H, only pairs within the energy tolerance superposed)
and, measured in the same run, a plain double loop over all pairs with the same RMSD
function (no energy pre-filter), timed on as many pairs as fit in ``--baseline-seconds`` and
extrapolated to all pairs. Also RDKit's threaded all-pairs GetAllConformerBestRMS on a
subset, as an outside reference for the cost of one symmetric RMSD.

The molecule is an invented drug-like ester-amide (30 heavy atoms), used only as a workload.

    python benchmarks/bench_prune.py [--conformers 1000] [--baseline-seconds 20]
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolAlign

from confpop.prune import PruneSettings, automorphisms, best_rmsd, find_duplicates, rmsd_atoms
from confpop.units import convert

# invented: 30 heavy atoms, 9 rotatable bonds
SMILES = "CC(C)OC(=O)CCc1ccc(cc1)NC(=O)[C@@H](C)OCc1cccc(F)c1OC"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--conformers", type=int, default=1000)
    ap.add_argument("--baseline-seconds", type=float, default=20.0)
    args = ap.parse_args()

    mol = Chem.AddHs(Chem.MolFromSmiles(SMILES))
    print(f"molecule: {SMILES} ({mol.GetNumHeavyAtoms()} heavy atoms, {mol.GetNumAtoms()} atoms)")
    t0 = time.perf_counter()
    params = AllChem.ETKDGv3()
    params.randomSeed = 42
    params.numThreads = 0
    # half the trials twice over, so that real duplicates exist after minimization
    ids = AllChem.EmbedMultipleConfs(mol, args.conformers // 2, params)
    results = AllChem.MMFFOptimizeMoleculeConfs(mol, numThreads=0, maxIters=5000,
                                                mmffVariant="MMFF94s")
    pos = [mol.GetConformer(i).GetPositions() for i in ids]
    energies = [e for _, e in results]
    pos = pos + [p.copy() for p in pos]
    energies = np.array(energies + energies) + np.random.default_rng(0).normal(0, 0.005, len(pos))
    energies_h = convert(energies, "kcal/mol", "hartree")
    print(f"prepared {len(pos)} minimized conformers in {time.perf_counter() - t0:.1f} s")

    settings = PruneSettings()
    t0 = time.perf_counter()
    rep = find_duplicates(mol, pos, energies_h, settings)
    t_ours = time.perf_counter() - t0
    print(f"confpop find_duplicates: {t_ours:.2f} s, {len(rep.unique)} unique, "
          f"{rep.comparisons} superpositions")

    perms = automorphisms(mol, rmsd_atoms(mol))
    n = len(pos)
    total_pairs = n * (n - 1) // 2
    done = 0
    t0 = time.perf_counter()
    for i in range(n):
        for j in range(i + 1, n):
            best_rmsd(pos[i], pos[j], perms)
            done += 1
            if done % 200 == 0 and time.perf_counter() - t0 > args.baseline_seconds:
                break
        else:
            continue
        break
    t_pairs = time.perf_counter() - t0
    t_loop = t_pairs / done * total_pairs
    how = "measured" if done == total_pairs else f"extrapolated from {done} of {total_pairs} pairs"
    print(f"plain double loop over all pairs: {t_loop:.1f} s ({how})")
    print(f"ratio (double loop / confpop): {t_loop / t_ours:.0f}x")

    sub = Chem.Mol(mol)
    keep = set(list(ids)[:60])
    for conf in list(sub.GetConformers()):
        if conf.GetId() not in keep:
            sub.RemoveConformer(conf.GetId())
    heavy = Chem.RemoveHs(sub)
    t0 = time.perf_counter()
    rms = rdMolAlign.GetAllConformerBestRMS(heavy, numThreads=0)
    t_rd = time.perf_counter() - t0
    per_pair = t_rd / len(rms)
    print(f"RDKit GetAllConformerBestRMS, 60 conformers ({len(rms)} pairs, heavy atoms, threaded): "
          f"{t_rd:.2f} s = {1e3 * per_pair:.2f} ms/pair; all {total_pairs} pairs would take "
          f"{per_pair * total_pairs:.0f} s")
    print(f"confpop per superposition: {1e3 * t_pairs / done:.3f} ms")


if __name__ == "__main__":
    main()
