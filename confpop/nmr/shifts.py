"""Population-averaged 1H and 13C chemical shifts from GIAO shieldings of every conformer.

Steps
-----
1. :func:`conformer_shieldings`: isotropic GIAO shieldings σ of every atom of every active
   conformer (Kohn-Sham DFT through PySCF, :mod:`confpop.backends.shielding`), one unit of
   work per conformer through :func:`confpop.execution.run_units` and the result store, so
   an interrupted run resumes and scales out like every other step.
2. σ -> δ, by linear scaling fitted by us (``reference="scaling"``: δ = intercept + slope·σ,
   fitted to the measured shifts of the 15 rigid molecules of
   :data:`confpop.nmr.calibration.CALIBRATION_SET`, sources named there) or against
   tetramethylsilane computed at the same level and geometry method (``reference="tms"``:
   δ = σ_TMS − σ).
3. Boltzmann average over the conformers at each temperature (within each species when
   the ensemble has several, see :mod:`confpop.species`), then the mean over nuclei that
   are equivalent on the NMR time scale: symmetry-related atoms and those exchanged by
   fast rotation (a methyl's three protons). Diastereotopic nuclei (the two protons of a
   CH2 next to a stereocentre, the two methyls of an isopropyl group) stay apart and carry
   their pro-R/pro-S labels (:mod:`confpop.nmr.identity`).

Expected error (measured, README "Chemical shifts"): after scaling, PBE0/def2-SVP on GFN2
geometries reproduces the calibration set with the MAE in :data:`SCALING` (13C 1.9 ppm,
leave-one-molecule-out 2.2; 1H 0.13, out 0.15); treat a single
difference below about twice that MAE as inside the method's noise, and let experiment and
a qualified spectroscopist decide.
"""

from __future__ import annotations

import logging
import warnings
from collections import defaultdict

import numpy as np
import pandas as pd
from rdkit import Chem

from ..errors import ConfpopWarning, InputError
from .identity import _labelled_smiles

__all__ = ["SCALING", "NUCLEI", "shielding_unit", "conformer_shieldings", "tms_shielding",
           "to_shifts", "chemical_shifts", "nucleus_groups", "read_measured_shifts",
           "compare_shifts", "fit_scaling", "calibration_table"]

log = logging.getLogger(__name__)

#: nucleus name -> element symbol
NUCLEI = {"1H": "H", "13C": "C"}

#: Linear scaling δ = intercept + slope·σ per (functional, basis) and nucleus, fitted by
#: :func:`fit_scaling` to CALIBRATION_SET (15 rigid molecules; GFN2-xTB geometries, gas-phase
#: GIAO shieldings) with ``python benchmarks/bench_shifts.py accuracy``. ``mae`` is the fit's
#: mean absolute error, ``loo_mae`` the leave-one-molecule-out error (what a new molecule
#: should expect), ``max`` the largest error, ``n`` the number of signals, all ppm.
SCALING: dict[tuple[str, str], dict[str, dict[str, float]]] = {
    ("pbe0", "def2-svp"): {  # the default level: the lower errors of the two at equal cost
        "13C": {"slope": -1.00484, "intercept": 198.2440, "mae": 1.888, "loo_mae": 2.162,
                "max": 7.977, "n": 23},
        "1H": {"slope": -0.95635, "intercept": 30.6760, "mae": 0.125, "loo_mae": 0.153,
               "max": 0.369, "n": 16},
    },
    ("b3lyp", "def2-svp"): {
        "13C": {"slope": -1.02152, "intercept": 196.6400, "mae": 2.344, "loo_mae": 2.702,
                "max": 8.946, "n": 23},
        "1H": {"slope": -0.97444, "intercept": 31.2789, "mae": 0.150, "loo_mae": 0.189,
               "max": 0.414, "n": 16},
    },
}

_TEMPERATURE_DEFAULT = (298.15,)


# ----------------------------------------------------------------------------- shieldings
def shielding_unit(task: dict) -> dict:
    """GIAO shieldings of one structure (one unit of work for run_units).

    ``task`` holds ``symbols``, ``positions`` (angstrom), ``charge``, ``multiplicity`` and
    ``settings`` (keywords of :func:`confpop.backends.shielding.compute_shieldings`).
    """
    from ..backends.shielding import compute_shieldings
    return compute_shieldings(task["symbols"], task["positions"], charge=task["charge"],
                              multiplicity=task["multiplicity"], **task["settings"])


def _settings(functional, basis, grid_level):
    from ..backends.shielding import SHIELDING_DEFAULTS
    out = dict(SHIELDING_DEFAULTS)
    if functional is not None:
        out["functional"] = str(functional).lower()
    if basis is not None:
        out["basis"] = str(basis).lower()
    if grid_level is not None:
        out["grid_level"] = int(grid_level)
    return out


def _keys(tasks, store):
    if store is None:
        return None
    from ..backends.shielding import shielding_versions
    from ..store import content_key
    versions = shielding_versions()
    keys = []
    for t in tasks:
        numbers = [Chem.GetPeriodicTable().GetAtomicNumber(s) for s in t["symbols"]]
        settings = dict(t["settings"], engine_versions=versions)
        keys.append(content_key(numbers, t["positions"], charge=t["charge"],
                                multiplicity=t["multiplicity"], method="giao-dft",
                                solvent=None, settings=settings, kind="shielding"))
    return keys


def _open_store(store):
    if store is None or hasattr(store, "record"):
        return store
    from ..store import ResultStore
    return ResultStore(store)


def conformer_shieldings(ens, *, functional: str | None = None, basis: str | None = None,
                         grid_level: int | None = None, executor=None,
                         workers: int | None = None, store=None,
                         progress: bool = False) -> pd.DataFrame:
    """Isotropic GIAO shieldings of every atom of every active conformer.

    Parameters
    ----------
    ens : confpop.Ensemble
    functional, basis, grid_level
        DFT level (defaults :data:`confpop.backends.shielding.SHIELDING_DEFAULTS`:
        PBE0/def2-SVP, grid level 3).
    executor, workers
        Where the units run (see :func:`confpop.execution.run_units`); default: one process
        for fewer than 4 conformers, else the local pool.
    store : str, pathlib.Path or ResultStore, optional
        Finished shieldings are kept there and reused; an interrupted run resumes.
    progress : bool

    Returns
    -------
    pandas.DataFrame
        Index: conformer id (active conformers whose calculation succeeded); columns: atom
        index (0-based); values σ in ppm. ``attrs``: ``level`` (dict of the settings),
        ``failures`` ({conformer id: reason}), ``seconds`` ({conformer id: wall s}).

    Warns
    -----
    ConfpopWarning
        When the shieldings of some conformers failed (they are left out, with reasons in
        ``attrs["failures"]``).
    """
    from ..execution import run_units

    if not hasattr(ens, "ids"):
        raise InputError(f"ens must be a confpop Ensemble, got {type(ens).__name__}")
    ids = ens.ids()
    if not ids:
        raise InputError("ensemble has no active conformers (all failed or were removed)")
    settings = _settings(functional, basis, grid_level)
    mol = ens.mol
    symbols = [a.GetSymbol() for a in mol.GetAtoms()]
    tasks = [{"symbols": symbols, "positions": np.asarray(ens.positions(cid), float),
              "charge": int(ens.charge), "multiplicity": int(ens.multiplicity),
              "settings": settings} for cid in ids]
    store = _open_store(store)
    keys = _keys(tasks, store)
    if executor is None and workers is None:
        workers = 1 if len(tasks) < 4 else None
    outcomes = run_units(shielding_unit, tasks, executor=executor, workers=workers,
                         progress=progress, description="GIAO shieldings", store=store,
                         keys=keys)
    rows, index, failures, seconds = [], [], {}, {}
    for cid, outcome in zip(ids, outcomes):
        if outcome.ok:
            rows.append(np.asarray(outcome.value["shielding_ppm"], float))
            index.append(cid)
            seconds[cid] = float(outcome.seconds or 0.0)
        else:
            failures[cid] = f"{outcome.error_type}: {outcome.error_message}"
    if failures:
        warnings.warn(f"GIAO shieldings failed for conformer(s) {sorted(failures)}; they are "
                      f"left out of the averages (first reason: {next(iter(failures.values()))})",
                      ConfpopWarning, stacklevel=2)
    if not rows:
        raise InputError("GIAO shieldings failed for every conformer: "
                         + "; ".join(f"conformer {k}: {v}" for k, v in failures.items()))
    out = pd.DataFrame(np.vstack(rows), index=pd.Index(index, name="conformer"),
                       columns=pd.Index(range(len(symbols)), name="atom_index"))
    out.attrs.update({"level": settings, "failures": failures, "seconds": seconds})
    return out


def tms_shielding(*, functional: str | None = None, basis: str | None = None,
                  grid_level: int | None = None, geometry_method: str = "gfn2",
                  store=None) -> dict[str, float]:
    """σ of 13C and 1H in tetramethylsilane at the given level ({"C": ppm, "H": ppm}).

    The geometry is optimized with ``geometry_method`` (default GFN2-xTB, the level that
    makes confpop's ensembles), so that the reference and the conformers share it.
    """
    from rdkit.Chem import AllChem

    from ..execution import run_units
    from ..optimize import optimize_structure

    mol = Chem.AddHs(Chem.MolFromSmiles("C[Si](C)(C)C"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    mol = optimize_structure(mol, geometry_method)
    settings = _settings(functional, basis, grid_level)
    task = {"symbols": [a.GetSymbol() for a in mol.GetAtoms()],
            "positions": mol.GetConformer().GetPositions(), "charge": 0, "multiplicity": 1,
            "settings": settings}
    store = _open_store(store)
    outcome = run_units(shielding_unit, [task], workers=1, store=store,
                        keys=_keys([task], store))[0]
    if not outcome.ok:
        raise InputError(f"the TMS reference failed: {outcome.error_type}: "
                         f"{outcome.error_message}")
    sigma = np.asarray(outcome.value["shielding_ppm"])
    z = np.array([a.GetAtomicNum() for a in mol.GetAtoms()])
    return {"C": float(sigma[z == 6].mean()), "H": float(sigma[z == 1].mean())}


def to_shifts(sigma, element: str, *, level: dict | tuple, reference="scaling",
              tms: dict | None = None) -> np.ndarray:
    """Shieldings (ppm) of one element -> chemical shifts δ (ppm from TMS).

    ``reference="scaling"``: δ = intercept + slope·σ from :data:`SCALING` for ``level``
    ((functional, basis) or a settings dict); ``reference="tms"``: δ = σ_TMS − σ with
    ``tms`` from :func:`tms_shielding`.
    """
    sigma = np.asarray(sigma, float)
    if reference == "tms":
        if tms is None or element not in tms:
            raise InputError(f"reference='tms' needs the TMS shielding of {element} (tms=...)")
        return tms[element] - sigma
    if reference != "scaling":
        raise InputError(f"reference must be 'scaling' or 'tms', got {reference!r}")
    key = (level["functional"], level["basis"]) if isinstance(level, dict) else tuple(level)
    nucleus = {v: k for k, v in NUCLEI.items()}.get(element)
    if key not in SCALING or nucleus not in SCALING[key]:
        raise InputError(f"no linear scaling was fitted for {nucleus or element} at "
                         f"{key[0]}/{key[1]} (fitted: {sorted('/'.join(k) for k in SCALING)}); "
                         "use reference='tms' or one of the fitted levels")
    p = SCALING[key][nucleus]
    return p["intercept"] + p["slope"] * sigma


# ----------------------------------------------------------------------------- equivalence


def nucleus_groups(mol: Chem.Mol, element: str, conf_id: int | None = None) -> list[tuple]:
    """Atoms of ``element`` that give one NMR signal (homotopic or enantiotopic).

    Same test as :func:`confpop.nmr.proton_groups` (which serves the protons): atoms of one
    graph-symmetry class are equivalent when marking either as an isotope gives the same
    molecule or its mirror image; diastereotopic atoms give diastereomers and stay apart.
    Equivalence by fast exchange that does not change the marked molecule (methyl
    rotation, ring flips) is included.

    Returns
    -------
    list of tuple of int
        Sorted by the first atom index.
    """
    if element == "H":
        from .couplings import proton_groups
        return [tuple(g.atoms) for g in proton_groups(mol, conf_id)]
    if conf_id is None:
        conf_id = mol.GetConformers()[0].GetId()
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False))
    classes: dict[int, list[int]] = defaultdict(list)
    for atom in mol.GetAtoms():
        if atom.GetSymbol() == element:
            classes[ranks[atom.GetIdx()]].append(atom.GetIdx())
    groups = []
    for members in classes.values():
        if len(members) == 1:
            groups.append(tuple(members))
            continue
        plain = {a: _labelled_smiles(mol, a, conf_id, False) for a in members}
        mirrored = {a: _labelled_smiles(mol, a, conf_id, True) for a in members}
        remaining = list(members)
        while remaining:
            first = remaining.pop(0)
            same = [a for a in remaining if plain[a] in (plain[first], mirrored[first])]
            groups.append(tuple([first] + same))
            remaining = [a for a in remaining if a not in same]
    return sorted((tuple(sorted(g)) for g in groups), key=lambda g: g[0])


def _label(mol: Chem.Mol, atoms: tuple, stereo: dict) -> str:
    """1-based label: "C3", "H7/H8/H9 (C2)", "H10 (C4, pro-R)"."""
    first = mol.GetAtomWithIdx(atoms[0])
    names = "/".join(f"{first.GetSymbol()}{a + 1}" for a in atoms)
    if first.GetAtomicNum() != 1:
        tag = stereo.get(atoms[0]) if len(atoms) == 1 else None
        return names + (f" ({tag})" if tag else "")
    heavy = {mol.GetAtomWithIdx(a).GetNeighbors()[0].GetIdx() for a in atoms
             if mol.GetAtomWithIdx(a).GetDegree()}
    on = ",".join(f"{mol.GetAtomWithIdx(h).GetSymbol()}{h + 1}" for h in sorted(heavy))
    tag = stereo.get(atoms[0]) if len(atoms) == 1 else None
    inner = ", ".join(x for x in (on, tag) if x)
    return names + (f" ({inner})" if inner else "")


# ----------------------------------------------------------------------------- averaging
def _check_nuclei(nuclei) -> list[str]:
    if isinstance(nuclei, str):
        nuclei = (nuclei,)
    out = []
    for n in nuclei:
        key = str(n).strip()
        if key not in NUCLEI:
            raise InputError(f"nuclei must be among {sorted(NUCLEI)}, got {n!r}")
        out.append(key)
    if not out:
        raise InputError("nuclei must name at least one nucleus, e.g. ('1H', '13C')")
    return out


def chemical_shifts(ens, temperatures=_TEMPERATURE_DEFAULT, nuclei=("1H", "13C"), *,
                    shieldings: pd.DataFrame | None = None, functional: str | None = None,
                    basis: str | None = None, grid_level: int | None = None,
                    reference: str = "auto", tms: dict | None = None, energy: str = "auto",
                    species: bool = True, executor=None, workers: int | None = None, store=None,
                    progress: bool = False) -> pd.DataFrame:
    """Boltzmann-averaged 1H/13C chemical shifts of an ensemble at each temperature.

    Parameters
    ----------
    ens : confpop.Ensemble
    temperatures : float or sequence of float, K
    nuclei : sequence of {"1H", "13C"}
    shieldings : DataFrame, optional
        From :func:`conformer_shieldings` (computed here when missing, with the level,
        executor, workers, store and progress arguments).
    functional, basis, grid_level
        DFT level of the shieldings (default PBE0/def2-SVP, grid 3).
    reference : {"auto", "scaling", "tms"}
        "scaling": our fitted linear scaling (:data:`SCALING`); "tms": TMS at the same
        level; "auto" (default): scaling when the level has one, else TMS.
    energy : str
        Which energies weight the conformers (``ens.populations``).
    species : bool
        Average within each species (slow exchange; one block of rows per species).

    Returns
    -------
    pandas.DataFrame
        One row per signal (group of equivalent nuclei): ``atom_index`` (0-based index of
        the group's first atom), ``atoms`` (tuple, 0-based), ``label`` (1-based, e.g.
        ``"H7/H8/H9 (C2)"``, ``"H10 (C4, pro-R)"``), ``element``, ``nucleus``, ``species``,
        then one float column per temperature: <δ> in ppm. ``attrs``: ``level``,
        ``reference``, ``failures``, ``species``.

    Notes
    -----
    <δ>(T) = Σ_i p_i(T) δ_i over the conformers of a species (fast exchange), then the mean
    over the group's atoms.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> from confpop import Ensemble
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("CC"))
    >>> _ = AllChem.EmbedMolecule(mol, randomSeed=1)
    >>> ens = Ensemble.from_mol(mol)
    >>> sigma = pd.DataFrame([[180.0, 180.0] + [30.0] * 6], index=[0])
    >>> table = chemical_shifts(ens, 298.15, shieldings=sigma, reference="tms",
    ...                         tms={"C": 187.0, "H": 31.5})
    >>> list(zip(table["label"], table["nucleus"], table[298.15]))
    [('H3/H4/H5/H6/H7/H8 (C1,C2)', '1H', 1.5), ('C1/C2', '13C', 7.0)]

    """
    temps_in = temperatures
    nuclei = _check_nuclei(nuclei)
    if not hasattr(ens, "populations"):
        raise InputError("chemical_shifts needs a confpop Ensemble (energies); for a bare "
                         "molecule use confpop.Ensemble.from_mol(mol, energies=...)")
    if shieldings is None:
        shieldings = conformer_shieldings(ens, functional=functional, basis=basis,
                                          grid_level=grid_level, executor=executor,
                                          workers=workers, store=store, progress=progress)
    level = dict(shieldings.attrs.get("level") or _settings(functional, basis, grid_level))
    key = (level["functional"], level["basis"])
    if reference == "auto":
        reference = "scaling" if key in SCALING else "tms"
    if reference == "tms" and tms is None:
        tms = tms_shielding(functional=level["functional"], basis=level["basis"],
                            grid_level=level.get("grid_level"), store=_open_store(store))
    mol = ens.mol
    n_atoms = mol.GetNumAtoms()
    if shieldings.shape[1] != n_atoms:
        raise InputError(f"shieldings has {shieldings.shape[1]} atom columns, the ensemble's "
                         f"molecule {n_atoms} atoms")
    pops = ens.populations(temps_in, energy=energy)
    ids = [int(i) for i in pops.index if int(i) in set(int(j) for j in shieldings.index)]
    missing = [int(i) for i in pops.index if int(i) not in ids]
    if not ids:
        raise InputError("no active conformer has shieldings")
    weights = pops.loc[ids].to_numpy(float)
    sigma = shieldings.loc[ids].to_numpy(float)
    symbols = np.array([a.GetSymbol() for a in mol.GetAtoms()])
    delta = np.full_like(sigma, np.nan)
    for nucleus in nuclei:
        el = NUCLEI[nucleus]
        cols = symbols == el
        if cols.any():
            delta[:, cols] = to_shifts(sigma[:, cols], el, level=level, reference=reference,
                                       tms=tms)
    from .couplings import _species
    from .identity import prochiral_labels
    sp = _species(ens, ids) if species else None
    members = {0: np.ones(len(ids), bool)} if sp is None else \
        {int(s): (sp.to_numpy() == s) for s in sorted(sp.unique())}
    stereo = prochiral_labels(mol)
    groups = [(NUCLEI_BY_EL[el], g) for el in (NUCLEI[n] for n in nuclei)
              for g in nucleus_groups(mol, el)]
    rows, shares = [], {}
    for s, mask in members.items():
        w = weights * mask[:, None]
        total = w.sum(axis=0)
        shares[s] = {float(t): float(v) for t, v in zip(pops.columns, total)}
        avg = (w / np.where(total > 0, total, 1.0)).T @ delta  # (n_T, n_atoms)
        for nucleus, g in groups:
            row = {"atom_index": g[0], "atoms": g, "label": _label(mol, g, stereo),
                   "element": NUCLEI[nucleus], "nucleus": nucleus, "species": s}
            for k, t in enumerate(pops.columns):
                row[float(t)] = float(avg[k, list(g)].mean())
            rows.append(row)
    out = pd.DataFrame(rows)
    if "13C" in nuclei:
        _warn_halogenated_carbons(mol)
    out.attrs.update({"level": level, "reference": reference, "tms": tms,
                      "failures": dict(shieldings.attrs.get("failures", {})),
                      "left_out": missing,
                      "species": shares})
    if missing:
        warnings.warn(f"conformer(s) {missing} have no shieldings and are left out of the "
                      "averages (populations renormalized over the rest)", ConfpopWarning,
                      stacklevel=2)
    return out


NUCLEI_BY_EL = {v: k for k, v in NUCLEI.items()}


def _warn_halogenated_carbons(mol: Chem.Mol) -> None:
    """Caution for carbons bonded to Cl, Br or I (outside the calibrated range)."""
    bad = [a.GetIdx() + 1 for a in mol.GetAtoms() if a.GetAtomicNum() == 6 and
           any(n.GetAtomicNum() in (17, 35, 53) for n in a.GetNeighbors())]
    if bad:
        warnings.warn(f"13C shifts of carbon(s) {bad} (1-based), bonded to Cl/Br/I, are outside "
                      "the calibrated range: at B3LYP/def2-SVP the error grows by about 13 ppm "
                      "per chlorine (CH2Cl2 +12, CHCl3 +26, CCl4 +44 ppm, measured), and "
                      "bromine and iodine add relativistic effects this method lacks",
                      ConfpopWarning, stacklevel=3)


# ----------------------------------------------------------------------------- comparison
def read_measured_shifts(source) -> pd.DataFrame:
    """Measured shifts from a CSV file (or a DataFrame): columns ``nucleus`` (1H/13C),
    ``atom`` (1-based atom number as in the SMILES/file, H atoms after the heavy atoms as
    in the predicted table's labels) and ``shift_ppm``.

    For 1H, ``atom`` may also name the heavy atom that carries the proton(s) when they are
    one signal. Returns a DataFrame with ``nucleus``, ``atom`` (int, 1-based),
    ``shift_ppm`` (float) and ``line`` (the 1-based data line, for messages).
    """
    if isinstance(source, pd.DataFrame):
        frame, where = source.copy(), "measured shifts"
    else:
        where = str(source)
        try:
            frame = pd.read_csv(source, comment="#", skipinitialspace=True)
        except FileNotFoundError:
            raise InputError(f"measured shifts file {where} does not exist") from None
        except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
            raise InputError(f"measured shifts file {where} is not a readable CSV: {exc}") from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    need = {"atom", "shift_ppm"}
    if not need <= set(frame.columns):
        raise InputError(f"{where} needs the columns atom and shift_ppm (and nucleus), got "
                         f"{list(frame.columns)}")
    if "nucleus" not in frame.columns:
        frame["nucleus"] = "13C"
    out = []
    for i, row in enumerate(frame.itertuples(index=False), start=1):
        nucleus = str(row.nucleus).strip()
        if nucleus not in NUCLEI:
            raise InputError(f"{where}, data line {i}: nucleus must be 1H or 13C, got "
                             f"{row.nucleus!r}")
        try:
            atom = int(str(row.atom).strip())
            value = float(row.shift_ppm)
        except ValueError:
            raise InputError(f"{where}, data line {i}: atom must be a whole number and "
                             f"shift_ppm a number, got {row.atom!r}, {row.shift_ppm!r}") from None
        if atom < 1 or not np.isfinite(value):
            raise InputError(f"{where}, data line {i}: atom must be >= 1 (1-based) and "
                             f"shift_ppm finite, got {atom}, {value}")
        out.append({"nucleus": nucleus, "atom": atom, "shift_ppm": value, "line": i})
    if not out:
        raise InputError(f"{where} holds no measured shifts")
    return pd.DataFrame(out)


def _match_rows(predicted: pd.DataFrame, measured: pd.DataFrame, n_atoms: int | None,
                heavy_of=None) -> list[int]:
    """Row of ``predicted`` for each measured shift (by 1-based atom number)."""
    by_atom = {}
    for r, row in predicted.iterrows():
        for a in row["atoms"]:
            by_atom[(row["nucleus"], a + 1)] = r
    rows = []
    for m in measured.itertuples(index=False):
        r = by_atom.get((m.nucleus, m.atom))
        if r is None and m.nucleus == "1H" and heavy_of is not None:
            hs = heavy_of.get(m.atom - 1, [])
            found = {by_atom.get(("1H", h + 1)) for h in hs} - {None}
            if len(found) == 1:
                r = found.pop()
            elif len(found) > 1:
                raise InputError(f"measured shifts, line {m.line}: the protons on atom {m.atom} "
                                 "are diastereotopic (two signals); give the hydrogen's own "
                                 "number (see the predicted table's labels)")
        if r is None:
            raise InputError(f"measured shifts, line {m.line}: atom {m.atom} is not a "
                             f"{m.nucleus} nucleus of this molecule"
                             + (f" (atoms 1-{n_atoms})" if n_atoms else ""))
        rows.append(r)
    return rows


def compare_shifts(predicted: pd.DataFrame, measured, *, temperature: float | None = None,
                   species: int | None = None, mol: Chem.Mol | None = None,
                   outlier_factor: float = 3.0) -> pd.DataFrame:
    """Predicted against measured shifts: errors, MAE per nucleus, outliers flagged.

    Parameters
    ----------
    predicted : DataFrame from :func:`chemical_shifts`
    measured : CSV path or DataFrame (see :func:`read_measured_shifts`)
    temperature : float, optional
        Which temperature column (default: the first).
    species : int, optional
        Which species block (default: the most populated at that temperature).
    mol : rdkit.Chem.Mol, optional
        Lets a 1H row name the heavy atom carrying the protons.
    outlier_factor : float
        A signal is flagged when |error| > outlier_factor x the method's expected error
        for the nucleus (the leave-one-out MAE of the level's scaling, else of the default
        level's; 3 is common practice).

    Returns
    -------
    pandas.DataFrame
        ``nucleus``, ``atom`` (1-based, as given), ``label``, ``measured_ppm``,
        ``predicted_ppm``, ``error_ppm`` (predicted − measured), ``outlier`` (bool).
        ``attrs["mae"]``: {nucleus: MAE ppm}; ``attrs["expected_error"]``.
    """
    meas = read_measured_shifts(measured)
    temps = [c for c in predicted.columns if isinstance(c, float)]
    if not temps:
        raise InputError("predicted must come from chemical_shifts (temperature columns)")
    t = temps[0] if temperature is None else float(temperature)
    if t not in temps:
        raise InputError(f"temperature {temperature} K is not among the predicted ones {temps}")
    table = predicted
    if "species" in table.columns and table["species"].nunique() > 1:
        if species is None:
            shares = predicted.attrs.get("species", {})
            species = max(shares, key=lambda s: shares[s].get(t, 0.0)) if shares else \
                int(table["species"].iloc[0])
        table = table[table["species"] == species]
    table = table.reset_index(drop=True)
    heavy_of = None
    if mol is not None:
        heavy_of = {a.GetIdx(): [n.GetIdx() for n in a.GetNeighbors() if n.GetAtomicNum() == 1]
                    for a in mol.GetAtoms()}
    rows = _match_rows(table, meas, mol.GetNumAtoms() if mol is not None else None, heavy_of)
    level = predicted.attrs.get("level") or {}
    from ..backends.shielding import SHIELDING_DEFAULTS
    default = SCALING[(SHIELDING_DEFAULTS["functional"], SHIELDING_DEFAULTS["basis"])]
    expected = {}
    for n in NUCLEI:
        # a level without a fitted line (TMS reference) has no error of its own measured
        # here: the default level's leave-one-out error stands in for it
        p = SCALING.get((level.get("functional"), level.get("basis")), {}).get(n)
        expected[n] = (p or default[n])["loo_mae"]
    out = pd.DataFrame({
        "nucleus": meas["nucleus"].to_numpy(), "atom": meas["atom"].to_numpy(),
        "label": [table.loc[r, "label"] for r in rows],
        "measured_ppm": meas["shift_ppm"].to_numpy(float),
        "predicted_ppm": [float(table.loc[r, t]) for r in rows]})
    out["error_ppm"] = out["predicted_ppm"] - out["measured_ppm"]
    out["outlier"] = [abs(e) > outlier_factor * expected[n]
                      for e, n in zip(out["error_ppm"], out["nucleus"])]
    out.attrs["mae"] = {n: float(g["error_ppm"].abs().mean())
                        for n, g in out.groupby("nucleus")}
    out.attrs["expected_error"] = expected
    out.attrs["temperature"] = t
    return out


# ----------------------------------------------------------------------------- calibration
def calibration_table(shieldings_by_name: dict[str, tuple]) -> pd.DataFrame:
    """Pair computed shieldings with the measured shifts of CALIBRATION_SET.

    ``shieldings_by_name`` maps a molecule name of the set to (mol, σ array): ``mol`` the
    RDKit molecule (with the set's atom maps, explicit H) and σ per atom. Returns one row
    per signal: ``name``, ``signal``, ``nucleus``, ``sigma_ppm`` (mean over the atoms of
    the signal), ``measured_ppm``, ``source``, ``excluded`` (left out of the fit, see
    :mod:`confpop.nmr.calibration`).
    """
    from .calibration import CALIBRATION_SET
    rows = []
    for entry in CALIBRATION_SET:
        if entry["name"] not in shieldings_by_name:
            continue
        mol, sigma = shieldings_by_name[entry["name"]]
        sigma = np.asarray(sigma, float)
        for signal, value in entry["shifts"].items():
            el, k = signal[0], int(signal[1:])
            mapped = [a for a in mol.GetAtoms() if a.GetAtomMapNum() == k]
            idx = [a.GetIdx() for a in mapped] if el == "C" else \
                [n.GetIdx() for a in mapped for n in a.GetNeighbors() if n.GetAtomicNum() == 1]
            if not idx:
                raise InputError(f"calibration entry {entry['name']}: signal {signal} has no atoms")
            rows.append({"name": entry["name"], "signal": signal,
                         "nucleus": "13C" if el == "C" else "1H",
                         "sigma_ppm": float(sigma[idx].mean()), "measured_ppm": float(value),
                         "source": entry["source"][signal],
                         "excluded": signal in entry.get("fit_exclude", {})})
    return pd.DataFrame(rows)


def fit_scaling(table: pd.DataFrame) -> dict[str, dict[str, float]]:
    """Least-squares δ_measured = intercept + slope·σ per nucleus, with errors.

    ``table`` from :func:`calibration_table` (rows with ``excluded`` True are skipped).
    Returns {nucleus: {"slope", "intercept",
    "mae", "loo_mae", "max", "n"}}; ``loo_mae`` leaves each molecule out in turn.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"name": ["a", "b", "c"], "nucleus": ["13C"] * 3,
    ...                   "sigma_ppm": [180.0, 100.0, 20.0], "measured_ppm": [10.0, 90.0, 170.0]})
    >>> p = fit_scaling(t)["13C"]
    >>> round(p["slope"], 6), round(p["intercept"], 6), round(p["mae"], 9)
    (-1.0, 190.0, 0.0)
    """
    out = {}
    if "excluded" in table.columns:
        table = table[~table["excluded"].astype(bool)]
    for nucleus, sub in table.groupby("nucleus"):
        s = sub["sigma_ppm"].to_numpy(float)
        d = sub["measured_ppm"].to_numpy(float)
        if len(s) < 3:
            raise InputError(f"fitting a scaling for {nucleus} needs >= 3 signals, got {len(s)}")
        design = np.c_[s, np.ones_like(s)]
        coef = np.linalg.lstsq(design, d, rcond=None)[0]
        err = design @ coef - d
        names = sub["name"].to_numpy()
        loo = []
        for name in dict.fromkeys(names):
            keep = names != name
            if keep.sum() < 2 or len(set(s[keep])) < 2:
                continue
            c = np.linalg.lstsq(design[keep], d[keep], rcond=None)[0]
            loo.extend(np.abs(design[~keep] @ c - d[~keep]))
        out[nucleus] = {"slope": float(coef[0]), "intercept": float(coef[1]),
                        "mae": float(np.mean(np.abs(err))),
                        "loo_mae": float(np.mean(loo)) if loo else float("nan"),
                        "max": float(np.max(np.abs(err))), "n": int(len(s))}
    return out
