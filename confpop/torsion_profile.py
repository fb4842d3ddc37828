"""The energy along one dihedral: :class:`TorsionProfile`, with its fit, extrema, barriers
and rates.

Barriers from a scan are differences of electronic (or force-field) energies. They stand in
for the free energy of activation ΔG‡ of the Eyring equation; without zero-point, thermal
and entropy terms that typically errs by about ±1 kcal/mol at room temperature, a factor of
about 5 in rate constants and half-lives.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from rdkit import Chem

from .errors import InputError
from .fourier import _default_order, _design, _extrema_sequence, _fourier_fit
from .geometry import _circular_difference
from .thermo import check_temperatures
from .units import convert, normalize_unit

__all__ = ["TorsionProfile", "BARRIER_NOTE"]


#: default hysteresis threshold (kcal/mol): larger up/down differences are reported
HYSTERESIS_KCAL = 0.5

#: extrema pairs shallower than this (kcal/mol) are treated as fit ripple and merged
MIN_DEPTH_KCAL = 0.1

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

    def _repr_html_(self) -> str:
        from .views import profile_html
        return profile_html(self)

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
