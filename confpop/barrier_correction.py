"""A scan barrier rescored with a better method at the scan's extrema."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .geometry import _circular_difference
from .interconversion import _pair_barrier
from .torsion_profile import TorsionProfile
from .torsion_scan import _make_backend, _method_name
from .units import convert, normalize_unit

__all__ = ["BarrierCorrection", "rescore_barrier"]


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
