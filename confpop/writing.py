"""Ensembles out: SDF, multi-frame XYZ, CSV and JSON (the readers are in :mod:`confpop.io`).

SDF written here round-trips exactly: besides the usual 4-decimal coordinate block, every
record carries its full-precision coordinates and every table value as SD properties
(units in the property names), and the first record carries the ensemble's level, charge,
multiplicity, solvent and provenance. This module does not import :mod:`confpop.ensemble`
(an ensemble is only read here), so the ensemble's ``to_sdf``/``to_csv``/``to_json`` forwards
make no import cycle.
"""

from __future__ import annotations

import io
import json
import math
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from rdkit import Chem

from .units import convert, normalize_unit

if TYPE_CHECKING:  # for annotations only: never imported at run time, so no cycle
    from .ensemble import Ensemble

__all__ = ["write_sdf", "write_csv", "write_xyz", "ensemble_json"]


_META = "confpop_ensemble"
_COORDS = "confpop_coordinates_angstrom"
_TABLE = "confpop_row"
#: full-precision coordinates, (n_atoms, 3) little-endian float64, base64 (files before
#: this revision hold them as JSON under _COORDS; both are read)
_COORDS_B64 = "confpop_coordinates_angstrom_f8le_base64"


def _encode_positions(xyz) -> str:
    import base64
    return base64.b64encode(np.ascontiguousarray(xyz, dtype="<f8").tobytes()).decode("ascii")


def _descriptions_by_conformer(ens) -> dict:
    """{conformer id: {SD property: text}} from confpop.describe (empty when it fails)."""
    if not len(ens):
        return {}
    from .describe import describe_conformers

    desc = describe_conformers(ens)
    out: dict = {}
    for cid in ens.ids():
        props = {}
        if desc.torsions:
            props["torsions_deg"] = "; ".join(f"{t.label} {t.values[cid]:.0f}" for t in desc.torsions)
        rings = desc.rings[desc.rings["conformer"] == cid]
        if len(rings):
            props["ring_puckers"] = "; ".join(f"{r.ring} {getattr(r, 'label', r.pucker)}" for r in rings.itertuples())
        hb = desc.hbonds[desc.hbonds["conformer"] == cid]
        props["hydrogen_bonds"] = "; ".join(
            f"{r.label} {r.distance_angstrom:.2f} A" for r in hb.itertuples()) or "none"
        out[int(cid)] = props
    return out


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


def write_sdf(ens: Ensemble, path, temperatures=None) -> None:
    """Write one SD record per conformer (failed ones too, with status and reason).

    Properties a plain SDF reader shows: ``conformer_id``, ``status``, ``reason``,
    ``degeneracy``, ``energy_<level>_hartree`` for every level,
    ``relative_energy_kcal_per_mol`` at the ranking level, ``population_<T>K`` for each of
    ``temperatures`` (default: those the search was run for, else 298.15 K), ``species`` and
    ``species_label`` (slow exchange), and the conformer's
    description (``torsions_deg``, ``ring_puckers``, ``hydrogen_bonds``; atoms numbered from
    1). For an exact round trip each record also carries its table row as JSON and its
    full-precision coordinates as little-endian float64 in base64 (about half the size of
    the same numbers as JSON text).
    """
    table = ens.raw_table
    shown = ens.table("kcal/mol")
    rel = shown["relative_energy"]
    mol = ens.mol
    if temperatures is None:
        first = next((p for p in ens.provenance if p.get("step") == "input"), {})
        temperatures = first.get("temperatures") or (298.15,)
    pops = (ens.populations([float(t) for t in temperatures]) if len(ens) and temperatures
            else pd.DataFrame())
    described = _descriptions_by_conformer(ens)
    meta = {"level": ens.level, "charge": ens.charge, "multiplicity": ens.multiplicity,
            "solvent": ens.solvent, "name": ens.name, "provenance": _jsonable(ens.provenance),
            "columns": {c: str(table[c].dtype) for c in table.columns}}
    # RDKit's writer does not report a failed write (a full disk left a truncated file and
    # no error): build the text in memory and write it with Python, which does
    buffer = io.StringIO()
    with Chem.SDWriter(buffer) as writer:
        for k, cid in enumerate(ens.ids(active=False)):
            rec = Chem.Mol(mol)
            rec.RemoveAllConformers()
            rec.AddConformer(Chem.Conformer(mol.GetConformer(int(cid))), assignId=True)
            # private properties too: RDKit writes them, and the proton-identity cache of
            # confpop.nmr.identity (recomputed on reading) took 82 kB of 980 for propranolol
            for prop in list(rec.GetPropNames(includePrivate=True)):
                if prop != "_Name":
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
            for t in pops.columns:
                p = pops[t].get(cid, np.nan)
                rec.SetProp(f"population_{t:g}K", "" if pd.isna(p) else f"{float(p):.6f}")
            if "species" in shown.columns and not pd.isna(shown.loc[cid, "species"]):
                rec.SetIntProp("species", int(shown.loc[cid, "species"]))
                rec.SetProp("species_label", str(shown.loc[cid, "species_label"]))
            for prop, value in described.get(int(cid), {}).items():
                rec.SetProp(prop, value)
            rec.SetProp(_TABLE, json.dumps(_jsonable(row.to_dict())))
            rec.SetProp(_COORDS_B64, _encode_positions(mol.GetConformer(int(cid)).GetPositions()))
            if k == 0:
                rec.SetProp(_META, json.dumps(meta))
            writer.write(rec)
    with open(path, "w") as handle:
        handle.write(buffer.getvalue())


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


def write_csv(ens: Ensemble, path, temperatures=(298.15,), unit: str = "kcal/mol") -> None:
    """The table with a unit in every energy column name (see :mod:`confpop.schema`).

    Energies are relative (``energy_<level>_rel_kcal_mol``; the SDF holds the absolute
    hartree values), one ``population_<T>K`` column per temperature, ``delta_g_<T>K_<unit>``
    when free energies were computed at T, and the conformer descriptions of
    :func:`confpop.describe.describe_conformers` (``torsion_<labels>_deg`` with atoms
    numbered from 1, ``ring_<labels>`` pucker names, ``hydrogen_bonds``).
    """
    from .schema import file_columns

    unit = normalize_unit(unit)
    table = _csv_table(ens, temperatures, unit)
    table = table.rename(columns=file_columns(table.columns, unit))
    table.to_csv(path)


def _csv_table(ens: Ensemble, temperatures, unit: str, desc=None) -> pd.DataFrame:
    """The columns of table.csv under their internal names (one builder for the file and
    for run.json's description of it)."""
    table = ens.table(unit)
    temps = [float(t) for t in temperatures]
    if len(ens):
        pops = ens.populations(temps)
        for t in temps:
            gcol = f"gcorr_{t:.2f}"
            if gcol in table.columns:
                g = ens.energies(unit, energy="free", temperature=t)
                table[f"delta_g_{t:g}K"] = g.reindex(table.index)
        for t in pops.columns:
            table[f"population_{t:g}K"] = pops[t].reindex(table.index)
        if desc is None:
            from .describe import describe_conformers
            desc = describe_conformers(ens)
        table = table.join(desc.table)
    return table


def ensemble_json(ens: Ensemble, temperatures=(298.15,), input_text: str | None = None,
                  settings: dict | None = None) -> dict:
    """The machine-readable summary (``--json`` and ``run.json``).

    Holds the input, method, solvent and its model (GBSA or ALPB), the temperatures, per
    conformer the relative energy (kcal/mol), degeneracy, species, populations and
    description, per temperature the effective number of conformers (Kish), the
    distinguishing torsions (atoms numbered from 1), the written table's columns with their
    units, ``settings`` (e.g. the command-line options) and the provenance with every
    engine's version.
    """
    from .schema import describe_written, solvent_model

    temps = [float(t) for t in temperatures]
    rel = ens.energies("kcal/mol") if len(ens) else pd.Series(dtype=float)
    pops = ens.populations(temps) if len(ens) else pd.DataFrame()
    desc = None
    if len(ens):
        from .describe import describe_conformers
        desc = describe_conformers(ens)
    shown = ens.table("kcal/mol")
    conformers = []
    for cid in ens.ids():
        item = {"id": int(cid), "relative_energy": float(rel[cid]),
                "relative_energy_unit": "kcal/mol",
                "degeneracy": int(ens.degeneracy[cid]),
                "population": [float(pops.loc[cid, t]) for t in temps]}
        if "species" in shown.columns:
            item["species"] = int(shown.loc[cid, "species"])
        if desc is not None:
            item.update(desc.conformer_dict(cid))
        conformers.append(item)
    first = next((p for p in ens.provenance if p.get("step") == "input"), {})
    versions = {"confpop": first.get("confpop"), **first.get("libraries", {})} if first else {}
    if not versions.get("confpop"):
        from . import __version__
        versions["confpop"] = __version__
    payload = {"input": input_text if input_text is not None else ens.name, "method": ens.level,
               "solvent": ens.solvent,
               "solvent_model": solvent_model(first.get("method", ens.level), ens.solvent),
               "temperatures": temps, "temperature_unit": "K",
               "effective_conformers": ({format(t, "g"): ens.effective_count(t) for t in temps}
                                        if len(ens) else {}),
               "versions": versions,
               "conformers": conformers}
    if desc is not None:
        payload["descriptions"] = desc.to_dict()
    if settings:
        payload["settings"] = _jsonable(settings)
    # every column of table.csv (written in kcal/mol by the command line), with its unit
    payload["table_columns"] = describe_written(
        list(_csv_table(ens, temps, "kcal/mol", desc=desc).columns), "kcal/mol")
    payload["provenance"] = _jsonable(ens.provenance)
    return payload
