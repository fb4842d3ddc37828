"""Benchmark: GFN2 geometry optimizers compared on the same starts, interleaved.

Starts: MMFF94s-relaxed ETKDG conformers (fixed seed) of invented flexible molecules, each
optimized with GFN2-xTB (xtb-python) in the gas phase and in chloroform (GBSA). For every
start, all candidates run one after the other (the order rotates from start to start, so a
burst of load on the shared machine does not always hit the same candidate):

``geometric (before)``
    geomeTRIC/TRIC with geomeTRIC's own coordinate classes (the engine before the
    vectorized coordinates; same steps, same result).
``geometric-tric``, ``geometric-dlc``, ``geometric``
    confpop's engines: geomeTRIC with vectorized primitive coordinates, TRIC, DLC, or
    the default (DLC for a molecule in one piece, TRIC for several fragments).
``lbfgs``
    scipy's L-BFGS-B in Cartesian coordinates (confpop's ``engine="lbfgs"``).
``ase-bfgs``, ``ase-lbfgs``, ``ase-bfgs-linesearch``, ``ase-fire``, ``ase-precon``
    ASE's optimizers (``PreconLBFGS`` with the ``Exp`` preconditioner) driving the same
    backend through a small ASE calculator. They stop when the "tight" criteria hold:
    largest and RMS atomic gradient below gmax/grms (fmax = gmax in eV/angstrom), and the
    last step moved no atom more than dmax (RMS drms) and changed the energy by less than
    ``energy``.

Reference: geomeTRIC/TRIC (``geometric-tric``) at "verytight" from the same start. Printed
per start: gradient calls, wall and CPU seconds (``time.process_time``), the share of CPU
spent in the engine, E - E(reference) in kcal/mol and the heavy-atom RMSD to the reference
end point; then per candidate the medians, the energy error range, and the speed-up over
``geometric (before)`` (ratio of medians; and the median of the per-start ratios). A
candidate is acceptable only if every final energy is within 0.05 kcal/mol of the reference
or below it (DESIGN.md). When a confpop engine ends higher, a diagnosis follows: the same
engine at "verytight" from the same start, and the reference engine at "verytight" from the
candidate's end point (if that does not go lower by more than 0.05 kcal/mol, the candidate
found a separate minimum rather than stopping early on a flat slope).

Results of this script are summarized in the docstring of :mod:`confpop.optimize`
(all candidates: ``--conformers 2 --seed 7``, about 30 min; geomeTRIC variants only, about
12 min: ``--conformers 4 --seed 11 --candidates "geometric (before),geometric-tric,geometric"``).

Run:  OMP_NUM_THREADS=1 python benchmarks/bench_optimizer.py [--conformers 2] [--seed 7]
      [--candidates geometric,geometric-dlc] [--molecules amide-22,ester-amide-46]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
import warnings

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402
from rdkit.Chem import AllChem, rdMolAlign  # noqa: E402

import confpop.optimize as optimize_module  # noqa: E402
from confpop.backends import get_backend  # noqa: E402
from confpop.optimize import CONVERGENCE_PRESETS, optimize_positions  # noqa: E402
from confpop.units import BOHR_ANGSTROM, UNITS, convert  # noqa: E402

# Invented molecules (not taken from any data set): flexible amide and ester-amide chains.
MOLECULES = {
    "amide-22": "CC(=O)N(C)CCOC",                          # 22 atoms
    "ester-amide-31": "CCOC(=O)CCC(=O)NCCOC",              # 31 atoms
    "ester-amide-46": "CC(C)COC(=O)CCCC(=O)N(C)CCOCC",     # 46 atoms
}
MEDIA = (None, "chloroform")
ACCEPT_KCAL = 0.05


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


def conformers(smiles: str, n: int, seed: int) -> tuple[Chem.Mol, list[np.ndarray]]:
    """``n`` ETKDG conformers (seeded), each relaxed with MMFF94s."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    params = AllChem.ETKDGv3()
    params.randomSeed = seed
    ids = list(AllChem.EmbedMultipleConfs(mol, n, params))
    AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000, mmffVariant="MMFF94s")
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


# --- candidates -------------------------------------------------------------------------

def run_confpop(backend, start, engine, accelerate=True):
    optimize_module._ACCELERATE_GEOMETRIC = accelerate
    try:
        res = optimize_positions(backend, start, convergence="tight", engine=engine,
                                 max_steps=2000 if engine == "lbfgs" else None)
    finally:
        optimize_module._ACCELERATE_GEOMETRIC = True
    return res.energy, res.positions, res.gradient_calls, res.converged


def run_ase(backend, start, kind, max_steps=1000):
    """ASE optimizer ``kind`` on ``backend`` with confpop's "tight" criteria (see above)."""
    from ase import Atoms
    from ase.calculators.calculator import Calculator, all_changes
    from ase.optimize import BFGS, FIRE, LBFGS, BFGSLineSearch
    from ase.optimize.precon import Exp, PreconLBFGS

    crit = CONVERGENCE_PRESETS["tight"]
    ev = UNITS["eV"]
    cache = {"key": None, "result": None, "calls": 0}

    class BackendCalculator(Calculator):
        implemented_properties = ["energy", "forces"]

        def calculate(self, atoms=None, properties=("energy",), system_changes=all_changes):
            super().calculate(atoms, properties, system_changes)
            key = self.atoms.positions.tobytes()
            if key != cache["key"]:
                cache["result"] = backend.compute(self.atoms.positions.copy(), gradient=True)
                cache["key"] = key
                cache["calls"] += 1
            result = cache["result"]
            self.results = {"energy": result.energy * ev, "forces": -result.gradient * ev}

    atoms = Atoms(numbers=backend.numbers, positions=start.copy())
    atoms.calc = BackendCalculator()
    if kind == "ase-precon":
        # the Exp preconditioner estimates its length scale from the cell: give a box
        atoms.set_cell(np.diag(np.ptp(start, axis=0) + 10.0))
        atoms.pbc = False
        opt = PreconLBFGS(atoms, precon=Exp(), logfile=None)
    else:
        opt = {"ase-bfgs": BFGS, "ase-lbfgs": LBFGS, "ase-bfgs-linesearch": BFGSLineSearch,
               "ase-fire": FIRE}[kind](atoms, logfile=None)
    previous = None
    converged = False
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in opt.irun(fmax=0.0, steps=max_steps):  # our criteria decide
            x = atoms.positions.copy()
            energy = atoms.get_potential_energy() / ev
            grad = -atoms.get_forces() / ev * BOHR_ANGSTROM  # hartree/bohr
            per_atom = np.linalg.norm(grad, axis=1)
            ok = per_atom.max() < crit["gmax"] and np.sqrt(np.mean(per_atom ** 2)) < crit["grms"]
            if previous is not None:
                moved = np.linalg.norm(x - previous[0], axis=1)
                ok = ok and moved.max() < crit["dmax"] and \
                    np.sqrt(np.mean(moved ** 2)) < crit["drms"] and \
                    abs(energy - previous[1]) < crit["energy"]
            else:
                ok = False
            if ok:
                converged = True
                break
            previous = (x, energy)
    return atoms.get_potential_energy() / ev, atoms.positions.copy(), cache["calls"], converged


CANDIDATES = {
    "geometric (before)": lambda b, x: run_confpop(b, x, "geometric-tric", accelerate=False),
    "geometric-tric": lambda b, x: run_confpop(b, x, "geometric-tric"),
    "geometric": lambda b, x: run_confpop(b, x, "geometric"),
    "geometric-dlc": lambda b, x: run_confpop(b, x, "geometric-dlc"),
    "lbfgs": lambda b, x: run_confpop(b, x, "lbfgs"),
    "ase-bfgs": lambda b, x: run_ase(b, x, "ase-bfgs"),
    "ase-lbfgs": lambda b, x: run_ase(b, x, "ase-lbfgs"),
    "ase-bfgs-linesearch": lambda b, x: run_ase(b, x, "ase-bfgs-linesearch"),
    "ase-fire": lambda b, x: run_ase(b, x, "ase-fire"),
    "ase-precon": lambda b, x: run_ase(b, x, "ase-precon"),
}
BASELINE = "geometric (before)"
REFERENCE = "geometric-tric"  # at "verytight": the reference before this benchmark's changes
ENGINES = {"geometric (before)": "geometric-tric", "geometric-tric": "geometric-tric",
           "geometric": "geometric", "geometric-dlc": "geometric-dlc", "lbfgs": "lbfgs"}


def diagnose(mol, solvent, start, positions, energy, engine, ref) -> None:
    """Stopped early, or a different minimum? Rerun the engine at verytight from the start,
    and the reference engine at verytight from the candidate's end point."""
    b = get_backend("gfn2", mol, solvent=solvent)
    own = optimize_positions(b, start, convergence="verytight", engine=engine,
                             max_steps=2000 if engine == "lbfgs" else None)
    stay = optimize_positions(b, positions, convergence="verytight", engine=REFERENCE)
    early = kcal(energy - stay.energy) >= ACCEPT_KCAL
    verdict = "stopped early" if early else "a separate minimum"
    print(f"{'':<30}  diagnosis: {engine} verytight dE {kcal(own.energy - ref.energy):.4f} "
          f"(rmsd to its tight end {heavy_atom_rmsd(mol, own.positions, positions):.3f}); "
          f"geomeTRIC verytight from the end point: {stay.gradient_calls} calls, moves "
          f"{heavy_atom_rmsd(mol, stay.positions, positions):.3f} A, "
          f"energy {kcal(stay.energy - energy):+.4f} -> {verdict}", flush=True)


def run(n_conformers: int, seed: int, names: list[str], molecules: list[str]) -> None:
    print(f"GFN2-xTB (xtb-python); {n_conformers} MMFF94s-relaxed ETKDG conformers per "
          f"molecule (seed {seed}); gas and chloroform (GBSA); reference: geomeTRIC "
          f"verytight; dE in kcal/mol; times in seconds per optimization")
    print(f"{'start':<30}{'candidate':<22}{'calls':>6}{'wall':>8}{'cpu':>8}{'engine%':>8}"
          f"{'dE':>9}{'rmsd':>7}  conv")
    rows = []
    k = 0
    for name in molecules:
        mol, starts = conformers(MOLECULES[name], n_conformers, seed)
        for solvent in MEDIA:
            backend = get_backend("gfn2", mol, solvent=solvent)
            # warm-up: library imports and engine set-up stay out of the timings
            optimize_positions(backend, starts[0], convergence="loose")
            for c, start in enumerate(starts):
                label = f"{name} {solvent or 'gas'} #{c}"
                ref = optimize_positions(get_backend("gfn2", mol, solvent=solvent), start,
                                         convergence="verytight", engine=REFERENCE)
                order = names[k % len(names):] + names[:k % len(names)]
                k += 1
                for cand in order:
                    b = get_backend("gfn2", mol, solvent=solvent)
                    timer = Timed(b)
                    w0, c0 = time.perf_counter(), time.process_time()
                    energy, positions, calls, converged = CANDIDATES[cand](b, start)
                    wall, cpu = time.perf_counter() - w0, time.process_time() - c0
                    row = dict(start=label, cand=cand, calls=calls, wall=wall, cpu=cpu,
                               engine=timer.seconds / cpu, de=kcal(energy - ref.energy),
                               rmsd=heavy_atom_rmsd(mol, positions, ref.positions),
                               converged=converged)
                    rows.append(row)
                    print(f"{label:<30}{cand:<22}{calls:>6}{wall:>8.2f}{cpu:>8.2f}"
                          f"{100 * row['engine']:>8.0f}{row['de']:>9.4f}{row['rmsd']:>7.3f}"
                          f"  {'yes' if converged else 'NO'}", flush=True)
                    if row["de"] > ACCEPT_KCAL and cand in ENGINES:
                        diagnose(mol, solvent, start, positions, energy, ENGINES[cand], ref)
    summarize(rows, names)


def summarize(rows, names) -> None:
    starts = sorted({r["start"] for r in rows})
    base = {r["start"]: r for r in rows if r["cand"] == BASELINE}
    print(f"\nSummary over {len(starts)} starts (medians; speed-up = baseline / candidate, "
          f"baseline '{BASELINE}')")
    print(f"{'candidate':<22}{'calls':>7}{'wall s':>8}{'cpu s':>8}{'engine%':>8}"
          f"{'dE min':>9}{'dE max':>9}{'>0.05':>6}{'wall x':>8}{'cpu x':>7}"
          f"{'med cpu x':>10}  verdict")
    for cand in names:
        mine = [r for r in rows if r["cand"] == cand]
        med = {key: statistics.median(r[key] for r in mine)
               for key in ("calls", "wall", "cpu", "engine")}
        de = [r["de"] for r in mine]
        bad = sum(d > ACCEPT_KCAL for d in de) + sum(not r["converged"] for r in mine)
        if base:
            wall_x = statistics.median(base[r["start"]]["wall"] for r in mine) / med["wall"]
            cpu_x = statistics.median(base[r["start"]]["cpu"] for r in mine) / med["cpu"]
            per_start = statistics.median(base[r["start"]]["cpu"] / r["cpu"] for r in mine)
        else:
            wall_x = cpu_x = per_start = float("nan")
        print(f"{cand:<22}{med['calls']:>7.0f}{med['wall']:>8.2f}{med['cpu']:>8.2f}"
              f"{100 * med['engine']:>8.0f}{min(de):>9.4f}{max(de):>9.4f}{bad:>6}"
              f"{wall_x:>8.2f}{cpu_x:>7.2f}{per_start:>10.2f}  "
              f"{'acceptable' if bad == 0 else 'NOT acceptable'}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--conformers", type=int, default=2)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--candidates", default=",".join(CANDIDATES),
                        help="comma-separated names from: " + ", ".join(CANDIDATES))
    parser.add_argument("--molecules", default=",".join(MOLECULES),
                        help="comma-separated names from: " + ", ".join(MOLECULES))
    args = parser.parse_args()
    names = [n.strip() for n in args.candidates.split(",") if n.strip()]
    molecules = [n.strip() for n in args.molecules.split(",") if n.strip()]
    unknown = sorted(set(names) - set(CANDIDATES)) + sorted(set(molecules) - set(MOLECULES))
    if unknown:
        parser.error(f"unknown names: {unknown}")
    run(args.conformers, args.seed, names, molecules)


if __name__ == "__main__":
    main()
