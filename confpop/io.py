"""Ensembles in and out: SDF, multi-frame XYZ, CSV and JSON.

SDF written here round-trips exactly: besides the usual 4-decimal coordinate block, every
record carries its full-precision coordinates and every table value as SD properties
(units in the property names), and the first record carries the ensemble's level, charge,
multiplicity, solvent and provenance. SDF or XYZ files from elsewhere are read as plain
ensembles, with an energy per record when one is given.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem

from .ensemble import Ensemble
from .errors import InputError
from .units import convert, normalize_unit

__all__ = ["write_sdf", "read_ensemble", "write_csv", "write_xyz", "ensemble_json"]

_META = "confpop_ensemble"
_COORDS = "confpop_coordinates_angstrom"
_TABLE = "confpop_row"


def _jsonable(value):
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return None if math.isnan(v) else v
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.ndarray):
        return [_jsonable(v) for v in value.tolist()]
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    return value


def write_sdf(ens: Ensemble, path) -> None:
    """Write one SD record per conformer (failed ones too, with status and reason).

    Properties: ``conformer_id``, ``status``, ``reason``, ``degeneracy``,
    ``energy_<level>_hartree`` for every level, ``relative_energy_kcal_per_mol`` at the
    ranking level, plus the full-precision table row and coordinates for an exact round trip.
    """
    table = ens.raw_table
    rel = ens.table("kcal/mol")["relative_energy"]
    mol = ens.mol
    meta = {"level": ens.level, "charge": ens.charge, "multiplicity": ens.multiplicity,
            "solvent": ens.solvent, "name": ens.name, "provenance": _jsonable(ens.provenance),
            "columns": {c: str(table[c].dtype) for c in table.columns}}
    with Chem.SDWriter(str(path)) as writer:
        for k, cid in enumerate(ens.ids(active=False)):
            rec = Chem.Mol(mol)
            rec.RemoveAllConformers()
            rec.AddConformer(Chem.Conformer(mol.GetConformer(int(cid))), assignId=True)
            for prop in list(rec.GetPropNames()):
                rec.ClearProp(prop)
            row = table.loc[cid]
            rec.SetProp("_Name", f"{ens.name or 'conformer'} {cid}")
            rec.SetIntProp("conformer_id", int(cid))
            rec.SetProp("status", str(row["status"]))
            rec.SetProp("reason", str(row["reason"]))
            rec.SetIntProp("degeneracy", int(row["degeneracy"]))
            for c in table.columns:
                if c.startswith("energy_"):
                    rec.SetProp(f"{c}_hartree", repr(float(row[c])))
            r = rel.get(cid, np.nan)
            rec.SetProp("relative_energy_kcal_per_mol", "" if pd.isna(r) else f"{float(r):.6f}")
            rec.SetProp(_TABLE, json.dumps(_jsonable(row.to_dict())))
            rec.SetProp(_COORDS, json.dumps(mol.GetConformer(int(cid)).GetPositions().tolist()))
            if k == 0:
                rec.SetProp(_META, json.dumps(meta))
            writer.write(rec)


def _restore_dtypes(table: pd.DataFrame, dtypes: dict) -> pd.DataFrame:
    for col, dtype in dtypes.items():
        if col in table.columns and dtype != "object":
            try:
                table[col] = table[col].astype(dtype)
            except (TypeError, ValueError):
                pass
    return table[[c for c in dtypes if c in table.columns]]


def read_ensemble(path, *, energy_property: str | None = None, unit: str = "hartree",
                  charge: int | None = None, level: str | None = None) -> Ensemble:
    """Read an ensemble from SDF (one record per conformer) or multi-frame XYZ.

    Parameters
    ----------
    path : str or pathlib.Path
    energy_property : str, optional
        For SDF from elsewhere: the property holding each record's energy. For XYZ, energies
        are read from the first number on each frame's comment line when present.
    unit : str
        Unit of those energies.
    charge : int, optional
        Total charge (XYZ files carry none; bonds are perceived with it).
    level : str, optional
        Name of the energy level (default "input").

    Returns
    -------
    Ensemble
        Files written by :func:`write_sdf` come back exactly as they were written.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"ensemble file {str(path)!r} does not exist")
    suffix = path.suffix.lower()
    if suffix in (".sdf", ".sd", ".mol"):
        return _read_sdf(path, energy_property, unit, level)
    if suffix == ".xyz":
        return _read_xyz(path, unit, charge, level)
    raise InputError(f"ensemble file must be .sdf or .xyz, got {path.name!r}")


def _read_sdf(path, energy_property, unit, level) -> Ensemble:
    supplier = Chem.SDMolSupplier(str(path), removeHs=False, sanitize=True)
    records = []
    for k, rec in enumerate(supplier):
        if rec is None:
            raise InputError(f"{path.name}: record {k + 1} could not be read (invalid structure)")
        records.append(rec)
    if not records:
        raise InputError(f"{path.name}: no records")
    first = records[0]
    numbers = [a.GetAtomicNum() for a in first.GetAtoms()]
    smiles = Chem.MolToSmiles(Chem.RemoveHs(first))
    for k, rec in enumerate(records[1:], start=2):
        if [a.GetAtomicNum() for a in rec.GetAtoms()] != numbers:
            raise InputError(f"{path.name}: record {k} is not the same molecule in the same atom "
                             f"order as record 1 ({Chem.MolToSmiles(Chem.RemoveHs(rec))} vs {smiles})")
    mol = Chem.Mol(first)
    mol.RemoveAllConformers()
    for prop in list(mol.GetPropNames()):
        mol.ClearProp(prop)
    if first.HasProp(_META):
        meta = json.loads(first.GetProp(_META))
        rows, ids = [], []
        for rec in records:
            cid = rec.GetIntProp("conformer_id")
            conf = Chem.Conformer(rec.GetNumAtoms())
            for a, xyz in enumerate(json.loads(rec.GetProp(_COORDS))):
                conf.SetAtomPosition(a, tuple(float(v) for v in xyz))
            conf.SetId(cid)
            conf.Set3D(True)
            mol.AddConformer(conf, assignId=False)
            rows.append(json.loads(rec.GetProp(_TABLE)))
            ids.append(cid)
        table = pd.DataFrame(rows, index=pd.Index(ids, name="conformer"))
        table = table.astype(object).where(pd.notna(table), np.nan)
        table = _restore_dtypes(table, meta["columns"])
        mol.SetIntProp("charge", int(meta["charge"]))
        mol.SetIntProp("multiplicity", int(meta["multiplicity"]))
        return Ensemble(mol, table, level=meta["level"], charge=meta["charge"],
                        multiplicity=meta["multiplicity"], solvent=meta["solvent"],
                        provenance=meta["provenance"], name=meta.get("name", ""))
    energies = None
    if energy_property is not None:
        energies = []
        for k, rec in enumerate(records, start=1):
            if not rec.HasProp(energy_property):
                raise InputError(f"{path.name}: record {k} has no property {energy_property!r}; "
                                 f"it has {list(rec.GetPropNames())}")
            try:
                energies.append(float(rec.GetProp(energy_property)))
            except ValueError:
                raise InputError(f"{path.name}: record {k}: {energy_property}="
                                 f"{rec.GetProp(energy_property)!r} is not a number") from None
    for rec in records:
        mol.AddConformer(Chem.Conformer(rec.GetConformer()), assignId=True)
    return Ensemble.from_mol(mol, energies, level=level or "input", unit=normalize_unit(unit),
                             name=path.stem)


def _read_xyz(path, unit, charge, level) -> Ensemble:
    from .molecule import load_molecule

    mol = load_molecule(path, charge=charge, stereo="ignore")
    energies = []
    with open(path) as fh:
        lines = fh.read().splitlines()
    pos = 0
    while pos < len(lines):
        if not lines[pos].strip():
            pos += 1
            continue
        n = int(lines[pos].split()[0])
        comment = lines[pos + 1] if pos + 1 < len(lines) else ""
        value = None
        for token in comment.replace("=", " ").replace(",", " ").split():
            try:
                value = float(token)
                break
            except ValueError:
                continue
        energies.append(value)
        pos += n + 2
    use = energies if energies and all(e is not None for e in energies) \
        and len(energies) == mol.GetNumConformers() else None
    return Ensemble.from_mol(mol, use, level=level or "input", unit=normalize_unit(unit),
                             name=path.stem)


def write_xyz(ens: Ensemble, path, unit: str = "hartree") -> None:
    """Multi-frame XYZ of the active conformers; each comment line holds the energy."""
    table = ens.raw_table
    col = f"energy_{ens.level}"
    symbols = [a.GetSymbol() for a in ens.mol.GetAtoms()]
    with open(path, "w") as fh:
        for cid in ens.ids():
            e = convert(float(table.loc[cid, col]), "hartree", unit)
            fh.write(f"{len(symbols)}\n{e:.10f} {normalize_unit(unit)} conformer {cid}\n")
            for s, (x, y, z) in zip(symbols, ens.positions(cid)):
                fh.write(f"{s:2s} {x:14.8f} {y:14.8f} {z:14.8f}\n")


def write_csv(ens: Ensemble, path, temperatures=(298.15,)) -> None:
    """The table (kcal/mol) with one population column per temperature."""
    table = ens.table("kcal/mol")
    if len(ens):
        pops = ens.populations(list(temperatures))
        for t in pops.columns:
            table[f"population_{t:g}K"] = pops[t].reindex(table.index)
    table.to_csv(path)


def ensemble_json(ens: Ensemble, temperatures=(298.15,), input_text: str | None = None) -> dict:
    """The machine-readable summary the command line prints with ``--json``."""
    temps = [float(t) for t in temperatures]
    rel = ens.energies("kcal/mol") if len(ens) else pd.Series(dtype=float)
    pops = ens.populations(temps) if len(ens) else pd.DataFrame()
    conformers = [{"id": int(cid), "relative_energy": float(rel[cid]),
                   "degeneracy": int(ens.degeneracy[cid]),
                   "population": [float(pops.loc[cid, t]) for t in temps]} for cid in ens.ids()]
    return {"input": input_text if input_text is not None else ens.name, "method": ens.level,
            "solvent": ens.solvent, "temperatures": temps, "conformers": conformers,
            "provenance": _jsonable(ens.provenance)}
