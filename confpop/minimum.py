"""Is an optimized structure a minimum? Find symmetric saddle points and leave them.

A gradient-based optimizer stops wherever the gradient vanishes. When the starting structure
has a mirror plane or a two-fold axis (a force field put an aryl ring eclipsing a C-H, an
ester planar), the gradient along every symmetry-breaking motion is exactly zero, so the
optimizer keeps the symmetry and can stop on a first-order saddle point: the top of a
barrier between a pair of mirror-image (or C2-related) minima. Kept as a conformer it is
counted once, at too high an energy: an axial phenylcyclohexane measured here in the gas
phase (GFN2-xTB) has one imaginary mode (-21 cm^-1, full numerical Hessian) and falls
1.1 kcal/mol to a mirror pair when displaced, so the axial/equatorial gap came out
~1.3 kcal/mol too large.

Optimizers do not stop on *unsymmetric* saddles except by accident (the gradient along the
negative mode is not held at zero there), so the check looks where the risk is: every
optimized conformer that is superposable on itself by a mirror reflection or a proper
rotation that exchanges atoms (within ``symmetry_rmsd``) is displaced off its symmetry
(each rotatable bond turned a little, random signs, plus small random Cartesian noise,
seeded) and re-optimized. A structure that comes back to the same energy was a minimum; one
that ends lower was a saddle, and the lower structure replaces it, with a note in the row.

Why not a curvature probe: the rigid turn of the phenyl ring about its bond has a
*positive* curvature at that saddle (+67 cm^-1 Rayleigh quotient; the negative mode mixes
the turn with a tilt of the ring and overlaps the rigid turn by only 0.77), so a probe along
torsions alone misses it; a full Hessian sees it at 6N gradient calls per conformer.

Measured (``benchmarks/bench_minimum.py``, GFN2-xTB, seed 1, full numerical Hessians of
every final conformer as the arbiter): of 4 saddles kept without the check (axial
phenylcyclohexane -21, planar propanoate in water -32, diphenylmethane -18, trans ethyl
acetate -38 cm^-1) the check left 3; the fourth is the acetyl methyl top eclipsed, 0.028
kcal/mol above its minimum, below ``SADDLE_DROP_KCAL`` and without effect on populations.
Cost: on small rigid molecules whose few conformers are all symmetric the re-optimizations
add 27-160 % to the search's gradient calls (median ~55 %; those searches take 1-25 s);
on flexible molecules few conformers are symmetric: 1-hexanol 1.3 % (1 of 69), triethylene
glycol in water 6.3 % (24 of 379), an aryl ether-amide and propranolol 0 %.

"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from rdkit import Chem

from .errors import InputError
from .geometry import centered, kabsch_rmsd

__all__ = ["soft_directions", "symmetry_of_conformer", "relax_to_minimum", "MinimumOutcome",
           "DEFAULT_KICK", "DEFAULT_SYMMETRY_RMSD"]

log = logging.getLogger(__name__)

#: Largest atomic displacement (angstrom) of the kick off a symmetric structure. Measured
#: (GFN2, bench_minimum.py): 0.05 A missed the planar propanoate saddle (water), 0.1-0.3 A
#: caught it and the axial phenylcyclohexane saddle; 0.2 A needed the fewest gradient calls.
DEFAULT_KICK = 0.2
#: RMSD (angstrom, heavy atoms + polar H) within which a conformer counts as symmetric.
#: Measured on 36 GFN2 conformers of six small molecules (butane, pentane,
#: phenylcyclohexane, propanoate in water, 4-tert-butylphenol in chloroform, diethylene
#: glycol in water): conformer vs its own mirror image 0-0.026 A for the symmetric ones, one
#: near-symmetric at 0.053 A, and >= 0.28 A for every chiral conformer; 0.1 A takes all the
#: symmetric ones and stays a factor of ~3 from the chiral ones.
DEFAULT_SYMMETRY_RMSD = 0.1


def _side(mol: Chem.Mol, j: int, k: int) -> list[int]:
    """Atoms on k's side of the bond j-k (k included)."""
    seen, stack = {k}, [k]
    while stack:
        a = stack.pop()
        for n in mol.GetAtomWithIdx(a).GetNeighbors():
            idx = n.GetIdx()
            if idx not in seen and not (a == k and idx == j):
                seen.add(idx)
                stack.append(idx)
    return sorted(seen)


def _c3_top(mol: Chem.Mol, center: int, other: int) -> bool:
    nbrs = [n for n in mol.GetAtomWithIdx(center).GetNeighbors() if n.GetIdx() != other]
    return (len(nbrs) == 3 and len({n.GetAtomicNum() for n in nbrs}) == 1
            and all(n.GetDegree() == 1 for n in nbrs))


def soft_directions(mol: Chem.Mol, positions, *, include_tops: bool = False
                    ) -> tuple[list[np.ndarray], list[str]]:
    """Torsional displacement directions, one per rotatable bond.

    A rotatable bond here is a single, non-ring bond between two atoms that each have
    another neighbour; the smaller side is turned about the bond axis (displacement
    ω × r per atom, largest move 1 angstrom). C3-symmetric terminal tops (CH3, CF3, NH3+)
    are skipped unless ``include_tops``.

    Returns
    -------
    directions : list of (n_atoms, 3) arrays
    labels : list of str
        "C4-C7" with 1-based atom numbers.
    """
    pos = np.asarray(positions, dtype=float)
    dirs, labels = [], []
    for bond in mol.GetBonds():
        if bond.GetBondType() != Chem.BondType.SINGLE or bond.IsInRing():
            continue
        j, k = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        aj, ak = mol.GetAtomWithIdx(j), mol.GetAtomWithIdx(k)
        if aj.GetDegree() < 2 or ak.GetDegree() < 2:
            continue
        if not include_tops and (_c3_top(mol, j, k) or _c3_top(mol, k, j)):
            continue
        side_k, side_j = _side(mol, j, k), _side(mol, k, j)
        if set(side_k) & set(side_j):  # not a bridge after all
            continue
        pivot, moving = (j, side_k) if len(side_k) <= len(side_j) else (k, side_j)
        other = k if pivot == j else j
        axis = pos[other] - pos[pivot]
        norm = np.linalg.norm(axis)
        if norm < 1e-8:
            continue
        axis /= norm
        d = np.zeros_like(pos)
        d[moving] = np.cross(axis, pos[moving] - pos[pivot])
        biggest = np.linalg.norm(d, axis=1).max()
        if biggest < 1e-6:  # a linear group turning about its own axis
            continue
        dirs.append(d / biggest)
        labels.append(f"{aj.GetSymbol()}{j + 1}-{ak.GetSymbol()}{k + 1}")
    return dirs, labels


def symmetry_of_conformer(mol: Chem.Mol, positions, *, perms=None,
                          tolerance: float = DEFAULT_SYMMETRY_RMSD) -> str:
    """"mirror", "rotation" or "" : whether a conformer is superposable on itself by a
    reflection, or by a proper rotation that exchanges heavy atoms (a C2 axis, say).

    Uses the resonance-aware graph symmetry of :func:`confpop.prune.automorphisms` over
    heavy atoms and polar hydrogens.
    """
    from .prune import automorphisms, best_rmsd, rmsd_atoms

    pos = np.asarray(positions, dtype=float)
    atoms = rmsd_atoms(mol)
    if perms is None:
        perms = automorphisms(mol, atoms)
    mirror = pos.copy()
    mirror[:, 0] *= -1.0
    if best_rmsd(pos, mirror, perms) < tolerance:
        return "mirror"
    order = np.sort(atoms)
    heavy = np.array([mol.GetAtomWithIdx(int(a)).GetAtomicNum() > 1 for a in order])
    moving = np.array([p for p in perms if np.any(p[heavy] != order[heavy])])
    if len(moving):
        probes = centered(pos[moving])
        if kabsch_rmsd(centered(pos[order]), probes, allow_reflection=False).min() < tolerance:
            return "rotation"
    return ""


#: Energy drop (kcal/mol) that marks a re-optimized structure as lower: twice the
#: orientation noise of xtb-python's GBSA energies (+-0.015 kcal/mol, measured here).
SADDLE_DROP_KCAL = 0.03


@dataclass
class MinimumOutcome:
    """What :func:`relax_to_minimum` did to one optimized structure.

    Attributes
    ----------
    positions : (n_atoms, 3) array, angstrom
        The final structure (the input when it was a minimum).
    energy : float, hartree
    symmetry : str
        "mirror", "rotation" or "" (not symmetric: not re-optimized) for the input.
    saddle : bool
        The input was a saddle point: the re-optimized structure lies lower.
    energy_drop : float, kcal/mol
        Input energy minus final energy (0 for a minimum).
    gradient_calls, steps : int
        Spent by the re-optimizations.
    note : str
        Empty for a minimum; otherwise what happened, for the conformer's row.
    """

    positions: np.ndarray
    energy: float
    symmetry: str = ""
    saddle: bool = False
    energy_drop: float = 0.0
    gradient_calls: int = 0
    steps: int = 0
    note: str = ""


def symmetry_breaking_kick(mol: Chem.Mol, positions, *, size: float = DEFAULT_KICK,
                           seed: int = 0) -> np.ndarray:
    """A displacement (angstrom, largest atomic move ``size``) that breaks every symmetry:
    each rotatable bond turned with a random sign, plus random Cartesian noise of a third of
    the size, from a seeded generator."""
    pos = np.asarray(positions, dtype=float)
    rng = np.random.default_rng(seed)
    # methyl tops included: an eclipsed methyl on a mirror plane is a saddle too (the trans
    # ethyl acetate optimized from MMFF94s: -38 cm-1, missed when only heavy rotors turned)
    dirs, _ = soft_directions(mol, pos, include_tops=True)
    d = np.zeros_like(pos)
    for v in dirs:
        d += rng.choice((-1.0, 1.0)) * v
    if dirs:
        d /= np.linalg.norm(d, axis=1).max() or 1.0
    d += rng.normal(scale=1.0 / 3.0, size=pos.shape)
    return size * d / np.linalg.norm(d, axis=1).max()


def relax_to_minimum(backend, positions, energy: float, *, optimize_options: dict | None = None,
                     kick: float = DEFAULT_KICK, seed: int = 0,
                     symmetry_rmsd: float = DEFAULT_SYMMETRY_RMSD,
                     max_attempts: int = 2) -> MinimumOutcome:
    """Re-optimize a symmetric optimized structure from a symmetry-breaking displacement.

    Parameters
    ----------
    backend : confpop.backends.Backend
        Bound to the molecule; provides gradients.
    positions : (n_atoms, 3) array, angstrom
        An optimized structure.
    energy : float, hartree
        Its energy.
    optimize_options : dict, optional
        Keyword arguments for :func:`confpop.optimize.optimize_positions`.
    kick : float, angstrom
        Largest atomic displacement off the symmetric structure.
    seed : int
        Seed of the displacement (reproducible results).
    symmetry_rmsd : float, angstrom
        Tolerance of the symmetry test (:func:`symmetry_of_conformer`).
    max_attempts : int
        A lower structure that is itself symmetric is checked again, at most this often.

    Returns
    -------
    MinimumOutcome
    """
    from .optimize import optimize_positions
    from .prune import automorphisms, rmsd_atoms
    from .units import convert

    if not np.isfinite(kick) or kick <= 0:
        raise InputError(f"kick must be > 0 angstrom, got {kick}")
    mol = backend.mol
    pos = np.asarray(positions, dtype=float)
    perms = automorphisms(mol, rmsd_atoms(mol))
    out = MinimumOutcome(positions=pos, energy=float(energy))
    out.symmetry = symmetry_of_conformer(mol, pos, perms=perms, tolerance=symmetry_rmsd)
    symmetry = out.symmetry
    first = None
    for attempt in range(max_attempts):
        if not symmetry:
            break
        start = out.positions + symmetry_breaking_kick(mol, out.positions, size=kick,
                                                       seed=seed + attempt)
        res = optimize_positions(backend, start, **(optimize_options or {}))
        out.gradient_calls += res.gradient_calls
        out.steps += res.steps
        drop = float(convert(out.energy - res.energy, "hartree", "kcal/mol"))
        if drop <= SADDLE_DROP_KCAL or not res.converged:
            break
        first = first if first is not None else symmetry
        out.saddle = True
        out.positions = np.array(res.positions)
        out.energy = float(res.energy)
        symmetry = symmetry_of_conformer(mol, out.positions, perms=perms,
                                         tolerance=symmetry_rmsd)
    if out.saddle:
        out.energy_drop = float(convert(float(energy) - out.energy, "hartree", "kcal/mol"))
        what = "mirror plane" if first == "mirror" else "symmetry axis"
        out.note = (f"saddle point on a {what}: displaced and re-optimized, "
                    f"{out.energy_drop:.2f} kcal/mol lower")
    return out
