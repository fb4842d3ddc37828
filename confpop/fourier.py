"""The periodic fit of a torsion profile and its extrema.

The profile is fitted with a Fourier series

    V(φ) = c + Σₙ Vₙ/2 [1 − cos(nφ − γₙ)],   n = 1 … N (N ≤ 6, limited by the point count),

by linear least squares on cos(nφ) and sin(nφ); minima and maxima come from the fit
(refined with :func:`scipy.optimize.minimize_scalar`), so they are not tied to the grid.
"""

from __future__ import annotations

import numpy as np


__all__: list[str] = []


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
