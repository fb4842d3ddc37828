"""Consistent identity of stereoheterotopic protons (and methyl groups) across conformers.

A CH2 group next to a stereocentre carries two protons that give two NMR signals (they are
diastereotopic); the pro-R proton of one conformer is the pro-R proton of every conformer.
An embedding does not know that: ETKDG places the two protons of a CH2 (and the two methyls
of an isopropyl group) in either order, so atom index 18 may be pro-R in one conformer and
pro-S in the next. Averages taken per atom index then mix two different protons.

:func:`consistent_proton_identity` puts every conformer in one order: for each prochiral
centre X with two interchangeable terminal ligands a < b (two H, or two terminal groups such
as the methyls of an isopropyl group or of a gem-dimethyl carbon), the lower index ``a`` is
made the pro-R (or pro-r) ligand in every conformer, by swapping the coordinates of a and b
(and of their hydrogens) where the conformer has them the other way round. The assignment
is by the CIP rules: one of the two ligands is marked as the heavier isotope (deuterium for
H, 13C for a methyl carbon), the configuration is read from the 3D structure and RDKit's
CIP labeller (the new algorithm, ``rdCIPLabeler``) names the centre R or S; the marked
ligand is then pro-R when the centre is R. Which of the two places around X holds the pro-R
ligand is fixed by the sign of the triple product of the two other ligands' bonds and the
pro-R ligand's bond, which is the same in every conformer of one stereoisomer, so the
CIP labeller runs once per centre and every conformer is checked by that sign.

Homotopic pairs (the CIP labeller gives no label: propane's CH2, cyclohexane's CH2) are
left as they are: any order is the same molecule.

The two ligands of a trigonal centre X=Y (the protons of a vinyl CH2=, the methyls of an
isopropylidene group) are treated the same way: the one that makes the double bond Z when
marked as the heavier isotope (cis to the higher-priority group across the double bond) is
labelled "Z", the other "E", and the lower index is made the Z ligand in every conformer.

Only terminal ligands are reordered (H, or a heavy atom whose other neighbours are all
terminal: CH3, CF3); two larger equivalent groups on a prochiral centre (the ethyls of a
3-pentyl group) are left as embedded.

Conformers whose real stereocentres differ from the first conformer's (an ensemble built
with ``stereo="ignore"`` that mixes stereoisomers) are not reordered and a
:class:`ProtonIdentityWarning` says so: their protons have no common identity.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdCIPLabeler

from ..errors import ConfpopWarning, InputError
from ..geometry import dihedral_at

__all__ = ["ProchiralPair", "ProtonIdentityWarning", "prochiral_pairs",
           "consistent_proton_identity", "prochiral_labels"]

#: private molecule property caching the pair analysis (not written to SD files: RDKit
#: writes no property whose name starts with "_")
_CACHE_PROP = "_confpop_prochiral_pairs"


class ProtonIdentityWarning(ConfpopWarning):
    """Protons of some conformers could not be given the common pro-R/pro-S identity."""


@dataclass(frozen=True)
class ProchiralPair:
    """Two interchangeable ligands on one prochiral centre.

    Attributes
    ----------
    centre : int
        The prochiral atom (0-based index).
    pro_r, pro_s : int
        The ligand atoms; after :func:`consistent_proton_identity` ``pro_r`` < ``pro_s``.
    others : (int, int)
        The two other ligands of the centre, ascending.
    descriptor : str
        "R" (pro-R/pro-S) or "r" (pseudo-asymmetric: pro-r/pro-s).
    sign : float
        +1 or -1: the sign of (others[0] - X) . ((others[1] - X) x (pro_r - X)) in every
        conformer of this stereoisomer.
    hydrogens_r, hydrogens_s : tuple of int
        For terminal groups (a methyl): their hydrogens, ascending; empty for protons.
    """

    centre: int
    pro_r: int
    pro_s: int
    others: tuple
    descriptor: str
    sign: float
    hydrogens_r: tuple = ()
    hydrogens_s: tuple = ()

    @property
    def labels(self) -> dict:
        """{atom: "pro-R"/"pro-S"} (lower case r/s for pseudo-asymmetric centres; "Z"/"E"
        for the two ligands of a trigonal centre, see :func:`prochiral_pairs`)."""
        if self.descriptor == "Z":
            return {self.pro_r: "Z", self.pro_s: "E"}
        r, s = ("pro-R", "pro-S") if self.descriptor == "R" else ("pro-r", "pro-s")
        return {self.pro_r: r, self.pro_s: s}

    def orientation(self, positions: np.ndarray) -> np.ndarray:
        """+1/-1 per conformer ((..., n_atoms, 3) positions): which of the two places holds
        ``pro_r`` (compare with ``sign``)."""
        if self.descriptor == "Z":  # trigonal: cis (+1) or trans (-1) to others[1] across X=Y
            phi = dihedral_at(positions, (self.pro_r, self.centre, *self.others[:2]))
            return np.where(np.abs(phi) < 90.0, 1.0, -1.0)
        return _triple(positions, self.centre, self.others[0], self.others[1], self.pro_r)


# --------------------------------------------------------------------------- candidates
def _terminal_group(atom: Chem.Atom, centre: int) -> tuple | None:
    """(atom, its other neighbours) when atom is H or a terminal group (all other neighbours
    have degree 1), else None."""
    if atom.GetAtomicNum() == 1:
        return (atom.GetIdx(), ())
    others = [n for n in atom.GetNeighbors() if n.GetIdx() != centre]
    if others and all(n.GetDegree() == 1 for n in others):
        return (atom.GetIdx(), tuple(sorted(n.GetIdx() for n in others)))
    return None


def _candidates(mol: Chem.Mol):
    """(centre, (a, hs_a), (b, hs_b), (o1, o2)) for every 4-coordinate atom with exactly two
    graph-equivalent terminal ligands and two other ligands."""
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False))
    out = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 1:
            continue
        if atom.GetDegree() == 3 and not atom.GetIsAromatic():
            out.extend(_trigonal_candidates(mol, atom, ranks))
            continue
        if atom.GetDegree() != 4:
            continue
        nbrs = [n for n in atom.GetNeighbors()]
        by_rank: dict[int, list] = {}
        for n in nbrs:
            by_rank.setdefault(ranks[n.GetIdx()], []).append(n)
        for members in by_rank.values():
            if len(members) != 2:
                continue
            groups = [_terminal_group(n, atom.GetIdx()) for n in members]
            if any(g is None for g in groups):
                continue
            (a, ha), (b, hb) = sorted(groups)
            if len(ha) != len(hb):
                continue
            others = tuple(sorted(n.GetIdx() for n in nbrs if n.GetIdx() not in (a, b)))
            out.append((atom.GetIdx(), (a, ha), (b, hb), others))
    return out


def _trigonal_candidates(mol, atom, ranks):
    """X(=Y) with two graph-equivalent terminal ligands: (centre, (a, ha), (b, hb), (Y, W))
    with W a fixed neighbour of Y (not X)."""
    double = [b for b in atom.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE]
    if len(double) != 1 or double[0].IsInRing():
        return []
    y = double[0].GetOtherAtom(atom)
    ligands = [n for n in atom.GetNeighbors() if n.GetIdx() != y.GetIdx()]
    if len(ligands) != 2 or ranks[ligands[0].GetIdx()] != ranks[ligands[1].GetIdx()]:
        return []
    groups = [_terminal_group(n, atom.GetIdx()) for n in ligands]
    if any(g is None for g in groups):
        return []
    ws = sorted(n.GetIdx() for n in y.GetNeighbors() if n.GetIdx() != atom.GetIdx())
    if not ws:
        return []
    (a, ha), (b, hb) = sorted(groups)
    return [(atom.GetIdx(), (a, ha), (b, hb), (y.GetIdx(), ws[0]))]


def _descriptor(mol: Chem.Mol, centre: int, marked: int, conf_id: int) -> str | None:
    """CIP label of ``centre`` with ``marked`` as the heavier isotope, read from conf_id."""
    m = Chem.Mol(mol)
    atom = m.GetAtomWithIdx(marked)
    atom.SetIsotope(2 if atom.GetAtomicNum() == 1 else
                    int(round(Chem.GetPeriodicTable().GetMostCommonIsotopeMass(atom.GetAtomicNum()))) + 1)
    Chem.AssignStereochemistryFrom3D(m, confId=conf_id, replaceExistingTags=True)
    c = m.GetAtomWithIdx(centre)
    double = [b for b in c.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE]
    trigonal = c.GetDegree() == 3 and len(double) == 1
    try:
        if trigonal:
            rdCIPLabeler.AssignCIPLabels(m, atomsToLabel=[], bondsToLabel=[double[0].GetIdx()])
        else:
            rdCIPLabeler.AssignCIPLabels(m, atomsToLabel=[centre])
    except (RuntimeError, ValueError):  # the labeller gives up on some large ring systems
        return None
    item = double[0] if trigonal else c
    return item.GetProp("_CIPCode") if item.HasProp("_CIPCode") else None


def _triple(pos, x, o1, o2, a):
    """Sign of (o1 - x) . ((o2 - x) x (a - x)) for (..., n_atoms, 3) positions."""
    px = pos[..., x, :]
    return np.sign(np.einsum("...i,...i->...", pos[..., o1, :] - px,
                             np.cross(pos[..., o2, :] - px, pos[..., a, :] - px)))


def _stereo_signature(mol: Chem.Mol, pos: np.ndarray) -> np.ndarray:
    """Per conformer, the triple-product signs at the molecule's tetrahedral stereocentres."""
    centres = [a for a in mol.GetAtoms()
               if a.GetChiralTag() in (Chem.ChiralType.CHI_TETRAHEDRAL_CW,
                                       Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
               and a.GetDegree() >= 3]
    if not centres:
        return np.zeros((pos.shape[0], 0))
    cols = []
    for a in centres:
        n = [x.GetIdx() for x in a.GetNeighbors()][:3]
        cols.append(_triple(pos, a.GetIdx(), n[0], n[1], n[2]))
    return np.stack(cols, axis=-1)


def prochiral_pairs(mol: Chem.Mol, conf_id: int | None = None) -> list[ProchiralPair]:
    """Every stereoheterotopic pair of terminal ligands (H, or terminal groups) with its CIP
    pro-R/pro-S assignment, the lower index named pro-R.

    ``sign`` is the orientation in which the lower index is pro-R; conformers with the other
    orientation need the pair swapped (see :func:`consistent_proton_identity`).

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        With explicit hydrogens and at least one conformer.
    conf_id : int, optional
        The conformer the configuration is read from (default: the first).

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("OCC"))          # ethanol: enantiotopic CH2
    >>> AllChem.EmbedMolecule(mol, randomSeed=3)
    0
    >>> [(p.centre, p.pro_r, p.pro_s) for p in prochiral_pairs(mol)]
    [(1, 4, 5)]
    """
    if mol.GetNumConformers() == 0:
        return []
    if conf_id is None:  # the first conformer with usable coordinates
        conf_id = next((c.GetId() for c in mol.GetConformers()
                        if np.isfinite(np.asarray(c.GetPositions())).all()), None)
        if conf_id is None:
            return []
    pos = np.asarray(mol.GetConformer(int(conf_id)).GetPositions())
    pairs = []
    for centre, (a, ha), (b, hb), others in _candidates(mol):
        label = _descriptor(mol, centre, a, conf_id)
        if label not in ("R", "S", "r", "s", "E", "Z"):
            continue
        descriptor = "R" if label in ("R", "S") else ("r" if label in ("r", "s") else "Z")
        trial = ProchiralPair(centre, a, b, others, descriptor, 1.0, ha, hb)
        # the orientation a has where a is pro-R (or Z)
        s = float(trial.orientation(pos))
        if s == 0.0:
            continue
        if label in ("S", "s", "E"):
            s = -s
        pairs.append(ProchiralPair(centre, a, b, others, descriptor, s, ha, hb))
    return pairs


def consistent_proton_identity(mol: Chem.Mol, reference: str = "cip") -> Chem.Mol:
    """A copy of ``mol`` in which each atom index is the same stereoheterotopic ligand
    (pro-R or pro-S) in every conformer.

    Coordinates of the two ligands (with their hydrogens, for a methyl) are swapped in the
    conformers that have them the other way round. Nothing else changes: the set of
    positions of every conformer is the same.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
    reference : {"cip", "first"}
        "cip" (used for every Ensemble): the lower index of each pair is the pro-R ligand, so
        two ensembles of one molecule (other seeds, other runs) agree atom by atom. "first":
        the first conformer is kept as it is and the others follow it (for a molecule a user
        hands over, whose atom indices refer to that first structure).

    Returns
    -------
    rdkit.Chem.Mol
        A new molecule; the input is not modified. Molecules without conformers or without
        stereoheterotopic pairs come back as an unchanged copy.

    Warns
    -----
    ProtonIdentityWarning
        When conformers differ in the configuration of a real stereocentre (mixed
        stereoisomers); those conformers are left as they are.
    """
    out = Chem.Mol(mol)
    if out.GetNumConformers() == 0 or not any(a.GetAtomicNum() == 1 for a in out.GetAtoms()):
        return out
    pairs = _cached_pairs(out)
    if not pairs:
        return out
    confs = list(out.GetConformers())
    pos = np.stack([np.asarray(c.GetPositions()) for c in confs])
    finite = np.isfinite(pos).all(axis=(1, 2))
    if not finite.any():
        return out
    sig = _stereo_signature(out, pos)
    ref = sig[int(np.argmax(finite))]
    mixed = (np.any(sig != ref, axis=1) if sig.shape[1] else np.zeros(len(confs), bool)) & finite
    if mixed.any():
        warnings.warn(f"{int(mixed.sum())} of {len(confs)} conformers have a stereocentre "
                      "configured differently from the first conformer (mixed stereoisomers); "
                      "their diastereotopic protons were not given the common pro-R/pro-S "
                      "identity", ProtonIdentityWarning, stacklevel=2)
    if reference not in ("cip", "first"):
        raise InputError(f"reference must be 'cip' or 'first', got {reference!r}")
    changed = np.zeros(len(confs), bool)
    for p in pairs:
        s = p.orientation(pos)
        first = s[int(np.argmax(finite))]
        target = p.sign if reference == "cip" or first == 0 else first
        swap = (s != target) & (s != 0) & ~mixed & finite
        if not swap.any():
            continue
        src = [p.pro_r, *p.hydrogens_r, p.pro_s, *p.hydrogens_s]
        dst = [p.pro_s, *p.hydrogens_s, p.pro_r, *p.hydrogens_r]
        pos[np.ix_(swap, src)] = pos[np.ix_(swap, dst)]
        changed |= swap
    for k in np.flatnonzero(changed):
        conf = confs[k]
        for i, xyz in enumerate(pos[k]):
            conf.SetAtomPosition(i, xyz.tolist())
    return out


def _cache_key(mol: Chem.Mol) -> str:
    # atoms, bonds and chiral tags: the analysis is valid for this graph and configuration
    atoms = ",".join(f"{a.GetAtomicNum()}{int(a.GetChiralTag())}" for a in mol.GetAtoms())
    bonds = ",".join(f"{b.GetBeginAtomIdx()}-{b.GetEndAtomIdx()}" for b in mol.GetBonds())
    return f"{atoms}|{bonds}"


def _cached_pairs(mol: Chem.Mol) -> list[ProchiralPair]:
    """prochiral_pairs(mol) cached on the molecule (a private property copied with it)."""
    import json

    key = _cache_key(mol)
    if mol.HasProp(_CACHE_PROP):
        try:
            data = json.loads(mol.GetProp(_CACHE_PROP))
            if data.get("key") == key:
                return [ProchiralPair(p[0], p[1], p[2], tuple(p[3]), p[4], float(p[5]),
                                      tuple(p[6]), tuple(p[7])) for p in data["pairs"]]
        except (ValueError, KeyError, TypeError, IndexError):
            pass
    pairs = prochiral_pairs(mol)
    mol.SetProp(_CACHE_PROP, json.dumps({"key": key, "pairs": [
        [p.centre, p.pro_r, p.pro_s, list(p.others), p.descriptor, p.sign,
         list(p.hydrogens_r), list(p.hydrogens_s)] for p in pairs]}))
    return pairs


def prochiral_labels(mol: Chem.Mol, conf_id: int | None = None) -> dict[int, str]:
    """{atom index: "pro-R" / "pro-S" / "pro-r" / "pro-s"} for the ligands of every
    stereoheterotopic pair, as placed in conformer ``conf_id`` (default: the first).

    After :func:`consistent_proton_identity` (every ensemble goes through it) the labels are
    the same in every conformer and the lower index of each pair is pro-R.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("OCC"))
    >>> AllChem.EmbedMolecule(mol, randomSeed=3)
    0
    >>> prochiral_labels(consistent_proton_identity(mol))
    {4: 'pro-R', 5: 'pro-S'}
    """
    m = Chem.Mol(mol)
    if m.GetNumConformers() == 0:
        return {}
    if conf_id is None:
        conf_id = m.GetConformers()[0].GetId()
    pos = np.asarray(m.GetConformer(int(conf_id)).GetPositions())
    labels: dict[int, str] = {}
    for p in _cached_pairs(m):
        names = p.labels
        if float(p.orientation(pos)) != p.sign:
            names = {p.pro_r: names[p.pro_s], p.pro_s: names[p.pro_r]}
        labels.update(names)
    return labels


def _labelled_smiles(mol: Chem.Mol, atom: int, conf_id: int, mirror: bool) -> str:
    """Canonical SMILES with ``atom`` isotope-labelled (2 for H, 99 otherwise), stereo from
    the coordinates of ``conf_id`` (mirrored if asked): equal strings = equivalent nuclei.
    One implementation for the coupling and the shift groupings."""
    m = Chem.Mol(mol)
    a = m.GetAtomWithIdx(atom)
    a.SetIsotope(2 if a.GetAtomicNum() == 1 else 99)
    conf = m.GetConformer(conf_id)
    if mirror:
        pos = -conf.GetPositions()
        for i in range(m.GetNumAtoms()):
            conf.SetAtomPosition(i, pos[i].tolist())
    Chem.AssignStereochemistryFrom3D(m, confId=conf_id, replaceExistingTags=True)
    return Chem.MolToSmiles(m)
