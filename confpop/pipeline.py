"""The multi-level conformer search.

Stages (each records its counts in and out and its wall time in the provenance):

1. **sample**: ETKDGv3 trial structures, relaxed with a force field (MMFF94s), in rounds,
   split between two independent streams (seeds of their own); after every round each
   stream moves its low-energy conformers to their neighbouring rotamers, cis/trans amides
   and ring shapes (:mod:`confpop.moves`, ``moves=True``), and rounds go on until the two
   streams' force-field populations at the highest temperature overlap by
   ``target_overlap`` (default 0.9: sum_i min(p_i, q_i)) or ``max_rounds`` (default 20)
   rounds were drawn; the summary says which. Why: on the invented ether-ester of
   ``benchmarks/bench_sampling.py`` the former rule (one stream, Good–Turing completeness
   0.85) stopped at 300 trials with estimates of 0.85-0.88 while the two seeds shared 36 %
   of the GFN2 population and reached 30 % / 69 % of the brute force's; the Good–Turing
   figure is still reported (ETKDG draws only). With ``target_overlap=None`` one stream
   runs under the former rules (a round adds no new conformer, or the Good–Turing
   completeness estimate reaches ``target_completeness``, default 0.85; sampling.py).
   Duplicates removed and a wide force-field window applied
   (``ff_window``, default 10 kcal/mol: force fields misrank conformers by several kcal/mol;
   measured on three invented flexible molecules, the GFN2 minimum lay 2.4-4.0 kcal/mol up
   at MMFF94s and conformers within 1 kcal/mol at GFN2 up to 7.8 kcal/mol up).
   Why sample this deeply: the GFN2 work grows with the number of *distinct* conformers, not
   trials, while populations need most of the low-lying conformers. On an invented
   hydroxy-ester (6 rotatable bonds) two searches with different seeds agreed on the lowest
   energy to 0.6 kcal/mol and shared 43 % of the 298 K population after 250 trials
   (completeness 0.56-0.65, 2 min on 2 cores), but to 0.07 kcal/mol and 76 % after 1,000
   (completeness 0.87-0.88, 5 min).
2. **screen** (tight-binding methods only): single points at the final method on the
   force-field geometries; a structure is dropped when its single-point energy lies more
   than ``population_energy_cut(T_max, min_population) + screen_margin`` above the lowest
   (8.9 kcal/mol at 298.15 K with the defaults). The margin covers how far optimization can
   lower a structure's relative energy. Measured with ``benchmarks/bench_windows.py`` (every
   structure single-pointed *and* optimized at GFN2, seed 1): the drop
   (E_sp - E_sp,min) - (E_opt - E_opt,min) had median 0.08 / max 0.69 kcal/mol for
   1-hexanol (gas, 70 structures) but median 0.41, p90 4.2 and max 6.7 kcal/mol for
   propranolol in chloroform (231 structures; force-field geometries without the
   intramolecular hydrogen bond GFN2 forms): the 2.7 kcal/mol once quoted here was far too
   small; an invented-style hydroxy-ester (CCOC(=O)C[C@H](O)CCCOC, gas, 1,116 structures,
   986 minima) reached 6.1 (p99 3.9). Population lost by the screen at 298.15 / 323.15 K
   (share 1e-4): propranolol, margin 2: 0.11 / 0.09 %, margin 3: 0.063 / 0.044 %, margin 4:
   0.032 / 0 %; hydroxy-ester 0.000 % from margin 2; 1-hexanol, an aryl ether-amide,
   the glucoside and phenylalanine 0 for any margin >= 1. The default margin 3 keeps the
   loss below 0.1 % on all six.
3. **optimize**: optionally (``preoptimize=True``) a loose pre-optimization (L-BFGS, few
   gradient calls) of every survivor, duplicates removed with looser criteria (twice the
   RMSD, 2.5 times the energy tolerance) and a window of the population cut's energy (or
   ``energy_window`` when smaller) + ``preopt_margin``;
   then the survivors optimized at the final method (geomeTRIC, "tight" convergence, final energies within 0.05 kcal/mol
   of a very tight optimization).
4. **minimum check**: an optimizer started from a symmetric structure keeps the symmetry
   and can stop on a saddle point (the gradient along symmetry-breaking motions is zero by
   symmetry). Every optimized conformer with a mirror plane or a symmetry axis is displaced
   off it and re-optimized; a lower result replaces it, the row says so
   (:mod:`confpop.minimum`, ``check_minima=True``).
5. **check**: bond graph and stereo of every optimized conformer compared with the input;
   a conformer that changed is kept in the table with status "failed" and the reason.
6. **prune**: duplicates removed again (optimization makes distinct force-field minima
   fall into one), mirror images merged or kept, and the population cut: a conformer is
   dropped only when its population (degeneracy included) at the highest temperature
   asked for is below ``min_population`` (default 1e-4). Measured (bench_windows.py):
   at 1e-4 the dropped conformers held 0.08 / 0.10 % of the population in total at
   298.15 / 323.15 K for propranolol (33 / 30 of 189 minima), 0.007 / 0 % for 1-hexanol and
   0 for the other small molecules, but 1.4 % for the hydroxy-ester's long tail (580 of 986
   minima); at 1e-3 they held 2.8 % (propranolol), 0.5 % (hexanol) and 10.9 %
   (hydroxy-ester). The share dropped is recorded in the prune step and printed by the
   CLI; lower ``min_population`` for floppy molecules where the tail matters. An optional
   ``energy_window`` caps the list by energy as well.

With a force field as ``method`` the search stops after stage 1 and applies the final
population cut to the force-field energies.
"""

from __future__ import annotations

import logging
import time

import numpy as np
import pandas as pd
from rdkit import Chem

from .backends import backend_class, get_backend
from .ensemble import Ensemble, step_record
from .errors import InputError
from .prune import PruneSettings, find_duplicates, integrity_problems, is_achiral
from .sampling import sample_conformers
from .settings import SEARCH_DEFAULTS
from .units import EBOHR_DEBYE, convert

__all__ = ["search", "FORCE_FIELDS"]

log = logging.getLogger(__name__)

FORCE_FIELDS = ("mmff94", "mmff94s", "uff")
# the defaults are declared once, in confpop.settings (tests/test_settings.py checks search's)
MAX_ROUNDS = SEARCH_DEFAULTS.max_rounds
TARGET_COMPLETENESS = SEARCH_DEFAULTS.target_completeness
#: Agreement of two independent sampling streams (population overlap at the force-field
#: level, sum_i min(p_i, q_i)) at which sampling stops (module notes).
TARGET_OVERLAP = SEARCH_DEFAULTS.target_overlap
#: Final cut: a conformer is dropped when its population at the highest temperature asked
#: for is below this share (see the module notes for the measurement behind it).
MIN_POPULATION = SEARCH_DEFAULTS.min_population
#: Screening margin, kcal/mol, added to the population cut's energy (module notes).
SCREEN_MARGIN = SEARCH_DEFAULTS.screen_margin
DEFAULT_TEMPERATURES = SEARCH_DEFAULTS.temperatures


def population_energy_cut(temperature: float, share: float, degeneracy: int = 2) -> float:
    """Relative energy (kcal/mol) above which a conformer of the given degeneracy holds
    less than ``share`` of the population at ``temperature``, whatever the others do:
    p_i = g_i exp(-dE_i/RT) / Z <= g_i exp(-dE_i/RT) because Z >= 1 (the lowest
    conformer contributes at least 1), so dE > RT ln(g / share) guarantees p_i < share.

    Examples
    --------
    >>> round(population_energy_cut(298.15, 1e-3), 2)
    4.5
    """
    from .thermo import check_temperatures
    from .units import gas_constant

    (t,) = check_temperatures([temperature], "temperature")
    if not 0.0 < share < 1.0:
        raise InputError(f"min_population must lie between 0 and 1 (exclusive), got {share}")
    return float(gas_constant("kcal/mol") * t * np.log(degeneracy / share))


# ---------------------------------------------------------------- units of work (picklable)
def _backend_for(item: dict):
    mol = Chem.Mol(item["mol"])
    return get_backend(item["method"], mol, charge=item["charge"],
                       multiplicity=item["multiplicity"], solvent=item["solvent"],
                       **item.get("options", {}))


def single_point_unit(item: dict) -> dict:
    """Energy (hartree) and dipole (debye) of one geometry: a picklable unit of work."""
    backend = _backend_for(item)
    res = backend.compute(np.asarray(item["positions"]), gradient=False)
    dip = None if res.dipole is None else float(np.linalg.norm(res.dipole) * EBOHR_DEBYE)
    return {"energy": res.energy, "dipole_debye": dip}


def optimize_unit(item: dict) -> dict:
    """Optimize one geometry at ``item["method"]``: a picklable unit of work."""
    from .optimize import optimize_positions

    backend = _backend_for(item)
    res = optimize_positions(backend, np.asarray(item["positions"]),
                             convergence=item.get("convergence", "tight"),
                             max_steps=item.get("max_steps"),
                             engine=item.get("engine", "geometric"),
                             hessian_guess=item.get("hessian_guess"))
    dipole = res.dipole  # from the optimizer's last engine call: no extra single point
    if dipole is None and "dipole" in backend.capabilities:
        dipole = backend.compute(res.positions, gradient=False).dipole
    dip = None if dipole is None else float(np.linalg.norm(dipole) * EBOHR_DEBYE)
    return {"positions": np.array(res.positions), "energy": res.energy, "converged": res.converged,
            "steps": res.steps, "gradient_calls": res.gradient_calls,
            "gradient_norm": res.gradient_norm, "message": res.message, "dipole_debye": dip}


def minimum_unit(item: dict) -> dict:
    """Re-optimize one symmetric optimized structure off its symmetry (a saddle check)."""
    from .minimum import relax_to_minimum

    backend = _backend_for(item)
    out = relax_to_minimum(backend, np.asarray(item["positions"]), item["energy"],
                           optimize_options={"convergence": item.get("convergence", "tight"),
                                             "engine": item.get("engine", "geometric"),
                                             "hessian_guess": item.get("hessian_guess")},
                           seed=item.get("seed", 0))
    dip = None
    if out.saddle:
        final = backend.compute(out.positions, gradient=False)
        dip = None if final.dipole is None else float(np.linalg.norm(final.dipole) * EBOHR_DEBYE)
    return {"positions": np.array(out.positions), "energy": out.energy, "saddle": out.saddle,
            "symmetry": out.symmetry, "energy_drop": out.energy_drop,
            "gradient_calls": out.gradient_calls, "note": out.note, "dipole_debye": dip}


def _run(function, items, *, executor, workers, progress, store, kind, description):
    """Run units through the execution layer, with the store when one is given."""
    from .execution import _active_pool, run_units

    keys = None
    if store is not None:
        from .store import content_key
        keys = []
        for it in items:
            mol = Chem.Mol(it["mol"])
            numbers = [a.GetAtomicNum() for a in mol.GetAtoms()]
            settings = {k: it[k] for k in sorted(it) if k not in ("mol", "positions", "method",
                                                                  "solvent", "charge", "multiplicity")}
            keys.append(content_key(numbers, it["positions"], charge=it["charge"],
                                    multiplicity=it["multiplicity"], method=it["method"],
                                    solvent=it["solvent"], settings=settings, kind=kind))
    if executor is None and workers is None and _active_pool() is None:
        workers = 1  # one CPU, so search() opened no pool: run here
    # Inside the search's pool even a few short units go to the workers: its start-up is
    # paid once; measured (benchmarks/bench_pool.py, README example's 8 GFN2 single points,
    # ~25 ms each) in this process 0.214 s, on the warm 2-worker pool 0.226 s, on a fresh
    # pool (the former cost of a stage) 1.9 s on a loaded machine.
    return run_units(function, items, executor=executor, workers=workers, progress=progress,
                     description=description, store=store, keys=keys)


#: modules the workers of a search import when they start, before their first unit (the
#: engine's and geomeTRIC's: 0.4-0.8 s per process, the first optimization's extra cost in
#: a fresh process; benchmarks/bench_pool.py)
_WORKER_MODULES = ("confpop.pipeline", "confpop.optimize", "confpop.minimum",
                   "geometric.optimize", "geometric.engine", "geometric.prepare",
                   "geometric.internal")
#: the engine package each tight-binding backend module loads on its first calculation
_ENGINE_MODULES = {"confpop.backends.xtb": ("xtb.interface",),
                   "confpop.backends.tblite": ("tblite.interface",)}


def search_pool(method: str, executor, workers):
    """The process pool scope of a search (:func:`confpop.execution.pool_scope`), its
    workers preloaded with ``method``'s engine: shared by its stages, and by whatever runs
    inside it (the command line puts free energies and rescoring in it too). None is opened
    when the units run in this process or on a given executor, or for a force-field-only
    search."""
    import contextlib

    from .execution import default_workers, pool_scope

    method = method.lower() if isinstance(method, str) else method
    if executor is not None or workers == 1 or method in FORCE_FIELDS or \
            (workers is None and default_workers() == 1):
        return contextlib.nullcontext()
    try:
        module = backend_class(method).__module__
    except Exception:  # an unknown method: search() says so in the user's terms
        return contextlib.nullcontext()
    preload = (*_WORKER_MODULES, module, *_ENGINE_MODULES.get(module, ()))
    return pool_scope(workers, preload=preload)


def _open_store(store):
    if store is None or hasattr(store, "get"):
        return store
    from .store import ResultStore
    return ResultStore(store)


# ---------------------------------------------------------------- the search
def search(molecule, method: str = "gfn2", solvent: str | None = None, seed: int = 0, *,
           n_trials: int | None = None, temperatures=DEFAULT_TEMPERATURES,
           min_population: float = MIN_POPULATION, screen_margin: float = SCREEN_MARGIN,
           energy_window: float | None = None, ff_window: float = 10.0,
           screen_window: float | None = None, rmsd: float = 0.2, energy_tolerance: float = 0.05,
           merge_mirror_images: bool = True, max_rounds: int = MAX_ROUNDS,
           target_completeness: float | None = TARGET_COMPLETENESS, sampling_method: str = "mmff94s",
           convergence: str = "tight", preoptimize: bool = False, preopt_margin: float = 2.0,
           charge: int | None = None, multiplicity: int | None = None,
           stereo: str = "refuse", keep_largest_fragment: bool = False,
           force_trans_amides: bool = True, method_options: dict | None = None,
           check_minima: bool = True, allow_long: bool = False, executor=None, workers: int | None = None, store=None,
           progress: bool = False, moves=True, target_overlap: float | None = TARGET_OVERLAP) -> Ensemble:
    """Find the conformers of a molecule that matter and rank them.

    Parameters
    ----------
    molecule : str, pathlib.Path or rdkit.Chem.Mol
        SMILES, a MOL/SDF/XYZ file, or a molecule (see :func:`confpop.load_molecule`).
    method : str
        Final level: "gfn2" (default), "gfn1", "gfnff", "tblite-gfn2", or a force field
        ("mmff94s", "mmff94", "uff") for a force-field-only search.
    solvent : str, optional
        Implicit solvent for tight-binding methods, e.g. "water", "chloroform" (GBSA with
        gfn2/gfn1/gfnff through xtb-python, ALPB with tblite-gfn2/tblite-gfn1).
    seed : int
        Sampling seed; the same seed gives the same ensemble.
    n_trials : int, optional
        Trial structures per sampling round (default from the flexibility).
    max_rounds, target_completeness : int, float
        Sampling rounds go on until two independent sampling streams agree (population
        overlap >= ``target_overlap`` at the force-field level) or ``max_rounds`` rounds were
        drawn (the budget). With ``target_overlap=None`` one stream runs instead and stops
        when a round adds no new conformer or the Good–Turing completeness estimate reaches
        ``target_completeness`` (None: not used). See the module notes for the defaults.
    moves : bool or confpop.moves.MoveSettings
        After every ETKDG round, move the low-energy conformers to their neighbouring
        rotamers and ring shapes (:mod:`confpop.moves`). On by default (module notes).
    target_overlap : float or None
        Agreement of the two sampling streams to reach (default 0.9); None: one stream.
    temperatures : sequence of float, K
        The temperatures the populations are wanted at; the cuts follow the highest.
    min_population : float
        Final cut: a conformer is dropped only when its population (degeneracy included)
        at the highest temperature is below this share (default 1e-4, module notes).
    screen_margin : float, kcal/mol
        The single-point screen keeps every structure within ``population_energy_cut(T_max,
        min_population) + screen_margin`` of the lowest (default 3: measured single-point ->
        optimized drops, module notes).
    energy_window : float, kcal/mol, optional
        An extra hard cap on the final relative energy (None: the population cut alone).
    ff_window : float, kcal/mol
        Force-field window of the sampling stage.
    screen_window : float, kcal/mol, optional
        A fixed screening window instead of the population cut + margin.
    rmsd, energy_tolerance : float
        Duplicate criteria (Å, kcal/mol); see :class:`confpop.prune.PruneSettings`.
    merge_mirror_images : bool
        One row with degeneracy 2 per mirror-image pair (True) or two rows (False).
    convergence : str
        Optimizer preset ("loose", "normal", "tight", "verytight").
    allow_long : bool
        Run even when the cost estimate (:mod:`confpop.budget`: atoms, rotatable bonds,
        trials, method) is above its bound of 2 CPU hours or ``n_trials`` above 10,000.
    check_minima : bool
        Re-optimize every optimized conformer that has a mirror plane or a symmetry axis
        from a small symmetry-breaking displacement; a saddle point (the re-optimized
        structure lies lower) is replaced and its row says so (:mod:`confpop.minimum`).
    preoptimize : bool
        First optimize loosely (L-BFGS), drop duplicates and conformers more than
        ``energy_window + preopt_margin`` above the lowest, then optimize the rest tightly.
        Loose energies lie 0.3-1 kcal/mol above the tight ones, hence the 2 kcal/mol margin.
        Off by default: measured on an invented 21-atom hydroxy-ester it removed none of 52
        conformers and geomeTRIC still needed 23-34 gradient calls afterwards, so it only
        added cost; it pays where many force-field minima fall into one GFN2 minimum.
    executor : concurrent.futures.Executor, optional
        Where the units of work run (e.g. ``dask.distributed.Client.get_executor()``);
        default one local process pool for every stage of the search
        (:func:`confpop.execution.pool_scope`; in this process when only one CPU is
        available).
    workers : int, optional
        Local worker processes (1 = serial in this process).
    store : str, pathlib.Path or ResultStore, optional
        SQLite result store: finished calculations are reused, an interrupted run resumes.
    progress : bool
        Show progress bars on stderr.

    Returns
    -------
    Ensemble
        Ranked by the final method; failed conformers stay in the table with their reason
        (when every conformer failed the ensemble has no active conformer, ``len(ens) == 0``,
        and ``ens.table()`` says why).

    Notes
    -----
    GFN2-xTB relative conformer energies typically err by 0.5-1.5 kcal/mol against
    high-level references, so populations below ~10 % are uncertain by a factor of several.
    """
    from .molecule import load_molecule, stereo_signature

    method = method.lower() if isinstance(method, str) else method
    backend_class(method)  # unknown method or missing engine: fail before any work
    from .thermo import check_temperatures
    temperatures = check_temperatures(temperatures, "temperatures")
    t_max = max(temperatures)
    for name, value, lowest in (("energy_window", energy_window, 0.0), ("ff_window", ff_window, 0.0),
                                ("screen_window", screen_window, 0.0),
                                ("screen_margin", screen_margin, None)):
        if value is None:
            continue
        bad = isinstance(value, bool) or not isinstance(value, (int, float, np.number)) \
            or not np.isfinite(value) or (value <= lowest if lowest is not None else value < 0)
        if bad:
            what = "a finite number >= 0" if lowest is None else "a finite number > 0"
            raise InputError(f"{name} must be {what} kcal/mol, got {value!r}")
    final_cut = population_energy_cut(t_max, min_population)
    if screen_window is None:
        screen_window = final_cut + screen_margin
    t_start = time.perf_counter()
    mol = load_molecule(molecule, charge=charge, multiplicity=multiplicity, stereo=stereo,
                        keep_largest_fragment=keep_largest_fragment, method=method)
    _warn_implicit_ligand_hydrogens(mol)
    _refuse_open_square_planar(mol)
    from .budget import check_search_budget
    check_search_budget(mol, method=method, n_trials=n_trials, allow_long=allow_long,
                        label=Chem.MolToSmiles(Chem.RemoveHs(mol))[:40], option="allow_long=True",
                        moves=moves, target_overlap=target_overlap, max_rounds=max_rounds,
                        levers="a smaller max_rounds or n_trials, moves=False or a cheaper method")
    charge = mol.GetIntProp("charge") if mol.HasProp("charge") else Chem.GetFormalCharge(mol)
    multiplicity = mol.GetIntProp("multiplicity") if mol.HasProp("multiplicity") else 1
    if solvent is not None and "solvent" not in backend_class(method).capabilities:
        raise InputError(f"method {method!r} has no implicit solvent model; got solvent={solvent!r}")
    # check the method accepts this molecule (elements, charge, solvent name) before sampling
    get_backend(method, mol, charge=charge, multiplicity=multiplicity, solvent=solvent,
                **(method_options or {}))
    prune_settings = PruneSettings(rmsd=rmsd, energy_tolerance=energy_tolerance,
                                   merge_mirror_images=merge_mirror_images)
    achiral = is_achiral(mol)
    store = _open_store(store)
    from . import __version__
    from .store import library_versions
    provenance = [{"step": "input", "smiles": Chem.MolToSmiles(Chem.RemoveHs(mol)),
                   "charge": charge, "multiplicity": multiplicity, "method": method,
                   "solvent": solvent, "seed": seed, "temperatures": list(temperatures),
                   "min_population": min_population, "confpop": __version__,
                   "libraries": dict(library_versions())}]

    # one pool of worker processes for every stage; its workers import the engine while
    # this process samples (benchmarks/bench_pool.py)
    with search_pool(method, executor, workers):
        # 1. sample + force-field relax + prune
        t0 = time.perf_counter()
        ff, ff_reason = sampling_method, ""
        if method in FORCE_FIELDS:
            ff = method
        else:
            from .backends.forcefield import sampling_force_field
            ff, ff_reason = sampling_force_field(mol, sampling_method)
            if ff_reason:
                log.info("trial structures relaxed with %s (%s)", ff, ff_reason)
        sampled, ff_e, times_found, chiral, srep = sample_conformers(
            mol, n_trials=n_trials, seed=seed, method=ff, energy_window=ff_window,
            prune=prune_settings, max_rounds=max_rounds, force_trans_amides=force_trans_amides,
            target_completeness=target_completeness, moves=moves,
            streams=1 if target_overlap is None else 2, target_overlap=target_overlap,
            overlap_temperature=t_max)
        provenance.append(step_record("sample", started=t0, n_in=srep.trials, n_out=srep.unique,
                                      method=f"ETKDGv3 + {ff}", window_kcal=ff_window,
                                      force_field=ff, force_field_reason=ff_reason,
                                      rmsd=rmsd, **srep.as_dict()))
        table = pd.DataFrame({"status": "ok", "reason": "", "degeneracy": 1,
                              f"energy_{ff}": ff_e, "times_found": times_found,
                              "chiral_conformer": chiral},
                             index=pd.Index(range(sampled.GetNumConformers()), name="conformer"))
        ens = Ensemble(sampled, table, level=ff, charge=charge, multiplicity=multiplicity,
                       solvent=None, provenance=provenance, name=provenance[0]["smiles"])
        positions = {cid: ens.positions(cid) for cid in ens.ids()}

        if method in FORCE_FIELDS:
            return _finish(ens, positions, method, energy_window, prune_settings, achiral,
                           sampling=srep, t_start=t_start, t_max=t_max, min_population=min_population)

        base_item = {"mol": Chem.Mol(mol).ToBinary(), "method": method, "charge": charge,
                     "multiplicity": multiplicity, "solvent": solvent,
                     "options": dict(method_options or {})}

        # 2. screen with single points
        t0 = time.perf_counter()
        ids = ens.ids()
        outcomes = _run(single_point_unit, [{**base_item, "positions": positions[c]} for c in ids],
                        executor=executor, workers=workers, progress=progress, store=store,
                        kind="singlepoint", description="single points")
        table = ens.raw_table
        sp_col = f"energy_{method}_sp"
        table[sp_col] = np.nan
        for cid, out in zip(ids, outcomes):
            if out.ok:
                table.loc[cid, sp_col] = out.value["energy"]
            else:
                table.loc[cid, ["status", "reason"]] = ["failed", f"single point: {out.error_type}: {out.error_message}"]
        ok = table["status"] == "ok"
        e_min = table.loc[ok, sp_col].min() if ok.any() else 0.0
        drop = ok & (table[sp_col] - e_min > convert(screen_window, "kcal/mol", "hartree"))
        keep_ids = [int(c) for c in table.index[~drop]]
        ens = Ensemble(sampled, table, level=ff, charge=charge, multiplicity=multiplicity,
                       solvent=solvent, provenance=ens.provenance, name=ens.name)
        ens = ens.select(keep_ids, step=step_record(
            "screen", started=t0, n_in=len(ids), n_out=int(ok.sum() - drop.sum()), method=method,
            solvent=solvent, window_kcal=screen_window, failed=int((~ok).sum())))

        # 3. optimize: a cheap loose pre-optimization collapses force-field minima that fall into
        #    one tight-binding minimum; only the distinct survivors get the tight optimization
        if preoptimize:
            ens, positions = _optimize_stage(ens, positions, base_item, "loose", "lbfgs",
                                             "preoptimize", method, solvent, executor, workers,
                                             progress, store)
            ens, positions = _intermediate_prune(ens, positions, method,
                                                 min(final_cut, energy_window or np.inf) + preopt_margin,
                                                 prune_settings, achiral)
        ens, positions = _optimize_stage(ens, positions, base_item, convergence, "geometric",
                                         "optimize", method, solvent, executor, workers, progress, store)
        # 4. minimum check: symmetric structures re-optimized off their symmetry (saddles leave)
        if check_minima:
            ens, positions = _minimum_stage(ens, positions, base_item, convergence, method, seed,
                                            executor, workers, progress, store)
        opt_mol = ens.mol

        # 5. integrity checks
        t0 = time.perf_counter()
        table = ens.raw_table
        n_bad = 0
        for cid in ens.ids():
            # compare each optimized conformer with its own force-field geometry, whose stereo
            # ETKDG enforced from the input
            problems = integrity_problems(opt_mol, cid, stereo_signature(sampled, cid),
                                          reference_positions=sampled.GetConformer(cid).GetPositions())
            if problems:
                n_bad += 1
                table.loc[cid, ["status", "reason"]] = ["failed", "integrity: " + "; ".join(problems)]
        ens = ens._replace(table=table, step=step_record("check", started=t0, n_in=len(ens),
                                                          n_out=len(ens) - n_bad, changed=n_bad))
        return _finish(ens, positions, method, energy_window, prune_settings, achiral,
                       sampling=srep, t_start=t_start, t_max=t_max, min_population=min_population)


# d8 centres that are square planar with four ligands (Pt(II), Pd(II), Au(III), Rh(I), Ir(I))
_SQUARE_PLANAR_METALS = frozenset({78, 46, 79, 45, 77})


def _warn_implicit_ligand_hydrogens(mol: Chem.Mol) -> None:
    """A ligand atom written without brackets next to a metal ("N[Pt]") gets the hydrogens
    of its normal valence minus the metal bond: an amido NH2, not an ammine NH3. Say so."""
    import warnings

    from .backends.forcefield import _has_metal, is_metal
    from .errors import ConfpopWarning

    if not _has_metal(mol):
        return
    found = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() not in (7, 8, 15, 16) or atom.GetFormalCharge() != 0:
            continue
        metals = [n for n in atom.GetNeighbors() if is_metal(n.GetAtomicNum())]
        if not metals or any(b.GetBondType() == Chem.BondType.DATIVE for b in atom.GetBonds()):
            continue
        others = [n for n in atom.GetNeighbors() if not is_metal(n.GetAtomicNum())]
        if atom.GetAtomicNum() in (8, 16) and any(n.GetAtomicNum() != 1 for n in others):
            continue  # carboxylato, alkoxido, thiolato: anionic on purpose, as usually meant
        full = {7: "NH3", 8: "OH2", 15: "PH3", 16: "SH2"}[atom.GetAtomicNum()]
        found.append((f"{atom.GetSymbol()}{atom.GetIdx() + 1}",
                      atom.GetTotalNumHs(includeNeighbors=True),
                      f"{metals[0].GetSymbol()}{metals[0].GetIdx() + 1}", full,
                      f"{atom.GetSymbol()}->[{metals[0].GetSymbol()}]"))
    if found:
        listing = ", ".join(f"{a} (bonded to {m}) with {h} H" for a, h, m, _, _ in found)
        _, _, _, full, dative = found[0]
        warnings.warn(f"read {listing}: anionic ligands such as amido or hydroxido; for a "
                      f"neutral ligand write [{full}] or a dative bond, e.g. {dative}",
                      ConfpopWarning, stacklevel=3)


def _refuse_open_square_planar(mol: Chem.Mol) -> None:
    """Four-coordinate Pt/Pd/Au/Rh/Ir with unlike ligands and no ``@SP`` tag: cis and trans
    are different compounds, not conformers; the user must say which."""
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() not in _SQUARE_PLANAR_METALS or atom.GetDegree() != 4:
            continue
        if atom.GetChiralTag() == Chem.ChiralType.CHI_SQUAREPLANAR:
            continue
        if len({ranks[n.GetIdx()] for n in atom.GetNeighbors()}) > 1:
            raise InputError(
                f"{atom.GetSymbol()}{atom.GetIdx() + 1} has four unlike ligands and no square-planar "
                "arrangement: cis and trans isomers are different compounds; write it in the "
                f"SMILES, e.g. [{atom.GetSymbol()}@SP1] (first and third ligand cis) or "
                f"[{atom.GetSymbol()}@SP2] (first and third trans)")


def _optimizer_path() -> dict:
    """The optimizer path of an optimization unit (:func:`confpop.optimize.optimizer_path`):
    the initial Hessian is passed on, the Hessian update is in the item only for its store
    key, so a store never returns another path's result."""
    from .optimize import optimizer_path

    return optimizer_path()


def _optimize_stage(ens, positions, base_item, convergence, engine, name, method, solvent,
                    executor, workers, progress, store):
    """Optimize every active conformer; failures become rows with status "failed"."""
    t0 = time.perf_counter()
    ids = ens.ids()
    # the optimizer path is part of the unit (and of its store key): results of another
    # path are not taken from a store
    path = _optimizer_path() if engine.startswith("geometric") else {}
    outcomes = _run(optimize_unit, [{**base_item, "positions": positions[c],
                                     "convergence": convergence, "engine": engine, **path}
                                    for c in ids],
                    executor=executor, workers=workers, progress=progress, store=store,
                    kind=f"optimize-{engine}", description=name)
    table = ens.raw_table
    opt_mol = ens.mol
    for col, default in ((f"energy_{method}", np.nan), ("converged", False), ("opt_steps", 0),
                         ("gradient_calls", 0), ("dipole_debye", np.nan)):
        if col not in table.columns:
            table[col] = default
    positions = dict(positions)
    for cid, out in zip(ids, outcomes):
        if not out.ok:
            table.loc[cid, ["status", "reason"]] = ["failed", f"{name}: {out.error_type}: {out.error_message}"]
            continue
        v = out.value
        conf = opt_mol.GetConformer(cid)
        for a, (x, y, z) in enumerate(v["positions"]):
            conf.SetAtomPosition(a, (float(x), float(y), float(z)))
        positions[cid] = np.array(v["positions"])
        calls = int(v["gradient_calls"]) + (int(table.loc[cid, "gradient_calls"]) if name == "optimize" else 0)
        table.loc[cid, [f"energy_{method}", "converged", "opt_steps", "gradient_calls"]] = [
            v["energy"], bool(v["converged"]), int(v["steps"]), calls]
        if v["dipole_debye"] is not None:
            table.loc[cid, "dipole_debye"] = v["dipole_debye"]
        table.loc[cid, "reason"] = "" if v["converged"] else f"not converged: {v['message']}"
    active = table["status"] == "ok"
    calls = [int(out.value["gradient_calls"]) for out in outcomes if out.ok]
    step = step_record(name, started=t0, n_in=len(ids), n_out=int(active.sum()), method=method,
                       solvent=solvent, convergence=convergence, engine=engine,
                       gradient_calls_median=float(np.median(calls)) if calls else 0.0,
                       not_converged=int((~table["converged"].astype(bool) & active).sum()),
                       failed=len(ids) - int(active.sum()))
    out_ens = Ensemble(opt_mol, table, level=method, charge=ens.charge,
                       multiplicity=ens.multiplicity, solvent=solvent,
                       provenance=ens.provenance + [step], name=ens.name)
    return out_ens, positions


def _minimum_stage(ens, positions, base_item, convergence, method, seed, executor, workers,
                   progress, store):
    """Send every symmetric optimized conformer through :func:`minimum_unit`."""
    from .minimum import symmetry_of_conformer
    from .prune import automorphisms, rmsd_atoms

    t0 = time.perf_counter()
    table = ens.raw_table
    table["minimum_check"] = ["" if s == "ok" else "not checked" for s in table["status"]]
    mol = ens.mol
    perms = automorphisms(mol, rmsd_atoms(mol))
    symmetric = [c for c in ens.ids() if symmetry_of_conformer(mol, positions[c], perms=perms)]
    for c in ens.ids():
        table.loc[c, "minimum_check"] = "symmetric" if c in symmetric else "not symmetric"
    items = [{**base_item, "positions": positions[c], "energy": float(table.loc[c, f"energy_{method}"]),
              "convergence": convergence, "engine": "geometric", "seed": int(seed) % 2**31,
              **_optimizer_path()}  # in the store key, as for optimize
             for c in symmetric]
    outcomes = _run(minimum_unit, items, executor=executor, workers=workers, progress=progress,
                    store=store, kind="minimum-check", description="minimum check")
    positions = dict(positions)
    n_saddles, calls = 0, 0
    for cid, out in zip(symmetric, outcomes):
        if not out.ok:
            table.loc[cid, "minimum_check"] = f"failed: {out.error_type}: {out.error_message}"
            continue
        v = out.value
        calls += int(v["gradient_calls"])
        table.loc[cid, "gradient_calls"] = int(table.loc[cid, "gradient_calls"]) + int(v["gradient_calls"])
        if not v["saddle"]:
            table.loc[cid, "minimum_check"] = "symmetric minimum"
            continue
        n_saddles += 1
        table.loc[cid, "minimum_check"] = "saddle point left"
        table.loc[cid, f"energy_{method}"] = v["energy"]
        table.loc[cid, "reason"] = "; ".join(x for x in (table.loc[cid, "reason"], v["note"]) if x)
        if v["dipole_debye"] is not None:
            table.loc[cid, "dipole_debye"] = v["dipole_debye"]
        positions[cid] = np.array(v["positions"])
        conf = mol.GetConformer(cid)
        for a, (x, y, z) in enumerate(v["positions"]):
            conf.SetAtomPosition(a, (float(x), float(y), float(z)))
    step = step_record("minimum-check", started=t0, n_in=len(ens), n_out=len(ens),
                       symmetric=len(symmetric), saddles=n_saddles, gradient_calls=calls)
    out_ens = Ensemble(mol, table, level=method, charge=ens.charge, multiplicity=ens.multiplicity,
                       solvent=ens.solvent, provenance=ens.provenance + [step], name=ens.name)
    return out_ens, positions


def _intermediate_prune(ens, positions, method, window, settings, achiral):
    """Drop duplicates (looser criteria: geometries are only loosely converged) and
    conformers above ``window`` kcal/mol after the pre-optimization."""
    t0 = time.perf_counter()
    ids = ens.ids()
    if not ids:
        return ens, positions
    energies = ens.raw_table.loc[ids, f"energy_{method}"].to_numpy(dtype=float)
    loose = PruneSettings(rmsd=2 * settings.rmsd, energy_tolerance=2.5 * settings.energy_tolerance,
                          merge_mirror_images=True, max_automorphisms=settings.max_automorphisms)
    rep = find_duplicates(ens.mol, [positions[c] for c in ids], energies, loose, achiral=achiral)
    e_min = energies.min()
    keep = [ids[u] for u in rep.unique
            if energies[u] - e_min <= convert(window, "kcal/mol", "hartree")]
    failed = [c for c in ens.ids(active=False) if c not in set(ids)]
    step = step_record("prune-preoptimized", started=t0, n_in=len(ids), n_out=len(keep),
                       window_kcal=window, rmsd=loose.rmsd,
                       energy_tolerance_kcal=loose.energy_tolerance,
                       duplicates=len(rep.duplicate_of) - len(rep.mirror_of),
                       mirror_images=len(rep.mirror_of))
    return ens.select(keep + failed, step=step), positions


def _finish(ens: Ensemble, positions: dict, method: str, window: float | None,
            settings: PruneSettings, achiral: bool, *, sampling, t_start: float, t_max: float,
            min_population: float) -> Ensemble:
    """Final duplicate removal, mirror images, population cut (and optional energy window);
    failures kept as rows."""
    from .thermo import boltzmann_weights

    t0 = time.perf_counter()
    ids = ens.ids()
    if not ids:  # every conformer failed: the rows and their reasons are the result
        log.warning("no conformer survived; reasons: %s",
                    "; ".join(sorted(set(ens.raw_table["reason"]))))
        ens = _renumber(ens)
        ens.provenance.append({"step": "summary", "seconds": round(time.perf_counter() - t_start, 3),
                               "conformers": 0, **_sampling_summary(sampling)})
        return ens
    table = ens.raw_table
    energies = table.loc[ids, f"energy_{method}"].to_numpy(dtype=float)
    # mirror images are always merged here; with merge_mirror_images=False each chiral
    # conformer gets its mirror image back as a row of its own below (one path, no doubles)
    merging = PruneSettings(rmsd=settings.rmsd, energy_tolerance=settings.energy_tolerance,
                            merge_mirror_images=True, max_automorphisms=settings.max_automorphisms)
    rep = find_duplicates(ens.mol, [positions[c] for c in ids], energies, merging, achiral=achiral)
    e_min = energies.min()
    keep, n_window = [], 0
    candidates = [u for u in rep.unique
                  if window is None or energies[u] - e_min <= convert(window, "kcal/mol", "hartree")]
    n_window = len(rep.unique) - len(candidates)
    degeneracy = [2 if achiral and rep.chiral_conformer[u] else 1 for u in candidates]
    weights = boltzmann_weights(energies[candidates], t_max, unit="hartree", degeneracy=degeneracy)
    dropped_share = float(weights[weights < min_population].sum())
    n_rare = int((weights < min_population).sum())
    keep = [ids[u] for u, w in zip(candidates, weights) if w >= min_population]
    table["times_found"] = table.get("times_found", pd.Series(1, index=table.index))
    for dup, ref in rep.duplicate_of.items():
        table.loc[ids[ref], "times_found"] += table.loc[ids[dup], "times_found"]
    chiral = {ids[u]: rep.chiral_conformer[u] for u in rep.unique}
    table["chiral_conformer"] = pd.Series(chiral).reindex(table.index).fillna(False).astype(bool)
    failed = [int(c) for c in table.index if table.loc[c, "status"] != "ok"]
    mol = ens.mol
    mirror_rows = []
    if achiral:
        for cid in keep:
            if chiral.get(cid):
                if settings.merge_mirror_images:
                    table.loc[cid, "degeneracy"] = 2
                else:
                    mirror_rows.append(cid)
    ens = Ensemble(mol, table, level=method, charge=ens.charge, multiplicity=ens.multiplicity,
                   solvent=ens.solvent, provenance=ens.provenance, name=ens.name)
    ens = ens.select(sorted(keep, key=lambda c: table.loc[c, f"energy_{method}"]) + failed)
    if mirror_rows:
        ens = _add_mirror_rows(ens, mirror_rows)
    ens = _renumber(ens)
    ens.provenance.append(step_record(
        "prune", started=t0, n_in=len(ids), n_out=len(keep), method=method, window_kcal=window,
        min_population=min_population, population_temperature=t_max, below_min_population=n_rare,
        population_dropped=round(dropped_share, 6),
        rmsd=settings.rmsd, energy_tolerance_kcal=settings.energy_tolerance,
        duplicates=len(rep.duplicate_of), mirror_pairs_merged=len(rep.mirror_of),
        outside_window=n_window, merge_mirror_images=settings.merge_mirror_images,
        failed_kept_as_rows=len(failed)))
    ens.provenance.append({"step": "summary", "seconds": round(time.perf_counter() - t_start, 3),
                           "conformers": len(ens), **_sampling_summary(sampling)})
    return ens


def _sampling_summary(sampling) -> dict:
    """What the summary says about sampling: the completeness estimate, the agreement of
    the two streams and why sampling stopped."""
    return {"completeness": round(sampling.completeness, 4),
            "unseen_share": round(sampling.unseen_share, 4),
            "stream_overlap": None if sampling.stream_overlap is None else round(sampling.stream_overlap, 4),
            "target_overlap": sampling.target_overlap, "sampling_converged": bool(sampling.converged),
            "sampling_stop": sampling.stop_reason}


def _add_mirror_rows(ens: Ensemble, conf_ids: list[int]) -> Ensemble:
    """Add the mirror image of each listed conformer as a separate row (achiral molecules)."""
    mol = ens.mol
    table = ens.raw_table
    table["mirror_of"] = -1
    next_id = max(ens.ids(active=False)) + 1
    for cid in conf_ids:
        conf = Chem.Conformer(mol.GetConformer(cid))
        for a in range(mol.GetNumAtoms()):
            p = conf.GetAtomPosition(a)
            conf.SetAtomPosition(a, (-p.x, p.y, p.z))
        conf.SetId(next_id)
        mol.AddConformer(conf, assignId=False)
        row = table.loc[cid].copy()
        row["mirror_of"] = cid
        table.loc[next_id] = row
        next_id += 1
    return Ensemble(mol, table, level=ens.level, charge=ens.charge, multiplicity=ens.multiplicity,
                    solvent=ens.solvent, provenance=ens.provenance, name=ens.name)


def _renumber(ens: Ensemble) -> Ensemble:
    """Conformer ids 0..n-1: active ones by energy, failed ones after."""
    table = ens.raw_table
    active = [c for c in ens.ids()]
    active.sort(key=lambda c: (table.loc[c, f"energy_{ens.level}"], c))
    order = active + [c for c in ens.ids(active=False) if c not in active]
    mol = ens.mol
    new = Chem.Mol(mol)
    new.RemoveAllConformers()
    mapping = {}
    for new_id, old in enumerate(order):
        conf = Chem.Conformer(mol.GetConformer(old))
        conf.SetId(new_id)
        new.AddConformer(conf, assignId=False)
        mapping[old] = new_id
    table = table.loc[order]
    if "mirror_of" in table.columns:
        table["mirror_of"] = [mapping.get(int(m), -1) if m >= 0 else -1 for m in table["mirror_of"]]
    table.index = pd.Index(range(len(order)), name="conformer")
    return Ensemble(new, table, level=ens.level, charge=ens.charge, multiplicity=ens.multiplicity,
                    solvent=ens.solvent, provenance=ens.provenance, name=ens.name)
