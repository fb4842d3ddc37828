"""Measure the per-step costs behind confpop.budget's search cost estimate.

Prints, for alkane-like chains and an invented peptide-like chain of growing size:
- seconds per trial structure of ETKDG embedding + MMFF94s relaxation (one thread);
- seconds per GFN2-xTB energy+gradient call (one OpenMP thread), gas phase.
The constants in confpop/budget.py are fitted to these numbers (power law in the number of
atoms, hydrogens included). Run: OMP_NUM_THREADS=1 python benchmarks/bench_cost.py
"""

import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402
from rdkit.Chem import AllChem  # noqa: E402

from confpop.backends import get_backend  # noqa: E402
from confpop.sampling import embed  # noqa: E402

MOLECULES = {  # invented test chains of growing size
    "C8 chain": "CCCCCCCO",
    "C16 chain": "CCCCCCCCCCCCCCCO",
    "C32 chain": "C" * 31 + "O",
    "Gly-Ala x4 (invented)": "NCC(=O)N[C@@H](C)C(=O)" * 4 + "O",
}


def per_trial(mol, n=10):
    start = time.perf_counter()
    trial, _ = embed(mol, n, seed=1, threads=1)
    props = AllChem.MMFFGetMoleculeProperties(trial, "MMFF94s")
    for conf in trial.GetConformers():
        ff = AllChem.MMFFGetMoleculeForceField(trial, props, confId=conf.GetId())
        ff.Minimize(maxIts=2000)
    return (time.perf_counter() - start) / n


def per_gradient(mol, repeats=3):
    backend = get_backend("gfn2", mol)
    xyz = mol.GetConformer().GetPositions()
    backend.compute(xyz, gradient=True)  # warm-up
    start = time.perf_counter()
    for _ in range(repeats):
        backend.compute(xyz, gradient=True)
    return (time.perf_counter() - start) / repeats


def main():
    print(f"{'molecule':<24} {'atoms':>6} {'s/trial (ETKDG+MMFF)':>22} {'s/GFN2 gradient':>16}")
    for name, smiles in MOLECULES.items():
        mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
        AllChem.EmbedMolecule(mol, randomSeed=7)
        print(f"{name:<24} {mol.GetNumAtoms():>6} {per_trial(mol):>22.4f} "
              f"{per_gradient(mol):>16.4f}", flush=True)


if __name__ == "__main__":
    main()
