"""Numerical GFN2 Hessian: wall time serially and with two workers, and agreement with ASE.

Prints figures, asserts nothing. Run from the repository root:

    OMP_NUM_THREADS=1 python benchmarks/bench_hessian.py

1. A 33-atom molecule (an invented-looking arylpropanoic acid, C13H18O2): the 6N = 198
   displaced GFN2 gradients serially in this process, through ``workers=2`` (a local
   process pool made for the call, start-up included), and through a two-process pool
   that is already warm (passed as ``executor=``). The ratio is serial / parallel.
2. Our harmonic frequencies of ethanol against ase.vibrations.Vibrations driven by
   xtb-python's ASE calculator at the same geometry: largest deviation in cm⁻¹.

On a 2-core machine shared with other work the parallel ratio reflects the load; the
machine load (1-minute average) is printed with the figures.
"""

from __future__ import annotations

import os
import time

os.environ.setdefault("OMP_NUM_THREADS", "1")


def _load() -> str:
    try:
        return f"{os.getloadavg()[0]:.1f}"
    except OSError:
        return "n/a"


def main() -> None:
    from concurrent.futures import ProcessPoolExecutor

    import numpy as np
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from confpop.execution import START_METHOD
    from confpop.optimize import optimize_structure
    from confpop.vibrations import atomic_masses, harmonic_analysis, hessian

    import multiprocessing

    mol = Chem.AddHs(Chem.MolFromSmiles("CC(C)Cc1ccc(cc1)C(C)C(=O)O"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    AllChem.MMFFOptimizeMolecule(mol)
    n = mol.GetNumAtoms()
    print(f"Hessian of a {n}-atom molecule with GFN2 ({6 * n} gradients), load {_load()}")

    t = time.perf_counter()
    h_serial = hessian(mol, "gfn2")
    serial = time.perf_counter() - t
    print(f"  serial                         {serial:7.2f} s")

    t = time.perf_counter()
    h_pool = hessian(mol, "gfn2", workers=2)
    pooled = time.perf_counter() - t
    print(f"  workers=2 (new pool)           {pooled:7.2f} s   ratio {serial / pooled:.2f}")

    ctx = multiprocessing.get_context(START_METHOD)
    with ProcessPoolExecutor(2, mp_context=ctx) as pool:
        list(pool.map(abs, [1, 2]))  # start the workers
        hessian(_small(), "gfn2", executor=pool, n_chunks=2)  # warm the engine import
        t = time.perf_counter()
        h_warm = hessian(mol, "gfn2", executor=pool)
        warm = time.perf_counter() - t
    print(f"  2-process pool, already warm   {warm:7.2f} s   ratio {serial / warm:.2f}  (load {_load()})")
    print(f"  max |H_parallel - H_serial|    {max(np.abs(h_pool - h_serial).max(), np.abs(h_warm - h_serial).max()):.1e} hartree/bohr^2")

    # ---- ours vs ASE
    from ase import Atoms
    from ase import units as ase_units
    from ase.vibrations import Vibrations
    from xtb.ase.calculator import XTB
    import tempfile

    eth = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    AllChem.EmbedMolecule(eth, randomSeed=1)
    eth = optimize_structure(eth, "gfn2", convergence="verytight")
    ours = harmonic_analysis(eth, "gfn2").frequencies
    atoms = Atoms(numbers=[a.GetAtomicNum() for a in eth.GetAtoms()],
                  positions=eth.GetConformer().GetPositions(), masses=atomic_masses(eth))
    atoms.calc = XTB(method="GFN2-xTB")
    with tempfile.TemporaryDirectory() as tmp:
        vib = Vibrations(atoms, name=os.path.join(tmp, "vib"), delta=0.01, nfree=2)
        vib.run()
        e = vib.get_energies()
    theirs = np.sort([x.real if abs(x.imag) < 1e-12 else -x.imag for x in e])
    theirs = np.array(theirs) / ase_units.invcm
    theirs = theirs[-len(ours):]
    dev = np.abs(ours - theirs)
    print(f"ethanol GFN2 frequencies, ours vs ASE Vibrations (xtb-python calculator, 0.01 A):")
    print(f"  max deviation {dev.max():.2f} cm-1 (mode at {ours[dev.argmax()]:.1f} cm-1), "
          f"mean {dev.mean():.2f} cm-1 over {len(ours)} modes")


def _small():
    from rdkit import Chem
    from rdkit.Chem import AllChem

    m = Chem.AddHs(Chem.MolFromSmiles("O"))
    AllChem.EmbedMolecule(m, randomSeed=1)
    return m


if __name__ == "__main__":
    main()
