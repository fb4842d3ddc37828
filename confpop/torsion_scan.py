"""Torsion scans: drive one dihedral angle around its bond and record the energy.

A scan drives one dihedral angle i-j-k-l around the j-k bond. In a *relaxed* scan every
other coordinate is optimized under a dihedral constraint at each point; the scan starts at
the relaxed minimum's dihedral and walks both up and down the full circle, each point
starting from the previous point's geometry. The lower of the two energies is kept at each
angle, and where the two directions disagree (a neighbouring group flipped during one walk
but not the other: hysteresis) the angles and the differences are reported. A *rigid* scan
only rotates the moving fragment about the j-k bond.

Fitted extrema that fall between grid points are computed explicitly (from the computed
neighbours on both sides), so minimum and maximum energies are computed, not interpolated.
The result is a :class:`~confpop.torsion_profile.TorsionProfile`.
"""

from __future__ import annotations

import logging
import math

import numpy as np
from rdkit import Chem

from .errors import CalculationFailed, InputError, ScanWarning, caution
from .fourier import _wrap_into
from .geometry import _circular_difference, dihedral_angle, set_dihedral, wrap_degrees
from .rotatable import _check_dihedral_atoms, _label, _side, _torsion_from_atoms
from .settings import SCAN_DEFAULTS as _SCAN
from .torsion_profile import HYSTERESIS_KCAL, TorsionProfile
from .units import convert, normalize_unit

__all__ = ["scan_torsion"]

log = logging.getLogger(__name__)


#: the embedding seed used when a molecule comes without a conformer
EMBED_SEED = 0xC0F

#: a fitted extremum farther than this (degrees) from every scan point is computed explicitly
REFINE_DEG = 1.0


def _prepare(molecule, conf_id, charge, multiplicity):
    """(mol with explicit H and >= 1 conformer, conformer id, embedded?)."""
    if isinstance(molecule, str):
        from .loading import load_molecule
        mol = load_molecule(molecule, charge=charge, multiplicity=multiplicity)
    elif isinstance(molecule, Chem.Mol):
        mol = Chem.Mol(molecule)
        if any(a.GetNumImplicitHs() for a in mol.GetAtoms()):
            mol = Chem.AddHs(mol, addCoords=mol.GetNumConformers() > 0)
    else:
        raise InputError(f"molecule must be a SMILES string or an RDKit Mol, "
                         f"got {type(molecule).__name__}")
    embedded = False
    if mol.GetNumConformers() == 0:
        from rdkit.Chem import rdDistGeom
        params = rdDistGeom.ETKDGv3()
        params.randomSeed = EMBED_SEED
        if rdDistGeom.EmbedMolecule(mol, params) != 0:
            params.useRandomCoords = True
            if rdDistGeom.EmbedMolecule(mol, params) != 0:
                raise InputError(f"could not embed a 3D structure for "
                                 f"{Chem.MolToSmiles(Chem.RemoveHs(mol))}")
        embedded = True
        conf_id = mol.GetConformer().GetId()
    else:
        ids = [c.GetId() for c in mol.GetConformers()]
        if conf_id == -1:
            conf_id = ids[0]
        if conf_id not in ids:
            raise InputError(f"conf_id must be one of {ids}, got {conf_id}")
    return mol, int(conf_id), embedded


def _make_backend(method, mol, solvent, charge, multiplicity, options):
    from .backends import Backend, get_backend
    kw = dict(options)
    if solvent is not None:
        kw["solvent"] = solvent
    if charge is not None:
        kw["charge"] = charge
    if multiplicity is not None:
        kw["multiplicity"] = multiplicity
    if isinstance(method, type) and issubclass(method, Backend):
        return method(mol, **kw)
    return get_backend(method, mol, **kw)


def _method_name(method) -> str:
    return method if isinstance(method, str) else getattr(method, "name", str(method))


def _grid(start, stop, step):
    for name, v in (("start", start), ("stop", stop), ("step", step)):
        if not isinstance(v, (int, float, np.integer, np.floating)) or not math.isfinite(v):
            raise InputError(f"{name} must be a finite number of degrees, got {v!r}")
    start, stop, step = float(start), float(stop), float(step)
    if step <= 0:
        raise InputError(f"step must be > 0 degrees, got {step}")
    span = stop - start
    if span <= 0 or span > 360.0 + 1e-9:
        raise InputError(f"stop must be above start by at most 360 degrees, got start={start}, "
                         f"stop={stop}")
    periodic = abs(span - 360.0) < 1e-9
    count = span / step
    if periodic:
        if abs(count - round(count)) > 1e-6:
            raise InputError(f"step must divide 360 degrees for a full-turn scan, got {step}")
        n = int(round(count))
        if n < 4:
            raise InputError(f"a full-turn scan needs at least 4 points (step <= 90), got step={step}")
        angles = start + step * np.arange(n)
    else:
        angles = np.arange(start, stop + 1e-9, step)
        if len(angles) < 4:
            raise InputError(f"a scan needs at least 4 points; start={start}, stop={stop}, "
                             f"step={step} give {len(angles)}")
    return angles, periodic


def _moving_fragment(mol, atoms):
    """The smaller side of the j-k bond (None if the bond is in a ring)."""
    i, j, k, l = atoms
    side_k = _side(mol, k, j)
    if side_k is None:
        return None
    side_j = set(range(mol.GetNumAtoms())) - side_k
    return side_k if len(side_k) <= len(side_j) else side_j


def walk_unit(item: dict) -> list:
    """One walk of a scan through ``item["targets"]`` (a picklable unit of work)."""
    return _walk(item["mol"], item["method"], item["backend_kw"], item["positions"],
                 item["atoms"], item["targets"], item["convergence"], item["moving"],
                 item["relaxed"])


def _start_unit(item: dict) -> dict:
    """Relax the starting structure without constraint (a picklable unit of work)."""
    from .optimize import optimize_positions

    backend = _make_backend(item["method"], item["mol"], **item["backend_kw"])
    res = optimize_positions(backend, np.asarray(item["positions"], dtype=float),
                             convergence=item["convergence"])
    return {"positions": np.array(res.positions, dtype=float),
            "gradient_calls": int(res.gradient_calls), "converged": bool(res.converged),
            "message": res.message}


class _Runner:
    """Builds the scan's work items and runs them through the execution layer and store."""

    def __init__(self, mol, method, backend_kw, atoms, convergence, moving, executor, store):
        self.mol, self.method, self.backend_kw = mol, method, backend_kw
        self.atoms, self.convergence, self.executor, self.store = (atoms, convergence, executor,
                                                                   store)
        self.moving = None if moving is None else sorted(int(a) for a in moving)

    def item(self, positions, *, targets=(), relaxed=True) -> dict:
        return {"mol": self.mol, "method": self.method, "backend_kw": self.backend_kw,
                "positions": np.array(positions, dtype=float), "atoms": self.atoms,
                "targets": [float(t) for t in targets], "convergence": self.convergence,
                "moving": self.moving, "relaxed": bool(relaxed)}

    def _key(self, item, kind):
        from .jobs import job_key

        method = self.method
        name = (method if isinstance(method, str)
                else f"{method.__module__}.{getattr(method, '__qualname__', _method_name(method))}")
        kw = dict(self.backend_kw)
        settings = {"options": kw.pop("options", {}), "atoms": list(self.atoms),
                    "targets": item["targets"], "convergence": item["convergence"],
                    "moving": self.moving, "relaxed": item["relaxed"]}
        if kind == "torsion-start":  # the one unconstrained optimization of a scan
            from .optimize import optimizer_path
            settings["optimizer"] = optimizer_path()
        return job_key([a.GetAtomicNum() for a in self.mol.GetAtoms()], item["positions"],
                       charge=kw["charge"], multiplicity=kw["multiplicity"], method=name,
                       solvent=kw["solvent"], settings=settings, kind=kind)

    def run(self, function, items, what, *, kind="torsion-walk") -> list:
        from .jobs import run_jobs

        from .execution import _active_pool

        keys = [self._key(it, kind) for it in items] if self.store is not None else None
        # on the given executor, or on the pool of an enclosing pool_scope (only for a method
        # a worker can import: a backend class defined in a notebook or script cannot be
        # unpickled there), else here
        importable = isinstance(self.method, str) or \
            getattr(self.method, "__module__", "__main__") != "__main__"
        local = 1 if self.executor is None and (_active_pool() is None or not importable) \
            else None
        outcomes = run_jobs(function, items, keys=keys, store=self.store,
                            executor=self.executor, workers=local)
        for outcome in outcomes:
            if not outcome.ok:
                if outcome.error_type == "InputError":
                    raise InputError(outcome.error_message)
                raise CalculationFailed(f"{what} failed ({outcome.attempts} attempts): "
                                        f"{outcome.error_type}: {outcome.error_message}")
        return [o.value for o in outcomes]


def _walk(mol, method, backend_kw, positions, atoms, targets, convergence, moving, relaxed,
          starts=None):
    """One walk through ``targets``; returns a list of per-point dicts (picklable).

    Each point starts from the previous point's geometry, or from ``starts[idx]`` if given.
    """
    backend = _make_backend(method, mol, **backend_kw)
    pos = None if positions is None else np.array(positions, dtype=float)
    out = []
    for idx, target in enumerate(targets):
        if starts is not None:
            pos = np.array(starts[idx], dtype=float)
        trial = set_dihedral(pos, atoms, target, moving) if moving is not None else pos.copy()
        if not relaxed:
            try:
                res = backend.compute(trial, gradient=False)
                out.append({"energy": res.energy, "converged": True, "message": "",
                            "positions": trial, "angle": dihedral_angle(trial, atoms)})
            except CalculationFailed as exc:
                out.append({"energy": float("nan"), "converged": False, "message": str(exc),
                            "positions": None, "angle": float("nan")})
            continue
        from .optimize import optimize_positions
        try:
            res = optimize_positions(backend, trial, convergence=convergence,
                                     dihedral_constraints=[(atoms, float(wrap_degrees(target)))])
        except CalculationFailed as exc:
            log.warning("scan point %.1f deg failed: %s", target, exc)
            out.append({"energy": float("nan"), "converged": False, "message": str(exc),
                        "positions": None, "angle": float("nan")})
            pos = trial
            continue
        final = np.array(res.positions, dtype=float)
        try:
            angle = dihedral_angle(final, atoms)
        except InputError as exc:  # the optimizer made a bond angle of the dihedral linear
            out.append({"energy": float("nan"), "converged": False, "message": str(exc),
                        "positions": None, "angle": float("nan"),
                        "gradient_calls": int(res.gradient_calls)})
            pos = trial
            continue
        converged = bool(res.converged)
        message = res.message
        if _circular_difference(angle, target) > 1.0:
            converged = False
            message = (f"dihedral reached {angle:.2f} deg, not the target {wrap_degrees(target):.2f}; "
                       + message)
        out.append({"energy": float(res.energy), "converged": converged, "message": message,
                    "positions": final, "angle": angle, "gradient_calls": int(res.gradient_calls)})
        pos = final
    return out


def scan_torsion(molecule, atoms, method=_SCAN.method, solvent=_SCAN.solvent,
                 start: float = _SCAN.start, stop: float = _SCAN.stop, step: float = _SCAN.step,
                 relaxed: bool = _SCAN.relaxed, conf_id: int = _SCAN.conf_id,
                 convergence: str = _SCAN.convergence, executor=None,
                 unit: str = _SCAN.unit, *, charge: int | None = None,
                 multiplicity: int | None = None,
                 hysteresis_threshold: float | None = _SCAN.hysteresis_threshold,
                 refine: bool = _SCAN.refine, store=None,
                 **backend_options) -> TorsionProfile:
    """Scan one dihedral angle and return its energy profile.

    Parameters
    ----------
    molecule : str or rdkit.Chem.Mol
        SMILES (or anything :func:`confpop.molecule.load_molecule` reads) or a molecule. Without
        a conformer one is embedded (ETKDG, fixed seed) and relaxed with ``method`` first.
    atoms : (i, j, k, l) ints
        0-based atom indices (RDKit order, hydrogens included) of a bonded chain; the bond
        j-k rotates.
    method : str or Backend subclass
        Energy method: a registered backend name ("gfn2", "mmff94s", "model", ...) or a
        :class:`confpop.backends.Backend` subclass (for a custom potential).
    solvent : str, optional
        Implicit solvent for backends that have one.
    start, stop, step : float, degrees
        Scan grid; stop − start = 360 (the default) is a full turn, which ``step`` must divide.
    relaxed : bool
        True: every other coordinate is optimized under the dihedral constraint, walking up
        and down from the relaxed minimum. False: a rigid scan (the smaller fragment is turned
        about the j-k bond, nothing is optimized).
    conf_id : int
        Starting conformer of ``molecule`` (-1: the first).
    convergence : str
        Optimizer preset ("loose", "normal", "tight", "verytight").
    executor : concurrent.futures.Executor, optional
        If given, the up and down walks of a relaxed scan run as two units on it, and the
        points added at extrema one unit each, through :func:`confpop.execution.run_units`
        (set ``OMP_NUM_THREADS=1`` in its workers, as
        :func:`confpop.execution.local_executor` does). Default: on the pool of an enclosing
        :func:`confpop.execution.pool_scope` (the command line's), else all in this process.
    unit : str
        Energy unit of the profile.
    charge, multiplicity : int, optional
    hysteresis_threshold : float, optional
        Up/down differences above this (``unit``; default 0.5 kcal/mol) are reported.
    refine : bool
        Compute extra points at the fitted minima and maxima that fall between grid points
        (up to two rounds; each started from the computed points on both sides, keeping the
        lower), so extremum energies are computed, not interpolated; coarse grids otherwise
        under- or overshoot near sharp features.
    store : str, os.PathLike or confpop.store.ResultStore, optional
        Result store: the starting optimization, each walk and each extra point are written
        as they finish and reused by a later call with the same input (an interrupted scan
        resumes); keys as for :func:`confpop.jobs.job_key`.
    **backend_options
        Passed to the backend (e.g. ``barrier=`` for the model backend).

    Returns
    -------
    TorsionProfile

    Raises
    ------
    InputError
        Bad atoms (not a bonded chain, out of range), a bad grid, or a rigid scan of a ring bond.
    BackendUnavailable
        The method's engine is not installed.
    CalculationFailed
        The starting structure could not be computed, or every scan point failed.

    Notes
    -----
    A relaxed scan walks the whole circle twice, up and down from the relaxed minimum,
    each point starting from the previous one's geometry (turned rigidly to the new angle),
    and keeps the lower energy at each angle. A neighbouring group that flips during one walk
    shows up as a difference between the walks (hysteresis) and is reported in
    ``profile.hysteresis``. A point whose optimization fails is kept with
    ``converged=False`` (energy NaN if the engine failed) and the walk goes on. Over a
    partial range (stop − start < 360) the scan first walks down from the minimum to
    ``start``, then sweeps up to ``stop`` and back down, and the profile is a cubic spline.

    The cost is about (2 × points + extrema) constrained optimizations; their optimizer
    steps, not the energy method, dominate for force fields and small molecules.

    Examples
    --------
    >>> prof = scan_torsion("CCCC", (0, 1, 2, 3), method="model", step=30, relaxed=False)
    >>> round(prof.full_rotation_barrier(), 1)
    3.0
    """
    unit = normalize_unit(unit)
    mol, conf_id, embedded = _prepare(molecule, conf_id, charge, multiplicity)
    atoms = _check_dihedral_atoms(mol, atoms)
    angles, periodic = _grid(start, stop, step)
    threshold = (convert(HYSTERESIS_KCAL, "kcal/mol", unit) if hysteresis_threshold is None
                 else float(hysteresis_threshold))
    moving = _moving_fragment(mol, atoms)
    if moving is None and not relaxed:
        raise InputError(f"bond {_label(mol, atoms[1])}-{_label(mol, atoms[2])} is in a ring; "
                         "a rigid scan cannot turn it (use relaxed=True over a partial range)")
    if moving is None:
        caution(log, ScanWarning, "bond %s-%s is in a ring: the scan relies on the optimizer "
                "alone", _label(mol, atoms[1]), _label(mol, atoms[2]))
    backend_kw = {"solvent": solvent, "charge": charge, "multiplicity": multiplicity,
                  "options": backend_options}
    # every backend sees the starting conformer alone, as conformer 0 (the model backend
    # takes its reference bond lengths and angles from it)
    mol_walk = _single_conformer(mol, conf_id)
    _make_backend(method, mol_walk, **backend_kw)  # an unknown method or option fails here
    pos0 = np.array(mol.GetConformer(conf_id).GetPositions())
    # every computation below is a unit of work of the execution layer (retries, failure
    # records, any executor) and, with a store, is named by its content and reused
    runner = _Runner(mol_walk, method, backend_kw, atoms, convergence, moving, executor, store)
    calls = 0
    if relaxed or embedded:
        res = runner.run(_start_unit, [runner.item(pos0)], "the starting structure",
                         kind="torsion-start")[0]
        calls += res["gradient_calls"]
        if not res["converged"]:
            caution(log, ScanWarning, "the starting structure did not converge: %s",
                    res["message"])
        pos0 = np.array(res["positions"], dtype=float)
    phi0 = dihedral_angle(pos0, atoms)

    n = len(angles)
    if not relaxed:
        pts = runner.run(walk_unit, [runner.item(pos0, targets=angles, relaxed=False)],
                         "the rigid scan")[0]
        up = down = pts
    else:
        order_up, order_down = _walk_orders(angles, phi0, periodic)
        res_up, res_down = runner.run(
            walk_unit, [runner.item(pos0, targets=angles[order_up], relaxed=True),
                        runner.item(pos0, targets=angles[order_down], relaxed=True)],
            "a walk of the scan")
        up, down = _scatter(res_up, order_up, n), _scatter(res_down, order_down, n)
        calls += sum(p.get("gradient_calls", 0) for p in res_up + res_down)

    records = _merge_walks(up, down, angles)
    if not np.isfinite([r["energy"] for r in records]).any():
        raise CalculationFailed(f"every point of the scan of {atoms} failed; first message: "
                                f"{records[0]['message']}")
    if refine:
        calls += _refine_extrema(runner, records, periodic, float(start), unit, relaxed)

    def col(key, dtype=float):
        return np.array([r[key] for r in records], dtype=dtype)

    energy_h, conv = col("energy"), col("converged", bool)
    ok = conv & np.isfinite(energy_h)
    ref = float(np.nanmin(energy_h[ok])) if ok.any() else float(np.nanmin(energy_h))
    factor = convert(1.0, "hartree", unit)
    rel = (energy_h - ref) * factor
    rel_up, rel_down = (col("up") - ref) * factor, (col("down") - ref) * factor
    hyst = (_hysteresis(records, rel_up, rel_down, threshold,
                       "-".join(_label(mol, a) for a in atoms), unit) if relaxed else [])
    positions = np.full((len(records), mol.GetNumAtoms(), 3), np.nan)
    for m, r in enumerate(records):
        if r["positions"] is not None:
            positions[m] = r["positions"]
    tors = _torsion_from_atoms(mol, atoms)
    mol_out = Chem.Mol(mol)
    mol_out.RemoveAllConformers()
    return TorsionProfile(
        atoms=atoms, label=tors.label, angles=col("angle"), energies=rel, unit=unit,
        method=_method_name(method), solvent=solvent, relaxed=bool(relaxed),
        start=float(start), stop=float(stop), step=float(step),
        convergence=convergence if relaxed else "", converged=conv,
        energies_up=rel_up, energies_down=rel_down, hysteresis=tuple(hyst),
        hysteresis_threshold=threshold, messages=tuple(r["message"] for r in records),
        achieved_angles=col("achieved"), refined=col("refined", bool), gradient_calls=int(calls),
        start_angle=float(phi0), reference_energy=ref, positions=positions, mol=mol_out,
        periodic=periodic)


def _single_conformer(mol, conf_id):
    """A copy of ``mol`` holding only conformer ``conf_id``, as conformer 0."""
    single = Chem.Mol(mol)
    single.RemoveAllConformers()
    conf = Chem.Conformer(mol.GetConformer(conf_id))
    conf.SetId(0)
    single.AddConformer(conf, assignId=False)
    return single


def _hysteresis(records, rel_up, rel_down, threshold, label, unit) -> list:
    """(angle, |E_up - E_down|) where the two walks differ by more than ``threshold``;
    ``label``: the dihedral's atom labels (0-based, as in this module's other messages)."""
    hyst = []
    both = np.isfinite(rel_up) & np.isfinite(rel_down)
    for m in np.flatnonzero(both & (np.abs(rel_up - rel_down) > threshold)):
        hyst.append((float(records[m]["angle"]), float(abs(rel_up[m] - rel_down[m]))))
    if hyst:
        caution(log, ScanWarning, "scan of %s: the up and down walks differ by more than "
                "%.2f %s at %s degrees (a neighbouring group changed during the scan)",
                label, threshold, unit, ", ".join(f"{a:g}" for a, _ in hyst), stacklevel=4)
    return hyst


def _merge_walks(up, down, angles) -> list[dict]:
    """One record per grid angle from the up and down walks (the better point of the two)."""
    records = []
    for m in range(len(angles)):
        u, d = up[m], down[m]
        e_u = u["energy"] if u else np.nan
        e_d = d["energy"] if d else np.nan
        c_u, c_d = bool(u and u["converged"]), bool(d and d["converged"])
        # the lower energy wins, but a converged point beats a lower unconverged one
        take_down = (np.isfinite(e_d) and not (e_u <= e_d)) if c_u == c_d else (c_d and np.isfinite(e_d))
        p = d if take_down else u
        records.append({"angle": float(angles[m]), "energy": p["energy"] if p else np.nan,
                        "converged": bool(p and p["converged"]),
                        "message": p["message"] if p else "not computed",
                        "positions": p["positions"] if p else None,
                        "achieved": p["angle"] if p else np.nan,
                        "up": e_u, "down": e_d, "refined": False})
    return records


def _refine_extrema(runner, records, periodic, start, unit, relaxed) -> int:
    """Add computed points at fitted extrema between grid points (up to two rounds) to
    ``records`` (sorted by angle afterwards); returns the gradient calls they took."""
    calls = 0
    for _ in range(2):
        extra = _refinement(records, periodic, start, unit)
        if not extra:
            break
        # start from the computed neighbours on both sides and keep the lower result:
        # after hysteresis the two sides can sit in different basins
        jobs = [(x, pos) for x in extra for pos in _neighbour_geometries(records, x, periodic)]
        done = [walk[0] for walk in runner.run(
            walk_unit, [runner.item(pos, targets=[x], relaxed=relaxed) for x, pos in jobs],
            "a point at a fitted extremum")]
        calls += sum(p.get("gradient_calls", 0) for p in done)
        best: dict = {}
        for (x, _), p in zip(jobs, done):
            old = best.get(x)
            if old is None or _better(p, old):
                best[x] = p
        for x, p in best.items():
            records.append({"angle": float(x), "energy": p["energy"],
                            "converged": p["converged"], "message": p["message"],
                            "positions": p["positions"], "achieved": p["angle"],
                            "up": p["energy"], "down": p["energy"], "refined": True})
    records.sort(key=lambda r: r["angle"])
    return calls


def _refinement(records, periodic, start, unit) -> list[float]:
    """Angles of fitted extrema with no computed point within REFINE_DEG."""
    e = np.array([r["energy"] for r in records], dtype=float)
    phi = np.array([r["angle"] for r in records], dtype=float)
    conv = np.array([r["converged"] for r in records], dtype=bool)
    if np.isfinite(e).sum() < 4:
        return []
    rel = convert(e - np.nanmin(e), "hartree", unit)
    stop = start + 360.0 if periodic else float(np.max(phi))
    prof = TorsionProfile(atoms=(0, 1, 2, 3), label="", angles=phi, energies=rel, unit=unit,
                          converged=conv, start=start, stop=stop, periodic=periodic)
    out = []
    for x, _, _ in prof._extrema(snap=False):
        dist = _circular_difference(phi, x) if periodic else np.abs(phi - x)
        if np.min(dist) > REFINE_DEG:
            out.append(float(_wrap_into(x, start)) if periodic else float(x))
    return out


def _neighbour_geometries(records, x, periodic):
    """Geometries of the nearest computed points below and above the angle x (one or two)."""
    below = above = None
    for r in records:
        if r["positions"] is None:
            continue
        off = float(wrap_degrees(r["angle"] - x)) if periodic else r["angle"] - x
        if off <= 0 and (below is None or off > below[0]):
            below = (off, r["positions"])
        if off >= 0 and (above is None or off < above[0]):
            above = (off, r["positions"])
    out = [p for _, p in (below, above) if p is not None] if below or above else []
    if len(out) == 2 and out[0] is out[1]:
        out = out[:1]
    return out


def _better(new, old) -> bool:
    """Is scan point ``new`` preferable to ``old`` (converged first, then lower energy)?"""
    if bool(new["converged"]) != bool(old["converged"]):
        return bool(new["converged"]) and np.isfinite(new["energy"])
    if not np.isfinite(old["energy"]):
        return bool(np.isfinite(new["energy"]))
    return bool(np.isfinite(new["energy"]) and new["energy"] < old["energy"])


def _walk_orders(angles, phi0, periodic):
    """Index orders of the up and down walks starting at the dihedral ``phi0``."""
    n = len(angles)
    if periodic:
        up = np.argsort(np.mod(angles - phi0, 360.0), kind="stable")
        down = np.argsort(np.mod(phi0 - angles, 360.0), kind="stable")
        return up, down
    # partial range: go down to start first (part of the down walk), then up, then down again
    phi = _wrap_into(phi0, angles[0] - 180.0)
    below = [m for m in range(n) if angles[m] <= phi][::-1]
    up = list(range(n))
    down = below + list(range(n))[::-1]
    return np.array(up, dtype=int), np.array(down, dtype=int)


def _scatter(results, order, n):
    out = [None] * n
    for idx, r in zip(order, results):
        if out[idx] is None or (np.isfinite(r["energy"]) and not
                                (out[idx]["energy"] <= r["energy"])):
            out[idx] = r
    return out
