"""Stereo perception and enumeration.

Which stereocentres and stereogenic double bonds a molecule has and which of them are
open, ring junctions whose configuration the rings force (norbornane, adamantane), the
configuration one conformer's coordinates show (:func:`stereo_signature`,
:func:`configuration_smiles`), and the expansion of open elements into stereoisomers (used
by :func:`confpop.loading.stereoisomers`).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import AllChem, rdCIPLabeler
from rdkit.Chem.EnumerateStereoisomers import EnumerateStereoisomers, StereoEnumerationOptions

from .chem_helpers import _atom, _get_conformer, _isomeric_smiles
from .errors import InputError
from .geometry import dihedral_at

__all__ = ["stereo_signature", "configuration_smiles"]


# Junction atoms of small bridged or fused ring systems have their relative configuration
# forced by the rings (in/out isomers of a bridged system need rings of eight or more atoms;
# a trans junction needs more than four atoms in each fused ring) [common practice]. RDKit
# flags them as independent centres, which would make norbornane or adamantane "chiral".
_FORCED_BRIDGED_MAX_RING = 7
_FORCED_FUSED_MAX_RING = 4
_PROBE_SEED = 0x5EED


def stereo_signature(mol: Chem.Mol, conf_id: int = -1) -> tuple:
    """The configuration of every stereocentre and stereogenic double bond in one conformer.

    The configuration is read from the conformer's 3D coordinates alone (the stereo flags
    stored on ``mol`` are not used), so the signatures of two geometries differ when a
    centre was inverted or a double bond isomerized in between. The comparison is per atom:
    the two mirror-image conformers of a meso compound differ although they are one
    stereoisomer; :func:`configuration_smiles` compares blind to symmetry. Junctions of
    cages (adamantane, quinuclidine), which cannot invert on their own, are left out.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens and at least one 3D conformer.
    conf_id : int, default -1
        Conformer id (-1: the first conformer).

    Returns
    -------
    tuple of (tuple of int, str)
        Sorted pairs ``((atom,), label)`` for tetrahedral centres and ``((i, j), label)``
        for double bonds between atoms i < j. Labels are CIP descriptors from RDKit's new
        CIP labeller (``"R"``, ``"S"``, ``"r"``, ``"s"``, ``"E"``, ``"Z"``); where CIP gives
        none, the parity of the centre relative to RDKit's neighbour order (``"@"``,
        ``"@@"``) or ``"cis"``/``"trans"`` for the lowest-index neighbours of a double bond;
        ``"?"`` when the geometry does not define it (a flattened centre).

    Raises
    ------
    InputError
        If ``mol`` is not an RDKit molecule or has no such conformer.

    Examples
    --------
    >>> from rdkit.Chem import AllChem
    >>> from confpop import load_molecule
    >>> mol = load_molecule("C[C@@H](O)/C=C/C")
    >>> AllChem.EmbedMolecule(mol, randomSeed=7)
    0
    >>> stereo_signature(mol, 0)
    (((1,), 'R'), ((3, 4), 'E'))
    """
    conf = _get_conformer(mol, conf_id, "stereo_signature")
    work = Chem.Mol(mol, True)  # quick copy: graph only, no conformers or properties
    work.AddConformer(Chem.Conformer(conf), assignId=True)
    Chem.RemoveStereochemistry(work)
    _assign_from_coordinates(work, work.GetConformer().GetId())
    return _stereo_labels(work, conf)


def configuration_smiles(mol: Chem.Mol, conf_id: int = -1) -> str:
    """Isomeric SMILES of the stereoisomer that one conformer's coordinates show.

    Unlike a per-atom comparison of :func:`stereo_signature`, equality of these strings is
    blind to the molecule's symmetry: the two mirror-image conformers of a meso compound
    (atom 1 R and atom 2 S in one, atom 1 S and atom 2 R in the other) give the same string.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens and at least one 3D conformer.
    conf_id : int, default -1
        Conformer id (-1: the first conformer).

    Returns
    -------
    str
        Canonical isomeric SMILES (hydrogens implicit), configuration from the coordinates.

    Examples
    --------
    >>> from rdkit.Chem import AllChem
    >>> from confpop import load_molecule
    >>> mol = load_molecule("C[C@@H](O)CC")
    >>> AllChem.EmbedMolecule(mol, randomSeed=7)
    0
    >>> configuration_smiles(mol, 0)
    'CC[C@@H](C)O'
    """
    conf = _get_conformer(mol, conf_id, "configuration_smiles")
    work = Chem.Mol(mol, True)
    work.AddConformer(Chem.Conformer(conf), assignId=True)
    Chem.RemoveStereochemistry(work)
    _assign_from_coordinates(work, work.GetConformer().GetId())
    return _isomeric_smiles(work)


@dataclass(frozen=True)
class _StereoElement:
    key: tuple          # (atom,) or (i, j); the junction atoms for a ring unit
    text: str           # "atom 2 (C): unassigned tetrahedral centre"
    cumulene: bool = False
    unit: bool = False


@dataclass(frozen=True)
class _RingUnit:
    """Junction centres of one ring system whose configurations can only change together."""

    atoms: tuple        # atom indices
    tags: tuple         # one feasible set of chiral tags; the other is its mirror image


_INVERTED = {Chem.ChiralType.CHI_TETRAHEDRAL_CW: Chem.ChiralType.CHI_TETRAHEDRAL_CCW,
             Chem.ChiralType.CHI_TETRAHEDRAL_CCW: Chem.ChiralType.CHI_TETRAHEDRAL_CW}


def _open_stereo(mol):
    """(mol with forced stereo assigned, open stereo elements, ring units).

    Two kinds of RDKit flags are settled here because they are no choice at all: junction
    atoms of small bridged or fused ring systems whose configurations the rings force
    (norbornane, adamantane, quinuclidine), and flags whose every assignment gives the same
    molecule (C2 of 2-methyladamantane). Junctions of a chiral ring system (camphor) stay
    open as one element with two mirror-image forms.
    """
    elements = _unassigned_stereo(mol)
    settled, units = _settle_ring_junctions(mol, elements)
    if settled is not mol:
        elements = _unassigned_stereo(settled)
    in_units = {a for u in units for a in u.atoms}
    merged = [e for e in elements if not (len(e.key) == 1 and e.key[0] in in_units)]
    for unit in units:
        atoms = ", ".join(_atom(settled, a) for a in unit.atoms)
        merged.append(_StereoElement(unit.atoms, f"atoms {atoms}: unassigned configuration of "
                                                 f"the ring system (two mirror-image forms)",
                                     unit=True))
    choices = [e for e in merged if not e.cumulene]
    if choices and len(choices) <= 6:
        distinct = _distinct_isomers(settled, units, limit=2)
        if len(distinct) == 1:
            settled = distinct[0]
            merged = [e for e in merged if e.cumulene]
            units = []
    return settled, merged, units


def _settle_ring_junctions(mol, elements):
    """Assign forced ring junctions; return (mol, chiral ring units left open)."""
    open_atoms = {e.key[0] for e in elements if len(e.key) == 1}
    if not open_atoms:
        return mol, []
    centres = {i.centeredOn for i in _stereo_elements(mol)
               if i.type == Chem.StereoType.Atom_Tetrahedral}
    forced = _forced_junctions(mol, centres)
    forced_open = sorted(open_atoms & forced)
    if not forced_open:
        return mol, []
    probe = Chem.Mol(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = _PROBE_SEED
    with rdBase.BlockLogs():
        if AllChem.EmbedMolecule(probe, params) < 0:
            return mol, []  # cannot tell: every centre stays open
    positions = probe.GetConformer().GetPositions()
    system_of = _ring_systems(mol)
    settled = Chem.Mol(mol)
    units = []
    for system in sorted({system_of[a] for a in forced_open}):
        unit_atoms = [a for a in forced_open if system_of[a] == system]
        fixed_partners = [a for a in forced if system_of[a] == system and a not in open_atoms]
        tags = [_tag_from_geometry(mol, a, positions) for a in unit_atoms]
        candidate = _with_tags(settled, unit_atoms, tags)
        if not fixed_partners:
            mirror = _with_tags(settled, unit_atoms, [_INVERTED[t] for t in tags])
            if _isomeric_smiles(candidate) != _isomeric_smiles(mirror):
                units.append(_RingUnit(tuple(unit_atoms), tuple(tags)))
                continue
        settled = candidate  # only one configuration exists (up to symmetry)
    return settled, units


def _distinct_isomers(mol, units, limit):
    """Up to ``limit`` distinct stereoisomers completing ``mol`` (ring units respected)."""
    options = StereoEnumerationOptions(onlyUnassigned=True, unique=True, maxIsomers=1024)
    found = {}
    with rdBase.BlockLogs():
        for isomer in EnumerateStereoisomers(mol, options=options):
            if not _fits_units(isomer, units):
                continue
            found.setdefault(_isomeric_smiles(isomer), isomer)
            if len(found) >= limit:
                break
    return list(found.values())


def _tag_from_geometry(mol, idx, positions, min_volume=0.0):
    """RDKit's chiral tag of atom ``idx`` in the given geometry (None if flatter than allowed).

    The tag is CCW when the unit vectors to the first three neighbours, in the atom's bond
    order, span a positive volume (checked against ``AssignStereochemistryFrom3D`` for
    three- and four-coordinate centres); it works for amine nitrogens (aziridines, bridgehead
    amines), which RDKit's own 3D assignment skips. A regular tetrahedral centre gives a
    volume of 0.77, a planar one 0.
    """
    atom = mol.GetAtomWithIdx(idx)
    nbrs = [b.GetOtherAtomIdx(idx) for b in atom.GetBonds()][:3]
    if len(nbrs) < 3:
        return None
    vectors = positions[nbrs] - positions[idx]
    lengths = np.linalg.norm(vectors, axis=1)
    if np.any(lengths == 0):
        return None
    vectors = vectors / lengths[:, None]
    volume = float(np.dot(vectors[0], np.cross(vectors[1], vectors[2])))
    if abs(volume) <= min_volume:
        return None
    return (Chem.ChiralType.CHI_TETRAHEDRAL_CCW if volume > 0
            else Chem.ChiralType.CHI_TETRAHEDRAL_CW)


# a centre flatter than this (normalized volume, see _tag_from_geometry) has no configuration
_MIN_CHIRAL_VOLUME = 0.1


def _assign_from_coordinates(mol, conf_id):
    """Stereo flags of ``mol`` from one conformer, amine nitrogens included."""
    with rdBase.BlockLogs():
        Chem.AssignStereochemistryFrom3D(mol, confId=conf_id)
    positions = mol.GetConformer(conf_id).GetPositions()
    for _ in range(3):  # a newly set centre can make another one stereogenic
        changed = False
        for info in _stereo_elements(mol):
            if (info.type != Chem.StereoType.Atom_Tetrahedral
                    or info.specified == Chem.StereoSpecified.Specified):
                continue
            tag = _tag_from_geometry(mol, info.centeredOn, positions, _MIN_CHIRAL_VOLUME)
            if tag is not None:
                mol.GetAtomWithIdx(info.centeredOn).SetChiralTag(tag)
                changed = True
        if not changed:
            break


def _forced_junctions(mol, centres):
    rings = [set(r) for r in mol.GetRingInfo().AtomRings()]
    forced = set()
    for idx in centres:
        atom = mol.GetAtomWithIdx(idx)
        if sum(1 for b in atom.GetBonds() if b.IsInRing()) < 3:
            continue
        mine = [r for r in rings if idx in r]
        if any(len(r) > _FORCED_BRIDGED_MAX_RING for r in mine):
            continue
        for a, b in itertools.combinations(mine, 2):
            shared = len(a & b)
            if shared >= 3 or (shared == 2 and max(len(a), len(b)) <= _FORCED_FUSED_MAX_RING):
                forced.add(idx)
                break
    return forced


def _ring_systems(mol):
    """Map ring atom -> id of its ring system (rings joined through shared atoms)."""
    parent = {}

    def find(x):
        while parent.setdefault(x, x) != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for ring in mol.GetRingInfo().AtomRings():
        for a in ring[1:]:
            parent[find(a)] = find(ring[0])
    return {a: find(a) for a in parent}


def _with_tags(mol, atoms, tags):
    out = Chem.Mol(mol)
    for a, tag in zip(atoms, tags):
        out.GetAtomWithIdx(a).SetChiralTag(tag)
    return out


def _fits_units(isomer, units):
    for unit in units:
        tags = tuple(isomer.GetAtomWithIdx(a).GetChiralTag() for a in unit.atoms)
        if tags != unit.tags and tags != tuple(_INVERTED.get(t, t) for t in unit.tags):
            return False
    return True


def _stereo_elements(mol):
    """RDKit's stereo elements of ``mol`` (true stereo only: symmetric centres are dropped)."""
    work = Chem.Mol(mol, True)  # quick copy: FindPotentialStereo may change flags
    with rdBase.BlockLogs():
        infos = Chem.FindPotentialStereo(work, cleanIt=True, flagPossible=True)
    return list(infos)


def _unassigned_stereo(mol):
    out = []
    for info in _stereo_elements(mol):
        if info.specified == Chem.StereoSpecified.Specified:
            continue
        if info.type == Chem.StereoType.Atom_Tetrahedral:
            idx = info.centeredOn
            out.append(_StereoElement((idx,), f"atom {_atom(mol, idx)}: unassigned "
                                              f"tetrahedral centre"))
        elif info.type in (Chem.StereoType.Bond_Double, Chem.StereoType.Bond_Cumulene_Even):
            bond = mol.GetBondWithIdx(info.centeredOn)
            i, j = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
            cumulene = info.type == Chem.StereoType.Bond_Cumulene_Even or _is_cumulated(mol, bond)
            what = "allene/cumulene axis" if cumulene else "double bond"
            out.append(_StereoElement((i, j), f"bond {i + 1}-{j + 1}: unassigned {what}", cumulene))
        # other kinds (square-planar, trigonal-bipyramidal, octahedral centres) are flagged
        # by RDKit without regard to identical ligands (SF6 would count): not checked
    return out


def _is_cumulated(mol, bond):
    for atom in (bond.GetBeginAtom(), bond.GetEndAtom()):
        doubles = [b for b in atom.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE]
        if len(doubles) > 1:
            return True
    return False


def _refuse_cumulenes(elements, mol):
    cumulenes = [e for e in elements if e.cumulene]
    if cumulenes:
        raise InputError(
            f"{_isomeric_smiles(mol)}: {'; '.join(e.text for e in cumulenes)}: RDKit cannot "
            f"record the axial configuration of an allene or cumulene, so it can neither be "
            f"checked nor enumerated; pass stereo='ignore' (and check the conformers' axis "
            f"yourself) or leave out the cumulene")


def _unassigned_stereo_error(mol, elements, label, units):
    n = len(elements)
    example = ""
    try:
        options = StereoEnumerationOptions(onlyUnassigned=True, maxIsomers=256)
        with rdBase.BlockLogs():
            for isomer in EnumerateStereoisomers(mol, options=options):
                if _fits_units(isomer, units):
                    example = f" (for example {_isomeric_smiles(isomer)})"
                    break
    except Exception:  # noqa: BLE001 - an example is a courtesy only
        example = ""
    return InputError(
        f"{n} stereo element{'s' if n != 1 else ''} of {label} "
        f"{'have' if n != 1 else 'has'} no assigned configuration "
        f"({'; '.join(e.text for e in elements)}); assign {'them' if n != 1 else 'it'} in the "
        f"SMILES{example}, or work on every stereoisomer with confpop.stereoisomers() "
        f"(command line --enumerate-stereo), or pass stereo='ignore' to let conformer "
        f"generation pick a configuration at random (the ensemble then mixes stereoisomers)")


def _stereo_labels(mol, conf):
    """Sorted ((atoms), label) for the stereo elements of ``mol``, from its stereo flags.

    With ``conf`` given, double bonds without a CIP label are read as cis/trans from its
    coordinates; else from the bond's stereo flag.
    """
    infos = [i for i in _stereo_elements(mol)
             if i.type in (Chem.StereoType.Atom_Tetrahedral, Chem.StereoType.Bond_Double)]
    work = Chem.Mol(mol, True)  # quick copy: the labeller writes properties
    try:
        with rdBase.BlockLogs():
            rdCIPLabeler.AssignCIPLabels(work)
    except Exception:  # noqa: BLE001 - too complex for the labeller: parities are used
        pass
    labels = []
    for info in infos:
        if info.type == Chem.StereoType.Atom_Tetrahedral:
            atom = work.GetAtomWithIdx(info.centeredOn)
            if info.specified != Chem.StereoSpecified.Specified:
                lab = "?"
            elif atom.HasProp("_CIPCode"):
                lab = atom.GetProp("_CIPCode")
            else:
                tag = atom.GetChiralTag()
                lab = {Chem.ChiralType.CHI_TETRAHEDRAL_CCW: "@",
                       Chem.ChiralType.CHI_TETRAHEDRAL_CW: "@@"}.get(tag, "?")
                if lab != "?" and _inversion_changes_nothing(mol, info.centeredOn):
                    continue  # a cage junction (adamantane): no configuration of its own
            labels.append(((info.centeredOn,), lab))
        else:
            bond = work.GetBondWithIdx(info.centeredOn)
            if _is_cumulated(work, bond):
                continue
            key = tuple(sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx())))
            if info.specified != Chem.StereoSpecified.Specified:
                lab = "?"
            elif bond.HasProp("_CIPCode"):
                lab = bond.GetProp("_CIPCode")
            elif conf is not None:
                lab = _cis_trans_from_coordinates(work, bond, conf)
            else:
                lab = _cis_trans_from_flags(bond)
            labels.append((key, lab))
    return tuple(sorted(labels))


def _inversion_changes_nothing(mol, idx):
    flipped = Chem.Mol(mol, True)
    atom = flipped.GetAtomWithIdx(idx)
    atom.SetChiralTag(_INVERTED.get(atom.GetChiralTag(), atom.GetChiralTag()))
    return _isomeric_smiles(flipped) == _isomeric_smiles(Chem.Mol(mol, True))


def _lowest_other_neighbour(atom, other_idx):
    idx = [n.GetIdx() for n in atom.GetNeighbors() if n.GetIdx() != other_idx]
    return min(idx) if idx else None


def _cis_trans_from_coordinates(mol, bond, conf):
    a, b = bond.GetBeginAtom(), bond.GetEndAtom()
    na = _lowest_other_neighbour(a, b.GetIdx())
    nb = _lowest_other_neighbour(b, a.GetIdx())
    if na is None or nb is None:
        return "?"
    p = conf.GetPositions()
    angle = dihedral_at(p, (na, a.GetIdx(), b.GetIdx(), nb))
    if np.isnan(angle):  # a linear bond angle at the double bond: no cis or trans
        return "?"
    return "cis" if abs(angle) < 90.0 else "trans"


def _cis_trans_from_flags(bond):
    stereo = bond.GetStereo()
    atoms = list(bond.GetStereoAtoms())
    if stereo not in (Chem.BondStereo.STEREOCIS, Chem.BondStereo.STEREOTRANS) or len(atoms) != 2:
        return "?"
    a, b = bond.GetBeginAtom(), bond.GetEndAtom()
    flips = (atoms[0] != _lowest_other_neighbour(a, b.GetIdx())) + (
        atoms[1] != _lowest_other_neighbour(b, a.GetIdx()))
    cis = (stereo == Chem.BondStereo.STEREOCIS) ^ bool(flips % 2)
    return "cis" if cis else "trans"
