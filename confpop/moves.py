"""Move-based conformer search: from known low-energy conformers to their neighbours.

ETKDG draws torsions from its own knowledge-based preferences, so a rotamer those
preferences disfavour can be missed at any number of trials even when the force field or
tight-binding level puts it low (measured, see below). This module makes structures that do
not depend on those preferences: from each low-energy conformer ("parent"), one move at a
time,

* **torsion moves**: each rotatable bond (:func:`confpop.torsion.rotatable_torsions`,
  terminal tops included when they carry a polar hydrogen: OH, NH2, SH rotamers are distinct
  conformers) driven to its other minima: +-120 deg for a bond between two sp3 atoms, 180 and
  +-120 deg for a bond with an sp2/aromatic end (conjugated: 0/180; sp2-sp3: three eclipsed
  minima). Symmetric threefold tops (CH3, CF3, NH3+) are not moved: a rotation gives the same
  conformer;
* **cis/trans moves**: amide C-N bonds (and the ester C(=O)-O bond, a conjugated single bond
  above) turned by 180 deg; ETKDG draws secondary amides trans only (``forceTransAmides``);
* **ring moves** for saturated rings of 4-8 atoms that share no atom with another ring:
  a flip (every ring atom reflected through the ring's mean plane, which changes the sign of
  every ring torsion; each atom's substituents follow in the frame of its two ring
  neighbours, so configurations stay and axial <-> equatorial: chair -> inverted chair) and
  a flap per ring atom (that atom reflected through the plane of its two ring neighbours and
  the ring centre: chair -> twist/boat, envelope changes).

Each child is relaxed with the sampling force field and kept when its bonds and stereo are
those of the molecule (a move can push a ring substituent through the ring), it is not a
duplicate of a known conformer (:func:`confpop.prune.find_duplicates`) and it lies in the
energy window; new conformers become parents in the next iteration, until an iteration gives
nothing new in the parent window (or ``max_iterations``).

Why (measured): ETKDG draws 3-methoxyoxetane (``COC1COC1``) with H-C3-O-CH3 at +-55 deg in
500 of 500 trials at each of three seeds; the anti rotamer (174 deg) lies +0.84 kcal/mol
at GFN2 (gas, 10.8 % at 298 K) and +2.3 kcal/mol at MMFF94s, and one torsion move from the
gauche conformer finds it (``tests/test_moves.py``). 2-methoxyoxane: a rotamer at +3.1
kcal/mol (GFN2) missing from 3 x 500 embeddings; 2-(ethoxymethyl)oxolane: three of 37 GFN2
minima within 3 kcal/mol (+0.63, +1.77, +2.00; 3.7 % of the population together) missing
from all three seeds of 500, found by moves from 50 trials.

Defaults (:class:`MoveSettings`), measured with MMFF94s on the invented ether-ester of
``benchmarks/bench_sampling.py`` (``CCOC(=O)[C@@H](C)CCOC``, 5 rotatable bonds), scoring a
force-field ensemble by the share of the brute-force GFN2 population (298 K; 2,000
embeddings, every MMFF94s minimum optimized) whose MMFF94s precursor it contains, seeds 0/1:

========================================  ======  =============  ================
sampler                                   trials  MMFF94s conf.  GFN2 pop. reached
========================================  ======  =============  ================
ETKDG, one stream, completeness 0.85        300    111 / 119     0.299 / 0.692
ETKDG, two streams, overlap 0.9           550/450  124 / 126     0.578 / 0.714
+ moves, parent_window 2 kcal/mol            50    111 / 133     0.700 / 0.972
+ moves, parent_window 4                     50    159 / 159     0.998 / 1.000
+ moves, parent_window 6 (default)           50    161 / 160     1.000 / 1.000
+ moves, parent_window 8                     50    161 / 162     1.000 / 1.000
========================================  ======  =============  ================

CPU for the sampling stage: 2.2 s (ETKDG), 3-4 s (two streams), 12 s (window 4), 20 s
(window 6 and 8), against 105 s for the brute force's GFN2 work. Window 6 rather than 4:
the force field misranks by up to 4 kcal/mol (the GFN2 minimum of this ester has its best
MMFF94s precursor at +2.4 kcal/mol; pipeline notes: 2.4-4.0 on three other molecules) and
costs 8 s more. ``max_parents`` = 400 bounds the cost only (304-351 parents were moved in
the measured searches); ``max_iterations`` = 10 likewise (they stopped earlier).

References
----------
Chang, Guida, Still, J. Am. Chem. Soc. 1989, 111, 4379 (random torsion moves from low-energy
conformers, "usage-directed"), doi:10.1021/ja00194a035
Kolossváry & Guida, J. Am. Chem. Soc. 1996, 118, 5011 (low-mode moves; torsion/ring
moves as the simpler alternative), doi:10.1021/ja952478m
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from rdkit import Chem

from .errors import InputError
from .rotatable import _side  # one implementation of "atoms on one side of a bond"

__all__ = ["Move", "MoveSettings", "list_moves", "apply_move", "population_overlap",
           "match_conformers"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class MoveSettings:
    """How far the move search goes (defaults measured: module notes).

    Attributes
    ----------
    parent_window : float, kcal/mol
        Conformers at most this far above the lowest (force-field energy) are moved.
    max_parents : int
        Upper bound on parents moved in one search (cost bound).
    max_iterations : int
        Upper bound on move iterations (children of children ...).
    ring_moves, torsion_moves : bool
        Which kinds of move to make.
    """

    parent_window: float = 6.0
    max_parents: int = 400
    max_iterations: int = 10
    torsion_moves: bool = True
    ring_moves: bool = True

    def __post_init__(self):
        if isinstance(self.parent_window, bool) or not np.isfinite(self.parent_window) \
                or self.parent_window <= 0:
            raise InputError(f"parent_window must be a finite number > 0 kcal/mol, "
                             f"got {self.parent_window!r}")
        for name in ("max_parents", "max_iterations"):
            value = getattr(self, name)
            if isinstance(value, bool) or int(value) != value or value < 1:
                raise InputError(f"{name} must be an integer >= 1, got {value!r}")


@dataclass(frozen=True)
class Move:
    """One move of a conformer.

    Attributes
    ----------
    kind : str
        "torsion", "cis/trans", "ring flip" or "ring flap".
    atoms : tuple of int
        Torsion moves: the dihedral (i, j, k, l); ring moves: the ring atoms (flap: the
        flapped atom first).
    offset : float, degrees
        Torsion moves: the change of the dihedral; 0 for ring moves.
    moving : tuple of int
        The atoms that move (one side of the bond; for ring moves the ring atoms with their
        substituents).
    label : str
        E.g. "C1-C2 +120" or "ring C5-C6-C7-C8-C9-O10 flip" (0-based atom labels).
    """

    kind: str
    atoms: tuple
    offset: float
    moving: tuple
    label: str



def _symmetric_top(mol, end, other) -> bool:
    """CH3, CF3, NH3+ (three like terminal atoms): turning it gives the same conformer."""
    nbrs = [a for a in mol.GetAtomWithIdx(end).GetNeighbors() if a.GetIdx() != other]
    return (len(nbrs) == 3 and all(a.GetDegree() == 1 for a in nbrs)
            and len({a.GetAtomicNum() for a in nbrs}) == 1)


def _offsets(mol, j, k, kind) -> tuple[float, ...]:
    if kind == "amide":
        return (180.0,)
    sp3 = Chem.HybridizationType.SP3
    aj, ak = mol.GetAtomWithIdx(j), mol.GetAtomWithIdx(k)
    if aj.GetHybridization() == sp3 and ak.GetHybridization() == sp3 \
            and not mol.GetBondBetweenAtoms(j, k).GetIsConjugated():
        return (120.0, -120.0)
    return (180.0, 120.0, -120.0)


def _ring_units(mol) -> list[tuple[int, ...]]:
    """Saturated rings of 4-8 atoms sharing no atom with another ring."""
    rings = [tuple(r) for r in mol.GetRingInfo().AtomRings()]
    out = []
    for ring in rings:
        if not 4 <= len(ring) <= 8:
            continue
        if any(set(ring) & set(other) for other in rings if other != ring):
            continue
        atoms = [mol.GetAtomWithIdx(a) for a in ring]
        if any(a.GetIsAromatic() for a in atoms):
            continue
        bonds = [mol.GetBondBetweenAtoms(ring[i], ring[(i + 1) % len(ring)]) for i in range(len(ring))]
        if any(b.GetBondType() != Chem.BondType.SINGLE for b in bonds):
            continue
        out.append(ring)
    return out


def _substituents(mol, ring) -> dict[int, tuple[int, ...]]:
    """Ring atom -> itself and every atom reached from it without entering the ring."""
    ring_set = set(ring)
    out = {}
    for a in ring:
        seen = {a}
        stack = [a]
        while stack:
            x = stack.pop()
            for nb in mol.GetAtomWithIdx(x).GetNeighbors():
                n = nb.GetIdx()
                if n in ring_set or n in seen:
                    continue
                seen.add(n)
                stack.append(n)
        out[a] = tuple(sorted(seen))
    return out


def _label(mol, idx):
    return f"{mol.GetAtomWithIdx(idx).GetSymbol()}{idx}"


def list_moves(mol: Chem.Mol, settings: MoveSettings | None = None) -> list[Move]:
    """Every move of ``mol`` (explicit hydrogens), in bond order then ring order.

    Examples
    --------
    >>> from rdkit import Chem
    >>> [m.label for m in list_moves(Chem.AddHs(Chem.MolFromSmiles("CCCC")))]
    ['C1-C2 +120', 'C1-C2 -120']
    """
    from .rotatable import rotatable_torsions

    settings = settings or MoveSettings()
    if any(a.GetNumImplicitHs() for a in mol.GetAtoms()):
        raise InputError("list_moves needs explicit hydrogens (see confpop.load_molecule)")
    moves = []
    if settings.torsion_moves:
        for t in rotatable_torsions(mol, include_terminal=True):
            i, j, k, l = t.atoms
            if _symmetric_top(mol, j, k) or _symmetric_top(mol, k, j):
                continue
            side_k, side_j = _side(mol, k, j), _side(mol, j, k)
            if side_k is None or side_j is None:
                continue
            moving = side_k if len(side_k) <= len(side_j) else side_j
            kind = "cis/trans" if t.kind == "amide" else "torsion"
            for off in _offsets(mol, j, k, t.kind):
                moves.append(Move(kind=kind, atoms=(i, j, k, l), offset=off,
                                  moving=tuple(sorted(moving)),
                                  label=f"{_label(mol, j)}-{_label(mol, k)} {off:+.0f}"))
    if settings.ring_moves:
        for ring in _ring_units(mol):
            subs = _substituents(mol, ring)
            name = "-".join(_label(mol, a) for a in ring)
            every = tuple(sorted(x for a in ring for x in subs[a]))
            moves.append(Move(kind="ring flip", atoms=tuple(ring), offset=0.0, moving=every,
                              label=f"ring {name} flip"))
            for pos, a in enumerate(ring):
                order = (a,) + tuple(ring[(pos + s) % len(ring)] for s in range(1, len(ring)))
                moves.append(Move(kind="ring flap", atoms=order, offset=0.0, moving=subs[a],
                                  label=f"ring {name} flap {_label(mol, a)}"))
    return moves


def apply_move(mol: Chem.Mol, positions, move: Move) -> np.ndarray:
    """The start structure of one move (unrelaxed), a new (n_atoms, 3) array in angstrom."""
    from .geometry import dihedral_angle, set_dihedral

    p = np.array(positions, dtype=float)
    if move.kind in ("torsion", "cis/trans"):
        return set_dihedral(p, move.atoms, dihedral_angle(p, move.atoms) + move.offset, move.moving)
    ring = list(move.atoms)
    if move.kind == "ring flip":
        centre = p[ring].mean(axis=0)
        _, _, vt = np.linalg.svd(p[ring] - centre)
        normal = vt[2]
        new_ring = p[ring] - 2.0 * ((p[ring] - centre) @ normal)[:, None] * normal
        return _replace_ring(mol, p, ring, new_ring)
    if move.kind == "ring flap":
        a, nb1, nb2 = ring[0], ring[1], ring[-1]
        centre = p[ring].mean(axis=0)
        normal = np.cross(p[nb1] - centre, p[nb2] - centre)
        norm = np.linalg.norm(normal)
        if norm < 1e-6:
            return p
        normal /= norm
        new_ring = p[ring].copy()
        new_ring[0] = p[a] - 2.0 * float(np.dot(p[a] - centre, normal)) * normal
        return _replace_ring(mol, p, ring, new_ring)
    raise InputError(f"unknown move kind {move.kind!r}")


def _local_frame(prev, atom, nxt):
    """Right-handed frame at a ring atom from its two ring neighbours (columns e1, e2, e3)."""
    e1 = (prev - atom) + (nxt - atom)
    e1 /= np.linalg.norm(e1)
    e2 = nxt - prev
    e2 -= np.dot(e2, e1) * e1
    e2 /= np.linalg.norm(e2)
    return np.column_stack([e1, e2, np.cross(e1, e2)])


def _replace_ring(mol, p, ring, new_ring):
    """Ring atoms to ``new_ring``; each ring atom's substituents follow rigidly in the frame of
    its two ring neighbours. Reflecting the ring changes the sign of every ring torsion, and
    a substituent keeps its place relative to its neighbours (so the configuration is kept):
    axial and equatorial swap, as in a real ring inversion."""
    subs = _substituents(mol, ring)
    out = p.copy()
    n = len(ring)
    for k, a in enumerate(ring):
        prev, nxt = (k - 1) % n, (k + 1) % n
        old = _local_frame(p[ring[prev]], p[a], p[ring[nxt]])
        new = _local_frame(new_ring[prev], new_ring[k], new_ring[nxt])
        rot = new @ old.T
        moving = [x for x in subs[a] if x != a]
        out[moving] = (p[moving] - p[a]) @ rot.T + new_ring[k]
        out[a] = new_ring[k]
    return out


# --------------------------------------------------------------- comparing two ensembles
def match_conformers(mol: Chem.Mol, positions_a, energies_a, positions_b, energies_b,
                     settings=None, *, achiral: bool | None = None) -> tuple[list[int], list[int]]:
    """One cluster label per conformer of two ensembles: equal labels = the same conformer.

    Both sets are pooled and grouped with :func:`confpop.prune.find_duplicates` (the given
    duplicate criteria, mirror images merged), so a conformer of A and one of B share a
    label exactly when the search itself would call them duplicates.

    Returns
    -------
    labels_a, labels_b : list of int
    """
    from .prune import PruneSettings, find_duplicates

    settings = settings or PruneSettings()
    merging = PruneSettings(rmsd=settings.rmsd, energy_tolerance=settings.energy_tolerance,
                            merge_mirror_images=True, max_automorphisms=settings.max_automorphisms)
    pos = [np.asarray(x, dtype=float) for x in list(positions_a) + list(positions_b)]
    e = np.concatenate([np.asarray(energies_a, dtype=float), np.asarray(energies_b, dtype=float)])
    rep = find_duplicates(mol, pos, e, merging, achiral=achiral)
    label = {u: n for n, u in enumerate(rep.unique)}
    for dup, ref in rep.duplicate_of.items():
        label[dup] = label[ref]
    n_a = len(list(energies_a))
    return [label[i] for i in range(n_a)], [label[i] for i in range(n_a, len(e))]


def population_overlap(labels_a, weights_a, labels_b, weights_b) -> float:
    """Sum over conformers of min(p_i, q_i): 1 for the same populations, 0 for disjoint ones.

    ``weights_*`` are populations (each summing to 1) of the conformers carrying
    ``labels_*``; conformers with the same label are one (their weights add up).

    Examples
    --------
    >>> round(population_overlap([0, 1], [0.7, 0.3], [0, 2], [0.5, 0.5]), 3)
    0.5
    """
    pa: dict = {}
    pb: dict = {}
    for lab, w in zip(labels_a, weights_a):
        pa[lab] = pa.get(lab, 0.0) + float(w)
    for lab, w in zip(labels_b, weights_b):
        pb[lab] = pb.get(lab, 0.0) + float(w)
    return float(sum(min(w, pb.get(lab, 0.0)) for lab, w in pa.items()))
