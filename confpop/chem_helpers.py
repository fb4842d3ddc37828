"""Small RDKit helpers shared by the input modules.

How an atom, a charge or a molecule is written in a message (atoms count from 1 there, as
molecule viewers count), the periodic table lookups, and conformer access with a clear error.
"""

from __future__ import annotations

import re

from rdkit import Chem, rdBase

from .checks import _check_int
from .errors import InputError

__all__: list[str] = []


_PT = Chem.GetPeriodicTable()
_SYMBOL_TO_Z = {_PT.GetElementSymbol(z).lower(): z for z in range(1, 119)}


def _element_number(token):
    if token.isdigit():
        z = int(token)
        return z if 1 <= z <= 118 else None
    return _SYMBOL_TO_Z.get(re.sub(r"[^A-Za-z]", "", token).lower() or "?")


def _element_text(mol, key):
    if len(key) == 1:
        return f"atom {_atom(mol, key[0])}"
    return f"bond {key[0] + 1}-{key[1] + 1}"


def _signed(n):
    return f"{n:+d}" if n else "0"


def _atom(mol, idx):
    """"3 (N)": the atom's 1-based number (as molecule viewers count) and its element."""
    atom = mol.GetAtomWithIdx(int(idx))
    return f"{int(idx) + 1} ({atom.GetSymbol()})"


def _get_conformer(mol, conf_id, caller):
    if not isinstance(mol, Chem.Mol):
        raise InputError(f"{caller}: mol must be an RDKit Mol, got {type(mol).__name__}")
    if mol.GetNumConformers() == 0:
        raise InputError(f"{caller}: the molecule has no conformer")
    conf_id = _check_int("conf_id", conf_id)
    if conf_id is None:
        conf_id = -1
    try:
        return mol.GetConformer(conf_id)
    except ValueError:
        ids = [c.GetId() for c in mol.GetConformers()]
        raise InputError(f"{caller}: no conformer with id {conf_id} (ids present: "
                         f"{ids[:10]}{' ...' if len(ids) > 10 else ''})") from None


def _isomeric_smiles(mol):
    with rdBase.BlockLogs():
        return Chem.MolToSmiles(Chem.RemoveHs(mol, sanitize=False))


def _plain_smiles(smiles):
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles)
    return Chem.MolToSmiles(mol) if mol is not None else smiles
