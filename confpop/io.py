"""Ensembles in: SDF and multi-frame XYZ (the writers live in :mod:`confpop.writing` and are
re-exported here).

SDF written here round-trips exactly: besides the usual 4-decimal coordinate block, every
record carries its full-precision coordinates and every table value as SD properties
(units in the property names), and the first record carries the ensemble's level, charge,
multiplicity, solvent and provenance. SDF or XYZ files from elsewhere are read as plain
ensembles, with an energy per record when one is given.
"""

from __future__ import annotations

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
from .units import normalize_unit
from .writing import _COORDS, _COORDS_B64, _META, _TABLE  # one declaration of the SD keys
from .writing import ensemble_json, write_csv, write_sdf, write_xyz  # noqa: F401 (re-exported)

__all__ = ["write_sdf", "read_ensemble", "write_csv", "write_xyz", "ensemble_json"]

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


