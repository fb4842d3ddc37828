"""Per-conformer free energies from harmonic frequencies, and single points at another level.

Both functions take an :class:`~confpop.ensemble.Ensemble` and return a new one with extra
table columns (the input is not changed). Each conformer is one unit of work for
:func:`confpop.execution.run_units` (``executor=`` / ``workers=``); a conformer whose
calculation fails keeps its row, with status "failed" and the reason.

Columns written by :func:`add_free_energies` (T formatted with two decimals, as
:func:`confpop.ensemble.temperature_key` does, e.g. ``gcorr_298.15``):

``gcorr_<T>`` : hartree
    Thermal correction to the Gibbs energy at T (ZPE included), so G(T) = E + gcorr_<T>,
    in the standard state named in the provenance ("1 bar" ideal gas, or "1 M" when a
    solvent is used).
``hcorr_<T>`` : hartree
    Thermal correction to the enthalpy at T (ZPE included): H(T) = E + hcorr_<T>.
``entropy_<T>`` : hartree/K
    Absolute entropy at T in the same standard state; gcorr = hcorr - T * entropy.
``zpe`` : hartree
    Harmonic zero-point energy.
``symmetry_number`` : int
    Rotational symmetry number σ of the conformer (its -RT ln σ is inside gcorr).
``imaginary_modes`` : int
    Number of imaginary modes below ``imaginary_threshold`` (a saddle point, or a structure
    that is not a minimum at this level); 0 for a proper minimum.
``lowest_frequency`` : float, cm⁻¹
    The lowest vibrational wavenumber (negative: imaginary).
``max_gradient`` : float, hartree/angstrom
    Largest gradient component at the geometry used (a check that it is a stationary point).

:func:`rescore` writes ``energy_<method>`` (hartree; ``energy_dft`` for DFT).

Standard state
--------------
The ideal-gas terms are for 1 bar. With an implicit solvent (``solvent`` given, or taken
from the ensemble) the free energies are moved to 1 mol/L by adding RT ln(c° R T / p°) =
1.90 kcal/mol at 298.15 K (the same for every conformer, so populations do not change).
"""

from __future__ import annotations

import logging
import time

import numpy as np
import pandas as pd
from rdkit import Chem

from .errors import FrequencyWarning, InputError, caution
from .thermo import check_temperatures
from .units import convert

__all__ = ["add_free_energies", "rescore", "free_energy_unit", "single_point_unit",
           "GAS_PHASE"]

log = logging.getLogger(__name__)

#: pass as ``solvent`` to force the gas phase even when the ensemble has a solvent
GAS_PHASE = "gas"


def _conformer_binary(mol: Chem.Mol, conf_id: int) -> bytes:
    single = Chem.Mol(mol)
    single.RemoveAllConformers()
    conf = Chem.Conformer(mol.GetConformer(int(conf_id)))
    conf.SetId(0)
    single.AddConformer(conf, assignId=False)
    return single.ToBinary()


def _resolve_solvent(ens, solvent, method):
    if isinstance(solvent, str) and solvent.strip().lower() in (GAS_PHASE, "none", "vacuum"):
        return None
    if solvent is not None:
        return solvent
    if ens.solvent is None:
        return None
    from .backends import backend_class
    if "solvent" not in backend_class(method).capabilities:
        log.info("method %s has no solvent model; using the gas phase although the ensemble "
                 "is in %s", method, ens.solvent)
        return None
    return ens.solvent


# ---------------------------------------------------------------------------------- units
def free_energy_unit(task: dict) -> dict:
    """Free-energy corrections of one conformer (one unit of work for run_units).

    ``task`` holds ``mol`` (RDKit binary, one conformer), ``method``, ``settings`` (backend
    keywords), ``temperatures``, ``low_mode``, ``cutoff``, ``imaginary_threshold``,
    ``displace_imaginary``, ``standard_state``, ``step``. Returns a dict of plain numbers
    (and the new positions when the structure was displaced and re-optimized).
    """
    from .backends import get_backend
    from .optimize import optimize_positions
    from .thermo import ideal_gas_thermo, standard_state_correction
    from .vibrations import harmonic_analysis

    mol = Chem.Mol(task["mol"])
    method, settings = task["method"], dict(task["settings"])
    threshold = float(task["imaginary_threshold"])
    res = harmonic_analysis(mol, method, step=task["step"], **settings)
    displaced = 0
    new_positions = None
    new_energy = None
    while task["displace_imaginary"] and displaced < 2 and np.any(res.frequencies < threshold):
        # step downhill along the most negative mode (both directions tried) and re-optimize
        backend = get_backend(method, mol, **settings)
        mode = res.normal_modes[0]
        mode = mode / np.max(np.linalg.norm(mode, axis=1))  # largest atom displacement 1 Å
        trials = [res.positions + s * 0.2 * mode for s in (1.0, -1.0)]
        energies = [backend.compute(p, gradient=False).energy for p in trials]
        start = trials[int(np.argmin(energies))]
        opt = optimize_positions(backend, start, convergence="tight")
        conf = mol.GetConformer()
        for i, xyz in enumerate(opt.positions):
            conf.SetAtomPosition(i, xyz.tolist())
        displaced += 1
        new_positions, new_energy = np.array(opt.positions), float(opt.energy)
        res = harmonic_analysis(mol, method, step=task["step"], **settings)
    freqs = np.array(res.frequencies)
    n_bad = int(np.sum(freqs < threshold))
    # small imaginary modes above the threshold are taken as numerical noise of a minimum and
    # used with their absolute value (common practice); those below are left out and flagged
    used = np.where((freqs < 0) & (freqs >= threshold), -freqs, freqs)
    used = used[used != 0.0]
    temps = list(task["temperatures"])
    th = ideal_gas_thermo(used, mass=res.mass, rotational_constants=res.rotational_constants,
                          symmetry_number=res.symmetry_number, temperature=temps,
                          multiplicity=res.multiplicity, low_mode=task["low_mode"],
                          cutoff=task["cutoff"], unit="hartree")
    gibbs = np.atleast_1d(th.gibbs).astype(float)
    if task["standard_state"] != "1 bar":
        shift = np.atleast_1d(standard_state_correction(temps, "1 bar", task["standard_state"],
                                                        unit="hartree"))
        gibbs = gibbs + shift
        entropy = (np.atleast_1d(th.enthalpy) - gibbs) / np.asarray(temps)
    else:
        entropy = np.atleast_1d(th.entropy).astype(float)
    return {"gcorr": gibbs.tolist(), "hcorr": np.atleast_1d(th.enthalpy).astype(float).tolist(),
            "entropy": entropy.tolist(), "zpe": float(th.zpe),
            "symmetry_number": int(res.symmetry_number), "imaginary_modes": n_bad,
            "lowest_frequency": float(freqs.min()) if freqs.size else float("nan"),
            "max_gradient": float(np.max(np.abs(res.gradient))), "energy": float(res.energy),
            "displaced": displaced, "positions": new_positions, "new_energy": new_energy}


def single_point_unit(task: dict) -> dict:
    """Energy of one conformer at another level (one unit of work for run_units)."""
    from .backends import get_backend

    mol = Chem.Mol(task["mol"])
    backend = get_backend(task["method"], mol, **task["settings"])
    res = backend.compute(mol.GetConformer().GetPositions(), gradient=False)
    return {"energy": float(res.energy)}


# ---------------------------------------------------------------------------------- helpers
def _run(function, tasks, executor, workers, progress, description, *, store=None, kind=None,
         unit_settings=()):
    """Run the per-conformer units; with a store, each under its :func:`confpop.jobs.job_key`."""
    from .jobs import job_key, run_jobs

    keys = None
    if store is not None:
        keys = []
        for task in tasks:
            mol = Chem.Mol(task["mol"])
            backend = dict(task["settings"])
            charge, multiplicity = backend.pop("charge", None), backend.pop("multiplicity", None)
            solvent = backend.pop("solvent", None)
            settings = {"backend": backend, **{k: task[k] for k in unit_settings}}
            keys.append(job_key([a.GetAtomicNum() for a in mol.GetAtoms()],
                                mol.GetConformer().GetPositions(), charge=charge,
                                multiplicity=multiplicity, method=task["method"], solvent=solvent,
                                settings=settings, kind=kind))
    return run_jobs(function, tasks, keys=keys, store=store, executor=executor, workers=workers,
                    progress=progress, description=description)


def _rebuild(ens, mol, table, step, level=None):
    # the ensemble's own class (no import of confpop.ensemble, which forwards to this module)
    return type(ens)(mol, table, level=level or ens.level, charge=ens.charge,
                    multiplicity=ens.multiplicity, solvent=ens.solvent,
                    provenance=list(ens.provenance) + [step], name=ens.name)


def _active_ids(ens) -> list[int]:
    ids = ens.ids()
    if not ids:
        raise InputError("ensemble has no active conformers (all failed or were removed); "
                         "see ens.table() for the reasons")
    return ids


def _fail(table, cid, what, outcome):
    table.loc[cid, "status"] = "failed"
    table.loc[cid, "reason"] = f"{what}: {outcome.error_type}: {outcome.error_message}"


# ---------------------------------------------------------------------------------- public
def add_free_energies(ens, method: str = "gfn2", temperatures=(298.15,), low_mode: str = "qrrho",
                      cutoff: float = 100.0, solvent: str | None = None,
                      imaginary_threshold: float = -50.0, displace_imaginary: bool = False,
                      executor=None, *, workers: int | None = None, step: float = 0.005,
                      standard_state: str | None = None, progress: bool = False, store=None,
                      **backend_options):
    """Per-conformer G(T) = E + G_corr(T) from numerical harmonic frequencies (RRHO).

    Parameters
    ----------
    ens : confpop.ensemble.Ensemble
        Its conformers should be minima at ``method`` (optimize first); ``max_gradient``
        in the result tells how far they are from that.
    method : str
        Backend for the Hessians (default "gfn2").
    temperatures : float or sequence of float, K
    low_mode : {"qrrho", "rrho", "quasi-harmonic"}
        Treatment of low-frequency modes (see :func:`confpop.thermo.ideal_gas_thermo`);
        the default is Grimme's quasi-RRHO entropy.
    cutoff : float, cm⁻¹
        ν₀ of the low-mode treatment.
    solvent : str, optional
        Implicit solvent for the Hessians; default: the ensemble's solvent (if ``method``
        has a solvent model). ``"gas"`` forces the gas phase.
    imaginary_threshold : float, cm⁻¹
        Imaginary modes below this (default -50) are counted in ``imaginary_modes`` and left
        out of the thermochemistry; smaller ones are taken as numerical noise and used with
        their absolute value (common practice).
    displace_imaginary : bool
        Displace a conformer with a mode below the threshold along that mode (downhill),
        re-optimize it at ``method`` (:func:`confpop.optimize.optimize_positions`) and redo
        the Hessian (at most twice). The new geometry replaces the old one; if ``method`` is
        the ensemble's ranking level its energy is updated too.
    executor, workers
        Where the per-conformer units run (see :func:`confpop.execution.run_units`);
        ``workers=1`` runs them in this process.
    step : float, bohr
        Finite-difference step of the Hessian.
    standard_state : {"1 bar", "1 M"}, optional
        Default "1 M" with a solvent, "1 bar" in the gas phase.
    progress : bool
    store : str, os.PathLike or confpop.store.ResultStore, optional
        Result store: Hessians already in it are reused, each new one is written as soon as
        it is done (an interrupted run resumes where it stopped).
    **backend_options
        Passed to the backend.

    Returns
    -------
    Ensemble
        With the columns listed in the module docstring; conformers whose Hessian failed get
        status "failed" and the reason. ``ens.populations(T, energy="free")`` then uses G(T).

    Raises
    ------
    InputError
        Bad temperatures, low_mode, threshold or standard state; unknown method.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> from confpop.ensemble import Ensemble
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("O"))
    >>> _ = AllChem.EmbedMolecule(mol, randomSeed=1)
    >>> _ = AllChem.MMFFOptimizeMolecule(mol, maxIters=2000)
    >>> ens = Ensemble.from_mol(mol, level="mmff94")
    >>> out = add_free_energies(ens, method="mmff94", temperatures=[298.15], workers=1)
    >>> int(out.column("symmetry_number")[0]), int(out.column("imaginary_modes")[0])
    (2, 0)
    """
    from .records import step_record, temperature_key

    started = time.perf_counter()
    temps = check_temperatures(temperatures)
    if low_mode not in ("qrrho", "rrho", "quasi-harmonic"):
        raise InputError(f"low_mode must be 'qrrho', 'rrho' or 'quasi-harmonic', got {low_mode!r}")
    if not (isinstance(imaginary_threshold, (int, float)) and imaginary_threshold <= 0):
        raise InputError(f"imaginary_threshold must be a number <= 0 cm-1, got {imaginary_threshold!r}")
    if not (isinstance(cutoff, (int, float)) and cutoff > 0):
        raise InputError(f"cutoff must be a positive number of cm-1, got {cutoff!r}")
    solvent = _resolve_solvent(ens, solvent, method)
    if standard_state is None:
        standard_state = "1 M" if solvent is not None else "1 bar"
    if standard_state not in ("1 bar", "1 M"):
        raise InputError(f"standard_state must be '1 bar' or '1 M', got {standard_state!r}")
    settings = dict(backend_options, charge=ens.charge, multiplicity=ens.multiplicity)
    if solvent is not None:
        settings["solvent"] = solvent
    from .backends import backend_class
    backend_class(method)  # unknown method -> InputError now, not in every unit

    mol = ens.mol
    ids = _active_ids(ens)
    tasks = [{"mol": _conformer_binary(mol, cid), "method": method, "settings": settings,
              "temperatures": temps, "low_mode": low_mode, "cutoff": float(cutoff),
              "imaginary_threshold": float(imaginary_threshold),
              "displace_imaginary": bool(displace_imaginary), "standard_state": standard_state,
              "step": float(step)} for cid in ids]
    outcomes = _run(free_energy_unit, tasks, executor, workers, progress, "free energies",
                    store=store, kind="free-energy",
                    unit_settings=("temperatures", "low_mode", "cutoff", "imaginary_threshold",
                                   "displace_imaginary", "standard_state", "step"))

    table = ens.raw_table
    keys = [temperature_key(t) for t in temps]
    columns = ([f"gcorr_{k}" for k in keys] + [f"hcorr_{k}" for k in keys]
               + [f"entropy_{k}" for k in keys]
               + ["zpe", "lowest_frequency", "max_gradient"])
    for col in columns:
        table[col] = np.nan
    for col in ("symmetry_number", "imaginary_modes"):
        table[col] = pd.array([pd.NA] * len(table), dtype="Int64")
    level_col = f"energy_{ens.level}"
    n_displaced = 0
    for cid, outcome in zip(ids, outcomes):
        if not outcome.ok:
            _fail(table, cid, "free energy", outcome)
            continue
        v = outcome.value
        for k, g, h, s in zip(keys, v["gcorr"], v["hcorr"], v["entropy"]):
            table.loc[cid, f"gcorr_{k}"] = g
            table.loc[cid, f"hcorr_{k}"] = h
            table.loc[cid, f"entropy_{k}"] = s
        for col in ("zpe", "lowest_frequency", "max_gradient", "symmetry_number",
                    "imaginary_modes"):
            table.loc[cid, col] = v[col]
        if v["positions"] is not None:
            n_displaced += 1
            conf = mol.GetConformer(cid)
            for i, xyz in enumerate(v["positions"]):
                conf.SetAtomPosition(i, list(map(float, xyz)))
            if method.lower() == ens.level.lower() and level_col in table.columns:
                table.loc[cid, level_col] = v["new_energy"]
            else:
                caution(log, FrequencyWarning, "conformer %d was re-optimized at %s; its %s "
                        "energy is from the old geometry", cid, method, ens.level)
    n_flagged = int((table["imaginary_modes"].fillna(0) > 0).sum())
    if n_flagged:
        caution(log, FrequencyWarning, "%d conformer(s) have imaginary modes below %.0f cm-1 "
                "(column imaginary_modes)", n_flagged, imaginary_threshold)
    step_info = step_record("free energies", started=started, n_in=len(ids),
                            n_out=int(sum(o.ok for o in outcomes)), method=method,
                            solvent=solvent, temperatures=temps, low_mode=low_mode,
                            cutoff=float(cutoff), imaginary_threshold=float(imaginary_threshold),
                            displace_imaginary=bool(displace_imaginary), displaced=n_displaced,
                            flagged=n_flagged, standard_state=standard_state,
                            hessian_step_bohr=float(step),
                            model="ideal gas, rigid rotor, harmonic oscillator")
    return _rebuild(ens, mol, table, step_info)


def rescore(ens, method: str = "dft", functional: str | None = None, basis: str | None = None,
            dispersion: str | None = "d3bj", solvent: str | None = None, executor=None,
            progress: bool = False, *, workers: int | None = None, rank: bool = True,
            store=None, **backend_options):
    """Single-point energies of every active conformer at another level of theory.

    Parameters
    ----------
    ens : confpop.ensemble.Ensemble
    method : str
        Backend name (default "dft"; any registered name works, e.g. "gfn2").
    functional, basis, dispersion
        DFT settings (see :class:`confpop.backends.dft.DFT`; defaults B3LYP, def2-SVPD,
        D3(BJ)); ignored for other methods.
    solvent : str, optional
        Default: the ensemble's solvent if ``method`` has a solvent model; ``"gas"`` forces
        the gas phase.
    executor, workers
        Where the units run (see :func:`confpop.execution.run_units`).
    progress : bool
    rank : bool
        Make the new level the one that ranks the conformers (default True).
    store : str, os.PathLike or confpop.store.ResultStore, optional
        Result store: energies already in it are reused, new ones written as they come.
    **backend_options
        Other backend options (``grid_level``, ``threads``, ...).

    Returns
    -------
    Ensemble
        With the column ``energy_<method>`` (hartree). A conformer whose calculation failed
        keeps its row with status "failed" and the engine's reason, and NaN energy.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> from confpop.ensemble import Ensemble
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    >>> _ = AllChem.EmbedMultipleConfs(mol, 2, randomSeed=1)
    >>> out = rescore(Ensemble.from_mol(mol), method="mmff94", workers=1)
    >>> out.level, bool(out.column("energy_mmff94").notna().all())
    ('mmff94', True)
    """
    from .backends import backend_class
    from .records import step_record

    started = time.perf_counter()
    if not isinstance(method, str):
        raise InputError(f"method must be a backend name, got {method!r}")
    backend_class(method)
    solvent = _resolve_solvent(ens, solvent, method)
    settings = dict(backend_options, charge=ens.charge, multiplicity=ens.multiplicity)
    if method.lower() == "dft":
        if functional is not None:
            settings["functional"] = functional
        if basis is not None:
            settings["basis"] = basis
        settings["dispersion"] = dispersion
    if solvent is not None:
        settings["solvent"] = solvent
    mol = ens.mol
    ids = _active_ids(ens)
    tasks = [{"mol": _conformer_binary(mol, cid), "method": method, "settings": settings}
             for cid in ids]
    outcomes = _run(single_point_unit, tasks, executor, workers, progress,
                    f"{method} single points", store=store, kind="rescore-singlepoint")
    level = method.lower()
    column = f"energy_{level}"
    table = ens.raw_table
    table[column] = np.nan
    for cid, outcome in zip(ids, outcomes):
        if outcome.ok:
            table.loc[cid, column] = outcome.value["energy"]
        else:
            _fail(table, cid, f"{method} single point", outcome)
    shown = {k: v for k, v in settings.items() if k not in ("threads",)}
    step_info = step_record("rescore", started=started, n_in=len(ids),
                            n_out=int(sum(o.ok for o in outcomes)), method=level, solvent=solvent,
                            settings=shown)
    return _rebuild(ens, mol, table, step_info, level=level if rank else None)
