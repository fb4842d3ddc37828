"""Does sampling find the ensemble? ``confpop.search`` against a brute-force ensemble.

For invented molecules (made up for this benchmark, not taken from any data set; 4-8
rotatable bonds, one with a saturated ring, one ester, one amide) the benchmark builds its
own brute-force reference:

* 2,000 ETKDGv3 embeddings (4 x 500, seeds of their own, never a search's seed),
* every one relaxed with MMFF94s, duplicates removed (default criteria),
* **every** distinct MMFF94s minimum optimized at GFN2-xTB (gas, geomeTRIC "tight", the
  search's own optimizer settings), structures whose bonds or stereo changed dropped,
  duplicates removed again.

The reference is cached on disk (``benchmarks/cache/<name>.brute.json``, JSON numbers only,
gitignored); an interrupted reference resumes from ``<name>.partial.json``. Its CPU time
(process time, this process only, serial) is stored with it.

Then ``confpop.search(smiles, "gfn2", seed=s, workers=1)`` runs for two seeds (0 and 1) and
the benchmark prints, per molecule and search:

* lowest GFN2 energy minus the brute force's, kcal/mol (negative: the search found a lower
  minimum than 2,000 embeddings did);
* population overlap sum_i min(p_i, q_i) at 298.15 K with the brute force, and between the
  two seeds (conformers matched by :func:`confpop.moves.match_conformers`: symmetry-aware
  RMSD < 0.2 A and |dE| < 0.05 kcal/mol, mirror images merged);
* the search's CPU time over the brute force's (process time, serial; the brute force's is
  from the run that built the cache, so under a different load: read the ratio as +-20 %).

Targets (issue 16): lowest energy within 0.1 kcal/mol, overlap >= 0.9 with the brute force
and >= 0.9 between seeds, at most 1/3 of the brute force's CPU time.

    nice -n 10 python benchmarks/bench_sampling.py --brute-only      # build references
    nice -n 10 python benchmarks/bench_sampling.py [--only NAME] [--sampler etkdg|moves]

``--sampler etkdg`` runs the searches as before the move sampler and the two-stream
convergence (ETKDG rounds and the Good–Turing stop only): the "before" column.
A brute-force reference cost 17-270 s CPU for the 4- and 5-rotor molecules (34-647
optimizations of 0.31-0.43 s each on the default optimizer path; ``bench_search.py
--converged``, which also times the searches against it), a pair of default searches
1.75-2.5 times that.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from rdkit import Chem  # noqa: E402

from confpop.backends.forcefield import minimize_conformers  # noqa: E402
from confpop.molecule import load_molecule, stereo_signature  # noqa: E402
from confpop.pipeline import optimize_unit  # noqa: E402
from confpop.prune import PruneSettings, find_duplicates, integrity_problems, is_achiral  # noqa: E402
from confpop.sampling import embed  # noqa: E402
from confpop.units import convert  # noqa: E402

CACHE = Path(__file__).resolve().parent / "cache"
#: invented molecules: name -> SMILES (rotatable bonds by RDKit's strict count: 5, except
#: the glycol-ester's 4 and the hydroxy-ester's 7)
MOLECULES = {
    # an aliphatic ester with a stereocentre and an ether tail
    "ether-ester": "CCOC(=O)[C@@H](C)CCOC",
    # a saturated ring (oxane, ring flip + axial/equatorial) with a glycol-ether arm
    "oxane-ether": "COCCOC[C@@H]1CCCCO1",
    # a tertiary amide (E/Z both populated) with an ether arm
    "ether-amide": "CCOCCN(C)C(=O)CC",
    # a small glycol-ether ester, 4 rotatable bonds (the cheapest reference; bench_search.py
    # --converged uses it as a fourth molecule)
    "glycol-ester": "CCC(=O)OCCOC",
    # a hydroxy-ester, 7 rotatable bonds (slowest reference: ~1,000 GFN2 minima)
    "hydroxy-ester": "CCOC(=O)C[C@H](O)CCCOC",
}
BRUTE_EMBEDDINGS = 2000
BRUTE_BATCH = 500
BRUTE_SEED = 0x5EED16  # never used by a search in this benchmark (searches use 0 and 1)
TEMPERATURE = 298.15


def _base(mol):
    return {"mol": Chem.Mol(mol).ToBinary(), "method": "gfn2", "charge": Chem.GetFormalCharge(mol),
            "multiplicity": 1, "solvent": None, "options": {}, "convergence": "tight"}


def _load_sample() -> list:
    """[UTC time, 1-minute load average]: recorded with the brute force's CPU time."""
    return [time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), round(os.getloadavg()[0], 2)]


def load_summary(data: dict) -> str:
    """'built <first>..<last> UTC at load <min>-<max> (median <m>)' of a brute-force record."""
    load = data.get("load") or []
    if not load:
        return "built earlier, load not recorded"
    values = [v for _, v in load]
    return (f"built {load[0][0]}..{load[-1][0]} at load {min(values):.1f}-{max(values):.1f} "
            f"(median {float(np.median(values)):.1f}, {len(values)} samples)")


def brute_force(name: str, smiles: str, log=print, cache: Path | None = None) -> dict:
    """Build (or read) the brute-force reference of one molecule.

    ``cache``: the folder of its files (default ``benchmarks/cache``); a new folder builds
    it anew (``bench_search.py --converged`` times it in its own run that way).
    """
    cache = CACHE if cache is None else Path(cache)
    cache.mkdir(parents=True, exist_ok=True)
    done = cache / f"{name}.brute.json"
    if done.exists():
        data = json.loads(done.read_text())
        if data["smiles"] == smiles:
            return data
    partial_path = cache / f"{name}.partial.json"
    mol = load_molecule(smiles)
    partial = json.loads(partial_path.read_text()) if partial_path.exists() else None
    if partial is not None and partial["smiles"] != smiles:
        partial = None
    if partial is None:
        c0 = time.process_time()
        starts, ff_e = [], []
        for b in range(BRUTE_EMBEDDINGS // BRUTE_BATCH):
            trial, _ = embed(mol, BRUTE_BATCH, seed=BRUTE_SEED, round_index=b, threads=1)
            relaxed, res = minimize_conformers(trial, threads=1)
            for conf, (_, e) in zip(relaxed.GetConformers(), res):
                if np.isfinite(e):
                    starts.append(conf.GetPositions())
                    ff_e.append(e)
        rep = find_duplicates(mol, starts, ff_e, PruneSettings())
        partial = {"smiles": smiles, "embedded": len(starts), "ff_minima": len(rep.unique),
                   "starts": [np.round(starts[u], 6).tolist() for u in rep.unique],
                   "ff_energies": [float(ff_e[u]) for u in rep.unique],
                   "cpu_sample": time.process_time() - c0, "cpu_opt": 0.0, "results": [],
                   "load": [_load_sample()]}
        partial_path.write_text(json.dumps(partial))
        log(f"{name}: {len(starts)} embedded, {len(rep.unique)} distinct MMFF94s minima "
            f"({partial['cpu_sample']:.0f} s CPU)")
    base = _base(mol)
    ref_mol = Chem.Mol(mol)
    ref_mol.RemoveAllConformers()
    work = Chem.Mol(mol)
    n = len(partial["starts"])
    while len(partial["results"]) < n:
        i = len(partial["results"])
        c0 = time.process_time()
        start = np.array(partial["starts"][i])
        try:
            out = optimize_unit({**base, "positions": start})
        except Exception as exc:  # recorded, never fatal for the reference
            partial["results"].append({"ok": False, "reason": f"{type(exc).__name__}: {exc}"})
        else:
            # integrity: the optimized structure must still be the input molecule
            work.RemoveAllConformers()
            conf = Chem.Conformer(mol.GetNumAtoms())
            for a, (x, y, z) in enumerate(start):
                conf.SetAtomPosition(a, (float(x), float(y), float(z)))
            cid_ref = work.AddConformer(conf, assignId=True)
            ref_stereo = stereo_signature(work, cid_ref)
            conf2 = Chem.Conformer(mol.GetNumAtoms())
            for a, (x, y, z) in enumerate(out["positions"]):
                conf2.SetAtomPosition(a, (float(x), float(y), float(z)))
            cid = work.AddConformer(conf2, assignId=True)
            problems = integrity_problems(work, cid, ref_stereo)
            partial["results"].append({"ok": not problems and bool(out["converged"]),
                                       "reason": "; ".join(problems),
                                       "energy": float(out["energy"]),
                                       "positions": np.round(out["positions"], 6).tolist(),
                                       "gradient_calls": int(out["gradient_calls"])})
        partial["cpu_opt"] += time.process_time() - c0
        if (i + 1) % 25 == 0 or i + 1 == n:
            partial.setdefault("load", []).append(_load_sample())
            partial_path.write_text(json.dumps(partial))
            log(f"{name}: optimized {i + 1}/{n} ({partial['cpu_opt']:.0f} s CPU)")
    ok = [r for r in partial["results"] if r.get("ok")]
    pos = [np.array(r["positions"]) for r in ok]
    e = np.array([r["energy"] for r in ok])
    achiral = is_achiral(mol)
    rep = find_duplicates(mol, pos, e, PruneSettings(), achiral=achiral)
    data = {"smiles": smiles, "embeddings": BRUTE_EMBEDDINGS, "embedded": partial["embedded"],
            "ff_minima": partial["ff_minima"], "optimized": len(partial["results"]),
            "failed": len(partial["results"]) - len(ok),
            "energies": [float(e[u]) for u in rep.unique],
            "positions": [pos[u].tolist() for u in rep.unique],
            "degeneracy": [2 if achiral and rep.chiral_conformer[u] else 1 for u in rep.unique],
            "cpu_seconds": partial["cpu_sample"] + partial["cpu_opt"],
            "cpu_sample": partial["cpu_sample"], "cpu_opt": partial["cpu_opt"],
            # when it was built and the machine's load meanwhile (1-minute load average at
            # every save; older caches have none): its CPU time was measured under that load
            "load": partial.get("load", [])}
    done.write_text(json.dumps(data))
    rel = convert(np.array(data["energies"]) - min(data["energies"]), "hartree", "kcal/mol")
    log(f"{name}: brute force done: {len(rep.unique)} GFN2 minima ({int((rel <= 3).sum())} within "
        f"3 kcal/mol), {data['failed']} failed, {data['cpu_seconds']:.0f} s CPU")
    return data


def force_field_window_lever(name, smiles, log=print, windows=(2, 3, 4, 5, 6, 7, 8.9, 10, 15)):
    """What a narrower force-field window would keep: from the brute force's own record
    (every distinct MMFF94s minimum and the GFN2 minimum it optimized into), the GFN2
    population at 298.15 K still reached, and the share of GFN2 optimizations left, when
    only MMFF94s minima within W kcal/mol of the lowest are optimized."""
    from confpop.thermo import boltzmann_weights

    partial = json.loads((CACHE / f"{name}.partial.json").read_text())
    mol = load_molecule(smiles)
    ok = [i for i, r in enumerate(partial["results"]) if r.get("ok")]
    pos = [np.array(partial["results"][i]["positions"]) for i in ok]
    e = np.array([partial["results"][i]["energy"] for i in ok])
    ff = convert(np.array([partial["ff_energies"][i] for i in ok]), "hartree", "kcal/mol")
    ff -= ff.min()
    achiral = is_achiral(mol)
    rep = find_duplicates(mol, pos, e, PruneSettings(), achiral=achiral)
    group = {u: u for u in rep.unique}
    group.update(rep.duplicate_of)
    w = dict(zip(rep.unique, boltzmann_weights(
        e[rep.unique], TEMPERATURE, unit="hartree",
        degeneracy=[2 if achiral and rep.chiral_conformer[u] else 1 for u in rep.unique])))
    lowest_ff = {}
    for i in range(len(ok)):
        g = group[i]
        lowest_ff[g] = min(lowest_ff.get(g, np.inf), ff[i])
    g_min = min(rep.unique, key=lambda u: e[u])
    # GFN2 single points at every MMFF94s minimum (cached with the reference): the screen
    if "sp_energies" not in partial:
        from confpop.pipeline import single_point_unit
        base = _base(mol)
        partial["sp_energies"] = [float(single_point_unit({**base, "positions": np.array(p)})["energy"])
                                  for p in partial["starts"]]
        (CACHE / f"{name}.partial.json").write_text(json.dumps(partial))
    sp = convert(np.array([partial["sp_energies"][i] for i in ok]), "hartree", "kcal/mol")
    sp -= sp.min()
    lowest_sp = {}
    for i in range(len(ok)):
        lowest_sp[group[i]] = min(lowest_sp.get(group[i], np.inf), sp[i])
    parts = []
    for win in windows:
        kept = sum(wt for g, wt in w.items() if lowest_sp[g] <= win)
        parts.append(f"{win:g}: {kept:.4f} of the population, {100 * float((sp <= win).mean()):.0f} % "
                     "of the optimizations")
    log(f"  {name}: GFN2 single-point screen window -> GFN2 population reached (298 K) and "
        "work: " + "; ".join(parts))
    parts = []
    for win in windows:
        kept = sum(wt for g, wt in w.items() if lowest_ff[g] <= win)
        share = float((ff <= win).mean())
        parts.append(f"{win:g}: {kept:.3f} of the population, {100 * share:.0f} % of the "
                     "optimizations")
    log(f"  {name}: MMFF94s window -> GFN2 population reached (298 K) and work: "
        + "; ".join(parts) + f" (the GFN2 minimum's best MMFF94s start: "
        f"{lowest_ff[g_min]:.2f} kcal/mol)")


def _log_to(path):
    def log(msg):
        line = f"{time.strftime('%H:%M:%S')} {msg}"
        print(line, flush=True)
        if path:
            with open(path, "a") as fh:
                fh.write(line + "\n")
    return log


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", action="append", help="molecule name (repeatable)")
    ap.add_argument("--brute-only", action="store_true", help="only build the references")
    ap.add_argument("--sampler", choices=("moves", "etkdg"), default="moves")
    ap.add_argument("--seeds", default="0,1")
    ap.add_argument("--lever", action="store_true",
                    help="only print what a narrower force-field window would keep (from the "
                         "brute force's record, no new calculation)")
    ap.add_argument("--log", default=None, help="also append progress lines to this file")
    args = ap.parse_args(argv)
    log = _log_to(args.log)
    names = args.only or list(MOLECULES)
    for name in names:
        if name not in MOLECULES:
            sys.exit(f"--only: unknown molecule {name!r}; choose from {', '.join(MOLECULES)}")
    for name in names:
        brute = brute_force(name, MOLECULES[name], log=log)
        if args.brute_only:
            continue
        if args.lever:
            force_field_window_lever(name, MOLECULES[name], log=log)
            continue
        compare(name, brute, sampler=args.sampler,
                seeds=[int(s) for s in args.seeds.split(",")], log=log)


def _ensemble_arrays(ens):
    ids = ens.ids()
    table = ens.raw_table
    return ([ens.positions(c) for c in ids], table.loc[ids, "energy_gfn2"].to_numpy(dtype=float),
            table.loc[ids, "degeneracy"].to_numpy(dtype=int))


def _overlap(mol, a, b):
    from confpop.moves import match_conformers, population_overlap
    from confpop.thermo import boltzmann_weights

    la, lb = match_conformers(mol, a[0], a[1], b[0], b[1], achiral=is_achiral(mol))
    wa = boltzmann_weights(np.asarray(a[1]), TEMPERATURE, unit="hartree", degeneracy=a[2])
    wb = boltzmann_weights(np.asarray(b[1]), TEMPERATURE, unit="hartree", degeneracy=b[2])
    return population_overlap(la, wa, lb, wb)


def compare(name, brute, *, sampler, seeds, log):
    """Searches with two seeds against the brute force; prints one row per search."""
    import confpop

    mol = load_molecule(brute["smiles"])
    ref = ([np.array(p) for p in brute["positions"]], np.array(brute["energies"]),
           np.array(brute["degeneracy"]))
    e_ref = float(ref[1].min())
    rel_ref = convert(ref[1] - e_ref, "hartree", "kcal/mol")
    log(f"== {name} {brute['smiles']} [{sampler}]: brute force {len(ref[1])} GFN2 minima "
        f"({int((rel_ref <= 3).sum())} within 3 kcal/mol) from {brute['embeddings']} embeddings, "
        f"{brute['ff_minima']} MMFF94s minima, {brute['cpu_seconds']:.0f} s CPU")
    options = {} if sampler == "moves" else {"moves": False, "target_overlap": None}
    runs = []
    for seed in seeds:
        c0 = time.process_time()
        ens = confpop.search(brute["smiles"], "gfn2", seed=seed, workers=1, **options)
        cpu = time.process_time() - c0
        arrays = _ensemble_arrays(ens)
        summary = next(s for s in ens.provenance if s["step"] == "sample")
        rel = convert(arrays[1] - arrays[1].min(), "hartree", "kcal/mol")
        row = {"seed": seed, "cpu": cpu, "d_lowest": float(convert(arrays[1].min() - e_ref, "hartree", "kcal/mol")),
               "overlap_brute": _overlap(mol, arrays, ref), "n3": int((rel <= 3).sum()),
               "completeness": summary.get("completeness"), "stream_overlap": summary.get("stream_overlap"),
               "stop": summary.get("stop_reason"), "trials": summary.get("trials"),
               "ff_conformers": summary.get("unique"), "found_by_moves": summary.get("found_by_moves")}
        runs.append((row, arrays))
        log(f"  seed {seed}: lowest {row['d_lowest']:+.2f} kcal/mol vs brute force, overlap with brute "
            f"force {row['overlap_brute']:.3f}, {row['n3']} conformers within 3 kcal/mol, "
            f"CPU {cpu:.0f} s = {cpu / brute['cpu_seconds']:.2f} x brute force; sampling: "
            f"{row['trials']} trials, {row['ff_conformers']} MMFF94s conformers "
            f"({row['found_by_moves']} by moves only), completeness {row['completeness']:.3f}, "
            f"stream overlap {row['stream_overlap']}, stop: {row['stop']}")
    for (ra, aa), (rb, ab) in zip(runs, runs[1:]):
        log(f"  seeds {ra['seed']}/{rb['seed']}: population overlap {_overlap(mol, aa, ab):.3f}")
    # where a search finds minima the brute force lacks (lower ones included), the brute force
    # is an incomplete reference: compare with the union of everything found as well
    pos = list(ref[0]) + [p for _, a in runs for p in a[0]]
    e = np.concatenate([ref[1]] + [a[1] for _, a in runs])
    deg = np.concatenate([ref[2]] + [a[2] for _, a in runs])
    rep = find_duplicates(mol, pos, e, PruneSettings(), achiral=is_achiral(mol))
    union = ([pos[u] for u in rep.unique], e[rep.unique], deg[rep.unique])
    rel = convert(union[1] - union[1].min(), "hartree", "kcal/mol")
    log(f"  union of brute force and searches: {len(rep.unique)} minima ({int((rel <= 3).sum())} "
        f"within 3 kcal/mol); overlap with it: brute force {_overlap(mol, ref, union):.3f}, "
        + ", ".join(f"seed {r['seed']} {_overlap(mol, a, union):.3f}" for r, a in runs))
    CACHE.mkdir(exist_ok=True)
    for r, a in runs:
        (CACHE / f"{name}.{sampler}.seed{r['seed']}.json").write_text(json.dumps(
            {"smiles": brute["smiles"], **r, "energies": a[1].tolist(),
             "positions": [np.asarray(p).tolist() for p in a[0]], "degeneracy": a[2].tolist()}))
    return runs


if __name__ == "__main__":
    main()
