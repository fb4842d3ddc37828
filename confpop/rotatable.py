"""Which torsions of a molecule rotate: the one definition of a rotatable bond.

:func:`rotatable_torsions` lists the rotatable single bonds with one dihedral each (the end
atoms chosen by a fixed rule, so the same molecule always gives the same atoms);
:func:`torsion_for_bond` gives the dihedral of one chosen bond.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rdkit import Chem

from .errors import InputError

__all__ = ["Torsion", "rotatable_torsions", "torsion_for_bond"]


def _side(mol: Chem.Mol, start: int, blocked: int) -> set[int] | None:
    """Atoms reached from ``start`` without crossing the bond start-blocked (None in a ring)."""
    seen = {start}
    stack = [start]
    while stack:
        a = stack.pop()
        for nb in mol.GetAtomWithIdx(a).GetNeighbors():
            n = nb.GetIdx()
            if a == start and n == blocked:
                continue
            if n == blocked:
                return None
            if n not in seen:
                seen.add(n)
                stack.append(n)
    return seen


@dataclass(frozen=True)
class Torsion:
    """One scan-worthy dihedral.

    Attributes
    ----------
    atoms : (i, j, k, l) tuple of int
        0-based atom indices (RDKit order); heavy atoms preferred for i and l.
    bond : str
        The rotating bond in chemist's labels (element symbol + 0-based index), e.g. "C1-C2".
    label : str
        The whole dihedral, e.g. "C0-C1-C2-C3".
    kind : str
        "single", "amide" (C(=O)-N), "biaryl" (aromatic-aromatic) or "terminal top".
    equivalent_i, equivalent_l : tuple of int
        Atoms symmetry-equivalent to i (on j) and to l (on k); the dihedral through any of them
        describes the same conformer, so circular differences take the smallest choice.
    """

    atoms: tuple[int, int, int, int]
    bond: str
    label: str
    kind: str
    equivalent_i: tuple[int, ...] = ()
    equivalent_l: tuple[int, ...] = ()


def _label(mol, idx):
    return f"{mol.GetAtomWithIdx(idx).GetSymbol()}{idx}"


def _is_linear(atom) -> bool:
    """sp atoms with two neighbours (C#C, C=C=C, nitriles): dihedrals through them are undefined."""
    if atom.GetDegree() != 2:
        return False
    return (atom.GetHybridization() == Chem.HybridizationType.SP
            or any(b.GetBondType() == Chem.BondType.TRIPLE for b in atom.GetBonds()))


def _terminal_top(mol, end, other, conjugated) -> bool:
    """Is ``end`` (seen from ``other``) a terminal symmetric top such as CH3, CF3, NH2 or OH?

    All of its other neighbours are terminal atoms of one element. Threefold tops (CH3, CF3,
    NH3+) always count; one- and twofold ones (OH, NH2, NO2) only on a bond that is not
    conjugated, since on a conjugated bond (phenol, aniline, nitroarenes) they carry real
    barriers.
    """
    atom = mol.GetAtomWithIdx(end)
    others = [a for a in atom.GetNeighbors() if a.GetIdx() != other]
    if not others or any(a.GetDegree() != 1 for a in others):
        return False
    if len({a.GetAtomicNum() for a in others}) != 1:
        return False
    return len(others) >= 3 or not conjugated


def _pick_end(mol, center, other, ranks):
    nbrs = [a for a in mol.GetAtomWithIdx(center).GetNeighbors() if a.GetIdx() != other]
    if not nbrs:
        return None, ()
    # heavy atoms first, then the heavier element, then the more substituted atom, then index
    nbrs.sort(key=lambda a: (a.GetAtomicNum() == 1, -a.GetAtomicNum(),
                             -sum(1 for n in a.GetNeighbors() if n.GetAtomicNum() > 1),
                             a.GetIdx()))
    chosen = nbrs[0].GetIdx()
    equivalent = tuple(a.GetIdx() for a in nbrs if ranks[a.GetIdx()] == ranks[chosen])
    return chosen, equivalent


def _torsion_for_bond(mol, j, k, ranks, kind):
    i, eq_i = _pick_end(mol, j, k, ranks)
    l, eq_l = _pick_end(mol, k, j, ranks)
    if i is None or l is None:
        return None
    return Torsion(atoms=(i, j, k, l), bond=f"{_label(mol, j)}-{_label(mol, k)}",
                   label="-".join(_label(mol, a) for a in (i, j, k, l)), kind=kind,
                   equivalent_i=eq_i, equivalent_l=eq_l)


def _bond_kind(mol, bond) -> str:
    a, b = bond.GetBeginAtom(), bond.GetEndAtom()
    if a.GetIsAromatic() and b.GetIsAromatic():
        return "biaryl"
    for c, n in ((a, b), (b, a)):
        if c.GetAtomicNum() == 6 and n.GetAtomicNum() == 7 and any(
                nb.GetAtomicNum() == 8 and mol.GetBondBetweenAtoms(c.GetIdx(), nb.GetIdx())
                .GetBondType() == Chem.BondType.DOUBLE for nb in c.GetNeighbors()):
            return "amide"
    return "single"


def rotatable_torsions(mol: Chem.Mol, include_terminal: bool = False) -> list[Torsion]:
    """The scan-worthy dihedrals of a molecule, one per rotatable bond.

    A rotatable bond is a single, non-ring bond between two atoms that each have another
    neighbour and are not linear (sp). Terminal symmetric tops (CH3, CF3, NH3+, and OH, NH2
    or NO2 on a bond that is not conjugated) are left out unless ``include_terminal``.
    Amide C-N bonds are included (their barriers are the interesting ones) and marked.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Hydrogens may be implicit or explicit. Heavy-atom indices refer to ``mol`` as given;
        where a hydrogen must serve as i or l (an OH, an NH2) and ``mol`` has implicit
        hydrogens, its index refers to ``Chem.AddHs(mol)`` (hydrogens appended after the heavy
        atoms, as :func:`confpop.molecule.load_molecule` does).
    include_terminal : bool
        Also list terminal symmetric tops.

    Returns
    -------
    list of Torsion
        In bond order; i and l are heavy atoms where there are any.

    Examples
    --------
    >>> from rdkit import Chem
    >>> [t.label for t in rotatable_torsions(Chem.MolFromSmiles("CCCC"))]
    ['C0-C1-C2-C3']
    >>> [t.bond for t in rotatable_torsions(Chem.MolFromSmiles("CCCC"), include_terminal=True)]
    ['C0-C1', 'C1-C2', 'C2-C3']
    """
    if not isinstance(mol, Chem.Mol):
        raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
    work = Chem.AddHs(mol) if any(a.GetNumImplicitHs() for a in mol.GetAtoms()) else mol
    ranks = list(Chem.CanonicalRankAtoms(work, breakTies=False))
    out = []
    for bond in mol.GetBonds():
        if bond.GetBondType() != Chem.BondType.SINGLE or bond.IsInRing():
            continue
        j, k = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        aj, ak = work.GetAtomWithIdx(j), work.GetAtomWithIdx(k)
        if aj.GetDegree() < 2 or ak.GetDegree() < 2 or _is_linear(aj) or _is_linear(ak):
            continue
        conj = bond.GetIsConjugated()
        top = _terminal_top(work, j, k, conj) or _terminal_top(work, k, j, conj)
        if top and not include_terminal:
            continue
        kind = "terminal top" if top else _bond_kind(work, bond)
        t = _torsion_for_bond(work, j, k, ranks, kind)
        if t is not None:
            out.append(t)
    return out


def _torsion_from_atoms(mol, atoms) -> Torsion:
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    i, j, k, l = atoms

    def eq(end, center):
        return tuple(a.GetIdx() for a in mol.GetAtomWithIdx(center).GetNeighbors()
                     if ranks[a.GetIdx()] == ranks[end])

    bond = mol.GetBondBetweenAtoms(j, k)
    return Torsion(atoms=tuple(int(a) for a in atoms), bond=f"{_label(mol, j)}-{_label(mol, k)}",
                   label="-".join(_label(mol, a) for a in atoms), kind=_bond_kind(mol, bond),
                   equivalent_i=eq(i, j), equivalent_l=eq(l, k))


def torsion_for_bond(mol: Chem.Mol, j: int, k: int) -> Torsion:
    """The dihedral i-j-k-l for the bond j-k, with heavy atoms preferred for i and l.

    Raises
    ------
    InputError
        If j and k are not bonded or one of them has no other neighbour.
    """
    _check_index(mol, (j, k))
    if mol.GetBondBetweenAtoms(int(j), int(k)) is None:
        raise InputError(f"atoms {j} and {k} (0-based) are not bonded "
                         f"({_label(mol, int(j))}, {_label(mol, int(k))})")
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    bond = mol.GetBondBetweenAtoms(int(j), int(k))
    t = _torsion_for_bond(mol, int(j), int(k), ranks, _bond_kind(mol, bond))
    if t is None:
        raise InputError(f"bond {_label(mol, int(j))}-{_label(mol, int(k))} has no dihedral: "
                         "one of its atoms has no other neighbour")
    return t


def _check_index(mol, atoms):
    n = mol.GetNumAtoms()
    for a in atoms:
        if isinstance(a, bool) or not isinstance(a, (int, np.integer)):
            raise InputError(f"atom indices must be integers (0-based), got {a!r}")
        if not 0 <= int(a) < n:
            raise InputError(f"atom index {a} is out of range: the molecule has {n} atoms "
                             f"(0-based indices 0..{n - 1}, hydrogens included)")


def _check_dihedral_atoms(mol, atoms) -> tuple[int, int, int, int]:
    try:
        atoms = tuple(atoms)
    except TypeError:
        raise InputError(f"atoms must be four atom indices (i, j, k, l), got {atoms!r}") from None
    if len(atoms) != 4:
        raise InputError(f"atoms must be four atom indices (i, j, k, l), got {len(atoms)}: {atoms}")
    _check_index(mol, atoms)
    atoms = tuple(int(a) for a in atoms)
    if len(set(atoms)) != 4:
        raise InputError(f"atoms must be four different atoms, got {atoms}")
    for a, b in zip(atoms[:-1], atoms[1:]):
        if mol.GetBondBetweenAtoms(a, b) is None:
            raise InputError(f"atoms {atoms} must form a bonded chain i-j-k-l; "
                             f"{_label(mol, a)} and {_label(mol, b)} are not bonded")
    return atoms
