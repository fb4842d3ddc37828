"""Model Hessians: a cheap first guess of the second derivatives for a quasi-Newton optimizer.

Lindh's model (Lindh et al. 1995) sums stretch, bend and torsion terms over *all* pairs,
triples and quadruples of atoms, each weighted by how strongly the atoms interact, judged
from their distance alone:

    rho_ij = exp(alpha_ij (r_ref,ij^2 - r_ij^2))
    H = sum_ij k_r rho_ij g_ij g_ij^T + sum_ijk k_phi rho_ij rho_jk g_ijk g_ijk^T
        + sum_ijkl k_tau rho_ij rho_jk rho_kl g_ijkl g_ijkl^T

with g the Cartesian gradient of the distance, angle or dihedral. Every term is an outer
product with a positive weight, so H is positive semi-definite (zero only along overall
translations and rotations). Unlike a diagonal guess on bonded coordinates it couples atoms
that are close but not bonded (the folded chains of flexible molecules).

Parameters (atomic units; rows of the periodic table 1 = H-He, 2 = Li-Ne, 3 = Na and beyond,
as the paper's table; its third row is used for heavier elements):
k_r = 0.45, k_phi = 0.15, k_tau = 0.005; alpha (bohr^-2) 1.0 (1-1), 0.3949 (1-2, 1-3),
0.28 (2-2, 2-3, 3-3); r_ref (bohr) 1.35 (1-1), 2.10 (1-2), 2.53 (1-3), 2.87 (2-2),
3.40 (2-3, 3-3). Source: Lindh et al. 1995, Table 1 (values from memory, checked against
an independent open-source implementation's constants: the same k and alpha, C-C r_ref
2.87 bohr).

References
----------
R. Lindh, A. Bernhardsson, G. Karlstrom, P.-A. Malmqvist, Chem. Phys. Lett. 1995, 241, 423,
doi:10.1016/0009-2614(95)00646-L.

Examples
--------
>>> import numpy as np
>>> h = lindh_hessian([8, 1, 1], np.array([[0., 0., 0.], [1.81, 0., 0.], [-0.45, 1.75, 0.]]))
>>> h.shape
(9, 9)
>>> bool(np.allclose(h, h.T))
True
"""

from __future__ import annotations

import numpy as np

__all__ = ["lindh_hessian", "lindh_weights"]

_K_STRETCH, _K_BEND, _K_TORSION = 0.45, 0.15, 0.005
_ALPHA = np.array([[1.0, 0.3949, 0.3949], [0.3949, 0.28, 0.28], [0.3949, 0.28, 0.28]])
_R_REF = np.array([[1.35, 2.10, 2.53], [2.10, 2.87, 3.40], [2.53, 3.40, 3.40]])
# terms whose weight (the product of the rho's) is below this are left out: their largest
# contribution is below 0.45e-4 (stretch), 0.15e-4 (bend), 0.005e-4 (torsion) hartree/bohr^2
# per unit coordinate gradient, small against the smallest terms kept
_CUTOFF = 1e-4
# atoms are partners of a bend or torsion only if their rho is at least this (a product of
# rho's each at most ~3, a triple bond, cannot reach _CUTOFF otherwise)
_PARTNER = _CUTOFF / 10.0
# bends within ~0.6 degrees of linear carry no term (the bend plane is undefined)
_SIN2_LINEAR = 1e-4


def _rows(numbers) -> np.ndarray:
    z = np.asarray(numbers, dtype=int)
    return np.where(z <= 2, 0, np.where(z <= 10, 1, 2))


def lindh_weights(numbers, positions_bohr) -> np.ndarray:
    """(n_atoms, n_atoms) array of rho_ij (zero on the diagonal)."""
    x = np.asarray(positions_bohr, dtype=float).reshape(-1, 3)
    rows = _rows(numbers)
    r2 = np.sum((x[:, None, :] - x[None, :, :]) ** 2, axis=2)
    rho = np.exp(_ALPHA[rows[:, None], rows[None, :]]
                 * (_R_REF[rows[:, None], rows[None, :]] ** 2 - r2))
    np.fill_diagonal(rho, 0.0)
    return rho


def _accumulate(n_atoms, atoms, grads, weights):
    """sum over terms of w g g^T, with g the term's Cartesian gradient (3 n_atoms)."""
    size = 3 * n_atoms
    index = (3 * atoms[:, :, None] + np.arange(3)).reshape(len(atoms), -1)
    g = grads.reshape(len(atoms), -1)
    blocks = weights[:, None, None] * g[:, :, None] * g[:, None, :]
    flat = index[:, :, None] * size + index[:, None, :]
    return np.bincount(flat.ravel(), blocks.ravel(), minlength=size * size).reshape(size, size)


def _bend_gradients(x, t):
    u_vec, v_vec = x[t[:, 0]] - x[t[:, 1]], x[t[:, 2]] - x[t[:, 1]]
    lu, lv = np.linalg.norm(u_vec, axis=1), np.linalg.norm(v_vec, axis=1)
    u, v = u_vec / lu[:, None], v_vec / lv[:, None]
    cos = np.clip(np.sum(u * v, axis=1), -1.0, 1.0)
    sin2 = 1.0 - cos ** 2
    sin = np.sqrt(np.maximum(sin2, 1e-12))
    # d theta / d x_i = (cos u - v) / (|u| sin), likewise for k
    gi = (cos[:, None] * u - v) / (lu * sin)[:, None]
    gk = (cos[:, None] * v - u) / (lv * sin)[:, None]
    return np.stack([gi, -(gi + gk), gk], 1), sin2 > _SIN2_LINEAR


def _torsion_gradients(x, q):
    b1 = x[q[:, 1]] - x[q[:, 0]]
    b2 = x[q[:, 2]] - x[q[:, 1]]
    b3 = x[q[:, 3]] - x[q[:, 2]]
    n1, n2 = np.cross(b1, b2), np.cross(b2, b3)
    n1s, n2s = np.sum(n1 ** 2, axis=1), np.sum(n2 ** 2, axis=1)
    l2s = np.sum(b2 ** 2, axis=1)
    ok = ((n1s > _SIN2_LINEAR * np.sum(b1 ** 2, axis=1) * l2s)
          & (n2s > _SIN2_LINEAR * np.sum(b3 ** 2, axis=1) * l2s))
    n1s, n2s = np.where(ok, n1s, 1.0), np.where(ok, n2s, 1.0)
    l2 = np.sqrt(l2s)
    # Blondel-Karplus form of the dihedral gradient
    gi = -(l2 / n1s)[:, None] * n1
    gl = (l2 / n2s)[:, None] * n2
    f1 = (np.sum(b1 * b2, axis=1) / l2s)[:, None]
    f3 = (np.sum(b3 * b2, axis=1) / l2s)[:, None]
    gj = -gi - f1 * gi + f3 * gl
    gk = -gl + f1 * gi - f3 * gl
    return np.stack([gi, gj, gk, gl], 1), ok


def lindh_hessian(numbers, positions_bohr) -> np.ndarray:
    """Lindh's model Hessian in Cartesian coordinates.

    Parameters
    ----------
    numbers : (n_atoms,) ints
        Atomic numbers.
    positions_bohr : (n_atoms, 3) array, bohr

    Returns
    -------
    (3 n_atoms, 3 n_atoms) array, hartree/bohr^2
        Symmetric and positive semi-definite.
    """
    x = np.asarray(positions_bohr, dtype=float).reshape(-1, 3)
    n = len(x)
    rho = lindh_weights(numbers, x)
    h = np.zeros((3 * n, 3 * n))
    # stretches
    i, j = np.nonzero(np.triu(rho > _CUTOFF, 1))
    if len(i):
        d = x[i] - x[j]
        u = d / np.linalg.norm(d, axis=1)[:, None]
        h += _accumulate(n, np.stack([i, j], 1), np.stack([u, -u], 1),
                         _K_STRETCH * rho[i, j])
    partner = rho > _PARTNER
    # bends a-b-c (b in the middle, a < c)
    a, b, c = np.nonzero(partner.T[:, :, None] & partner[:, None, :]
                         & (np.arange(n)[:, None] < np.arange(n)[None, :])[None, :, :])
    # (the mask is indexed [b, a, c])
    a, b = b, a
    w = rho[a, b] * rho[b, c]
    keep = w > _CUTOFF
    if keep.any():
        t = np.stack([a[keep], b[keep], c[keep]], 1)
        grads, ok = _bend_gradients(x, t)
        h += _accumulate(n, t[ok], grads[ok], _K_BEND * w[keep][ok])
    # torsions a-b-c-d about the b-c axis (each once: b < c)
    quads = []
    for b, c in np.argwhere(np.triu(partner, 1)):
        a = np.nonzero(partner[b])[0]
        d = np.nonzero(partner[c])[0]
        a, d = a[a != c], d[d != b]
        if not len(a) or not len(d):
            continue
        aa, dd = np.repeat(a, len(d)), np.tile(d, len(a))
        w = rho[aa, b] * rho[b, c] * rho[c, dd]
        keep = (w > _CUTOFF) & (aa != dd)
        if keep.any():
            quads.append(np.stack([aa[keep], np.full(keep.sum(), b), np.full(keep.sum(), c),
                                   dd[keep], ], 1))
    if quads:
        q = np.concatenate(quads)
        w = rho[q[:, 0], q[:, 1]] * rho[q[:, 1], q[:, 2]] * rho[q[:, 2], q[:, 3]]
        grads, ok = _torsion_gradients(x, q)
        h += _accumulate(n, q[ok], grads[ok], _K_TORSION * w[ok])
    return 0.5 * (h + h.T)
