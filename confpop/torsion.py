"""Torsion scans, periodic profile fits, minima, barriers and interconversion rates.

A scan drives one dihedral angle i-j-k-l around the j-k bond. In a *relaxed* scan every
other coordinate is optimized under a dihedral constraint at each point; the scan starts at
the relaxed minimum's dihedral and walks both up and down the full circle, each point
starting from the previous point's geometry. The lower of the two energies is kept at each
angle, and where the two directions disagree (a neighbouring group flipped during one walk
but not the other: hysteresis) the angles and the differences are reported. A *rigid* scan
only rotates the moving fragment about the j-k bond.

Fitted extrema that fall between grid points are computed explicitly (from the computed
neighbours on both sides), so minimum and maximum energies are computed, not interpolated.

The profile is fitted with a Fourier series

    V(φ) = c + Σₙ Vₙ/2 [1 − cos(nφ − γₙ)],   n = 1 … N (N ≤ 6, limited by the point count),

by linear least squares on cos(nφ) and sin(nφ); minima and maxima come from the fit
(refined with :func:`scipy.optimize.minimize_scalar`), so they are not tied to the grid.

Barriers from a scan are differences of electronic (or force-field) energies. They stand in
for the free energy of activation ΔG‡ of the Eyring equation; without zero-point, thermal
and entropy terms that typically errs by about ±1 kcal/mol at room temperature, a factor of
about 5 in rate constants and half-lives.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd
from rdkit import Chem

from .errors import CalculationFailed, InputError
from .geometry import DEGENERATE_LENGTH, dihedral_at, wrap_degrees
from .thermo import check_temperatures
from .units import convert, normalize_unit

__all__ = ["Torsion", "TorsionProfile", "Interconversion", "scan_torsion", "rotatable_torsions",
           "dihedral_angle", "set_dihedral", "interconversion", "exchange_summary",
           "BarrierCorrection", "rescore_barrier", "BARRIER_NOTE"]

log = logging.getLogger(__name__)

#: the embedding seed used when a molecule comes without a conformer
EMBED_SEED = 0xC0F

#: default hysteresis threshold (kcal/mol): larger up/down differences are reported
HYSTERESIS_KCAL = 0.5

#: extrema pairs shallower than this (kcal/mol) are treated as fit ripple and merged
MIN_DEPTH_KCAL = 0.1

#: a fitted extremum farther than this (degrees) from every scan point is computed explicitly
REFINE_DEG = 1.0

#: a computed point this close (degrees) to a fitted extremum anchors the extremum's energy:
#: E = E(point) + fit(extremum) - fit(point), which cancels the fit's local offset
SNAP_DEG = 2.0

BARRIER_NOTE = (
    "Barriers are differences of {kind} scan energies ({method}); they stand in for the free "
    "energy of activation (ΔG‡) in the Eyring equation: no zero-point, thermal or entropy "
    "terms, transmission coefficient 1. That typically errs by about ±1 kcal/mol at room "
    "temperature, a factor of about 5 in rate constants and half-lives.{extra}")
_RIGID_EXTRA = (" A rigid scan relaxes nothing, so its barriers are upper bounds and can be "
                "much too high.")


# ----------------------------------------------------------------------------- geometry
def dihedral_angle(positions, atoms) -> float:
    """The dihedral angle i-j-k-l in degrees, in (−180, 180] (:func:`confpop.geometry.dihedral`).

    Parameters
    ----------
    positions : (n_atoms, 3) array, angstrom
    atoms : (i, j, k, l) ints, 0-based

    Raises
    ------
    InputError
        If j and k coincide or a bond angle at j or k is linear (no dihedral is defined).

    Examples
    --------
    >>> import numpy as np
    >>> p = np.array([[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [0, 1.0, 1.5]])
    >>> round(dihedral_angle(p, (0, 1, 2, 3)), 6)
    90.0
    """
    p = np.asarray(positions, dtype=float)
    angle = float(dihedral_at(p, atoms))
    if math.isnan(angle):
        _, j, k, _ = atoms
        if np.linalg.norm(p[k] - p[j]) < DEGENERATE_LENGTH:
            raise InputError(f"atoms {j} and {k} sit on top of each other; no dihedral is defined")
        raise InputError(f"dihedral {tuple(atoms)} is undefined: a bond angle at atom {j} or "
                         f"{k} is linear")
    return angle


def _circular_difference(a, b):
    """|a − b| on the circle, degrees in [0, 180]."""
    return np.abs(wrap_degrees(np.asarray(a, dtype=float) - np.asarray(b, dtype=float)))


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


def _rotation_matrix(axis, angle_deg):
    axis = np.asarray(axis, dtype=float)
    axis = axis / np.linalg.norm(axis)
    t = math.radians(angle_deg)
    x, y, z = axis
    c, s, C = math.cos(t), math.sin(t), 1.0 - math.cos(t)
    return np.array([[c + x * x * C, x * y * C - z * s, x * z * C + y * s],
                     [y * x * C + z * s, c + y * y * C, y * z * C - x * s],
                     [z * x * C - y * s, z * y * C + x * s, c + z * z * C]])


def set_dihedral(positions, atoms, target, moving) -> np.ndarray:
    """Rotate the atoms ``moving`` about the j-k axis so that dihedral i-j-k-l equals ``target``.

    Parameters
    ----------
    positions : (n_atoms, 3) array, angstrom
    atoms : (i, j, k, l)
    target : float, degrees
    moving : collection of int
        The fragment on the k side (containing l) or on the j side (containing i) of the bond.

    Returns
    -------
    (n_atoms, 3) array, angstrom
        A new array; bond lengths and angles are unchanged.
    """
    p = np.array(positions, dtype=float)
    i, j, k, l = atoms
    moving = np.array(sorted(moving), dtype=int)
    delta = wrap_degrees(target - dihedral_angle(p, atoms))
    # rotating the k-side by +delta about j->k raises the dihedral by delta; the j side by -delta
    sign = 1.0 if l in moving else -1.0
    rot = _rotation_matrix(p[k] - p[j], sign * delta)
    origin = p[j]
    p[moving] = (p[moving] - origin) @ rot.T + origin
    return p


# ----------------------------------------------------------------------------- torsion lists
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
        raise InputError(f"--bond atoms {j} and {k} are not bonded "
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


# ----------------------------------------------------------------------------- fitting
def _design(phi_deg, order):
    phi = np.radians(np.asarray(phi_deg, dtype=float))
    cols = [np.ones_like(phi)]
    for n in range(1, order + 1):
        cols += [np.cos(n * phi), np.sin(n * phi)]
    return np.stack(cols, axis=-1)


def _default_order(n_points: int) -> int:
    # up to n/2: on an even grid the Nyquist term cos(n/2 φ) is determined (its sine is not)
    return int(max(0, min(6, n_points // 2)))


def _fourier_fit(phi_deg, energies, order):
    """Least-squares coefficients [a0, a1, b1, ...] (the undetermined Nyquist sine set to 0)."""
    design = _design(phi_deg, order)
    keep = np.ones(design.shape[1], bool)
    if order > 0 and 2 * order + 1 > len(phi_deg):
        keep[2 * order] = False
    coef = np.zeros(design.shape[1])
    coef[keep] = np.linalg.lstsq(design[:, keep], energies, rcond=None)[0]
    return coef


def _extrema_sequence(f, lo, hi, periodic, depth):
    """Alternating local minima/maxima of f on [lo, hi) as [(angle, energy, is_min)]."""
    from scipy.optimize import minimize_scalar

    h = 0.5
    grid = np.arange(lo, hi, h) if periodic else np.arange(lo, hi + 1e-9, h)
    y = f(grid)
    if np.ptp(y) < 1e-9:
        return []
    n = len(grid)
    found = []
    for idx in range(n):
        if not periodic and (idx == 0 or idx == n - 1):
            continue
        prev, nxt = y[(idx - 1) % n], y[(idx + 1) % n]
        for is_min, sign in ((True, 1.0), (False, -1.0)):
            if sign * y[idx] < sign * prev and sign * y[idx] <= sign * nxt:
                res = minimize_scalar(lambda x: sign * float(f(np.array([x]))[0]),
                                      bounds=(grid[idx] - h, grid[idx] + h), method="bounded",
                                      options={"xatol": 1e-6})
                x = float(res.x)
                found.append((x, float(f(np.array([x]))[0]), is_min))
    found.sort(key=lambda t: t[0])
    # merge min/max pairs shallower than `depth` (fit ripple), smallest first
    while len(found) > 2:
        m = len(found)
        pairs = range(m) if periodic else range(m - 1)
        gaps = [(abs(found[p][1] - found[(p + 1) % m][1]), p) for p in pairs
                if found[p][2] != found[(p + 1) % m][2]]
        if not gaps:
            break
        gap, p = min(gaps)
        if gap >= depth:
            break
        q = (p + 1) % m
        for idx in sorted((p, q), reverse=True):
            del found[idx]
    if periodic:
        found = [(_wrap_into(x, lo), e, is_min) for x, e, is_min in found]
        found.sort(key=lambda t: t[0])
    return found


def _wrap_into(x, lo):
    return float(lo + np.mod(x - lo, 360.0))


# ----------------------------------------------------------------------------- the profile
def _readonly(values, dtype=float):
    arr = np.array(values, dtype=dtype)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class TorsionProfile:
    """The energy along one dihedral, with its periodic fit, extrema, barriers and rates.

    Attributes
    ----------
    atoms : (i, j, k, l) tuple of int
        0-based atom indices of the scanned dihedral.
    label : str
        Chemist's label of the dihedral, e.g. "C0-C1-C2-C3".
    angles : (n_points,) array, degrees
        Scan angles in increasing order (for a full turn, ``stop`` itself is left out).
    energies : (n_points,) array, ``unit``
        Energy at each angle relative to the lowest point; the lower of the up and down walks.
        NaN where both walks failed.
    unit : str
    method : str
        Energy method (backend name).
    solvent : str or None
    relaxed : bool
        True for a relaxed scan, False for a rigid one.
    start, stop, step : float, degrees
        The scan range and grid step.
    convergence : str
        Optimizer convergence preset of a relaxed scan.
    converged : (n_points,) bool array
        Whether the point kept in ``energies`` was optimized to convergence.
    energies_up, energies_down : (n_points,) arrays, ``unit``
        The walk up and the walk down (same zero as ``energies``; NaN where a walk failed).
    hysteresis : tuple of (angle, difference) pairs
        Angles (degrees) where the two walks differ by more than ``hysteresis_threshold``, with
        the difference |E_up − E_down| in ``unit``.
    hysteresis_threshold : float, ``unit``
    messages : tuple of str
        Per point: the optimizer's or engine's message for the kept point ("" if none).
    achieved_angles : (n_points,) array, degrees
        The dihedral actually reached at each kept point.
    refined : (n_points,) bool array
        True for points added at fitted extrema between grid points (see ``refine`` of
        :func:`scan_torsion`); those were computed once, not walked up and down.
    gradient_calls : int
        Energy+gradient evaluations the whole scan took (a cost measure; 0 for rigid scans).
    start_angle : float or None, degrees
        Dihedral of the relaxed starting minimum (the walks begin there).
    reference_energy : float, hartree
        Absolute energy of the zero of ``energies``.
    positions : (n_points, n_atoms, 3) array, angstrom, or None
        Geometry of each kept point (NaN rows for failed points).
    mol : rdkit.Chem.Mol or None
        The molecule (explicit H) the positions belong to.
    periodic : bool
        Whether the scan covers a full turn (then the fit is a Fourier series; otherwise a
        cubic spline through the points).
    fit_order : int
        Highest Fourier order N of the fit.
    fit_coefficients : array
        ``[a0, a1, b1, a2, b2, ...]`` of V(φ) = a0 + Σ aₙ cos nφ + bₙ sin nφ (``unit``).
    note : str
        What the barriers mean and how far to trust them as ΔG‡.
    """

    atoms: tuple
    label: str
    angles: np.ndarray
    energies: np.ndarray
    unit: str = "kcal/mol"
    method: str = ""
    solvent: str | None = None
    relaxed: bool = True
    start: float = -180.0
    stop: float = 180.0
    step: float = 15.0
    convergence: str = ""
    converged: np.ndarray | None = None
    energies_up: np.ndarray | None = None
    energies_down: np.ndarray | None = None
    hysteresis: tuple = ()
    hysteresis_threshold: float = HYSTERESIS_KCAL
    messages: tuple = ()
    achieved_angles: np.ndarray | None = None
    refined: np.ndarray | None = None
    gradient_calls: int = 0
    start_angle: float | None = None
    reference_energy: float = float("nan")
    positions: np.ndarray | None = field(default=None, repr=False)
    mol: Chem.Mol | None = field(default=None, repr=False)
    periodic: bool = True
    fit_order: int = -1
    fit_coefficients: np.ndarray | None = field(default=None, repr=False)
    note: str = ""

    def __post_init__(self):
        unit = normalize_unit(self.unit)
        object.__setattr__(self, "unit", unit)
        angles = np.array(self.angles, dtype=float).ravel()
        energies = np.array(self.energies, dtype=float).ravel()
        if angles.size != energies.size:
            raise InputError(f"angles and energies must have the same length, got {angles.size} "
                             f"and {energies.size}")
        n = angles.size
        object.__setattr__(self, "angles", _readonly(angles))
        object.__setattr__(self, "energies", _readonly(energies))
        conv = np.ones(n, bool) if self.converged is None else np.array(self.converged, bool)
        object.__setattr__(self, "converged", _readonly(conv, bool))
        for name in ("energies_up", "energies_down"):
            val = energies if getattr(self, name) is None else getattr(self, name)
            object.__setattr__(self, name, _readonly(np.array(val, dtype=float).ravel()))
        ach = angles if self.achieved_angles is None else self.achieved_angles
        object.__setattr__(self, "achieved_angles", _readonly(ach))
        ref = np.zeros(n, bool) if self.refined is None else np.array(self.refined, bool)
        object.__setattr__(self, "refined", _readonly(ref, bool))
        if not self.messages:
            object.__setattr__(self, "messages", tuple("" for _ in range(n)))
        if self.positions is not None:
            object.__setattr__(self, "positions", _readonly(self.positions))
        object.__setattr__(self, "atoms", tuple(int(a) for a in self.atoms))
        if self.fit_coefficients is None or self.fit_order < 0:
            self._fit()
        else:
            object.__setattr__(self, "fit_coefficients", _readonly(self.fit_coefficients))
        if not self.note:
            kind = "relaxed" if self.relaxed else "rigid"
            extra = "" if self.relaxed else _RIGID_EXTRA
            object.__setattr__(self, "note", BARRIER_NOTE.format(kind=kind, method=self.method
                                                                 or "unstated method", extra=extra))

    # --------------------------------------------------------------- construction
    @classmethod
    def from_energies(cls, angles, energies, unit: str = "kcal/mol", *, atoms=(0, 1, 2, 3),
                      label: str = "", method: str = "", periodic: bool | None = None,
                      fit_order: int | None = None, relaxed: bool = True) -> "TorsionProfile":
        """A profile from numbers computed anywhere (a literature scan, another program's output).

        Parameters
        ----------
        angles : (n,) array, degrees
        energies : (n,) array, ``unit``
            Absolute or relative; shifted so the lowest finite value is zero.
        unit : str
        periodic : bool, optional
            Whether the points cover a full turn; by default, when the angles are evenly
            spaced and one more step closes the circle.
        fit_order : int, optional
            Highest Fourier order; default ``min(6, (n − 1) // 2)``.

        Examples
        --------
        >>> import numpy as np
        >>> phi = np.arange(-180.0, 180.0, 30.0)
        >>> prof = TorsionProfile.from_energies(phi, 1.5 * (1 - np.cos(np.radians(3 * phi - 180))))
        >>> [round(a) for a in prof.minima()["angle"]]
        [-180, -60, 60]
        >>> round(float(prof.barriers()["barrier_forward"].iloc[0]), 6)
        3.0
        """
        phi = np.asarray(angles, dtype=float).ravel()
        e = np.asarray(energies, dtype=float).ravel()
        if phi.size != e.size:
            raise InputError(f"angles and energies must have the same length, got {phi.size} "
                             f"and {e.size}")
        if phi.size < 4:
            raise InputError(f"a profile needs at least 4 points, got {phi.size}")
        order = np.argsort(phi)
        phi, e = phi[order], e[order]
        finite = np.isfinite(e)
        if not finite.any():
            raise InputError("energies contain no finite value")
        e = e - np.nanmin(e)
        steps = np.diff(phi)
        step = float(np.median(steps))
        if periodic is None:
            periodic = bool(np.allclose(steps, step, atol=1e-6)
                            and abs(phi[-1] - phi[0] + step - 360.0) < 1e-6)
        return cls(atoms=tuple(atoms), label=label, angles=phi, energies=e, unit=unit,
                   method=method, relaxed=relaxed, start=float(phi[0]),
                   stop=float(phi[0] + 360.0) if periodic else float(phi[-1]), step=step,
                   periodic=periodic, fit_order=-1 if fit_order is None else int(fit_order),
                   fit_coefficients=None)

    def _fit(self):
        ok = np.isfinite(self.energies)
        use = ok & self.converged
        if use.sum() < 5:
            use = ok
        order = self.fit_order
        if self.periodic:
            if order < 0:
                order = _default_order(int(use.sum()))
            order = min(order, _default_order(int(use.sum())))
            coef = _fourier_fit(self.angles[use], self.energies[use], order)
        else:
            order = 0
            coef = np.array([])
        object.__setattr__(self, "fit_order", int(order))
        object.__setattr__(self, "fit_coefficients", _readonly(coef))
        object.__setattr__(self, "_fit_mask", use)
        if not self.periodic:
            from scipy.interpolate import CubicSpline
            if use.sum() < 4:
                raise InputError(f"a partial-range profile needs at least 4 finite points, "
                                 f"got {int(use.sum())}")
            x, y = self.angles[use], self.energies[use]
            order = np.argsort(x, kind="stable")
            if np.any(np.diff(x[order]) <= 0):
                raise InputError("a partial-range profile needs distinct angles")
            object.__setattr__(self, "_spline", CubicSpline(x[order], y[order]))

    # --------------------------------------------------------------- the fit
    def energy_at(self, angles) -> np.ndarray:
        """The fitted energy at ``angles`` (degrees), in the profile's unit.

        Examples
        --------
        >>> import numpy as np
        >>> phi = np.arange(0.0, 360.0, 30.0)
        >>> prof = TorsionProfile.from_energies(phi, 1 - np.cos(np.radians(2 * phi)))
        >>> round(float(prof.energy_at(45.0)), 6)
        1.0
        """
        x = np.asarray(angles, dtype=float)
        if self.periodic:
            out = _design(x, self.fit_order) @ self.fit_coefficients
        else:
            out = self._spline(x)
        return float(out) if np.ndim(out) == 0 else np.asarray(out)

    def fit_rmsd(self) -> float:
        """Root-mean-square deviation of the fit from the fitted points, in the profile's unit."""
        use = self._fit_mask
        resid = self.energy_at(self.angles[use]) - self.energies[use]
        return float(np.sqrt(np.mean(resid ** 2)))

    def fourier_terms(self) -> pd.DataFrame:
        """The fit as V(φ) = c + Σ Vₙ/2 [1 − cos(nφ − γₙ)]: columns n, V (``unit``), gamma (degrees).

        Row n = 0 holds the constant c in ``V``.
        """
        if not self.periodic:
            raise InputError("a partial-range profile has no Fourier fit (it uses a spline)")
        c = self.fit_coefficients
        rows = []
        const = c[0]
        for n in range(1, self.fit_order + 1):
            a, b = c[2 * n - 1], c[2 * n]
            v = 2.0 * math.hypot(a, b)
            gamma = math.degrees(math.atan2(-b, -a)) if v > 0 else 0.0
            const -= v / 2.0
            rows.append({"n": n, "V": v, "gamma": gamma})
        return pd.DataFrame([{"n": 0, "V": const, "gamma": 0.0}] + rows)

    # --------------------------------------------------------------- extrema
    def _depth(self, min_depth):
        if min_depth is None:
            return convert(MIN_DEPTH_KCAL, "kcal/mol", self.unit)
        return float(min_depth)

    def _extrema(self, min_depth=None, snap=True):
        """Fitted extrema [(angle, energy, is_min)]; with ``snap`` the energy is anchored to a
        computed point within SNAP_DEG (the fit can ripple between coarse grid points)."""
        lo = float(self.start) if self.periodic else float(np.nanmin(self.angles[self._fit_mask]))
        hi = lo + 360.0 if self.periodic else float(np.nanmax(self.angles[self._fit_mask]))
        ext = _extrema_sequence(self.energy_at, lo, hi, self.periodic, self._depth(min_depth))
        if not snap:
            return ext
        use = self._fit_mask
        phi, e = self.angles[use], self.energies[use]
        out = []
        for x, fit_e, is_min in ext:
            dist = _circular_difference(phi, x) if self.periodic else np.abs(phi - x)
            near = int(np.argmin(dist)) if len(dist) else -1
            if near >= 0 and dist[near] <= SNAP_DEG:
                # the fit's local shape, anchored to the computed point next to the extremum
                fit_e = float(e[near]) + fit_e - float(self.energy_at(phi[near]))
            out.append((x, fit_e, is_min))
        return out

    def minima(self, min_depth: float | None = None) -> pd.DataFrame:
        """Minima of the fitted profile: columns ``angle`` (degrees) and ``energy`` (``unit``).

        Every minimum is listed, including symmetry-equivalent ones (a threefold rotor has
        three rows). Wells shallower than ``min_depth`` (default 0.1 kcal/mol in ``unit``)
        are treated as fit ripple and merged.
        """
        rows = [(x, e) for x, e, m in self._extrema(min_depth) if m]
        return pd.DataFrame(rows, columns=["angle", "energy"])

    def maxima(self, min_depth: float | None = None) -> pd.DataFrame:
        """Maxima of the fitted profile: columns ``angle`` (degrees) and ``energy`` (``unit``)."""
        rows = [(x, e) for x, e, m in self._extrema(min_depth) if not m]
        return pd.DataFrame(rows, columns=["angle", "energy"])

    def barriers(self, min_depth: float | None = None) -> pd.DataFrame:
        """Barriers between neighbouring minima (around the circle for a full turn).

        Returns
        -------
        pandas.DataFrame
            One row per pair of neighbouring minima, walking up in angle: ``from_min``,
            ``to_min`` and ``via_max`` (degrees), ``barrier_forward`` = E(max) − E(from) and
            ``barrier_reverse`` = E(max) − E(to) (``unit``), and ``from_energy``,
            ``to_energy``, ``max_energy`` (``unit``). With a single minimum the row describes
            a full rotation (from and to the same minimum).

        Notes
        -----
        The barriers are scan energies standing in for ΔG‡; see :attr:`note`.
        """
        ext = self._extrema(min_depth)
        cols = ["from_min", "to_min", "via_max", "barrier_forward", "barrier_reverse",
                "from_energy", "to_energy", "max_energy"]
        mins = [t for t in ext if t[2]]
        if not mins:
            return pd.DataFrame(columns=cols)
        m = len(ext)
        rows = []
        for p, (x, e, is_min) in enumerate(ext):
            if not is_min:
                continue
            if self.periodic:
                seq = [ext[(p + s) % m] for s in range(1, m + 1)]
            else:
                seq = ext[p + 1:]
            maxes = []
            for y in seq:
                if y[2]:
                    break
                maxes.append(y)
            else:
                if not self.periodic:
                    continue
            if not maxes or (not self.periodic and not seq[len(maxes):]):
                continue
            nxt = seq[len(maxes)]
            top = max(maxes, key=lambda t: t[1])
            rows.append({"from_min": x, "to_min": nxt[0], "via_max": top[0],
                         "barrier_forward": top[1] - e, "barrier_reverse": top[1] - nxt[1],
                         "from_energy": e, "to_energy": nxt[1], "max_energy": top[1]})
        return pd.DataFrame(rows, columns=cols)

    def full_rotation_barrier(self, min_depth: float | None = None) -> float:
        """Highest maximum minus the lowest minimum of the fit (``unit``): a complete turn."""
        ext = self._extrema(min_depth)
        if not ext:
            return 0.0
        return max(e for _, e, m in ext if not m) - min(e for _, e, m in ext if m)

    def interconversion_barrier(self, min_depth: float | None = None) -> float:
        """The barrier that must be crossed to reach every minimum from the lowest one (``unit``).

        On a full circle the path can avoid the highest maximum, so this is the second-highest
        maximum minus the lowest minimum (for an axially chiral biaryl, the racemization
        barrier through the lower planar transition state). With one minimum it is 0.
        """
        ext = self._extrema(min_depth)
        mins = [e for _, e, m in ext if m]
        maxes = sorted((e for _, e, m in ext if not m), reverse=True)
        if len(mins) <= 1:
            return 0.0
        if self.periodic:
            maxes = maxes[1:]
        return maxes[0] - min(mins)

    # --------------------------------------------------------------- kinetics
    def rates(self, temperatures=298.15, delta_nu_hz: float | None = None,
              transmission: float = 1.0, min_depth: float | None = None) -> pd.DataFrame:
        """Eyring rates and half-lives for every barrier of :meth:`barriers`.

        Parameters
        ----------
        temperatures : float or sequence of float, K
        delta_nu_hz : float, optional
            Shift difference (Hz) of the exchanging sites; when given, each row gets the NMR
            exchange regime ("fast", "intermediate", "slow") from
            :func:`confpop.kinetics.exchange_regime` with the mean directional rate
            (k_forward + k_reverse) / 2 (the rate of either direction for a symmetric exchange).
        transmission : float
            Transmission coefficient κ of the Eyring equation.

        Returns
        -------
        pandas.DataFrame
            One row per barrier and temperature: from_min, to_min, via_max, temperature,
            barrier_forward, barrier_reverse (``unit``), k_forward, k_reverse (s⁻¹),
            half_life_forward, half_life_reverse (s), exchange_regime (when ``delta_nu_hz``),
            atropisomer_class (by the forward half-life at 37 °C, LaPlante et al. 2011).

        Notes
        -----
        k = κ k_B T / h · exp(−ΔE‡ / RT) with the scan barrier ΔE‡ standing in for ΔG‡: see
        :attr:`note` (typically ±1 kcal/mol at room temperature, a factor ~5 in k).
        """
        temps = check_temperatures(temperatures)
        table = self.barriers(min_depth)
        rows = []
        for _, b in table.iterrows():
            for t in temps:
                rows.append(_rate_row(b, t, self.unit, delta_nu_hz, transmission))
        cols = ["from_min", "to_min", "via_max", "temperature", "barrier_forward",
                "barrier_reverse", "k_forward", "k_reverse", "half_life_forward",
                "half_life_reverse", "atropisomer_class"]
        if delta_nu_hz is not None:
            cols.insert(-1, "exchange_regime")
        out = pd.DataFrame(rows, columns=cols)
        out.attrs["note"] = self.note
        return out

    def atropisomer_class(self, min_depth: float | None = None) -> int:
        """Stability class (1, 2 or 3) of :meth:`interconversion_barrier` at 37 °C.

        Class 1: t½ < 60 s; class 2: 60 s to 4.5 years; class 3: > 4.5 years (LaPlante et al.,
        J. Med. Chem. 2011, 54, 7005, doi:10.1021/jm200584g), with the scan barrier for ΔG‡.
        """
        from . import kinetics
        return int(kinetics.atropisomer_class(self.interconversion_barrier(min_depth),
                                              unit=self.unit))

    def hysteresis_table(self) -> pd.DataFrame:
        """Per angle: energy_up, energy_down, difference (``unit``) and ``flagged``."""
        diff = np.abs(self.energies_up - self.energies_down)
        return pd.DataFrame({"angle": self.angles, "energy_up": self.energies_up,
                             "energy_down": self.energies_down, "difference": diff,
                             "flagged": diff > self.hysteresis_threshold})

    # --------------------------------------------------------------- views
    def table(self) -> pd.DataFrame:
        """The scan points: angle, energy, fit, converged, achieved_angle, energy_up/down, message."""
        return pd.DataFrame({"angle": self.angles, "energy": self.energies,
                             "fit": self.energy_at(self.angles), "converged": self.converged,
                             "achieved_angle": self.achieved_angles,
                             "energy_up": self.energies_up, "energy_down": self.energies_down,
                             "message": list(self.messages)})

    def to_mol(self) -> Chem.Mol:
        """The molecule with one conformer per successful scan point (conformer id = point index).

        Each conformer carries the properties ``angle`` and ``energy`` (``unit``).
        """
        if self.mol is None or self.positions is None:
            raise InputError("this profile holds no geometries (it was made from numbers)")
        from rdkit.Geometry import Point3D
        out = Chem.Mol(self.mol)
        out.RemoveAllConformers()
        for idx, pos in enumerate(self.positions):
            if not np.all(np.isfinite(pos)):
                continue
            conf = Chem.Conformer(out.GetNumAtoms())
            for a, (x, y, z) in enumerate(pos):
                conf.SetAtomPosition(a, Point3D(float(x), float(y), float(z)))
            conf.SetId(idx)
            conf.SetDoubleProp("angle", float(self.angles[idx]))
            conf.SetDoubleProp("energy", float(self.energies[idx]))
            out.AddConformer(conf, assignId=False)
        return out

    def to_dict(self, temperatures=(298.15,), delta_nu_hz: float | None = None) -> dict:
        """Everything as plain JSON-ready Python values."""
        def records(df):
            return [{k: (None if isinstance(v, float) and not math.isfinite(v) else
                         (v.item() if hasattr(v, "item") else v)) for k, v in r.items()}
                    for r in df.to_dict(orient="records")]

        def floats(arr):
            return [None if not math.isfinite(float(v)) else float(v) for v in arr]

        return {
            "atoms": list(self.atoms), "label": self.label, "method": self.method,
            "solvent": self.solvent, "relaxed": self.relaxed, "unit": self.unit,
            "start": self.start, "stop": self.stop, "step": self.step,
            "convergence": self.convergence, "start_angle": self.start_angle,
            "angles": floats(self.angles), "energies": floats(self.energies),
            "energies_up": floats(self.energies_up), "energies_down": floats(self.energies_down),
            "converged": [bool(c) for c in self.converged],
            "refined": [bool(c) for c in self.refined], "gradient_calls": self.gradient_calls,
            "hysteresis": [{"angle": a, "difference": d} for a, d in self.hysteresis],
            "fit_order": self.fit_order, "fit_rmsd": self.fit_rmsd(),
            "minima": records(self.minima()), "maxima": records(self.maxima()),
            "barriers": records(self.barriers()),
            "rates": records(self.rates(temperatures, delta_nu_hz=delta_nu_hz)),
            "full_rotation_barrier": self.full_rotation_barrier(),
            "interconversion_barrier": self.interconversion_barrier(),
            "note": self.note,
        }

    def __repr__(self) -> str:
        kind = "relaxed" if self.relaxed else "rigid"
        return (f"<TorsionProfile {self.label or self.atoms} {kind} {self.method} "
                f"{len(self.angles)} points, {len(self.minima())} minima, "
                f"full rotation {self.full_rotation_barrier():.2f} {self.unit}>")


def _rate_row(b, t, unit, delta_nu_hz, transmission):
    from . import kinetics
    kf = float(kinetics.eyring_rate(b["barrier_forward"], t, unit=unit, transmission=transmission))
    kr = float(kinetics.eyring_rate(b["barrier_reverse"], t, unit=unit, transmission=transmission))
    row = {"from_min": b["from_min"], "to_min": b["to_min"], "via_max": b["via_max"],
           "temperature": t, "barrier_forward": b["barrier_forward"],
           "barrier_reverse": b["barrier_reverse"], "k_forward": kf, "k_reverse": kr,
           "half_life_forward": math.log(2.0) / kf, "half_life_reverse": math.log(2.0) / kr,
           "atropisomer_class": int(kinetics.atropisomer_class(b["barrier_forward"], unit=unit))}
    if delta_nu_hz is not None:
        row["exchange_regime"] = str(kinetics.exchange_regime(0.5 * (kf + kr), delta_nu_hz))
    return row


# ----------------------------------------------------------------------------- scanning
def _prepare(molecule, conf_id, charge, multiplicity):
    """(mol with explicit H and >= 1 conformer, conformer id, embedded?)."""
    if isinstance(molecule, str):
        from .loading import load_molecule
        mol = load_molecule(molecule, charge=charge, multiplicity=multiplicity)
    elif isinstance(molecule, Chem.Mol):
        mol = Chem.Mol(molecule)
        if any(a.GetNumImplicitHs() for a in mol.GetAtoms()):
            mol = Chem.AddHs(mol, addCoords=mol.GetNumConformers() > 0)
    else:
        raise InputError(f"molecule must be a SMILES string or an RDKit Mol, "
                         f"got {type(molecule).__name__}")
    embedded = False
    if mol.GetNumConformers() == 0:
        from rdkit.Chem import rdDistGeom
        params = rdDistGeom.ETKDGv3()
        params.randomSeed = EMBED_SEED
        if rdDistGeom.EmbedMolecule(mol, params) != 0:
            params.useRandomCoords = True
            if rdDistGeom.EmbedMolecule(mol, params) != 0:
                raise InputError(f"could not embed a 3D structure for "
                                 f"{Chem.MolToSmiles(Chem.RemoveHs(mol))}")
        embedded = True
        conf_id = mol.GetConformer().GetId()
    else:
        ids = [c.GetId() for c in mol.GetConformers()]
        if conf_id == -1:
            conf_id = ids[0]
        if conf_id not in ids:
            raise InputError(f"conf_id must be one of {ids}, got {conf_id}")
    return mol, int(conf_id), embedded


def _make_backend(method, mol, solvent, charge, multiplicity, options):
    from .backends import Backend, get_backend
    kw = dict(options)
    if solvent is not None:
        kw["solvent"] = solvent
    if charge is not None:
        kw["charge"] = charge
    if multiplicity is not None:
        kw["multiplicity"] = multiplicity
    if isinstance(method, type) and issubclass(method, Backend):
        return method(mol, **kw)
    return get_backend(method, mol, **kw)


def _method_name(method) -> str:
    return method if isinstance(method, str) else getattr(method, "name", str(method))


def _grid(start, stop, step):
    for name, v in (("start", start), ("stop", stop), ("step", step)):
        if not isinstance(v, (int, float, np.integer, np.floating)) or not math.isfinite(v):
            raise InputError(f"{name} must be a finite number of degrees, got {v!r}")
    start, stop, step = float(start), float(stop), float(step)
    if step <= 0:
        raise InputError(f"step must be > 0 degrees, got {step}")
    span = stop - start
    if span <= 0 or span > 360.0 + 1e-9:
        raise InputError(f"stop must be above start by at most 360 degrees, got start={start}, "
                         f"stop={stop}")
    periodic = abs(span - 360.0) < 1e-9
    count = span / step
    if periodic:
        if abs(count - round(count)) > 1e-6:
            raise InputError(f"step must divide 360 degrees for a full-turn scan, got {step}")
        n = int(round(count))
        if n < 4:
            raise InputError(f"a full-turn scan needs at least 4 points (step <= 90), got step={step}")
        angles = start + step * np.arange(n)
    else:
        angles = np.arange(start, stop + 1e-9, step)
        if len(angles) < 4:
            raise InputError(f"a scan needs at least 4 points; start={start}, stop={stop}, "
                             f"step={step} give {len(angles)}")
    return angles, periodic


def _moving_fragment(mol, atoms):
    """The smaller side of the j-k bond (None if the bond is in a ring)."""
    i, j, k, l = atoms
    side_k = _side(mol, k, j)
    if side_k is None:
        return None
    side_j = set(range(mol.GetNumAtoms())) - side_k
    return side_k if len(side_k) <= len(side_j) else side_j


def _walk(mol, method, backend_kw, positions, atoms, targets, convergence, moving, relaxed,
          starts=None):
    """One walk through ``targets``; returns a list of per-point dicts (picklable).

    Each point starts from the previous point's geometry, or from ``starts[idx]`` if given.
    """
    backend = _make_backend(method, mol, **backend_kw)
    pos = None if positions is None else np.array(positions, dtype=float)
    out = []
    for idx, target in enumerate(targets):
        if starts is not None:
            pos = np.array(starts[idx], dtype=float)
        trial = set_dihedral(pos, atoms, target, moving) if moving is not None else pos.copy()
        if not relaxed:
            try:
                res = backend.compute(trial, gradient=False)
                out.append({"energy": res.energy, "converged": True, "message": "",
                            "positions": trial, "angle": dihedral_angle(trial, atoms)})
            except CalculationFailed as exc:
                out.append({"energy": float("nan"), "converged": False, "message": str(exc),
                            "positions": None, "angle": float("nan")})
            continue
        from .optimize import optimize_positions
        try:
            res = optimize_positions(backend, trial, convergence=convergence,
                                     dihedral_constraints=[(atoms, float(wrap_degrees(target)))])
        except CalculationFailed as exc:
            log.warning("scan point %.1f deg failed: %s", target, exc)
            out.append({"energy": float("nan"), "converged": False, "message": str(exc),
                        "positions": None, "angle": float("nan")})
            pos = trial
            continue
        final = np.array(res.positions, dtype=float)
        try:
            angle = dihedral_angle(final, atoms)
        except InputError as exc:  # the optimizer made a bond angle of the dihedral linear
            out.append({"energy": float("nan"), "converged": False, "message": str(exc),
                        "positions": None, "angle": float("nan"),
                        "gradient_calls": int(res.gradient_calls)})
            pos = trial
            continue
        converged = bool(res.converged)
        message = res.message
        if _circular_difference(angle, target) > 1.0:
            converged = False
            message = (f"dihedral reached {angle:.2f} deg, not the target {wrap_degrees(target):.2f}; "
                       + message)
        out.append({"energy": float(res.energy), "converged": converged, "message": message,
                    "positions": final, "angle": angle, "gradient_calls": int(res.gradient_calls)})
        pos = final
    return out


def scan_torsion(molecule, atoms, method="gfn2", solvent=None, start: float = -180.0,
                 stop: float = 180.0, step: float = 15.0, relaxed: bool = True,
                 conf_id: int = -1, convergence: str = "tight", executor=None,
                 unit: str = "kcal/mol", *, charge: int | None = None,
                 multiplicity: int | None = None,
                 hysteresis_threshold: float | None = None, refine: bool = True,
                 **backend_options) -> TorsionProfile:
    """Scan one dihedral angle and return its energy profile.

    Parameters
    ----------
    molecule : str or rdkit.Chem.Mol
        SMILES (or anything :func:`confpop.molecule.load_molecule` reads) or a molecule. Without
        a conformer one is embedded (ETKDG, fixed seed) and relaxed with ``method`` first.
    atoms : (i, j, k, l) ints
        0-based atom indices (RDKit order, hydrogens included) of a bonded chain; the bond
        j-k rotates.
    method : str or Backend subclass
        Energy method: a registered backend name ("gfn2", "mmff94s", "model", ...) or a
        :class:`confpop.backends.Backend` subclass (for a custom potential).
    solvent : str, optional
        Implicit solvent for backends that have one.
    start, stop, step : float, degrees
        Scan grid; stop − start = 360 (the default) is a full turn, which ``step`` must divide.
    relaxed : bool
        True: every other coordinate is optimized under the dihedral constraint, walking up
        and down from the relaxed minimum. False: a rigid scan (the smaller fragment is turned
        about the j-k bond, nothing is optimized).
    conf_id : int
        Starting conformer of ``molecule`` (-1: the first).
    convergence : str
        Optimizer preset ("loose", "normal", "tight", "verytight").
    executor : concurrent.futures.Executor, optional
        If given, the up and down walks of a relaxed scan run as two tasks on it, and the
        points added at extrema one task each (set ``OMP_NUM_THREADS=1`` in its workers, as
        :func:`confpop.execution.local_executor` does). Default: all in this process.
    unit : str
        Energy unit of the profile.
    charge, multiplicity : int, optional
    hysteresis_threshold : float, optional
        Up/down differences above this (``unit``; default 0.5 kcal/mol) are reported.
    refine : bool
        Compute extra points at the fitted minima and maxima that fall between grid points
        (up to two rounds; each started from the computed points on both sides, keeping the
        lower), so extremum energies are computed, not interpolated; coarse grids otherwise
        under- or overshoot near sharp features.
    **backend_options
        Passed to the backend (e.g. ``barrier=`` for the model backend).

    Returns
    -------
    TorsionProfile

    Raises
    ------
    InputError
        Bad atoms (not a bonded chain, out of range), a bad grid, or a rigid scan of a ring bond.
    BackendUnavailable
        The method's engine is not installed.
    CalculationFailed
        The starting structure could not be computed, or every scan point failed.

    Notes
    -----
    A relaxed scan walks the whole circle twice, up and down from the relaxed minimum,
    each point starting from the previous one's geometry (turned rigidly to the new angle),
    and keeps the lower energy at each angle. A neighbouring group that flips during one walk
    shows up as a difference between the walks (hysteresis) and is reported in
    ``profile.hysteresis``. A point whose optimization fails is kept with
    ``converged=False`` (energy NaN if the engine failed) and the walk goes on. Over a
    partial range (stop − start < 360) the scan first walks down from the minimum to
    ``start``, then sweeps up to ``stop`` and back down, and the profile is a cubic spline.

    The cost is about (2 × points + extrema) constrained optimizations; their optimizer
    steps, not the energy method, dominate for force fields and small molecules.

    Examples
    --------
    >>> prof = scan_torsion("CCCC", (0, 1, 2, 3), method="model", step=30, relaxed=False)
    >>> round(prof.full_rotation_barrier(), 1)
    3.0
    """
    unit = normalize_unit(unit)
    mol, conf_id, embedded = _prepare(molecule, conf_id, charge, multiplicity)
    atoms = _check_dihedral_atoms(mol, atoms)
    angles, periodic = _grid(start, stop, step)
    threshold = (convert(HYSTERESIS_KCAL, "kcal/mol", unit) if hysteresis_threshold is None
                 else float(hysteresis_threshold))
    moving = _moving_fragment(mol, atoms)
    if moving is None and not relaxed:
        raise InputError(f"bond {_label(mol, atoms[1])}-{_label(mol, atoms[2])} is in a ring; "
                         "a rigid scan cannot turn it (use relaxed=True over a partial range)")
    if moving is None:
        log.warning("bond %s-%s is in a ring: the scan relies on the optimizer alone",
                    _label(mol, atoms[1]), _label(mol, atoms[2]))
    backend_kw = {"solvent": solvent, "charge": charge, "multiplicity": multiplicity,
                  "options": backend_options}
    # every backend sees the starting conformer alone, as conformer 0 (the model backend
    # takes its reference bond lengths and angles from it)
    mol_walk = Chem.Mol(mol)
    mol_walk.RemoveAllConformers()
    start_conf = Chem.Conformer(mol.GetConformer(conf_id))
    start_conf.SetId(0)
    mol_walk.AddConformer(start_conf, assignId=False)
    backend = _make_backend(method, mol_walk, **backend_kw)
    pos0 = np.array(mol.GetConformer(conf_id).GetPositions())
    calls = 0
    if relaxed or embedded:
        from .optimize import optimize_positions
        res = optimize_positions(backend, pos0, convergence=convergence)
        calls += int(res.gradient_calls)
        if not res.converged:
            log.warning("the starting structure did not converge: %s", res.message)
        pos0 = np.array(res.positions, dtype=float)
    phi0 = dihedral_angle(pos0, atoms)

    n = len(angles)
    if not relaxed:
        pts = _walk(mol_walk, method, backend_kw, pos0, atoms, angles, convergence, moving, False)
        up = down = pts
    else:
        order_up, order_down = _walk_orders(angles, phi0, periodic)
        args = (mol_walk, method, backend_kw, pos0, atoms)
        if executor is None:
            res_up = _walk(*args, angles[order_up], convergence, moving, True)
            res_down = _walk(*args, angles[order_down], convergence, moving, True)
        else:
            fut_up = executor.submit(_walk, *args, angles[order_up], convergence, moving, True)
            fut_down = executor.submit(_walk, *args, angles[order_down], convergence, moving, True)
            res_up, res_down = fut_up.result(), fut_down.result()
        up, down = _scatter(res_up, order_up, n), _scatter(res_down, order_down, n)
        calls += sum(p.get("gradient_calls", 0) for p in res_up + res_down)

    records = []
    for m in range(n):
        u, d = up[m], down[m]
        e_u = u["energy"] if u else np.nan
        e_d = d["energy"] if d else np.nan
        c_u, c_d = bool(u and u["converged"]), bool(d and d["converged"])
        # the lower energy wins, but a converged point beats a lower unconverged one
        take_down = (np.isfinite(e_d) and not (e_u <= e_d)) if c_u == c_d else (c_d and np.isfinite(e_d))
        p = d if take_down else u
        records.append({"angle": float(angles[m]), "energy": p["energy"] if p else np.nan,
                        "converged": bool(p and p["converged"]),
                        "message": p["message"] if p else "not computed",
                        "positions": p["positions"] if p else None,
                        "achieved": p["angle"] if p else np.nan,
                        "up": e_u, "down": e_d, "refined": False})
    if not np.isfinite([r["energy"] for r in records]).any():
        raise CalculationFailed(f"every point of the scan of {atoms} failed; first message: "
                                f"{records[0]['message']}")
    if refine:
        for _ in range(2):
            extra = _refinement(records, periodic, float(start), unit)
            if not extra:
                break
            # start from the computed neighbours on both sides and keep the lower result:
            # after hysteresis the two sides can sit in different basins
            jobs = [(x, pos) for x in extra for pos in _neighbour_geometries(records, x, periodic)]
            if executor is None:
                done = _walk(mol_walk, method, backend_kw, None, atoms, [x for x, _ in jobs],
                             convergence, moving, relaxed, starts=[pos for _, pos in jobs])
            else:
                futures = [executor.submit(_walk, mol_walk, method, backend_kw, None, atoms, [x],
                                           convergence, moving, relaxed, starts=[pos])
                           for x, pos in jobs]
                done = [f.result()[0] for f in futures]
            calls += sum(p.get("gradient_calls", 0) for p in done)
            best: dict = {}
            for (x, _), p in zip(jobs, done):
                old = best.get(x)
                if old is None or _better(p, old):
                    best[x] = p
            for x, p in best.items():
                records.append({"angle": float(x), "energy": p["energy"],
                                "converged": p["converged"], "message": p["message"],
                                "positions": p["positions"], "achieved": p["angle"],
                                "up": p["energy"], "down": p["energy"], "refined": True})
        records.sort(key=lambda r: r["angle"])

    def col(key, dtype=float):
        return np.array([r[key] for r in records], dtype=dtype)

    energy_h, conv = col("energy"), col("converged", bool)
    ok = conv & np.isfinite(energy_h)
    ref = float(np.nanmin(energy_h[ok])) if ok.any() else float(np.nanmin(energy_h))
    factor = convert(1.0, "hartree", unit)
    rel = (energy_h - ref) * factor
    rel_up, rel_down = (col("up") - ref) * factor, (col("down") - ref) * factor
    hyst = []
    if relaxed:
        both = np.isfinite(rel_up) & np.isfinite(rel_down)
        for m in np.flatnonzero(both & (np.abs(rel_up - rel_down) > threshold)):
            hyst.append((float(records[m]["angle"]), float(abs(rel_up[m] - rel_down[m]))))
        if hyst:
            log.warning("scan of %s: the up and down walks differ by more than %.2f %s at %s "
                        "degrees (a neighbouring group changed during the scan)",
                        atoms, threshold, unit, ", ".join(f"{a:g}" for a, _ in hyst))
    positions = np.full((len(records), mol.GetNumAtoms(), 3), np.nan)
    for m, r in enumerate(records):
        if r["positions"] is not None:
            positions[m] = r["positions"]
    tors = _torsion_from_atoms(mol, atoms)
    mol_out = Chem.Mol(mol)
    mol_out.RemoveAllConformers()
    return TorsionProfile(
        atoms=atoms, label=tors.label, angles=col("angle"), energies=rel, unit=unit,
        method=_method_name(method), solvent=solvent, relaxed=bool(relaxed),
        start=float(start), stop=float(stop), step=float(step),
        convergence=convergence if relaxed else "", converged=conv,
        energies_up=rel_up, energies_down=rel_down, hysteresis=tuple(hyst),
        hysteresis_threshold=threshold, messages=tuple(r["message"] for r in records),
        achieved_angles=col("achieved"), refined=col("refined", bool), gradient_calls=int(calls),
        start_angle=float(phi0), reference_energy=ref, positions=positions, mol=mol_out,
        periodic=periodic)


def _refinement(records, periodic, start, unit) -> list[float]:
    """Angles of fitted extrema with no computed point within REFINE_DEG."""
    e = np.array([r["energy"] for r in records], dtype=float)
    phi = np.array([r["angle"] for r in records], dtype=float)
    conv = np.array([r["converged"] for r in records], dtype=bool)
    if np.isfinite(e).sum() < 4:
        return []
    rel = convert(e - np.nanmin(e), "hartree", unit)
    stop = start + 360.0 if periodic else float(np.max(phi))
    prof = TorsionProfile(atoms=(0, 1, 2, 3), label="", angles=phi, energies=rel, unit=unit,
                          converged=conv, start=start, stop=stop, periodic=periodic)
    out = []
    for x, _, _ in prof._extrema(snap=False):
        dist = _circular_difference(phi, x) if periodic else np.abs(phi - x)
        if np.min(dist) > REFINE_DEG:
            out.append(float(_wrap_into(x, start)) if periodic else float(x))
    return out


def _neighbour_geometries(records, x, periodic):
    """Geometries of the nearest computed points below and above the angle x (one or two)."""
    below = above = None
    for r in records:
        if r["positions"] is None:
            continue
        off = float(wrap_degrees(r["angle"] - x)) if periodic else r["angle"] - x
        if off <= 0 and (below is None or off > below[0]):
            below = (off, r["positions"])
        if off >= 0 and (above is None or off < above[0]):
            above = (off, r["positions"])
    out = [p for _, p in (below, above) if p is not None] if below or above else []
    if len(out) == 2 and out[0] is out[1]:
        out = out[:1]
    return out


def _better(new, old) -> bool:
    """Is scan point ``new`` preferable to ``old`` (converged first, then lower energy)?"""
    if bool(new["converged"]) != bool(old["converged"]):
        return bool(new["converged"]) and np.isfinite(new["energy"])
    if not np.isfinite(old["energy"]):
        return bool(np.isfinite(new["energy"]))
    return bool(np.isfinite(new["energy"]) and new["energy"] < old["energy"])


def _walk_orders(angles, phi0, periodic):
    """Index orders of the up and down walks starting at the dihedral ``phi0``."""
    n = len(angles)
    if periodic:
        up = np.argsort(np.mod(angles - phi0, 360.0), kind="stable")
        down = np.argsort(np.mod(phi0 - angles, 360.0), kind="stable")
        return up, down
    # partial range: go down to start first (part of the down walk), then up, then down again
    phi = _wrap_into(phi0, angles[0] - 180.0)
    below = [m for m in range(n) if angles[m] <= phi][::-1]
    up = list(range(n))
    down = below + list(range(n))[::-1]
    return np.array(up, dtype=int), np.array(down, dtype=int)


def _scatter(results, order, n):
    out = [None] * n
    for idx, r in zip(order, results):
        if out[idx] is None or (np.isfinite(r["energy"]) and not
                                (out[idx]["energy"] <= r["energy"])):
            out[idx] = r
    return out


# ----------------------------------------------------------------------------- ensembles
@dataclass(frozen=True, eq=False)
class Interconversion:
    """How two conformers of an ensemble turn into each other about one torsion.

    Attributes
    ----------
    conformers : (i, j) tuple of int
    single_torsion : bool
        False when two or more rotatable torsions differ by more than the threshold; then no
        scan is made and ``profile`` is None.
    torsion_changes : pandas.DataFrame
        Every rotatable torsion: label, atoms, angle_i, angle_j, difference (degrees).
    atoms, label : the scanned dihedral (or the largest change)
    profile : TorsionProfile or None
        The scan from conformer i.
    from_min, to_min, via_max : float, degrees
        The wells of i and j on the profile and the maximum crossed between them.
    barrier_forward, barrier_reverse : float, ``unit``
        i -> j and j -> i (NaN when both land in the same well or no scan was made).
    rates : pandas.DataFrame
        Per temperature: k_forward, k_reverse (s⁻¹), half_life_forward, half_life_reverse (s),
        exchange_regime (with ``delta_nu_hz``).
    message : str
        Plain-language summary.
    note : str
        The barrier caveat (scan energy for ΔG‡).
    """

    conformers: tuple
    single_torsion: bool
    torsion_changes: pd.DataFrame
    atoms: tuple | None
    label: str
    profile: TorsionProfile | None
    from_min: float
    to_min: float
    via_max: float
    barrier_forward: float
    barrier_reverse: float
    rates: pd.DataFrame
    unit: str
    message: str
    note: str


def torsion_changes(ens, i: int, j: int, include_terminal: bool = False) -> pd.DataFrame:
    """Circular differences of every rotatable dihedral between conformers i and j.

    Symmetry-equivalent end atoms (the two ortho carbons of a phenyl, the hydrogens of a
    methyl) are tried in turn and the smallest difference is kept.

    Returns
    -------
    pandas.DataFrame
        Columns label, bond, atoms, angle_i, angle_j, difference (degrees), sorted by
        difference, largest first.
    """
    mol = ens.mol
    pi, pj = ens.positions(i), ens.positions(j)
    rows = []
    for t in rotatable_torsions(mol, include_terminal=include_terminal):
        a_i = dihedral_angle(pi, t.atoms)
        best, a_j_best = 181.0, None
        for ii in t.equivalent_i or (t.atoms[0],):
            for ll in t.equivalent_l or (t.atoms[3],):
                a_j = dihedral_angle(pj, (ii, t.atoms[1], t.atoms[2], ll))
                d = float(_circular_difference(a_i, a_j))
                if d < best:
                    best, a_j_best = d, a_j
        rows.append({"label": t.label, "bond": t.bond, "atoms": t.atoms, "angle_i": a_i,
                     "angle_j": dihedral_angle(pj, t.atoms), "difference": best})
    df = pd.DataFrame(rows, columns=["label", "bond", "atoms", "angle_i", "angle_j", "difference"])
    return df.sort_values("difference", ascending=False, kind="stable").reset_index(drop=True)


def _default_method(ens, method):
    if method is not None:
        return method
    from .backends import available_backends
    level = str(getattr(ens, "method", "") or "").lower()
    return level if level in available_backends() else "gfn2"


def _slow_change(mol, big: pd.DataFrame):
    """The one row of ``big`` (changed torsions) that turns a slow bond (amide C-N, hindered
    biaryl axis; :func:`confpop.species.slow_bonds`), or None when there is not exactly one.

    When conformers differ in several torsions and one of them is slow, that one sets the
    rate: the others relax along a relaxed scan of it and are crossed much faster."""
    from .species import slow_bonds
    slow = {frozenset(b.atoms[1:3]) for b in slow_bonds(mol)}
    rows = [r for r in big.itertuples() if frozenset(r.atoms[1:3]) in slow]
    return rows[0] if len(rows) == 1 else None


def _barrier_caution(mol, atoms, method) -> str:
    """The amide-barrier method caution (issued as a MethodWarning) when a tight-binding
    method scanned an amide, thioamide or carbamate C-N bond; "" otherwise."""
    from .nmr.cautions import amide_barrier_caution, warn_cautions
    from .species import slow_bonds
    bond = frozenset(atoms[1:3])
    kinds = [b.kind for b in slow_bonds(mol) if frozenset(b.atoms[1:3]) == bond]
    if not kinds and _bond_kind(mol, mol.GetBondBetweenAtoms(*atoms[1:3])) == "amide":
        kinds = ["amide"]  # symmetric amides (NMe2) are no species split but still amides
    caution = amide_barrier_caution(method, kinds[0]) if kinds else None
    if caution is None:
        return ""
    warn_cautions([caution], stacklevel=4)
    return " " + caution.message


def _pair_barrier(profile: TorsionProfile, angle_a: float, angle_b: float):
    """Wells of angle_a and angle_b on the profile and the lower of the two paths between them."""
    ext = profile._extrema()
    mins = [(x, e) for x, e, m in ext if m]
    maxes = [(x, e) for x, e, m in ext if not m]
    if not mins:
        return None
    def nearest(a):
        return min(mins, key=lambda t: float(_circular_difference(t[0], a)))
    ma, mb = nearest(angle_a), nearest(angle_b)
    if ma == mb:
        return {"from_min": ma[0], "to_min": mb[0], "via_max": float("nan"),
                "barrier_forward": float("nan"), "barrier_reverse": float("nan"),
                "same_well": True}
    best = None
    arcs = [(ma[0], mb[0])] if not profile.periodic else [(ma[0], mb[0]), (mb[0], ma[0])]
    for lo, hi in arcs:
        span = np.mod(hi - lo, 360.0) if profile.periodic else hi - lo
        inside = []
        for x, e in maxes:
            off = np.mod(x - lo, 360.0) if profile.periodic else x - lo
            if (0 < off < span) if span > 0 else (span < off < 0):
                inside.append((x, e))
        if not profile.periodic and span < 0:
            inside = [(x, e) for x, e in maxes if hi < x < lo]
        if inside:
            top = max(inside, key=lambda t: t[1])
            if best is None or top[1] < best[1]:
                best = top
    if best is None:
        return None
    return {"from_min": ma[0], "to_min": mb[0], "via_max": best[0],
            "barrier_forward": best[1] - ma[1], "barrier_reverse": best[1] - mb[1],
            "same_well": False}


def _pair_rates(barrier, temperatures, unit, delta_nu_hz):
    from . import kinetics
    rows = []
    for t in temperatures:
        if barrier is None or not math.isfinite(barrier["barrier_forward"]):
            rows.append({"temperature": t, "k_forward": float("nan"), "k_reverse": float("nan"),
                         "half_life_forward": float("nan"), "half_life_reverse": float("nan"),
                         **({"exchange_regime": "same well"} if delta_nu_hz is not None else {})})
            continue
        kf = float(kinetics.eyring_rate(barrier["barrier_forward"], t, unit=unit))
        kr = float(kinetics.eyring_rate(barrier["barrier_reverse"], t, unit=unit))
        row = {"temperature": t, "k_forward": kf, "k_reverse": kr,
               "half_life_forward": math.log(2.0) / kf, "half_life_reverse": math.log(2.0) / kr}
        if delta_nu_hz is not None:
            row["exchange_regime"] = str(kinetics.exchange_regime(0.5 * (kf + kr), delta_nu_hz))
        rows.append(row)
    return pd.DataFrame(rows)


def interconversion(ens, i: int, j: int, method=None, temperatures=(298.15,), *,
                    delta_nu_hz: float | None = None, step: float = 30.0,
                    threshold: float = 60.0, convergence: str = "tight", executor=None,
                    unit: str = "kcal/mol", **backend_options) -> Interconversion:
    """Barrier and rates between two conformers that differ mainly in one torsion.

    The rotatable dihedral with the largest circular difference between conformers i and j
    is scanned (relaxed, full turn) from conformer i; the barrier is the lower of the two
    ways round the circle from i's well to j's.

    Parameters
    ----------
    ens : confpop.Ensemble
    i, j : int
        Conformer ids.
    method : str, optional
        Scan method; default the ensemble's ranking level if it is a backend name, else "gfn2".
    temperatures : float or sequence of float, K
    delta_nu_hz : float, optional
        Shift difference for the NMR exchange regime of the rates.
    step : float, degrees
    threshold : float, degrees
        If two or more torsions differ by more than this, the change is not a single-torsion
        interconversion: nothing is scanned and the torsions are reported.
    unit : str

    Returns
    -------
    Interconversion

    Notes
    -----
    The barrier is a scan energy standing in for ΔG‡ (typically ±1 kcal/mol at room
    temperature, a factor ~5 in k).
    """
    unit = normalize_unit(unit)
    temps = check_temperatures(temperatures)
    ids = ens.ids(active=False)
    for name, c in (("i", i), ("j", j)):
        if c not in ids:
            raise InputError(f"{name} must be a conformer id of the ensemble ({ids}), got {c}")
    if i == j:
        raise InputError(f"i and j must be two different conformers, got {i} twice")
    changes = torsion_changes(ens, i, j)
    empty_rates = _pair_rates(None, temps, unit, delta_nu_hz)
    nan = float("nan")
    if changes.empty:
        return Interconversion((i, j), False, changes, None, "", None, nan, nan, nan, nan, nan,
                               empty_rates, unit, "the molecule has no rotatable torsion", "")
    big = changes[changes["difference"] > threshold]
    top = changes.iloc[0]
    relaxing = ""
    if len(big) >= 2:
        listing = ", ".join(f"{r.label} ({r.difference:.0f} deg)" for r in big.itertuples())
        slow = _slow_change(ens.mol, big)
        if slow is None:
            msg = (f"conformers {i} and {j} differ in {len(big)} torsions by more than "
                   f"{threshold:g} degrees ({listing}) and not in exactly one slow bond "
                   "(amide C-N, hindered biaryl axis): not a single-torsion interconversion")
            return Interconversion((i, j), False, changes, tuple(top["atoms"]), top["label"],
                                   None, nan, nan, nan, nan, nan, empty_rates, unit, msg, "")
        # the slow bond sets the rate; the other torsions relax along its relaxed scan
        top = changes[changes["label"] == slow.label].iloc[0]
        relaxing = (f"; conformers {i} and {j} also differ in "
                    + ", ".join(r.label for r in big.itertuples() if r.label != slow.label)
                    + ", which relax along the scan of the slow bond")
    method = _default_method(ens, method)
    profile = scan_torsion(ens.mol, tuple(top["atoms"]), method=method,
                           solvent=getattr(ens, "solvent", None), step=step, conf_id=i,
                           convergence=convergence, executor=executor, unit=unit,
                           charge=getattr(ens, "charge", None),
                           multiplicity=getattr(ens, "multiplicity", None), **backend_options)
    pb = _pair_barrier(profile, profile.start_angle, top["angle_j"])
    rates = _pair_rates(pb, temps, unit, delta_nu_hz)
    if pb is None:
        msg = f"the scan of {top['label']} shows no barrier between the wells"
        pb = {"from_min": nan, "to_min": nan, "via_max": nan, "barrier_forward": nan,
              "barrier_reverse": nan}
    elif pb["same_well"]:
        msg = (f"conformers {i} and {j} fall into the same well of {top['label']} on the "
               f"{method} scan (largest change {top['difference']:.0f} deg)")
    else:
        msg = (f"{top['label']}: {i} -> {j} over {pb['barrier_forward']:.2f} {unit} "
               f"(reverse {pb['barrier_reverse']:.2f}) via {pb['via_max']:.0f} deg")
    msg += relaxing
    caution = _barrier_caution(ens.mol, tuple(top["atoms"]), method)
    return Interconversion((i, j), True, changes, tuple(top["atoms"]), top["label"], profile,
                           pb["from_min"], pb["to_min"], pb["via_max"], pb["barrier_forward"],
                           pb["barrier_reverse"], rates, unit, msg, profile.note + caution)


def exchange_summary(ens, temperatures, *, delta_nu_hz: float, method=None,
                     step: float = 30.0, threshold: float = 60.0, convergence: str = "tight",
                     executor=None, unit: str = "kcal/mol", **backend_options) -> pd.DataFrame:
    """For every pair of conformers that differ in one torsion: do they average on the NMR time scale?

    Each such torsion is scanned once from the lower-energy conformer of the pair (scans are
    reused between pairs that share torsion and starting conformer). Pairs that differ in
    several torsions of which exactly one is a slow bond (amide C-N, hindered biaryl axis;
    :mod:`confpop.species`) are handled through that bond: it is scanned once per species
    from the species' lowest conformer, the other torsions relaxing along the scan.

    Parameters
    ----------
    ens : confpop.Ensemble
    temperatures : float or sequence of float, K
    delta_nu_hz : float
        Shift difference (Hz) of the exchanging sites; the mean directional rate
        (k_ab + k_ba) / 2 is compared with the coalescence rate by
        :func:`confpop.kinetics.exchange_regime`.
    method, step, threshold, convergence, executor, unit
        As for :func:`interconversion`.

    Returns
    -------
    pandas.DataFrame
        One row per pair and temperature: conformer_a, conformer_b, torsion, atoms,
        temperature, barrier_ab, barrier_ba (``unit``), k_ab, k_ba, k_exchange (s⁻¹),
        regime ("fast", "intermediate", "slow"; "same well" when the scan joins them), note.
        ``attrs["note"]`` holds the barrier caveat; ``attrs["skipped"]`` the pairs that
        differ in more than one torsion and not in exactly one slow bond, as (a, b, torsion
        labels, reason).
    """
    from . import kinetics
    unit = normalize_unit(unit)
    temps = check_temperatures(temperatures)
    method = _default_method(ens, method)
    ids = ens.ids()
    try:
        order = ens.energies(unit=unit)
        rank = {int(c): float(order.loc[c]) for c in order.index}
    except Exception:  # ensembles without energies: keep id order
        rank = {c: float(c) for c in ids}
    from .species import species_table
    species = species_table(ens, ids=ids)["species"].to_dict()
    scans: dict = {}
    rows, skipped = [], []
    note = ""
    for a_pos, a in enumerate(ids):
        for b in ids[a_pos + 1:]:
            changes = torsion_changes(ens, a, b)
            big = changes[changes["difference"] > threshold]
            via_slow = False
            if len(big) > 1:
                slow = _slow_change(ens.mol, big)
                if slow is None:
                    reason = ("same species: several fast torsions (fast by bond class)"
                              if species[a] == species[b] else
                              "several slow bonds differ: scan each with scan_torsion")
                    skipped.append((a, b, list(big["label"]), reason))
                    continue
                big = big[big["label"] == slow.label]
                via_slow = True
            if len(big) != 1:
                continue
            first, second = (a, b) if rank.get(a, a) <= rank.get(b, b) else (b, a)
            a_starts = first == a
            tors = big.iloc[0]
            if via_slow:
                # one scan per slow bond and species, from the species' lowest conformer
                same = [c for c in ids if species[c] == species[first]]
                first = min(same, key=lambda c: rank.get(c, c))
                if species[a] != species[b]:
                    a_starts = species[a] == species[first]
            key = (tuple(tors["atoms"]), first)
            if key not in scans:
                scans[key] = scan_torsion(ens.mol, tuple(tors["atoms"]), method=method,
                                          solvent=getattr(ens, "solvent", None), step=step,
                                          conf_id=first, convergence=convergence,
                                          executor=executor, unit=unit,
                                          charge=getattr(ens, "charge", None),
                                          multiplicity=getattr(ens, "multiplicity", None),
                                          **backend_options)
            prof = scans[key]
            note = prof.note
            target = dihedral_angle(ens.positions(second), tors["atoms"])
            pb = _pair_barrier(prof, prof.start_angle, target)
            if pb is not None and not a_starts:  # report a -> b
                pb = {**pb, "barrier_forward": pb["barrier_reverse"],
                      "barrier_reverse": pb["barrier_forward"]}
            for t in temps:
                row = {"conformer_a": a, "conformer_b": b, "species_a": species[a],
                       "species_b": species[b], "torsion": tors["label"],
                       "atoms": tuple(tors["atoms"]), "temperature": t}
                if pb is None or pb["same_well"]:
                    row.update(barrier_ab=float("nan"), barrier_ba=float("nan"),
                               k_ab=float("nan"), k_ba=float("nan"), k_exchange=float("nan"),
                               regime="same well",
                               note=f"the {method} scan puts both conformers in one well")
                else:
                    kab = float(kinetics.eyring_rate(pb["barrier_forward"], t, unit=unit))
                    kba = float(kinetics.eyring_rate(pb["barrier_reverse"], t, unit=unit))
                    row.update(barrier_ab=pb["barrier_forward"], barrier_ba=pb["barrier_reverse"],
                               k_ab=kab, k_ba=kba, k_exchange=kab + kba,
                               regime=str(kinetics.exchange_regime(0.5 * (kab + kba), delta_nu_hz)),
                               note=(f"slow bond scanned from conformer {first}; the other "
                                     "changed torsions relax along it" if via_slow else ""))
                rows.append(row)
    cols = ["conformer_a", "conformer_b", "species_a", "species_b", "torsion", "atoms",
            "temperature", "barrier_ab", "barrier_ba", "k_ab", "k_ba", "k_exchange", "regime",
            "note"]
    out = pd.DataFrame(rows, columns=cols)
    note = note or BARRIER_NOTE.format(kind="relaxed", method=method, extra="")
    for atoms in dict.fromkeys(k[0] for k in scans):
        caution = _barrier_caution(ens.mol, atoms, method)
        if caution and caution not in note:
            note += caution
    out.attrs["note"] = note
    out.attrs["skipped"] = skipped
    return out


# ----------------------------------------------------------------------------- barrier correction
@dataclass(frozen=True)
class BarrierCorrection:
    """A scan barrier recomputed with single points at another level.

    Attributes
    ----------
    label : str
        The scanned dihedral.
    scan_method, method : str
        The level of the scan and of the single points.
    minimum_angle, maximum_angle : float, degrees
        The computed scan points used (the well's lowest point and the highest point of the
        path to the other well).
    barrier_scan, barrier : float, ``unit``
        E(max) - E(min) at the scan level and at ``method``, both at the scan geometries.
    correction : float, ``unit``
        barrier - barrier_scan: add it to the scan's barriers between these wells.
    unit : str
    note : str
    """

    label: str
    scan_method: str
    method: str
    minimum_angle: float
    maximum_angle: float
    barrier_scan: float
    barrier: float
    correction: float
    unit: str
    note: str


def rescore_barrier(profile: TorsionProfile, angle_from: float | None = None,
                    angle_to: float | None = None, method="dft", *, charge: int | None = None,
                    multiplicity: int | None = None, unit: str = "kcal/mol",
                    **backend_options) -> BarrierCorrection:
    """Recompute a scan barrier with single points at another level (e.g. DFT).

    The scan's computed geometries at the bottom of the starting well and at the top of the
    path to the other well are recomputed with ``method``; the barrier at that level at the
    scan-level geometries corrects the scan barrier for the scan method's error (for amide
    C-N bonds GFN2-xTB is 1.4-3.2 kcal/mol low). Geometries are not re-optimized, so the
    corrected barrier is an estimate: the maximum at the new level may lie elsewhere.

    Parameters
    ----------
    profile : TorsionProfile
        A relaxed scan with geometries (from :func:`scan_torsion`).
    angle_from, angle_to : float, degrees, optional
        Dihedrals in the two wells (default: the scan's starting minimum, and the other
        well with the lowest barrier from it).
    method : str
        Single-point level (default "dft"; any backend name).
    charge, multiplicity : int, optional
    unit : str
    **backend_options
        Passed to the backend (``basis``, ``functional``, ``solvent``, ...).

    Returns
    -------
    BarrierCorrection

    Raises
    ------
    InputError
        When the profile holds no geometries or no barrier separates the wells.
    """
    unit = normalize_unit(unit)
    if profile.positions is None or profile.mol is None:
        raise InputError("rescore_barrier needs a scan with geometries (from scan_torsion)")
    start = profile.start_angle if angle_from is None else float(angle_from)
    if start is None:
        raise InputError("angle_from is needed: this profile has no starting minimum")
    if angle_to is None:
        best = None
        for x, e, is_min in profile._extrema():
            if not is_min or float(_circular_difference(x, start)) < 1.0:
                continue
            pb = _pair_barrier(profile, start, x)
            if pb and not pb["same_well"] and (best is None or pb["barrier_forward"] < best["barrier_forward"]):
                best = pb
        pb = best
    else:
        pb = _pair_barrier(profile, start, float(angle_to))
    if pb is None or pb["same_well"]:
        raise InputError(f"no barrier separates the wells on the scan of {profile.label}")
    ok = np.array([np.all(np.isfinite(p)) for p in profile.positions]) & np.isfinite(profile.energies)
    angles = np.asarray(profile.achieved_angles if profile.achieved_angles is not None else profile.angles)

    def nearest(target, pick):
        d = np.array([float(_circular_difference(a, target)) for a in angles])
        window = ok & (d <= max(profile.step, 1.0) * 1.01)
        if not window.any():
            window = ok & (d == d[ok].min())
        idx = np.flatnonzero(window)
        return int(idx[pick(profile.energies[idx])])

    i_min = nearest(pb["from_min"], np.argmin)
    i_max = nearest(pb["via_max"], np.argmax)
    backend = _make_backend(method, profile.mol, backend_options.pop("solvent", profile.solvent),
                            charge, multiplicity, backend_options)
    e_min = backend.compute(profile.positions[i_min], gradient=False).energy
    e_max = backend.compute(profile.positions[i_max], gradient=False).energy
    barrier = float(convert(e_max - e_min, "hartree", unit))
    scan = float(profile.energies[i_max] - profile.energies[i_min])
    note = (f"single points ({_method_name(method)}) at the {profile.method} scan geometries of "
            f"{angles[i_min]:.0f} and {angles[i_max]:.0f} degrees; not re-optimized")
    return BarrierCorrection(profile.label, profile.method, _method_name(method),
                             float(angles[i_min]), float(angles[i_max]), scan, barrier,
                             barrier - scan, unit, note)
