"""Bonds perceived from the interatomic distances of one conformer.

Used by the XYZ reader (frames must show the bonds of the first frame) and by the check that
an optimization kept every bond (:func:`confpop.prune.integrity_problems`).
"""

from __future__ import annotations

import numpy as np
from rdkit import Chem
from scipy.spatial import cKDTree

from .chem_helpers import _PT, _get_conformer
from .errors import InputError

__all__ = ["bond_graph_from_coordinates", "BOND_TOLERANCE"]


#: default relative tolerance of :func:`bond_graph_from_coordinates`: two atoms are bonded when
#: closer than (1 + 0.3) times the sum of their covalent radii, the factor 1.3 that RDKit's
#: ``rdDetermineBonds.DetermineConnectivity`` uses by default (common practice).
BOND_TOLERANCE = 0.3


def bond_graph_from_coordinates(mol: Chem.Mol, conf_id: int = -1, tolerance: float = BOND_TOLERANCE
                                ) -> set[tuple[int, int]]:
    """Bonds perceived from the interatomic distances of one conformer.

    Atoms i and j are bonded when d_ij <= (1 + tolerance) (r_i + r_j), with r the covalent
    radii of RDKit's periodic table (``GetRcovalent``).

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with at least one conformer.
    conf_id : int, default -1
        Conformer id (-1: the first conformer).
    tolerance : float, default 0.3
        Relative tolerance on the sum of covalent radii. The default gives the factor 1.3 of
        RDKit's ``DetermineConnectivity``: a C-C bond is recognized up to 1.98 angstrom, a
        C-H bond up to 1.39 angstrom, while 1,3 neighbours (C...C about 2.5 angstrom) stay
        unbonded.

    Returns
    -------
    set of (int, int)
        Pairs of atom indices (i < j). Compare with the molecule's bonds,
        ``{tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}``.

    Raises
    ------
    InputError
        If ``mol`` has no such conformer or ``tolerance`` is not in [0, 1).

    Examples
    --------
    >>> from rdkit.Chem import AllChem
    >>> from confpop import load_molecule
    >>> mol = load_molecule("CO")
    >>> AllChem.EmbedMolecule(mol, randomSeed=1)
    0
    >>> sorted(bond_graph_from_coordinates(mol, 0))
    [(0, 1), (0, 2), (0, 3), (0, 4), (1, 5)]
    """
    try:
        tolerance = float(tolerance)
    except (TypeError, ValueError):
        raise InputError(f"tolerance must be a number, got {tolerance!r}") from None
    if not 0.0 <= tolerance < 1.0:
        raise InputError(f"tolerance must be in [0, 1) (a relative tolerance on the sum of "
                         f"covalent radii), got {tolerance}")
    conf = _get_conformer(mol, conf_id, "bond_graph_from_coordinates")
    positions = np.asarray(conf.GetPositions(), dtype=float)
    if len(positions) < 2:
        return set()
    radii = np.array([_PT.GetRcovalent(a.GetAtomicNum()) for a in mol.GetAtoms()])
    # candidate pairs from a k-d tree (no n x n matrix for large molecules), then the
    # pair-specific limit
    pairs = cKDTree(positions).query_pairs(r=(1.0 + tolerance) * 2.0 * radii.max(),
                                           output_type="ndarray")
    if len(pairs) == 0:
        return set()
    i_idx, j_idx = pairs[:, 0], pairs[:, 1]
    distances = np.linalg.norm(positions[i_idx] - positions[j_idx], axis=1)
    keep = distances <= (1.0 + tolerance) * (radii[i_idx] + radii[j_idx])
    return {(int(min(i, j)), int(max(i, j))) for i, j in zip(i_idx[keep], j_idx[keep])}
