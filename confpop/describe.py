"""What distinguishes the conformers of an ensemble, in a chemist's terms.

Three descriptions, computed from the coordinates alone (cheap; no energies):

* **Distinguishing torsions** (:func:`distinguishing_torsions`): the dihedral of every
  rotatable bond (OH and NH groups included, symmetric tops such as CH3 fall out by
  themselves), measured through a *canonically chosen* atom at each end, and kept only when it
  differs between the conformers. Atoms that are symmetry-equivalent (same canonical rank, e.g.
  the two N-methyls of a dimethylamide or the two methyls of an isopropyl group) cannot name a
  conformer: which of them got the lower index is an accident of the input. So a unique
  neighbour is preferred (the isopropyl C-H, not one of its methyls); when every neighbour has
  an equivalent partner, the partner giving the smallest absolute dihedral is taken in each
  conformer, which makes the value the same whichever partner came first.
* **Ring puckers** (:func:`ring_puckers`): Cremer-Pople puckering coordinates of every
  non-aromatic 5- and 6-membered ring and the name of the nearest ideal shape.
* **Axial and equatorial substituents** (:func:`ring_substituents`): on every non-planar
  6-membered ring, each non-hydrogen substituent is axial ("ax") or equatorial ("eq") by the
  angle between its bond from the ring atom and the normal of the ring's Cremer-Pople mean
  plane (:data:`AXIAL_DEGREES`). Axial bonds run parallel to the normal (the ring's
  pseudo-threefold axis in a chair), equatorial ones lie near the mean plane: the usual
  definition (Eliel & Wilen, Stereochemistry of Organic Compounds, 1994, ch. 11; from
  memory). Shown beside the pucker ("chair, N3 ax") where it differs between conformers, so
  two chairs that differ by a ring flip are told apart.
* **Intramolecular hydrogen bonds** (:func:`hydrogen_bonds`): X-H...Y with X, Y in {N, O},
  H...Y <= 2.5 A and X-H...Y >= 110 degrees (:data:`HBOND_ANGLE`), Y at least three bonds
  from H.

Atom labels here and everywhere a user sees them are the element and the **1-based** atom
number (``C1`` is the first atom), as molecule viewers and the SDF atom block number them.

References
----------
D. Cremer and J. A. Pople, "A general definition of ring puckering coordinates",
J. Am. Chem. Soc. 1975, 97, 1354-1358. doi:10.1021/ja00839a011
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from rdkit import Chem

from .errors import InputError
from .geometry import dihedral_at

__all__ = ["atom_label", "one_based_labels", "LABEL_CONVENTION", "ID_CONVENTION", "distinguishing_torsions", "ring_puckers",
           "cremer_pople", "pucker_name", "hydrogen_bonds", "describe_conformers",
           "DISTINGUISHING_DEGREES", "ring_substituents", "AXIAL_DEGREES", "ISOCLINAL"]

#: Said in every header that shows atom labels.
LABEL_CONVENTION = "atoms numbered from 1, as in molecule viewers and the SDF atom block"

#: Said under a table whose torsion labels carry a "*".
STAR_NOTE = ("* an end atom chosen among symmetry-equivalent ones: in each conformer the one "
             "giving the smallest |dihedral|")

#: degrees. A torsion "differs" when two conformers' canonical values are further apart than
#: this. Measured (benchmarks/describe_threshold.py: GFN2-xTB/GBSA(chloroform) ensembles of
#: five small molecules, 166 conformers; symmetric-top torsions included on their period,
#: 360/lcm(n1, n2)): 31,077 pairwise torsion differences, one peak at 0-10 degrees (same well,
#: 12,387 pairs), one at 110-120 (other well, 3,458), and a flat trough from 30 to 90 (195-378
#: pairs per 10-degree bin); 60 sits in its middle. The symmetric-top torsions alone (5,841
#: pairs): 5,613 within 0-30, 8 at 40-60, none at 60-90. (Before symmetric tops were included:
#: 25,236 pairs, peaks 8,290 and 3,328, trough 193-378 per bin: the same threshold.)
DISTINGUISHING_DEGREES = 60.0

#: Angstrom and degrees: H...Y distance and X-H...Y angle of a hydrogen bond. The angle follows
#: the IUPAC recommendation that X-H...Y be above 110 degrees (Arunan et al., Pure Appl. Chem.
#: 2011, 83, 1637; from memory); 120 (a common intermolecular cut) missed the O-H...N bond of
#: a 1,2-amino alcohol measured here (GFN2-xTB, 2-morpholino-1-phenylethanol: H...N 2.13 A,
#: 117-119 degrees in the three lowest conformers). 2.5 A: common practice.
HBOND_DISTANCE = 2.5
HBOND_ANGLE = 110.0

#: Angstrom: below this total puckering amplitude Q a ring is called planar (common practice;
#: aromatic rings give Q < 0.02 A, cyclohexane chairs ~0.55-0.6 A).
PLANAR_Q = 0.1

#: degrees. A substituent bond is axial when it makes less than this angle with the normal of
#: the ring's mean plane, equatorial otherwise. Ideal chair: axial 0, equatorial ~70.5
#: (109.5 - 90 from the plane). Measured (benchmarks/describe_axial.py, MMFF94s ensembles of
#: nine molecules, 134 conformers: N-cyclohexyl-2-hydroxybenzamide, methylcyclohexane, cis-
#: and trans-1,4-dimethylcyclohexane, methyl beta-D-glucopyranoside, trans-cyclohexane-1,2-
#: diol, N-methylpiperidine, tert-butylcyclohexane, 1,1-dimethylcyclohexane): on chairs, 232
#: substituent bonds, axial 5.4-27.9 degrees, equatorial 63.6-75.5, none between; 45 is the
#: middle of that gap. GFN2-xTB, N-cyclohexyl-2-hydroxybenzamide: axial N 8.4, equatorial 72.0.
AXIAL_DEGREES = 45.0

#: degrees. On a ring that is not a chair (boat, twist-boat, half-chair, envelope) a bond at
#: ISOCLINAL[0]-ISOCLINAL[1] degrees to the normal is neither axial nor equatorial: "iso"
#: (isoclinal, the twist-boat's in-between positions). Measured with the chairs above: 107
#: such bonds on non-chair rings cluster at 5-25 (14), 40-55 (32) and 65-90 (49), with 2 at
#: 30-35 and 3 at 55-60: the band's edges sit in those sparse bins.
ISOCLINAL = (30.0, 60.0)


def atom_label(mol: Chem.Mol, index: int) -> str:
    """Element and 1-based atom number, e.g. ``atom_label(mol, 0) == "C1"``."""
    return f"{mol.GetAtomWithIdx(int(index)).GetSymbol()}{int(index) + 1}"


def one_based_labels(text: str) -> str:
    """Atom labels in a text (``H7``, ``C2``) renumbered from 0-based to 1-based.

    For messages and labels made by the library's 0-based parts (``confpop.torsion``,
    ``confpop.nmr``) before a user sees them.

    Examples
    --------
    >>> one_based_labels("H7(C2)-H9(O3)")
    'H8(C3)-H10(O4)'
    >>> one_based_labels("Se4-Ge0 and C2")   # any element
    'Se5-Ge1 and C3'
    """
    return _ATOM_LABEL.sub(lambda m: f"{m.group(1)}{int(m.group(2)) + 1}", str(text))


def _atom_label_pattern():
    """Any element symbol (RDKit's periodic table, 1-118) followed by a number, as a word."""
    import re
    table = Chem.GetPeriodicTable()
    symbols = sorted((table.GetElementSymbol(z) for z in range(1, 119)), key=len, reverse=True)
    return re.compile(r"\b(" + "|".join(symbols) + r")(\d+)\b")


_ATOM_LABEL = _atom_label_pattern()

#: Said beside conformer ids wherever users see them: a conformer keeps one id in every file
#: (ensemble.sdf names, table.csv, run.json, the --store) and in Python, so ids are not
#: renumbered for the screen the way atom numbers are.
ID_CONVENTION = "conformer ids from 0, the same in every file and in Python"


def _labels(mol, atoms) -> str:
    return "-".join(atom_label(mol, a) for a in atoms)


# ----------------------------------------------------------------------------- torsions
@dataclass(frozen=True)
class DistinguishingTorsion:
    """One torsion that differs between conformers.

    Attributes
    ----------
    bond : (j, k) 0-based atom indices of the rotating bond
    label : str
        1-based chemist's label of the dihedral as reported, e.g. "C4-C6-O8-C9" (i and l are
        the canonical choices; for an end with equivalent partners the first is named and
        marked with "*").
    values : dict
        {conformer id: canonical dihedral, degrees in (-180, 180]}
    atoms : dict
        {conformer id: (i, j, k, l)} 0-based atoms the value was measured through.
    spread : float
        Largest circular difference between two conformers, degrees, on ``period``.
    period : float
        Degrees after which the torsion repeats: 360, or 360/lcm(n1, n2) with symmetric tops
        of n1- and n2-fold ends (120 for a CH3 end, 180 for an aryl-NMe2).
    """

    bond: tuple
    label: str
    values: dict
    atoms: dict
    spread: float
    period: float = 360.0

    @property
    def column(self) -> str:
        """Column name in tables and files: ``torsion_<label>_deg``."""
        return f"torsion_{self.label.replace('*', '')}_deg"


def _end_choices(mol, center, other, ranks):
    """Candidate atoms at one end of a bond: a unique neighbour, or one class of equivalents."""
    nbrs = [a for a in mol.GetAtomWithIdx(center).GetNeighbors() if a.GetIdx() != other]
    if not nbrs:
        return ()
    classes: dict[int, list[int]] = {}
    for a in nbrs:
        classes.setdefault(ranks[a.GetIdx()], []).append(a.GetIdx())

    def preference(members):
        atom = mol.GetAtomWithIdx(members[0])
        return (atom.GetAtomicNum() == 1, -atom.GetAtomicNum(),
                -sum(1 for n in atom.GetNeighbors() if n.GetAtomicNum() > 1), min(members))

    unique = [m for m in classes.values() if len(m) == 1]
    pool = unique or list(classes.values())
    return tuple(sorted(min(pool, key=preference)))


def _positions(atom) -> int:
    """Substituent positions around an atom: 4 (sp3, lone pairs included), 3 (sp2), 2 (sp)."""
    hybrid = atom.GetHybridization()
    if hybrid == Chem.HybridizationType.SP:
        return 2
    if hybrid == Chem.HybridizationType.SP2:
        return 3
    return 4


def _circular_spread(values) -> float:
    v = np.asarray(values, float)
    if v.size < 2:
        return 0.0
    d = np.abs((v[:, None] - v[None, :] + 180.0) % 360.0 - 180.0)
    return float(np.nanmax(d))


def distinguishing_torsions(mol: Chem.Mol, conf_ids=None, *,
                            threshold: float = DISTINGUISHING_DEGREES,
                            weights=None) -> list[DistinguishingTorsion]:
    """The torsions that differ between conformers, the most telling first.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        With explicit hydrogens and the conformers to compare.
    conf_ids : sequence of int, optional
        Which conformers (default all).
    threshold : float, degrees
        A torsion is kept when two conformers differ by more than this (default
        :data:`DISTINGUISHING_DEGREES`, measured).
    weights : sequence of float, optional
        One per conformer (e.g. populations). The torsions are then ordered by their
        weighted circular variance 1 - |sum_i w_i exp(i n phi_i)| (n: the symmetric-top
        period), so the torsion that varies most among the populated conformers comes first;
        without weights, by the largest difference between two conformers.

    Returns
    -------
    list of DistinguishingTorsion
        Empty for one conformer or when none differ.
    """
    from .rotatable import rotatable_torsions

    if not isinstance(mol, Chem.Mol):
        raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
    ids = [c.GetId() for c in mol.GetConformers()] if conf_ids is None else [int(c) for c in conf_ids]
    if len(ids) < 2:
        return []
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    xyz = np.array([mol.GetConformer(c).GetPositions() for c in ids])
    w = None if weights is None else np.asarray(weights, float) / np.sum(weights)
    found, scores = [], []
    for t in rotatable_torsions(mol, include_terminal=True):
        j, k = t.atoms[1], t.atoms[2]
        ends_i = _end_choices(mol, j, k, ranks)
        ends_l = _end_choices(mol, k, j, ranks)
        if not ends_i or not ends_l:
            continue
        pairs = [(i, l) for i in ends_i for l in ends_l]
        # (n_conf, n_pairs) dihedrals; per conformer the pair of smallest |phi| (ties: positive)
        phi = np.stack([dihedral_at(xyz, (i, j, k, l)) for i, l in pairs], axis=1)
        phi = np.where(np.isclose(phi, -180.0), 180.0, phi)
        key = np.abs(phi) - 1e-6 * np.sign(phi)
        choice = np.argmin(np.where(np.isnan(key), np.inf, key), axis=1)
        values = phi[np.arange(len(ids)), choice]
        # a symmetric top (every other position of an end taken by equivalent atoms: CH3, CF3,
        # a planar NMe2 or phenyl; not a pyramidal NH2, whose lone pair is a position too)
        # repeats every 360/n degrees: compare the values on that period
        # with both ends symmetric the torsion repeats when either end's turn does: the
        # combined period is 360/lcm(n1, n2) (CH3-CH3: 120, phenyl-NMe2: 180), not the product
        fold = 1
        for center, ends in ((j, ends_i), (k, ends_l)):
            if len(ends) > 1 and len(ends) == _positions(mol.GetAtomWithIdx(center)) - 1:
                fold = math.lcm(fold, len(ends))
        spread = _circular_spread(values * fold) / fold
        if not spread > threshold:
            continue
        first_i, first_l = pairs[0]
        label = (atom_label(mol, first_i) + ("*" if len(ends_i) > 1 else "") + "-"
                 + _labels(mol, (j, k)) + "-"
                 + atom_label(mol, first_l) + ("*" if len(ends_l) > 1 else ""))
        if w is None:
            scores.append(spread)
        else:
            scores.append(1.0 - abs(np.sum(w * np.exp(1j * np.radians(values * fold)))))
        found.append(DistinguishingTorsion(
            bond=(j, k), label=label,
            values={c: float(v) for c, v in zip(ids, values)},
            atoms={c: (pairs[p][0], j, k, pairs[p][1]) for c, p in zip(ids, choice)},
            spread=spread, period=360.0 / fold))
    order = sorted(range(len(found)), key=lambda k: (-scores[k], -found[k].spread))
    return [found[k] for k in order]


# ----------------------------------------------------------------------------- rings
def cremer_pople(positions) -> dict:
    """Cremer-Pople puckering coordinates of one ring.

    Parameters
    ----------
    positions : (N, 3) array, angstrom
        The ring atoms in ring order, N >= 4.

    Returns
    -------
    dict
        ``Q`` (total amplitude, angstrom), ``q`` ({m: q_m}), ``phi`` ({m: phi_m, degrees in
        [0, 360)}), ``z`` (each atom's signed distance from the mean plane along n, angstrom)
        and for N = 6 ``theta`` (degrees, 0..180).

    Notes
    -----
    With the ring centred, the mean plane has normal n = R' x R'' / |R' x R''|,
    R' = sum_j r_j sin(2 pi j/N), R'' = sum_j r_j cos(2 pi j/N); z_j = r_j . n and
    q_m cos phi_m = sqrt(2/N) sum_j z_j cos(2 pi m j/N),
    q_m sin phi_m = -sqrt(2/N) sum_j z_j sin(2 pi m j/N), q_{N/2} = sqrt(1/N) sum_j z_j (-1)^j
    (even N); Q^2 = sum_j z_j^2. For N = 6, tan theta = q_2 / q_3 (Cremer & Pople 1975).
    """
    r = np.asarray(positions, float)
    n = len(r)
    if r.ndim != 2 or r.shape[1] != 3 or n < 4:
        raise InputError(f"a ring needs (N >= 4, 3) coordinates, got shape {r.shape}")
    r = r - r.mean(axis=0)
    j = np.arange(n)
    normal = _mean_plane_normal(r)
    z = r @ normal
    q, phi = {}, {}
    for m in range(2, (n - 1) // 2 + 1):
        c = np.sqrt(2.0 / n) * np.sum(z * np.cos(2 * np.pi * m * j / n))
        s = -np.sqrt(2.0 / n) * np.sum(z * np.sin(2 * np.pi * m * j / n))
        q[m] = float(np.hypot(c, s))
        phi[m] = float(np.degrees(np.arctan2(s, c)) % 360.0)
    if n % 2 == 0:
        q[n // 2] = float(np.sqrt(1.0 / n) * np.sum(z * (-1.0) ** j))
    out = {"Q": float(np.sqrt(np.sum(z ** 2))), "q": q, "phi": phi, "z": z.tolist()}
    if n == 6:
        out["theta"] = float(np.degrees(np.arctan2(q[2], q[3])))
    return out


def _mean_plane_normal(centred) -> np.ndarray:
    """Unit normal of a centred ring's Cremer-Pople mean plane, n = R' x R'' / |R' x R''|."""
    n = len(centred)
    j = np.arange(n)
    r1 = (centred * np.sin(2 * np.pi * j / n)[:, None]).sum(axis=0)
    r2 = (centred * np.cos(2 * np.pi * j / n)[:, None]).sum(axis=0)
    normal = np.cross(r1, r2)
    return normal / np.linalg.norm(normal)


def pucker_name(coords: dict, size: int) -> str:
    """Nearest ideal shape of a 5- or 6-membered ring from its Cremer-Pople coordinates.

    Six-membered: chair (theta within 30 degrees of 0 or 180), boat or twist-boat (theta within
    30 of 90; phi_2 nearer a multiple of 60 = boat, nearer 30 + 60k = twist-boat), else
    half-chair (phi_2 near 30 + 60k) or envelope (near 60k). Five-membered: envelope (phi_2 near
    a multiple of 36) or twist (near 18 + 36k). Below Q = 0.1 A: planar. The sectors follow
    the ideal forms of Cremer & Pople 1975 (their Fig. and Table); the 30-degree half-widths
    are the midpoints between ideal forms.
    """
    if coords["Q"] < PLANAR_Q:
        return "planar"
    if size == 6:
        theta, phi = coords["theta"], coords["phi"][2]
        off60 = phi % 60.0
        near_multiple = min(off60, 60.0 - off60) < 15.0
        if theta < 30.0 or theta > 150.0:
            return "chair"
        if 60.0 <= theta <= 120.0:
            return "boat" if near_multiple else "twist-boat"
        return "envelope" if near_multiple else "half-chair"
    if size == 5:
        off36 = coords["phi"][2] % 36.0
        return "envelope" if min(off36, 36.0 - off36) < 9.0 else "twist"
    return ""


#: how the side of an out-of-plane ring atom is named
SIDE_CONVENTION = ("toward/away from X: the out-of-plane ring atom lies on the same/the other "
                   "side of the ring's mean plane as substituent X (the ring's first "
                   "non-hydrogen substituent on a tetrahedral ring atom)")


def _reference_substituent(mol: Chem.Mol, ring) -> tuple[int, int] | None:
    """(ring atom, substituent) the side of a five-membered ring's out-of-plane atoms is
    named by: the lowest-numbered non-hydrogen substituent of a ring atom with four
    neighbours (an sp3 substituent leaves the ring's plane; a carbonyl O lies in it), or
    None (nothing to refer to: the side is then not named)."""
    members = set(ring)
    best = None
    for a in ring:
        atom = mol.GetAtomWithIdx(int(a))
        if atom.GetTotalDegree() != 4:
            continue
        for nb in atom.GetNeighbors():
            b = nb.GetIdx()
            if b not in members and nb.GetAtomicNum() > 1 and (best is None or b < best[1]):
                best = (int(a), b)
    return best


def ring_form(mol: Chem.Mol, ring, coords: dict, positions=None) -> str:
    """The pucker name, and for a five-membered ring which atoms leave the plane and to
    which side: "envelope, C8 toward C2" (the flap), "twist, C6 toward and C7 away from C2"
    (the twisted bond's atoms).

    Two envelopes of one ring with the same flap on opposite sides (a ring flip: the
    substituents swap between pseudo-axial and pseudo-equatorial) have the same pucker name
    but are different conformers; this tells them apart. The atoms are those of largest
    displacement from the Cremer-Pople mean plane (an ideal envelope has its flap at
    cos = 1 and no other atom above cos 36 deg = 0.81 of it; an ideal twist has its two
    twisted atoms at +-cos 18 deg = 0.95 and the next at 0.59). The side is named against a
    substituent (:func:`_reference_substituent`, :data:`SIDE_CONVENTION`), not against the
    ring's numbering: a conformer and its mirror image (one row of an ensemble when mirror
    images are merged) then read the same. Without such a substituent only the atoms are
    named.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
    ring : sequence of int
        The ring atoms in ring order (0-based).
    coords : dict
        :func:`cremer_pople` of the ring's positions.
    positions : (n_atoms, 3) array, optional
        All atoms' positions (the substituent's direction); without them only the atoms are
        named.
    """
    name = pucker_name(coords, len(ring))
    if len(ring) != 5 or name not in ("envelope", "twist"):
        return name
    z = np.asarray(coords["z"], float)
    largest = np.argsort(-np.abs(z), kind="stable")
    reference = _reference_substituent(mol, ring) if positions is not None else None
    if reference is not None:
        xyz = np.asarray(positions, float)
        normal = _mean_plane_normal(xyz[list(ring)] - xyz[list(ring)].mean(axis=0))
        toward = float((xyz[reference[1]] - xyz[reference[0]]) @ normal)
        ref_label = atom_label(mol, reference[1])

    def where(j):
        if reference is None:
            return atom_label(mol, ring[j])
        side = "toward" if z[j] * toward > 0 else "away from"
        return f"{atom_label(mol, ring[j])} {side}"
    if name == "envelope":
        flap = where(largest[0])
        return f"envelope, {flap} {ref_label}" if reference is not None else f"envelope, {flap}"
    first, second = sorted(largest[:2])
    if reference is None:
        return f"twist, {where(first)}-{where(second)}"
    return f"twist, {where(first)} and {where(second)} {ref_label}"


def _ring_relabellings(mol: Chem.Mol):
    """(heavy atoms, their graph automorphisms) for :func:`_canonical_form`."""
    from .prune import automorphisms

    heavy = np.array([a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() > 1], dtype=int)
    return heavy, automorphisms(mol, heavy)


def _canonical_form(mol: Chem.Mol, ring, xyz, relabelled) -> str:
    """:func:`ring_form` made independent of which of several equivalent atoms a conformer's
    coordinates happen to sit on: the alphabetically first form over the molecule's graph
    automorphisms (cyclopentanol's C3/C6 and C4/C5 are equivalent: a conformer kept by one
    seed can be another seed's with those atoms swapped, or, with mirror images merged, its
    mirror image)."""
    heavy, perms = relabelled
    # only where the ring atoms and their substituents go matters (a molecule's other
    # symmetries, e.g. tert-butyl groups, would multiply the work without changing a label)
    near = sorted({int(a) for a in ring} | {nb.GetIdx() for a in ring
                                            for nb in mol.GetAtomWithIdx(int(a)).GetNeighbors()
                                            if nb.GetAtomicNum() > 1})
    columns = np.searchsorted(heavy, near)
    forms = set()
    for mapping in np.unique(perms[:, columns], axis=0):
        moved = np.array(xyz, dtype=float)
        moved[near] = xyz[mapping]
        forms.add(ring_form(mol, ring, cremer_pople(moved[ring]), positions=moved))
    return min(forms)


def _ordered_ring(mol, ring) -> list[int]:
    """Ring atoms in bond order, starting at the lowest index, going to its lower neighbour."""
    members = set(ring)
    start = min(ring)
    nbrs = sorted(n.GetIdx() for n in mol.GetAtomWithIdx(start).GetNeighbors() if n.GetIdx() in members)
    order = [start, nbrs[0]]
    while len(order) < len(ring):
        nxt = [n.GetIdx() for n in mol.GetAtomWithIdx(order[-1]).GetNeighbors()
               if n.GetIdx() in members and n.GetIdx() != order[-2]]
        order.append(nxt[0])
    return order


def puckered_rings(mol: Chem.Mol) -> list[list[int]]:
    """Non-aromatic 5- and 6-membered rings (0-based atoms in ring order)."""
    rings = []
    for ring in mol.GetRingInfo().AtomRings():
        if len(ring) in (5, 6) and not all(mol.GetAtomWithIdx(a).GetIsAromatic() for a in ring):
            rings.append(_ordered_ring(mol, ring))
    return rings


def ring_puckers(mol: Chem.Mol, conf_ids=None) -> pd.DataFrame:
    """Pucker of every non-aromatic 5/6-membered ring in every conformer.

    Returns
    -------
    pandas.DataFrame
        One row per (conformer, ring): ``conformer``, ``ring`` (1-based label, e.g.
        "C1-C2-C3-C4-C5-C6"), ``size``, ``Q_angstrom``, ``theta_deg`` (6-rings),
        ``phi2_deg``, ``pucker`` (the name of the ideal form) and ``form`` (:func:`ring_form`:
        the pucker name, for a five-membered ring with the out-of-plane atoms and their side).
    """
    ids = [c.GetId() for c in mol.GetConformers()] if conf_ids is None else [int(c) for c in conf_ids]
    rows = []
    rings = puckered_rings(mol)
    relabelled = _ring_relabellings(mol) if any(len(r) == 5 for r in rings) else None
    for ring in rings:
        for cid in ids:
            xyz = mol.GetConformer(cid).GetPositions()
            cp = cremer_pople(xyz[ring])
            form = pucker_name(cp, len(ring))
            if len(ring) == 5:
                form = _canonical_form(mol, ring, xyz, relabelled)
            rows.append({"conformer": cid, "ring": _labels(mol, ring), "size": len(ring),
                         "Q_angstrom": cp["Q"], "theta_deg": cp.get("theta", np.nan),
                         "phi2_deg": cp["phi"][2], "pucker": pucker_name(cp, len(ring)),
                         "form": form})
    return pd.DataFrame(rows, columns=["conformer", "ring", "size", "Q_angstrom", "theta_deg",
                                       "phi2_deg", "pucker", "form"])


def ring_substituents(mol: Chem.Mol, conf_ids=None, *, axial: float = AXIAL_DEGREES) -> pd.DataFrame:
    """Axial or equatorial position of every non-hydrogen substituent on a non-planar 6-ring.

    The position comes from the geometry alone: the angle between the bond ring atom ->
    substituent and the normal of the ring's Cremer-Pople mean plane (sign ignored); below
    ``axial`` degrees (default :data:`AXIAL_DEGREES`, measured) the substituent is axial,
    else equatorial. Rings with Q below :data:`PLANAR_Q` (planar) have no such positions and
    are left out. On a ring that is not a chair the labels mean pseudo-axial /
    pseudo-equatorial, and a bond within :data:`ISOCLINAL` of the normal is "iso" (isoclinal).

    Returns
    -------
    pandas.DataFrame
        One row per (conformer, ring, substituent): ``conformer``, ``ring`` (1-based label as
        in :func:`ring_puckers`), ``ring_atom``, ``substituent`` (0-based), ``label`` (1-based
        label of the substituent atom, e.g. "N3"), ``angle_deg`` (to the normal, 0-90),
        ``position`` ("ax", "eq", or "iso" on a ring that is not a chair).
    """
    ids = [c.GetId() for c in mol.GetConformers()] if conf_ids is None else [int(c) for c in conf_ids]
    columns = ["conformer", "ring", "ring_atom", "substituent", "label", "angle_deg", "position"]
    rows = []
    for ring in puckered_rings(mol):
        if len(ring) != 6:
            continue
        members = set(ring)
        bonds = [(a, nb.GetIdx()) for a in ring for nb in mol.GetAtomWithIdx(a).GetNeighbors()
                 if nb.GetIdx() not in members and nb.GetAtomicNum() > 1]
        if not bonds:
            continue
        name = _labels(mol, ring)
        for cid in ids:
            xyz = mol.GetConformer(cid).GetPositions()
            shape = pucker_name(cremer_pople(xyz[ring]), 6)
            if shape == "planar":
                continue
            centred = xyz[ring] - xyz[ring].mean(axis=0)
            normal = _mean_plane_normal(centred)
            for a, b in bonds:
                v = xyz[b] - xyz[a]
                angle = float(np.degrees(np.arccos(min(1.0, abs(v @ normal) / np.linalg.norm(v)))))
                if shape != "chair" and ISOCLINAL[0] <= angle <= ISOCLINAL[1]:
                    position = "iso"
                else:
                    position = "ax" if angle < axial else "eq"
                rows.append({"conformer": cid, "ring": name, "ring_atom": a, "substituent": b,
                             "label": atom_label(mol, b), "angle_deg": angle,
                             "position": position})
    return pd.DataFrame(rows, columns=columns)


def _ring_labels(rings: pd.DataFrame, subs: pd.DataFrame) -> pd.Series:
    """Per (conformer, ring) row of ``rings``: the ring's form (:func:`ring_form`), followed by
    the positions of the substituents whose position differs between the conformers
    ("chair, N3 ax", "envelope, C8 toward C2")."""
    if not len(rings):
        return pd.Series([], dtype=object)
    varying = {}
    for (ring, label), part in subs.groupby(["ring", "label"], sort=False):
        if part["position"].nunique() > 1:
            varying.setdefault(ring, []).append(label)
    where = {(r.conformer, r.ring, r.label): r.position for r in subs.itertuples()}
    out = []
    for r in rings.itertuples():
        extra = [f"{lab} {where[(r.conformer, r.ring, lab)]}" for lab in varying.get(r.ring, [])
                 if (r.conformer, r.ring, lab) in where]
        out.append(", ".join([r.form] + extra))
    return pd.Series(out, index=rings.index, dtype=object)


# ----------------------------------------------------------------------------- hydrogen bonds
def _is_acceptor(atom) -> bool:
    if atom.GetFormalCharge() > 0:
        return False
    if atom.GetAtomicNum() == 8:
        return True
    if atom.GetAtomicNum() != 7 or atom.GetTotalDegree() > 3:
        return False
    if any(b.GetBondType() in (Chem.BondType.DOUBLE, Chem.BondType.AROMATIC) for b in atom.GetBonds()):
        return atom.GetTotalNumHs() == 0 and atom.GetDegree() == 2  # imine, pyridine-type N
    # an amine N accepts unless its lone pair is conjugated (amide, aniline, sulfonamide)
    for nb in atom.GetNeighbors():
        if nb.GetIsAromatic() or any(b.GetBondType() == Chem.BondType.DOUBLE and
                                     b.GetOtherAtom(nb).GetAtomicNum() in (7, 8, 16)
                                     for b in nb.GetBonds()):
            return False
    return True


def hydrogen_bonds(mol: Chem.Mol, conf_ids=None) -> pd.DataFrame:
    """Intramolecular X-H...Y hydrogen bonds (X, Y = N or O) in every conformer.

    Returns
    -------
    pandas.DataFrame
        ``conformer``, ``label`` (e.g. "O8-H15···N3", 1-based), ``donor``, ``hydrogen``,
        ``acceptor`` (0-based), ``distance_angstrom`` (H...Y), ``angle_deg`` (X-H...Y).
    """
    ids = [c.GetId() for c in mol.GetConformers()] if conf_ids is None else [int(c) for c in conf_ids]
    polar_h = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 1 and atom.GetDegree() == 1:
            donor = atom.GetNeighbors()[0]
            if donor.GetAtomicNum() in (7, 8):
                polar_h.append((donor.GetIdx(), atom.GetIdx()))
    acceptors = [a.GetIdx() for a in mol.GetAtoms() if _is_acceptor(a)]
    rows = []
    if polar_h and acceptors:
        dist = Chem.GetDistanceMatrix(mol)
        for cid in ids:
            xyz = mol.GetConformer(cid).GetPositions()
            for x, h in polar_h:
                for y in acceptors:
                    if y == x or dist[h, y] < 3:
                        continue
                    d = float(np.linalg.norm(xyz[h] - xyz[y]))
                    if d > HBOND_DISTANCE:
                        continue
                    u, v = xyz[x] - xyz[h], xyz[y] - xyz[h]
                    angle = float(np.degrees(np.arccos(np.clip(
                        u @ v / np.linalg.norm(u) / np.linalg.norm(v), -1.0, 1.0))))
                    if angle < HBOND_ANGLE:
                        continue
                    rows.append({"conformer": cid,
                                 "label": f"{atom_label(mol, x)}-{atom_label(mol, h)}···{atom_label(mol, y)}",
                                 "donor": x, "hydrogen": h, "acceptor": y,
                                 "distance_angstrom": d, "angle_deg": angle})
    return pd.DataFrame(rows, columns=["conformer", "label", "donor", "hydrogen", "acceptor",
                                       "distance_angstrom", "angle_deg"])


# ----------------------------------------------------------------------------- together
@dataclass(frozen=True)
class ConformerDescription:
    """Per-conformer descriptions of an ensemble (see :func:`describe_conformers`).

    Attributes
    ----------
    table : pandas.DataFrame
        Index conformer id; one ``torsion_<label>_deg`` column per distinguishing torsion,
        one ``ring_<label>`` column per puckered ring (its pucker name, followed by the
        axial/equatorial position of each substituent whose position differs between the
        conformers, e.g. "chair, N3 ax"), and ``hydrogen_bonds`` ("; "-joined labels, "" when
        none).
    torsions : list of DistinguishingTorsion
    rings : pandas.DataFrame (from :func:`ring_puckers`, plus ``label``: the text of the
        table's ring column)
    hbonds : pandas.DataFrame (from :func:`hydrogen_bonds`)
    convention : str
        How atoms are numbered (1-based).
    substituents : pandas.DataFrame (from :func:`ring_substituents`)
    """

    table: pd.DataFrame
    torsions: list
    rings: pd.DataFrame
    hbonds: pd.DataFrame
    convention: str = LABEL_CONVENTION
    substituents: pd.DataFrame = None

    def to_dict(self) -> dict:
        """JSON-ready summary of the torsions (label, 1-based atoms, spread); the per-conformer
        values are in :meth:`conformer_dict`."""
        out = []
        for t in self.torsions:
            atoms = {tuple(a) for a in t.atoms.values()}
            item = {"label": t.label, "column": t.column,
                    "bond": [int(a) + 1 for a in t.bond], "spread_deg": round(t.spread, 1)}
            if len(atoms) == 1:
                item["atoms"] = [int(a) + 1 for a in atoms.pop()]
            else:  # an end chosen among equivalent atoms, differently in some conformers
                item["atoms_by_conformer"] = {str(c): [int(x) + 1 for x in a]
                                              for c, a in t.atoms.items()}
            out.append(item)
        return {"atom_numbering": self.convention, "distinguishing_degrees": DISTINGUISHING_DEGREES,
                "axial_degrees": AXIAL_DEGREES, "torsions": out}

    def conformer_dict(self, conf_id: int) -> dict:
        """One conformer's torsions (degrees), ring puckers (Cremer-Pople), the axial/equatorial
        positions of ring substituents (angle to the ring's mean-plane normal) and H-bonds."""
        cid = int(conf_id)
        rings = self.rings[self.rings["conformer"] == cid]
        hbonds = self.hbonds[self.hbonds["conformer"] == cid]
        subs = (self.substituents[self.substituents["conformer"] == cid]
                if self.substituents is not None else pd.DataFrame(columns=["ring"]))

        def positions(ring):
            return {s.label: {"position": s.position, "angle_to_normal_deg": round(float(s.angle_deg), 1)}
                    for s in subs[subs["ring"] == ring].itertuples()}

        return {
            "torsions_deg": {t.label: round(t.values[cid], 1) for t in self.torsions},
            "rings": {r.ring: {"pucker": r.pucker, "form": r.form,
                               "Q_angstrom": round(float(r.Q_angstrom), 3),
                               "theta_deg": None if np.isnan(r.theta_deg) else round(float(r.theta_deg), 1),
                               "phi2_deg": round(float(r.phi2_deg), 1),
                               "shown": getattr(r, "label", r.pucker),
                               "substituents": positions(r.ring)} for r in rings.itertuples()},
            "hydrogen_bonds": [{"label": r.label, "distance_angstrom": round(float(r.distance_angstrom), 3),
                                "angle_deg": round(float(r.angle_deg), 1)} for r in hbonds.itertuples()],
        }

    def hydrogen_bond_shares(self, populations) -> dict:
        """{H-bond label: share of the population in conformers that have it}.

        ``populations``: {conformer id: population} (e.g. one column of
        :meth:`Ensemble.populations`), largest share first.
        """
        pops = pd.Series(populations, dtype=float)
        shares = {}
        for label, sub in self.hbonds.groupby("label"):
            shares[label] = float(pops.reindex(sorted(set(sub["conformer"]))).fillna(0.0).sum())
        return dict(sorted(shares.items(), key=lambda kv: -kv[1]))

    def pucker_shares(self, populations) -> dict:
        """{ring label: {pucker name: share of the population}}, largest share first.

        The name is the ring column's text: the pucker, followed by the positions of the
        substituents whose axial/equatorial position differs between conformers
        ("chair, N3 eq": 74 %, "chair, N3 ax": 23 %)."""
        pops = pd.Series(populations, dtype=float)
        key = "label" if "label" in self.rings.columns else "pucker"
        out = {}
        for ring, sub in self.rings.groupby("ring", sort=False):
            shares = {}
            for name, part in sub.groupby(key):
                shares[name] = float(pops.reindex(part["conformer"]).fillna(0.0).sum())
            out[ring] = dict(sorted(shares.items(), key=lambda kv: -kv[1]))
        return out

    def ring_summary(self) -> list[str]:
        """Rings whose form is the same in every conformer, as 'ring X: chair'."""
        out = []
        key = "form" if "form" in self.rings.columns else "pucker"
        for ring, sub in self.rings.groupby("ring", sort=False):
            names = set(sub[key])
            if len(names) == 1:
                out.append(f"ring {ring}: {names.pop()} in every conformer")
        return out


def describe_conformers(ens_or_mol, conf_ids=None, *,
                        threshold: float = DISTINGUISHING_DEGREES) -> ConformerDescription:
    """Distinguishing torsions, ring puckers and hydrogen bonds of the active conformers.

    Parameters
    ----------
    ens_or_mol : Ensemble or rdkit.Chem.Mol
    conf_ids : sequence of int, optional
        Default: the ensemble's active conformers (all of a Mol's).
    threshold : float, degrees
        See :func:`distinguishing_torsions`; for an ensemble the torsions are ordered by
        their variation among the conformers populated at its first temperature.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    >>> cid = AllChem.EmbedMolecule(mol, randomSeed=7)
    >>> describe_conformers(mol).torsions    # one conformer: nothing to distinguish
    []
    """
    if isinstance(ens_or_mol, Chem.Mol):
        mol = ens_or_mol
        ids = [c.GetId() for c in mol.GetConformers()] if conf_ids is None else list(conf_ids)
    else:
        mol = ens_or_mol.mol
        ids = ens_or_mol.ids() if conf_ids is None else list(conf_ids)
    ids = [int(c) for c in ids]
    weights = None
    if not isinstance(ens_or_mol, Chem.Mol) and len(ids) > 1:
        first = next((p for p in ens_or_mol.provenance if p.get("step") == "input"), {})
        temperature = float((first.get("temperatures") or [298.15])[0])
        try:
            weights = ens_or_mol.populations([temperature])[temperature].reindex(ids).to_numpy()
        except InputError:  # ordering only (e.g. an ensemble without active conformers)
            weights = None
    torsions = distinguishing_torsions(mol, ids, threshold=threshold, weights=weights)
    rings = ring_puckers(mol, ids)
    subs = ring_substituents(mol, ids)
    rings["label"] = _ring_labels(rings, subs)
    hbonds = hydrogen_bonds(mol, ids)
    table = pd.DataFrame(index=pd.Index(ids, name="conformer"))
    for t in torsions:
        table[t.column] = pd.Series(t.values)
    for ring, sub in rings.groupby("ring", sort=False):
        table[f"ring_{ring}"] = sub.set_index("conformer")["label"]
    labels = hbonds.groupby("conformer")["label"].apply(lambda s: "; ".join(s)) if len(hbonds) else {}
    table["hydrogen_bonds"] = [labels.get(c, "") if len(hbonds) else "" for c in ids]
    return ConformerDescription(table=table, torsions=torsions, rings=rings, hbonds=hbonds,
                                substituents=subs)
