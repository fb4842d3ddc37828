"""Geometry primitives used across confpop: dihedral angles, angle wrapping, centring and
the Kabsch superposition RMSD.

One implementation of each, vectorized over leading dimensions, numpy only (no RDKit), so
every module measures a torsion or compares two structures the same way.

Conventions
-----------
Dihedral angles follow the IUPAC sign rule: the angle p0-p1-p2-p3 is positive when,
looking along p1 -> p2, the bond p1-p0 must turn clockwise to eclipse p2-p3. Values lie in
(-180, 180] degrees ((-pi, pi] radians): an exactly antiperiplanar arrangement gives +180,
never -180, whichever side of zero the rounding of the sine term fell on. A dihedral with
no defined value (p1 and p2 on top of each other, or p0 or p3 on the p1-p2 line within
:data:`DEGENERATE_LENGTH`) is NaN, not a number made of rounding noise.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError

__all__ = ["DEGENERATE_LENGTH", "dihedral", "dihedral_at", "dihedral_angle", "set_dihedral",
           "wrap_degrees", "centered", "kabsch_rmsd"]

#: Angstrom. Below this distance of p0 (or p3) from the p1-p2 line, or between p1 and p2,
#: a dihedral is undefined. Coordinates carry about 1e-15 relative rounding, so 1e-8 A is
#: far above noise and far below any real geometry.
DEGENERATE_LENGTH = 1e-8


def dihedral(points, *, degrees: bool = True):
    """Signed dihedral angle of four points.

    Parameters
    ----------
    points : (..., 4, 3) array, angstrom
        p0, p1, p2, p3 along the second-to-last axis; leading dimensions (conformers,
        torsions) are kept.
    degrees : bool
        Degrees in (-180, 180] (default) or radians in (-pi, pi].

    Returns
    -------
    (...) array of float (a numpy float for a single (4, 3) input)
        NaN where the dihedral is undefined (see the module docstring).

    Raises
    ------
    InputError
        If ``points`` is not shaped (..., 4, 3).

    Notes
    -----
    With b0 = p0 - p1, b1 = p2 - p1, b2 = p3 - p2 and n = b1/|b1|, v and w are b0 and b2 with
    their components along n removed; the angle is atan2((n x v) . w, v . w).

    Examples
    --------
    >>> round(float(dihedral([[1, 0, 0], [0, 0, 0], [0, 0, 1], [0, 1, 1]])), 6)
    90.0
    >>> float(dihedral([[1, 0, 0], [0, 0, 0], [0, 0, 1], [-1, -1e-300, 1]]))
    180.0
    """
    p = np.asarray(points, dtype=float)
    if p.ndim < 2 or p.shape[-2:] != (4, 3):
        raise InputError(f"points must be an array of shape (..., 4, 3) (four points in 3D), "
                         f"got shape {p.shape}")
    b0 = p[..., 0, :] - p[..., 1, :]
    b1 = p[..., 2, :] - p[..., 1, :]
    b2 = p[..., 3, :] - p[..., 2, :]
    length = np.linalg.norm(b1, axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        b1n = b1 / length
    v = b0 - np.sum(b0 * b1n, axis=-1, keepdims=True) * b1n
    w = b2 - np.sum(b2 * b1n, axis=-1, keepdims=True) * b1n
    angle = np.arctan2(np.sum(np.cross(b1n, v) * w, axis=-1), np.sum(v * w, axis=-1))
    angle = np.where(angle <= -np.pi, np.pi, angle)
    undefined = ((length[..., 0] < DEGENERATE_LENGTH)
                 | (np.linalg.norm(v, axis=-1) < DEGENERATE_LENGTH)
                 | (np.linalg.norm(w, axis=-1) < DEGENERATE_LENGTH))
    angle = np.where(undefined, np.nan, angle)
    if degrees:
        angle = np.degrees(angle)
    return angle[()]


def dihedral_at(positions, atoms, *, degrees: bool = True):
    """Dihedral angle of the atoms i-j-k-l in one or many structures.

    Parameters
    ----------
    positions : (..., n_atoms, 3) array, angstrom
        One structure or a stack of them (conformers, displaced geometries).
    atoms : (i, j, k, l) ints, 0-based
    degrees : bool
        Degrees (default) or radians; see :func:`dihedral` for range and conventions.

    Returns
    -------
    (...) array of float (a numpy float for one structure)

    Examples
    --------
    >>> import numpy as np
    >>> p = np.array([[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [0, 1.0, 1.5]])
    >>> round(float(dihedral_at(p, (0, 1, 2, 3))), 6)
    90.0
    """
    idx = list(atoms)
    if len(idx) != 4:
        raise InputError(f"a dihedral needs four atoms (i, j, k, l), got {tuple(atoms)!r}")
    return dihedral(np.asarray(positions, dtype=float)[..., idx, :], degrees=degrees)


def wrap_degrees(angle):
    """Map angles in degrees onto (-180, 180] (the dihedral range; 180 stays 180).

    Examples
    --------
    >>> wrap_degrees(-180.0), wrap_degrees(190.0), wrap_degrees(540.0)
    (180.0, -170.0, 180.0)
    """
    a = np.mod(np.asarray(angle, dtype=float) + 180.0, 360.0) - 180.0
    a = np.where(a <= -180.0, a + 360.0, a)
    return float(a) if np.ndim(a) == 0 else a


def centered(points, weights=None) -> np.ndarray:
    """Points (..., n, 3) moved so that their (weighted) mean is at the origin.

    ``weights`` (n,) are e.g. atomic masses (centre of mass); without them the centroid.
    """
    p = np.asarray(points, dtype=float)
    if weights is None:
        return p - p.mean(axis=-2, keepdims=True)
    w = np.asarray(weights, dtype=float)
    return p - (w[:, None] * p).sum(axis=-2, keepdims=True) / w.sum()


def kabsch_rmsd(ref, probes, *, allow_reflection: bool = False):
    """RMSD after the best superposition of each probe onto ``ref`` about the origin.

    Parameters
    ----------
    ref : (n, 3) array, angstrom
    probes : (n, 3) or (n_probes, n, 3) array, angstrom
        Row a of a probe is compared with row a of ``ref``.
    allow_reflection : bool
        False: proper rotations only (det = +1), so a mirror image does not match its
        original. True: also improper ones (det = -1), so it does.

    Returns
    -------
    float for one probe, (n_probes,) array for a stack, angstrom

    Notes
    -----
    Only rotations about the origin are searched: pass both sets through :func:`centered`
    for the usual fit that also removes the translation, or keep a common centre (a
    symmetry operation acts about the centre of mass). With H = P^T R = U S V^T (Kabsch
    1976), the minimal sum of squared distances is |P|^2 + |R|^2 - 2 (s1 + s2 + d s3),
    d = sign det(U V^T) for proper rotations and d = 1 when reflections are allowed.

    References
    ----------
    W. Kabsch, Acta Cryst. A32 (1976) 922, doi:10.1107/S0567739476001873.
    """
    r = np.asarray(ref, dtype=float)
    p = np.asarray(probes, dtype=float)
    single = p.ndim == 2
    if single:
        p = p[None]
    if r.ndim != 2 or r.shape[1] != 3 or p.ndim != 3 or p.shape[1:] != r.shape:
        raise InputError(f"kabsch_rmsd needs ref (n, 3) and probes (n, 3) or (n_probes, n, 3) "
                         f"with the same n, got {r.shape} and {np.shape(probes)}")
    h = np.einsum("pni,nj->pij", p, r)
    u, s, vt = np.linalg.svd(h)
    if allow_reflection:
        trace = s.sum(axis=1)
    else:
        d = np.sign(np.linalg.det(np.matmul(u, vt)))
        trace = s[:, 0] + s[:, 1] + d * s[:, 2]
    msd = (np.sum(r * r) + np.einsum("pni,pni->p", p, p) - 2.0 * trace) / r.shape[0]
    rmsd = np.sqrt(np.clip(msd, 0.0, None))
    return float(rmsd[0]) if single else rmsd


# moved here from torsion.py: the checked dihedral of one structure and the rotation
# that sets it
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
