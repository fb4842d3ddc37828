"""Readers of user input: SMILES, an RDKit Mol, MOL/SDF, XYZ and SMILES files.

One reader per format. Each returns a :class:`_Parsed` record, a sanitized molecule as
read, with how the input is named in messages; :mod:`confpop.loading` then applies the
common checks. Records of an SDF file and frames of an XYZ file count from 1 in messages, as
a text editor shows them.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import rdDetermineBonds

from .bonds import bond_graph_from_coordinates
from .chem_helpers import _PT, _SYMBOL_TO_Z, _atom, _element_number, _isomeric_smiles
from .errors import InputError

__all__ = ["SmilesText"]


_SDF_SUFFIXES = (".sdf", ".sd", ".mol")
_XYZ_SUFFIXES = (".xyz",)
_SMILES_SUFFIXES = (".smi", ".smiles")
_UNSUPPORTED_SUFFIXES = {
    ".mol2": "MOL2 files are not supported (their atom types and bond orders are too often "
             "ambiguous); convert the file to SDF",
    ".pdb": "PDB files are not supported (they carry no bond orders); convert the file to SDF",
    ".cif": "CIF files are not supported; convert the file to SDF or XYZ",
}
_KNOWN_SUFFIXES = _SDF_SUFFIXES + _XYZ_SUFFIXES + _SMILES_SUFFIXES + tuple(_UNSUPPORTED_SUFFIXES)


@dataclass
class _Parsed:
    """A sanitized molecule as read, before the common checks."""

    mol: Chem.Mol
    label: str                      # how the input is named in messages
    name: str                       # default "_Name"
    source: str                     # stored as the "source" property
    is3d: bool = False
    unit: str = "conformer"         # what a conformer is called in messages ("record", ...)
    conformer_labels: list = field(default_factory=list)
    multiplicity_hint: int | None = None  # from a Mol's "multiplicity" property
    stereo_from_3d: bool = False    # stereo flags already read from the coordinates


class SmilesText(str):
    """A string that is SMILES and never a file path (a line of a batch file): a batch
    "SMILES" that happens to name a local file must not make confpop read that file."""

    __slots__ = ()


def _read_source(source, charge):
    if isinstance(source, SmilesText):
        text = source.strip()
        if not text:
            raise InputError("empty input: expected a SMILES string")
        return _read_smiles(text, label=None, file_hint=False)
    if isinstance(source, Chem.Mol):
        return _read_rdkit_mol(source)
    if isinstance(source, os.PathLike):
        return _read_file(Path(source), charge)
    if isinstance(source, bytes):
        raise InputError("source must be a str (SMILES or path), a pathlib.Path or an RDKit "
                         "Mol, got bytes; decode it first")
    if not isinstance(source, str):
        raise InputError(f"source must be a SMILES string, a file path or an RDKit Mol, "
                         f"got {type(source).__name__}")
    text = source.strip()
    if not text:
        raise InputError("empty input: expected a SMILES string, a MOL/SDF/XYZ file path "
                         "or an RDKit Mol")
    if os.path.isdir(text):
        raise InputError(f"{text} is a directory; expected a SMILES string or a MOL/SDF/XYZ file")
    if os.path.isfile(text) or text.lower().endswith(_KNOWN_SUFFIXES):
        return _read_file(Path(text), charge)
    return _read_smiles(text, label=None)


def _read_smiles(text, label, file_hint=True):
    parts = text.split(None, 1)
    smiles = parts[0]
    given_name = parts[1].strip() if len(parts) > 1 else ""
    label = label or f"SMILES {smiles!r}"
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        _diagnose_smiles(smiles, label, text if file_hint else "")
    if mol.GetNumAtoms() == 0:
        raise InputError(f"{label} holds no atoms")
    return _Parsed(mol=mol, label=label, name=given_name or smiles, source=f"smiles:{smiles}")


def _diagnose_smiles(smiles, label, original):
    """Raise an InputError saying why a SMILES string does not parse."""
    with rdBase.BlockLogs():
        raw = Chem.MolFromSmiles(smiles, sanitize=False)
    if raw is not None:
        _raise_chemistry_problem(raw, label)
    reason = _smiles_syntax_reason(smiles)
    hint = ""
    if "/" in original or "\\" in original or re.search(r"\.[A-Za-z]{2,5}$", original):
        hint = f" (no file named {original!r} exists either)"
    raise InputError(f"could not read {label}: {reason}{hint}")


def _smiles_syntax_reason(smiles):
    depth = 0
    for ch in smiles:
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0:
                return "a ')' closes a branch that was never opened"
    if depth > 0:
        return "a '(' branch is never closed"
    if smiles.count("[") != smiles.count("]"):
        return "unbalanced square brackets [ ]"
    outside = re.sub(r"\[[^\]]*\]", "", smiles)
    bad_elements = [m.group(1) for m in re.finditer(r"\[\d*([A-Za-z][a-z]?)", smiles)
                    if m.group(1).lower() not in _SYMBOL_TO_Z]
    if bad_elements:
        return f"unknown element symbol {bad_elements[0]!r}"
    ring_labels = re.findall(r"%\d\d|\d", outside)
    open_labels = {}
    for lab in ring_labels:
        open_labels[lab] = open_labels.get(lab, 0) + 1
    unclosed = sorted(lab for lab, n in open_labels.items() if n % 2)
    if unclosed:
        return f"ring bond {unclosed[0].lstrip('%')} is opened but never closed"
    return "not valid SMILES syntax"


def _read_rdkit_mol(source):
    mol = Chem.Mol(source)
    label = "the RDKit molecule"
    if mol.HasProp("_Name") and mol.GetProp("_Name").strip():
        label = f"the RDKit molecule {mol.GetProp('_Name').strip()!r}"
    if mol.GetNumAtoms() == 0:
        raise InputError(f"{label} has no atoms")
    try:
        with rdBase.BlockLogs():
            Chem.SanitizeMol(mol)
    except Exception:  # noqa: BLE001 - RDKit raises several types; we explain it ourselves
        _raise_chemistry_problem(Chem.Mol(source), label)
        raise InputError(f"{label} could not be sanitized by RDKit") from None
    hint = None
    if mol.HasProp("multiplicity"):
        try:
            hint = int(mol.GetProp("multiplicity"))
        except ValueError:
            raise InputError(f"{label} has a property multiplicity="
                             f"{mol.GetProp('multiplicity')!r}, not an integer") from None
    name = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
    conformers = [c for c in mol.GetConformers() if c.Is3D()]
    labels = [f"conformer {c.GetId()}" for c in conformers]
    is3d = bool(conformers)
    _keep_conformers(mol, conformers)
    return _Parsed(mol=mol, label=label, name=name or _isomeric_smiles(mol), source="rdkit-mol",
                   is3d=is3d, unit="conformer", conformer_labels=labels,
                   multiplicity_hint=hint)


def _read_file(path, charge):
    suffix = path.suffix.lower()
    if suffix in _UNSUPPORTED_SUFFIXES:
        raise InputError(f"{path}: {_UNSUPPORTED_SUFFIXES[suffix]}")
    path = path.expanduser()
    if not path.exists():
        raise InputError(f"file not found: {path}")
    if not path.is_file():
        raise InputError(f"{path} is not a file")
    if suffix not in _SDF_SUFFIXES + _XYZ_SUFFIXES + _SMILES_SUFFIXES:
        raise InputError(f"unsupported file type {suffix or '(no suffix)'!r} for {path}; "
                         f"expected .sdf, .mol, .xyz or .smi (a string is read as a path when "
                         f"a file of that name exists)")
    try:
        text = path.read_text()
    except UnicodeDecodeError:
        raise InputError(f"{path} is not a text file") from None
    if not text.strip():
        raise InputError(f"{path} is empty: it holds no molecule")
    if suffix in _SDF_SUFFIXES:
        return _read_sdf(path, text)
    if suffix in _XYZ_SUFFIXES:
        return _read_xyz(path, text, 0 if charge is None else charge)
    return _read_smiles_file(path, text)


def _read_smiles_file(path, text):
    lines = [(n, ln.strip()) for n, ln in enumerate(text.splitlines(), 1)
             if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{path} holds no SMILES line (only comments)")
    parsed = [(n, _read_smiles(ln, label=f"line {n} of {path}")) for n, ln in lines]
    first_key = Chem.MolToSmiles(parsed[0][1].mol)
    for n, p in parsed[1:]:
        if Chem.MolToSmiles(p.mol) != first_key:
            raise InputError(f"line {n} of {path} is a different molecule from line "
                             f"{parsed[0][0]}; a file must hold one molecule")
    first = parsed[0][1]
    first.source = f"smi:{path}"
    return first


def _read_sdf(path, text):
    supplier = Chem.SDMolSupplier()
    supplier.SetData(text, sanitize=True, removeHs=False)
    with rdBase.BlockLogs():
        count = len(supplier)
    if count == 0:
        raise InputError(f"{path} holds no MOL record")
    records = []
    for index in range(count):
        label = f"record {index + 1} of {path}"
        with rdBase.BlockLogs():
            mol = supplier[index]
        if mol is None:
            raw = Chem.SDMolSupplier()
            raw.SetData(text, sanitize=False, removeHs=False)
            with rdBase.BlockLogs():
                unsanitized = raw[index]
            if unsanitized is None:
                raise InputError(f"{label} is not a readable MOL block (check the counts "
                                 f"line and the atom and bond lines)")
            _raise_chemistry_problem(unsanitized, label)
            raise InputError(f"{label} could not be sanitized by RDKit")
        if mol.GetNumAtoms() == 0:
            raise InputError(f"{label} has no atoms")
        title = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
        if title:
            label = f"record {index + 1} ({title!r}) of {path}"
        records.append((label, title, mol))

    dims = {label: (m.GetNumConformers() > 0 and m.GetConformer().Is3D())
            for label, _, m in records}
    is3d = dims[records[0][0]]
    for label, _, _ in records[1:]:
        if dims[label] != is3d:
            raise InputError(f"{label} has {'3D' if dims[label] else '2D'} coordinates but "
                             f"record 1 has {'3D' if is3d else '2D'}; records must be "
                             f"conformers of one molecule, all in 3D")
    first_label, first_title, first = records[0]
    if not is3d:
        # 2D records carry the structure only: they must all be the same molecule
        key = Chem.MolToSmiles(first)
        for label, _, mol in records[1:]:
            if Chem.MolToSmiles(mol) != key:
                raise _different_molecule(label, first_label, mol, first)
        first = Chem.Mol(first)
        first.RemoveAllConformers()
        return _Parsed(mol=first, label=str(path), name=first_title or path.stem,
                       source=f"sdf:{path}")

    prepared = []
    for label, title, mol in records:
        mol = Chem.AddHs(mol, addCoords=True)
        with rdBase.BlockLogs():
            Chem.AssignStereochemistryFrom3D(mol)
        prepared.append((label, title, mol))
    ref_label, _, ref = prepared[0]
    ref_iso = Chem.MolToSmiles(ref)
    merged = Chem.Mol(ref)
    merged.RemoveAllConformers()
    for key in merged.GetPropNames():  # SD data belong to each record's conformer
        merged.ClearProp(key)
    labels = []
    for index, (label, title, mol) in enumerate(prepared):
        if index > 0:
            if Chem.MolToSmiles(mol) != ref_iso:
                raise _different_molecule(label, ref_label, mol, ref)
            mol = _renumber_like(mol, ref, label)
        conf = Chem.Conformer(mol.GetConformer())
        for key in mol.GetPropNames():  # public SD data, kept as the text of the file
            conf.SetProp(key, mol.GetProp(key))
        conf.SetProp("title", title)
        conf.SetId(index)
        merged.AddConformer(conf, assignId=False)
        labels.append(label.replace(f" of {path}", ""))
    return _Parsed(mol=merged, label=str(path), name=first_title or path.stem,
                   source=f"sdf:{path}", is3d=True, unit="record", conformer_labels=labels,
                   stereo_from_3d=True)


def _different_molecule(label, ref_label, mol, ref):
    flat, ref_flat = (Chem.MolToSmiles(Chem.RemoveHs(m), isomericSmiles=False) for m in (mol, ref))
    if flat == ref_flat:
        return InputError(f"{label} is a different stereoisomer ({_isomeric_smiles(mol)}) from "
                          f"{ref_label} ({_isomeric_smiles(ref)}); a file must hold conformers "
                          f"of one stereoisomer")
    return InputError(f"{label} is a different molecule ({_isomeric_smiles(mol)}) from "
                      f"{ref_label} ({_isomeric_smiles(ref)}); a file must hold conformers of "
                      f"one molecule")


def _renumber_like(mol, ref, label):
    """Return ``mol`` with its atoms in the order of ``ref`` (same molecule)."""
    same_order = (
        all(a.GetAtomicNum() == b.GetAtomicNum() for a, b in zip(mol.GetAtoms(), ref.GetAtoms()))
        and all(mol.GetBondBetweenAtoms(b.GetBeginAtomIdx(), b.GetEndAtomIdx()) is not None
                for b in ref.GetBonds()))
    if same_order:
        return mol
    match = mol.GetSubstructMatch(ref, useChirality=True)
    if len(match) != ref.GetNumAtoms():
        raise InputError(f"{label}: could not map its atoms onto record 1's atom order")
    return Chem.RenumberAtoms(mol, list(match))


def _read_xyz(path, text, charge):
    frames = _parse_xyz_frames(path, text)
    elements0 = frames[0][1]
    for number, (_, elements, _, line) in enumerate(frames[1:], 2):
        if len(elements) != len(elements0):
            raise InputError(f"frame {number} of {path} (line {line}) has {len(elements)} atoms, "
                             f"frame 1 has {len(elements0)}; frames must be conformers of one "
                             f"molecule")
        for i, (a, b) in enumerate(zip(elements, elements0)):
            if a != b:
                raise InputError(
                    f"frame {number} of {path}: atom {i + 1} is {_PT.GetElementSymbol(a)}, in frame "
                    f"1 it is {_PT.GetElementSymbol(b)}; frames must list the atoms in the "
                    f"same order")
    electrons = sum(elements0) - charge
    if electrons < 0:
        raise InputError(f"charge={charge} removes more electrons than {path} has "
                         f"({sum(elements0)})")
    if electrons % 2:
        raise InputError(
            f"{path} has {electrons} electrons with total charge {charge}, an odd number: bond "
            f"orders can be assigned from coordinates only to closed-shell structures; if the "
            f"molecule is an ion give its charge (charge=..., command line --charge); a "
            f"radical must be given as SMILES or SDF with the unpaired electron marked")

    mol = Chem.RWMol()
    for z in elements0:
        mol.AddAtom(Chem.Atom(int(z)))
    mol = mol.GetMol()
    conf = Chem.Conformer(len(elements0))
    conf.Set3D(True)
    for i, xyz in enumerate(frames[0][2]):
        conf.SetAtomPosition(i, xyz.tolist())
    mol.AddConformer(conf, assignId=True)
    try:
        with rdBase.BlockLogs():
            rdDetermineBonds.DetermineBonds(mol, charge=int(charge))
            Chem.SanitizeMol(mol)
    except Exception:  # noqa: BLE001 - RDKit raises ValueError or RuntimeError here
        raise InputError(
            f"could not perceive the bonds of {path} with total charge {charge}: no set of "
            f"bond orders and formal charges fits the geometry and that charge; if the "
            f"molecule is charged, give its charge (charge=..., command line --charge), "
            f"otherwise check the geometry (units must be angstrom)") from None

    # later frames must show the same bonds as the first
    ref_graph = bond_graph_from_coordinates(mol, 0)
    merged = Chem.Mol(mol)
    merged.RemoveAllConformers()
    labels = []
    for number, (comment, _, positions, line) in enumerate(frames, 1):
        conf = Chem.Conformer(len(elements0))
        conf.Set3D(True)
        for i, xyz in enumerate(positions):
            conf.SetAtomPosition(i, xyz.tolist())
        conf.SetProp("title", comment)
        conf.SetId(number - 1)
        merged.AddConformer(conf, assignId=False)
        if number > 1:
            graph = bond_graph_from_coordinates(merged, number - 1)
            if graph != ref_graph:
                extra = sorted(graph - ref_graph)
                missing = sorted(ref_graph - graph)
                what = "; ".join(
                    [f"new bond {_atom(merged, i)}-{_atom(merged, j)}" for i, j in extra[:3]]
                    + [f"no bond {_atom(merged, i)}-{_atom(merged, j)}" for i, j in missing[:3]])
                raise InputError(f"frame {number} of {path} (line {line}) has other bonds than "
                                 f"frame 1 ({what}); frames must be conformers of one molecule")
        labels.append(f"frame {number}")
    return _Parsed(mol=merged, label=str(path), name=path.stem, source=f"xyz:{path}",
                   is3d=True, unit="frame", conformer_labels=labels, stereo_from_3d=True)


def _parse_xyz_frames(path, text):
    """[(comment, atomic numbers, (n, 3) positions, first line number), ...]"""
    lines = text.splitlines()
    frames = []
    i = 0
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        head = lines[i].split()
        try:
            n_atoms = int(head[0])
        except ValueError:
            raise InputError(f"line {i + 1} of {path}: expected the number of atoms of frame "
                             f"{len(frames) + 1}, got {lines[i].strip()[:40]!r}") from None
        if n_atoms < 1:
            raise InputError(f"line {i + 1} of {path}: frame {len(frames) + 1} declares "
                             f"{n_atoms} atoms")
        start = i
        comment = lines[i + 1].strip() if i + 1 < len(lines) else ""
        atom_lines = lines[i + 2:i + 2 + n_atoms]
        if len(atom_lines) < n_atoms:
            raise InputError(f"{path}: frame {len(frames) + 1} (line {start + 1}) declares "
                             f"{n_atoms} atoms but the file ends after {len(atom_lines)}")
        elements, positions = [], []
        for offset, raw in enumerate(atom_lines):
            number = i + 3 + offset
            parts = raw.split()
            if len(parts) < 4:
                raise InputError(f"line {number} of {path}: expected 'element x y z', "
                                 f"got {raw.strip()[:60]!r}")
            z = _element_number(parts[0])
            if z is None:
                raise InputError(f"line {number} of {path}: unknown element {parts[0]!r}")
            try:
                xyz = [float(v) for v in parts[1:4]]
            except ValueError:
                raise InputError(f"line {number} of {path}: coordinates must be numbers, got "
                                 f"{' '.join(parts[1:4])!r}") from None
            if not all(math.isfinite(v) for v in xyz):
                raise InputError(f"line {number} of {path}: coordinates must be finite, got "
                                 f"{' '.join(parts[1:4])!r}")
            elements.append(z)
            positions.append(xyz)
        frames.append((comment, elements, np.array(positions, dtype=float), start + 1))
        i += 2 + n_atoms
    if not frames:
        raise InputError(f"{path} holds no XYZ frame")
    return frames


def _keep_conformers(mol, conformers):
    """Keep only ``conformers`` (copies), renumbered 0, 1, ..."""
    kept = [Chem.Conformer(c) for c in conformers]
    mol.RemoveAllConformers()
    for new_id, conf in enumerate(kept):
        conf.SetId(new_id)
        mol.AddConformer(conf, assignId=False)


def _conformer_label(parsed, conf_id):
    if 0 <= conf_id < len(parsed.conformer_labels):
        return parsed.conformer_labels[conf_id]
    return f"{parsed.unit} {conf_id + 1}"


def _raise_chemistry_problem(raw, label):
    """Raise an InputError describing the first sanitization problem of ``raw``, if any."""
    with rdBase.BlockLogs():
        problems = Chem.DetectChemistryProblems(raw)
    if not problems:
        return
    problem = problems[0]
    kind = problem.GetType()
    if kind == "AtomValenceException":
        idx = problem.GetAtomIdx()
        atom = raw.GetAtomWithIdx(idx)
        match = re.search(r",\s*(\d+),", problem.Message())
        valence = match.group(1) if match else "too high"
        allowed = ""
        if atom.GetFormalCharge() == 0:
            valences = [v for v in _PT.GetValenceList(atom.GetAtomicNum()) if v >= 0]
            if valences:
                allowed = f" ({max(valences)})"
        raise InputError(f"{label}: atom {_atom(raw, idx)} has valence {valence}, more than "
                         f"allowed{allowed}; check its bonds, hydrogens and formal charge")
    if kind in ("KekulizeException", "AtomKekulizeException"):
        atoms = list(problem.GetAtomIndices()) if hasattr(problem, "GetAtomIndices") else [
            problem.GetAtomIdx()]
        listing = ", ".join(_atom(raw, i) for i in atoms[:10])
        raise InputError(f"{label}: cannot assign alternating single and double bonds to the "
                         f"aromatic atoms {listing}; check the aromatic ring (a pyrrole-type "
                         f"nitrogen needs its hydrogen written as [nH])")
    raise InputError(f"{label}: RDKit cannot sanitize it ({problem.Message().strip()})")
