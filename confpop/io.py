"""Ensembles in and out: SDF, multi-frame XYZ, CSV and JSON.

SDF written here round-trips exactly: besides the usual 4-decimal coordinate block, every
record carries its full-precision coordinates and every table value as SD properties
(units in the property names), and the first record carries the ensemble's level, charge,
multiplicity, solvent and provenance. SDF or XYZ files from elsewhere are read as plain
ensembles, with an energy per record when one is given.
"""

from __future__ import annotations

import io
import json
import math
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
from rdkit import Chem, rdBase

from .ensemble import Ensemble
from .errors import InputError
from .units import convert, normalize_unit

__all__ = ["write_sdf", "read_ensemble", "write_csv", "write_xyz", "ensemble_json"]

_META = "confpop_ensemble"
_COORDS = "confpop_coordinates_angstrom"
_TABLE = "confpop_row"
#: full-precision coordinates, (n_atoms, 3) little-endian float64, base64 (files before
#: this revision hold them as JSON under _COORDS; both are read)
_COORDS_B64 = "confpop_coordinates_angstrom_f8le_base64"


def _encode_positions(xyz) -> str:
    import base64
    return base64.b64encode(np.ascontiguousarray(xyz, dtype="<f8").tobytes()).decode("ascii")


def _decode_positions(rec, where):
    """Stored coordinates of a record: base64 float64, or JSON in older files."""
    if rec.HasProp(_COORDS_B64):
        import base64
        import binascii
        try:
            raw = base64.b64decode(rec.GetProp(_COORDS_B64), validate=True)
        except (binascii.Error, ValueError):
            raise _Malformed(f"{where}: stored coordinates are not valid base64") from None
        if len(raw) % 24:
            raise _Malformed(f"{where}: stored coordinates are not whole (x, y, z) triples")
        return np.frombuffer(raw, dtype="<f8").reshape(-1, 3).astype(float)
    try:
        return np.asarray(_json_prop(rec, _COORDS, where), dtype=float)
    except (TypeError, ValueError):
        raise _Malformed(f"{where}: stored coordinates are not numbers") from None


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
            props["ring_puckers"] = "; ".join(f"{r.ring} {r.pucker}" for r in rings.itertuples())
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


def _restore_dtypes(table: pd.DataFrame, dtypes: dict) -> pd.DataFrame:
    for col, dtype in dtypes.items():
        if col in table.columns and dtype != "object":
            try:
                table[col] = table[col].astype(dtype)
            except (TypeError, ValueError):
                pass
    return table[[c for c in dtypes if c in table.columns]]


def read_ensemble(path, *, energy_property: str | None = None, unit: str | None = None,
                  uniform_weights: bool = False, charge: int | None = None,
                  level: str | None = None) -> Ensemble:
    """Read an ensemble from SDF (one record per conformer) or multi-frame XYZ.

    Parameters
    ----------
    path : str or pathlib.Path
    energy_property : str, optional
        For SDF from elsewhere: the SD property holding each record's energy (every record
        must have it, as a finite number). Not used for confpop's own SDF, whose energies
        are read as written.
    unit : str, optional
        Unit of those energies ("kcal/mol", "kJ/mol", "hartree", "eV", "cm-1"); required
        whenever energies are read from a file confpop did not write (a kcal/mol value read
        as hartree would put every population on one conformer). XYZ files written by
        :func:`write_xyz` name their unit on each comment line.
    uniform_weights : bool
        Accept a file of several conformers without usable energies and give each the same
        weight (scaled by degeneracy). Default False: such a file is refused, since equal
        populations are rarely what was meant.
    charge : int, optional
        Total charge (XYZ files carry none; bonds are perceived with it).
    level : str, optional
        Name of the energy level (default "input").

    Returns
    -------
    Ensemble
        Files written by :func:`write_sdf` come back exactly as they were written.

    Raises
    ------
    InputError
        One line naming the file and the 1-based record or frame: a missing or non-numeric
        energy, a missing unit, energies that are neither all present nor all absent, a
        multi-conformer file without energies (unless ``uniform_weights``), or a confpop
        SDF whose stored data are malformed, not finite, or disagree with the visible
        coordinates.

    Notes
    -----
    An XYZ comment line gives an energy only when it is unambiguous: the line holds exactly
    one number (``-40.1``, ``E = -40.1``), or is :func:`write_xyz`'s own
    ``<energy> <unit> conformer <id>``. A line such as ``conformer 1 energy: -40.1`` holds
    two numbers and gives none.
    """
    if isinstance(path, bytes) or not isinstance(path, (str, os.PathLike)):
        raise InputError(f"path must be a file path, got {type(path).__name__}")
    path = Path(path).expanduser()
    if not path.is_file():
        raise InputError(f"ensemble file {str(path)!r} does not exist" if not path.exists()
                         else f"ensemble file {str(path)!r} is not a file")
    if uniform_weights not in (True, False):
        raise InputError(f"uniform_weights must be True or False, got {uniform_weights!r}")
    if energy_property is not None and (not isinstance(energy_property, str)
                                        or not energy_property.strip()):
        raise InputError(f"energy_property must be a property name, got {energy_property!r}")
    if unit is not None:
        unit = normalize_unit(unit)
    suffix = path.suffix.lower()
    if suffix in (".sdf", ".sd", ".mol"):
        return _read_sdf(path, energy_property, unit, uniform_weights, level)
    if suffix == ".xyz":
        if energy_property is not None:
            raise InputError(f"{path}: energy_property names an SD property; an XYZ file has "
                             "none (its energies come from the comment lines)")
        return _read_xyz(path, unit, uniform_weights, charge, level)
    raise InputError(f"ensemble file must be .sdf or .xyz, got {path.name!r}")


def _no_energies(where: str, count: int, what: str, remedy: str) -> InputError:
    return InputError(
        f"{where} holds {count} conformers but {what}; their populations cannot be computed. "
        f"{remedy}, or ask for equal weights explicitly (uniform_weights=True; "
        "--uniform-weights)")


def _energy_like(rec) -> list[str]:
    return [n for n in rec.GetPropNames() if "energ" in n.lower() or n.lower() in ("e", "dg")]


def _read_sdf(path, energy_property, unit, uniform_weights, level) -> Ensemble:
    try:
        text = path.read_text()
    except UnicodeDecodeError:
        raise InputError(f"{path} is not a text file") from None
    supplier = Chem.SDMolSupplier()
    supplier.SetData(text, removeHs=False, sanitize=True)
    with rdBase.BlockLogs():
        count = len(supplier)
    records = []
    for k in range(count):
        with rdBase.BlockLogs():
            rec = supplier[k]
        if rec is None:
            raise InputError(f"{path}: record {k + 1} could not be read (invalid structure)")
        if rec.GetNumConformers() != 1:
            raise InputError(f"{path}: record {k + 1} has no coordinates")
        records.append(rec)
    if not records:
        raise InputError(f"{path}: no records")
    first = records[0]
    numbers = [a.GetAtomicNum() for a in first.GetAtoms()]
    smiles = Chem.MolToSmiles(Chem.RemoveHs(first))
    for k, rec in enumerate(records[1:], start=2):
        if [a.GetAtomicNum() for a in rec.GetAtoms()] != numbers:
            raise InputError(f"{path}: record {k} is not the same molecule in the same atom "
                             f"order as record 1 ({Chem.MolToSmiles(Chem.RemoveHs(rec))} vs {smiles})")
    mol = Chem.Mol(first)
    mol.RemoveAllConformers()
    for prop in list(mol.GetPropNames()):
        mol.ClearProp(prop)
    if first.HasProp(_META):
        return _read_own_sdf(path, records, mol)
    if any(rec.HasProp(_META) or rec.HasProp(_COORDS) or rec.HasProp(_COORDS_B64)
           for rec in records):
        raise InputError(f"{path}: record 1 lacks the confpop header that later records' "
                         "confpop data need (was the file cut or reordered?)")
    energies = None
    if energy_property is not None:
        energies = []
        for k, rec in enumerate(records, start=1):
            if not rec.HasProp(energy_property):
                raise InputError(f"{path}: record {k} has no property {energy_property!r}; "
                                 f"it has {list(rec.GetPropNames())}")
            raw = rec.GetProp(energy_property)
            try:
                value = float(raw)
            except ValueError:
                value = float("nan")
            if not math.isfinite(value):
                raise InputError(f"{path}: record {k}: {energy_property}={raw!r} is not a "
                                 "finite number")
            energies.append(value)
        if unit is None:
            raise InputError(f"{path}: give the unit of property {energy_property!r} (unit=; "
                             "--energy-unit on the command line): kcal/mol, kJ/mol, hartree, "
                             "eV or cm-1")
    elif len(records) > 1 and not uniform_weights:
        hint = _energy_like(first)
        raise _no_energies(str(path), len(records), "no energy property was named" + (
            f" (record 1 has {', '.join(repr(h) for h in hint)})" if hint else ""),
            "Name the energy property and its unit (energy_property= and unit=; "
            "--energy-property and --energy-unit on the command line)")
    for rec in records:
        mol.AddConformer(Chem.Conformer(rec.GetConformer()), assignId=True)
    return Ensemble.from_mol(mol, energies, level=level or "input", unit=unit or "hartree",
                             name=path.stem)


class _Malformed(Exception):
    pass


def _json_prop(rec, name, where):
    if not rec.HasProp(name):
        raise _Malformed(f"{where} has no {name} property")
    try:
        return json.loads(rec.GetProp(name))
    except (json.JSONDecodeError, RecursionError) as exc:
        raise _Malformed(f"{where}: property {name} is not valid JSON "
                         f"({str(exc)[:80] or 'nested too deeply'})") from None


def _read_own_sdf(path, records, mol) -> Ensemble:
    """A file :func:`write_sdf` wrote: every stored value checked before it is used."""
    n_atoms = mol.GetNumAtoms()
    try:
        meta = _json_prop(records[0], _META, "record 1")
        if not isinstance(meta, dict):
            raise _Malformed("record 1: the confpop header is not a JSON object")
        missing = [k for k in ("level", "charge", "multiplicity", "solvent", "provenance",
                               "columns") if k not in meta]
        if missing:
            raise _Malformed(f"record 1: the confpop header lacks {', '.join(missing)}")
        level, columns = meta["level"], meta["columns"]
        if not isinstance(level, str) or not level:
            raise _Malformed("record 1: the header's level is not a name")
        for key in ("charge", "multiplicity"):
            if isinstance(meta[key], bool) or not isinstance(meta[key], int):
                raise _Malformed(f"record 1: the header's {key} is not an integer")
        if meta["multiplicity"] < 1:
            raise _Malformed("record 1: the header's multiplicity is < 1")
        if meta["solvent"] is not None and not isinstance(meta["solvent"], str):
            raise _Malformed("record 1: the header's solvent is not a name")
        if not isinstance(meta["provenance"], list) or \
                not all(isinstance(p, dict) for p in meta["provenance"]):
            raise _Malformed("record 1: the header's provenance is not a list of objects")
        if not isinstance(columns, dict) or not all(
                isinstance(c, str) and isinstance(t, str) for c, t in columns.items()):
            raise _Malformed("record 1: the header's column list is malformed")
        needed = {"status", "reason", "degeneracy", f"energy_{level}"}
        if not needed <= set(columns):
            raise _Malformed(f"record 1: the header's columns lack "
                             f"{', '.join(sorted(needed - set(columns)))}")
        rows, ids, conformers = [], [], []
        for k, rec in enumerate(records, start=1):
            where = f"record {k}"
            if not rec.HasProp("conformer_id"):
                raise _Malformed(f"{where} has no conformer_id")
            try:
                cid = int(rec.GetProp("conformer_id"))
            except ValueError:
                raise _Malformed(f"{where}: conformer_id {rec.GetProp('conformer_id')!r} is "
                                 "not an integer") from None
            if cid < 0 or cid in ids:
                raise _Malformed(f"{where}: conformer_id {cid} is negative or repeated")
            xyz = _decode_positions(rec, where)
            if xyz.shape != (n_atoms, 3):
                raise _Malformed(f"{where}: stored coordinates have shape {xyz.shape}, "
                                 f"expected ({n_atoms}, 3)")
            if not np.all(np.isfinite(xyz)):
                raise _Malformed(f"{where}: stored coordinates are not all finite")
            visible = rec.GetConformer().GetPositions()
            # the MOL block prints 4 decimals: a rounding error is at most 5e-5 angstrom
            worst = float(np.max(np.abs(visible - xyz)))
            if worst > 1.1e-4:
                atom = int(np.argmax(np.max(np.abs(visible - xyz), axis=1)))
                raise _Malformed(f"{where}: stored coordinates disagree with the visible "
                                 f"ones by {worst:.4g} angstrom (atom {atom + 1}); the file was "
                                 "edited after confpop wrote it")
            row = _json_prop(rec, _TABLE, where)
            if not isinstance(row, dict) or set(row) != set(columns):
                raise _Malformed(f"{where}: the stored table row does not have the header's "
                                 "columns")
            if row["status"] not in ("ok", "failed"):
                raise _Malformed(f"{where}: status {row['status']!r} is not ok or failed")
            degeneracy = row["degeneracy"]
            if isinstance(degeneracy, bool) or not isinstance(degeneracy, int) or degeneracy < 1:
                raise _Malformed(f"{where}: degeneracy {degeneracy!r} is not an integer >= 1")
            energy = row[f"energy_{level}"]
            if row["status"] == "ok" and (isinstance(energy, bool) or not isinstance(
                    energy, (int, float)) or not math.isfinite(energy)):
                raise _Malformed(f"{where}: energy_{level} {energy!r} is not a finite number")
            conf = Chem.Conformer(n_atoms)
            for a in range(n_atoms):
                conf.SetAtomPosition(a, tuple(float(v) for v in xyz[a]))
            conf.SetId(cid)
            conf.Set3D(True)
            conformers.append(conf)
            rows.append(row)
            ids.append(cid)
    except _Malformed as exc:
        raise InputError(f"{path}: {exc}") from None
    for conf in conformers:
        mol.AddConformer(conf, assignId=False)
    table = pd.DataFrame(rows, index=pd.Index(ids, name="conformer"))
    table = table.astype(object).where(pd.notna(table), np.nan)
    table = _restore_dtypes(table, columns)
    mol.SetIntProp("charge", int(meta["charge"]))
    mol.SetIntProp("multiplicity", int(meta["multiplicity"]))
    name = meta.get("name", "")
    return Ensemble(mol, table, level=level, charge=meta["charge"],
                    multiplicity=meta["multiplicity"], solvent=meta["solvent"],
                    provenance=meta["provenance"], name=name if isinstance(name, str) else "")


_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eEdD][-+]?\d+)?$")


def _comment_energy(comment: str):
    """(energy, unit or None) from an XYZ comment line, or None when it is not unambiguous."""
    tokens = comment.replace("=", " ").replace(",", " ").replace(":", " ").split()
    numbers = [t for t in tokens if _NUMBER.match(t)]
    # write_xyz's own line: "<energy> <unit> conformer <id>"
    if len(tokens) == 4 and tokens[2] == "conformer" and _NUMBER.match(tokens[0]):
        try:
            return float(tokens[0]), normalize_unit(tokens[1])
        except InputError:
            pass
    if len(numbers) != 1:
        return None
    value = float(numbers[0].replace("d", "e").replace("D", "e"))
    return (value, None) if math.isfinite(value) else None


def _read_xyz(path, unit, uniform_weights, charge, level) -> Ensemble:
    from .molecule import _parse_xyz_frames, load_molecule

    mol = load_molecule(path, charge=charge, stereo="ignore")
    frames = _parse_xyz_frames(path, path.read_text())
    comments = [frame[0] for frame in frames]
    found = [_comment_energy(c) for c in comments]
    n = mol.GetNumConformers()
    if len(found) != n:
        raise InputError(f"{path}: {len(found)} frames but {n} conformers were read")
    have = [k for k, f in enumerate(found, start=1) if f is not None]
    if not have:
        if n > 1 and not uniform_weights:
            raise _no_energies(str(path), n, "no comment line gives an unambiguous energy "
                               "(exactly one number)", "Put each frame's energy alone on its "
                               "comment line and give its unit (unit=; --energy-unit)")
        return Ensemble.from_mol(mol, None, level=level or "input", name=path.stem)
    lacking = [k for k, f in enumerate(found, start=1) if f is None]
    if lacking:
        shown = ", ".join(map(str, lacking[:5])) + (", ..." if len(lacking) > 5 else "")
        raise InputError(f"{path}: frame(s) {shown} give no unambiguous energy on their "
                         "comment line (exactly one number) while others do; fix those lines")
    units = {f[1] for f in found}
    if len(units) > 1:
        raise InputError(f"{path}: the comment lines name different energy units "
                         f"({', '.join(sorted(str(u) for u in units))})")
    named = units.pop()
    if named is not None and unit is not None and named != unit:
        raise InputError(f"{path}: the comment lines give energies in {named}, but unit="
                         f"{unit!r} was asked for")
    unit = named or unit
    if unit is None:
        raise InputError(f"{path}: give the unit of the energies on the comment lines "
                         "(unit=; --energy-unit on the command line): kcal/mol, kJ/mol, "
                         "hartree, eV or cm-1")
    return Ensemble.from_mol(mol, [f[0] for f in found], level=level or "input", unit=unit,
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
