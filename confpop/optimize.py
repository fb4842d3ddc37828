"""Geometry optimization on any backend that provides gradients.

The engine is geomeTRIC, driven through its Python classes with a small engine adapter
around a confpop backend: nothing is printed, geomeTRIC's log messages are switched off
while it runs, and its scratch files go to a temporary directory that is removed afterwards.
Most of geomeTRIC's own time went into Python loops over its primitive coordinates (one call
per distance, angle and dihedral, several times per step); confpop evaluates distances,
angles, dihedrals and out-of-plane angles for all primitives at once with numpy, with
geomeTRIC's formulas and edge cases, and inverts G = B B^T by a symmetric eigendecomposition
instead of an SVD. The optimizer takes exactly geomeTRIC's steps (final positions agree to
1e-12 angstrom) in about half the time.

The accelerated coordinate classes live in :mod:`confpop.geometric_fast`, used only with
the geomeTRIC versions they were checked with (other versions: geomeTRIC's own classes and
one warning naming the version).

Initial Hessian (``hessian_guess=``, default :data:`DEFAULT_HESSIAN_GUESS`) and SCF
restarts: geomeTRIC starts from a diagonal guess on its primitive coordinates (Schlegel-type
rules: 0.023 hartree/rad^2 for every dihedral). Lindh's model Hessian
(:mod:`confpop.model_hessian`; Lindh et al. 1995) weights every stretch, bend and torsion
by how close the atoms are, so soft torsions start soft and close non-bonded contacts
couple; projected on the delocalized coordinates it cuts the gradient calls of a GFN2
optimization by about a third (table below). Within one optimization each SCF starts from
the previous step's solution (:meth:`confpop.backends.Backend.continuation`): energies
within 7e-10 hartree of a fresh guess on 8 replayed GFN2 paths of the 31-atom ester (gradients
within 1.5e-5 hartree/angstrom, the size of the SCF tolerance itself: each is ~6e-6 from a
tightly converged SCF), each gradient 1.26-1.29x cheaper.

Measured with ``benchmarks/bench_search.py`` (GFN2-xTB, xtb-python, one thread; 30
MMFF94s-relaxed ETKDG starts per molecule, the search's own, paths interleaved start by
start on a shared 2-core machine at load 6-8; calls = gradient calls per "tight"
optimization, median (p90); CPU per optimization, median; dE = final energy minus
geomeTRIC "verytight" from the same start):

========================= ===== ============== ============= ============== ============
molecule (atoms)          ref.  geomeTRIC      ``"lindh"``   ``"lindh-      worst dE,
                          path  guess, fresh                 primitive"``   > 0.05 (a)
                                SCF (before)                 (default)
========================= ===== ============== ============= ============== ============
hydroxy-ester (31)        calls 30 (40)        20 (31)       20 (28)        0.000, 0
                          CPU s 0.68           0.43          0.41
ether-amide (35)          calls 34 (54)        24 (38)       24 (38)        0.215, 1
                          CPU s 1.03           0.58          0.69
aryl ester (43)           calls 36 (50)        34 (57)       30 (50)        0.020, 0
                          CPU s 1.57           1.22          1.10
========================= ===== ============== ============= ============== ============

(a) The same for every path: one start of the ether-amide ends, on every path, in a
neighbouring minimum 0.215 kcal/mol above the one "verytight" slides into; no path ended
anywhere else above the reference. ``"lindh-primitive"`` (Lindh's force constants on
geomeTRIC's own primitives, diagonal) is the default: as few calls as the full Cartesian
model or fewer, a lower p90, and no projection to compute. geomeTRIC's own guess stays
selectable (``hessian_guess="geometric"``), as the reference path.

Engines (``engine=``):

- ``"geometric"`` (default): delocalized internal coordinates (DLC) for a molecule in one
  piece, translation-rotation internal coordinates (TRIC) for several fragments (a salt, a
  complex), where TRIC was built to help. For one fragment both take identical steps in the
  gas phase; in implicit solvent the GBSA energy of xtb-python changes with the molecule's
  orientation (+-0.015 kcal/mol over random rotations of a 22-atom amide; exactly 0 in the
  gas phase), so its gradients carry a spurious net torque (~2e-4 vs ~4e-7 hartree) that
  TRIC's rotation coordinates chase: up to 5x more steps (237 vs 48 for a 46-atom chain),
  for an orientation "gain" of 0.01-0.03 kcal/mol that is numerical, not chemical.
- ``"geometric-tric"``: TRIC always (the default of earlier versions).
- ``"geometric-dlc"``: DLC always.
- ``"lbfgs"``: scipy's L-BFGS-B in Cartesian coordinates (a baseline; no constraints).

Measured with ``benchmarks/bench_optimizer.py`` (GFN2-xTB through xtb-python, one thread;
MMFF94s-relaxed ETKDG starts of invented 22-, 31- and 46-atom amide and ester-amide
chains, gas phase and chloroform; candidates interleaved on a shared 2-core machine,
load 3-7; medians per optimization; dE = final energy minus geomeTRIC/TRIC "verytight"
from the same start, worst case, kcal/mol; speed-up = before / candidate in CPU time):

=========================== ===== ====== ===== ======= ======== =====================
candidate ("tight")         calls wall s CPU s engine% worst dE CPU speed-up
=========================== ===== ====== ===== ======= ======== =====================
24 starts (seed 11):
geomeTRIC TRIC, before      45    10.5   7.7   26      0.020    1
``"geometric-tric"``        45    4.9    3.7   52      0.020    2.1 (same steps)
``"geometric"``             37    3.0    2.7   65      0.026    2.9
12 starts (seed 7):
geomeTRIC TRIC, before      48    8.7    6.5   25      0.003    1
``"geometric-tric"``        48    4.2    3.3   51      0.003    2.0
``"geometric"`` (DLC)       40    2.6    2.0   66      0.112    3.2 (b)
``"lbfgs"`` (L-BFGS-B)      84    3.6    3.4   99      1.89     1.9, 7 starts > 0.05
ASE BFGS                    248   12.1   11.4  91      1.07     0.6, 7 starts > 0.05
ASE LBFGS                   260   12.8   12.1  92      1.06     0.5, 7 starts > 0.05
ASE BFGSLineSearch          277   11.2   10.5  93      0.35     0.6, 5 starts > 0.05
ASE FIRE                    384   17.6   14.6  94      2.07     0.4, 8 > 0.05 (a)
ASE PreconLBFGS (Exp)       173   7.0    6.6   89      1.05     1.0, 6 starts > 0.05
=========================== ===== ====== ===== ======= ======== =====================

(a) 3 of 12 not converged in 1000 steps. (b) One start (46 atoms, chloroform) relaxed
into a neighbouring minimum 0.11 kcal/mol above the one TRIC reached after 243 steps: a true
minimum (no imaginary frequency; DLC at "verytight" ends there too; TRIC at "verytight"
started there does not move). Every other start of the default engine ended within
0.03 kcal/mol of the reference. The Cartesian optimizers (ASE's with our five criteria
added to ``fmax``) stop 0.1-2 kcal/mol high on the flat torsions of the 31- and 46-atom
chains; a Cartesian trust-region quasi-Newton with a Lindh model Hessian, tried on the
side, needed 18-24 steps for the 22-atom amide but 265-271 for the 46-atom chain (straight
Cartesian steps cannot follow coupled torsions). geomeTRIC's trust-radius settings stay at
its defaults (a larger initial or maximum trust radius saved 3-4% of the steps).
Constrained optimizations gain as much: a 12-point relaxed dihedral scan of the 22-atom
amide took 36 -> 13 s CPU in the gas phase and 53 -> 12 s in chloroform (same profile to
0.013 kcal/mol).

Convergence presets (geomeTRIC's five criteria must all hold; gradients per atom in
hartree/bohr, displacements in angstrom, energy change in hartree):

=========== ========= ========= ========= ========= =========
preset      energy    grms      gmax      drms      dmax
=========== ========= ========= ========= ========= =========
loose       1e-5      1.7e-3    2.5e-3    6.7e-3    1e-2
normal      1e-6      3e-4      4.5e-4    1.2e-3    1.8e-3
tight       1e-6      1e-4      1.5e-4    4e-4      6e-4
verytight   1e-7      1e-5      1.5e-5    4e-5      6e-5
=========== ========= ========= ========= ========= =========

"tight" (the default) ended within 1e-4 kcal/mol of "verytight" in 9 of 10 GFN2
optimizations of 31- and 46-atom molecules (``benchmarks/bench_optimizer.py``); in the tenth
both presets reached a stationary point with a gradient below 1e-5 hartree/angstrom, tight on
a saddle that verytight happened to slide off (0.17 kcal/mol lower, 0.75 angstrom away).
No gradient criterion tells a flat saddle from a minimum; only a Hessian does.

Dropping the displacement criteria was measured and rejected (``benchmarks/bench_search.py
--paths default,default@tight/drms=1/dmax=1``: 30 MMFF94s-relaxed ETKDG starts per molecule,
GFN2-xTB, Lindh guess and SCF restarts, interleaved, load 5-8). Tight's gradient and energy
criteria alone cut the median gradient calls from 19.5 / 24.5 / 30.5 to 14 / 17.5 / 10
(invented hydroxy-ester 31 atoms, ether-amide 35, aryl ester 43) with final energies within
0.0001-0.0013 kcal/mol (median) of "verytight", but on the aryl ester the stopping point
wanders along flat torsions: RMSD (the duplicate check's atoms) to the "verytight" structure
median 0.030,
largest 0.27 angstrom (13 of 30 starts above 0.05; "tight": largest 0.002), and of 60 other
starts 18 ended where the search's duplicate criteria (0.2 angstrom, 0.05 kcal/mol) no longer
match the "tight" structure of the same start (:func:`confpop.prune.find_duplicates` on the
pooled end structures; the ether-amide: 1 of 60). Two starts in one flat basin could then
be kept as two conformers and the basin's population counted twice. Displacement criteria
3x, 5x and 10x tight's (21, 13 and 11.5 calls on the aryl ester) wander as far (largest
0.27 angstrom), so "tight" stays the search's preset.

Learning the soft modes faster (measured, selectable, not the default): the tail of a tight
optimization is not noise but curvature: on the hydroxy-ester (start 0 of the benchmark) the
softest mode at the minimum has a curvature of 4e-4 hartree per squared delocalized unit
(finite-difference GFN2 Hessian at the "verytight" minimum), Lindh's guess gives it 1e-2,
and BFGS learns it only over five steps whose displacement is mostly along that mode while
the gradient is mostly elsewhere; then two to three modes still 2-3x too stiff take another
five steps. Two changes help, and together they keep the minima:

- ``hessian_guess="lindh-primitive-soft"``: Lindh's dihedral force constants halved
  (:data:`confpop.geometric_fast._SOFT_TORSION_SCALE`; on 8-10 starts of the hydroxy-ester
  0.5 gave median/mean 16/15.5 calls, 0.7 16.5/15.9, 1 (Lindh) 17.5/17.1, 0.25 18/18.3,
  0.1 25.5/25.9);
- the multi-secant (block BFGS) Hessian update over the last 3 steps
  (:func:`confpop.geometric_fast.multisecant_update`, ``_SECANT_PAIRS = 3``; 2, 4 or 6
  steps and looser step-selection limits did no better), unconstrained steps only.

``benchmarks/bench_search.py --starts 30 --paths default,default+msec,lindh-primitive-soft,
lindh-primitive-soft+msec`` (seed 1) and ``--seed 2 --paths
default,lindh-primitive-soft+msec`` (other starts), measured while "default" was
``lindh-primitive`` with the one-step BFGS update (to repeat now: ``--paths
lindh-primitive+bfgs,lindh-primitive+msec,lindh-primitive-soft+bfgs,
lindh-primitive-soft+msec``), each one run, interleaved start by start,
load ~2; calls median (p90); CPU per optimization, median; RMSD = largest RMSD of an end
structure to the "verytight" one of the same start (the duplicate check's atoms):

=================== ========================= =============== =============== ===============
molecule            path                      calls, seed 1   calls, seed 2   CPU s (1 / 2)
=================== ========================= =============== =============== ===============
hydroxy-ester (31)  default                   20 (28)         22 (42)         0.39 / 0.41
                    default+msec              18 (28)                         0.37
                    lindh-primitive-soft      18 (31)                         0.36
                    lindh-primitive-soft+msec 18 (25)         19 (35)         0.35 / 0.36
ether-amide (35)    default                   24 (38)         24 (40)         0.55 / 0.56
                    default+msec              24 (34)                         0.53
                    lindh-primitive-soft      22 (35)                         0.55
                    lindh-primitive-soft+msec 21 (33)         21 (34)         0.52 / 0.50
aryl ester (43)     default                   30 (50)         32 (50)         0.96 / 1.02
                    default+msec              30 (45)                         0.92
                    lindh-primitive-soft      28 (46)                         0.89
                    lindh-primitive-soft+msec 26 (37)         26 (42)         0.80 / 0.87
=================== ========================= =============== =============== ===============

Every path of both runs: no failure, no start more than 0.05 kcal/mol above "verytight"
except the ether-amide start that "default" and "default+msec" end in the neighbouring
minimum 0.215 kcal/mol up (0.26 angstrom away; the soft guess reaches the verytight minimum
there, so that start is the one duplicate-check mismatch against "default", 1 of 30 in both
runs); largest RMSD to "verytight" otherwise 0.001-0.003 angstrom on every path. The goal
of 16 calls at 31 atoms is not reached (18-19), but the two together take 10-19 % fewer
gradient calls and 0.83-0.95x the CPU per optimization to the same minima, and a whole
search (``--search --paths default,lindh-primitive-soft+msec --trials 60 --rounds 1
--move-parents 10 --move-iterations 1``, hydroxy-ester) 0.88x the gradient calls and 0.90x
the CPU with the same 143 conformers: they are the default of unconstrained optimizations
(:data:`DEFAULT_HESSIAN_GUESS`, ``_SECANT_PAIRS = 3``). Constrained optimizations (torsion
scans, held dihedrals; the multi-secant update is off there anyway) keep
:data:`CONSTRAINED_HESSIAN_GUESS` = ``"lindh-primitive"``: relaxed GFN2 scans of five
torsions (``benchmarks/bench_scan_step.py --guesses lindh-primitive,lindh-primitive-soft``)
gave the same profiles (< 0.0005 kcal/mol apart) with the soft guess, and 0.89-0.92x the
gradient calls on four torsions but 1.40x on biphenyl's stiffer conjugated one (402 -> 563;
0.97x over all five; a second run, with gradient calls counted). Tried and dropped (8-10
starts, hydroxy-ester or all three): a curvature probe (one extra gradient 0.02-0.05 delocalized units along the coming
Newton step or H's softest eigenvector once the gradient criteria are within 2-5x) cost more
calls than it saved
(median/mean 17.5-19/17.4-18.6 against 17.5/17.1); an extrapolation along the last
step by its secant changed no result (30 starts); SR1 alone needed 36-48 median calls
(against 19-27); the Farkas-Schlegel SR1/BFGS mix and GDIIS did no better than the block
update (with the indefinite Hessian kept, one aryl-ester start ended 0.47 angstrom away); a
force-field (MMFF94) Hessian put in once near the minimum made it worse (21-32 calls
against 19).

Examples
--------
>>> sorted(CONVERGENCE_PRESETS)
['loose', 'normal', 'tight', 'verytight']
"""

from __future__ import annotations

import contextlib
import functools
import logging
import math
import tempfile
import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .backends.base import Backend
from .errors import CalculationFailed, ConfpopError, ConfpopWarning, InputError
from .geometric_fast import HESSIAN_GUESSES
from .geometry import dihedral_at, wrap_degrees
from .units import ANGSTROM_BOHR, BOHR_ANGSTROM

__all__ = ["OptimizationResult", "optimize_positions", "optimize_structure",
           "CONVERGENCE_PRESETS"]

_log = logging.getLogger(__name__)

#: preset -> geomeTRIC criteria (energy hartree; grms/gmax hartree/bohr; drms/dmax angstrom)
CONVERGENCE_PRESETS: dict[str, dict[str, float]] = {
    "loose": {"energy": 1e-5, "grms": 1.7e-3, "gmax": 2.5e-3, "drms": 6.7e-3, "dmax": 1e-2},
    "normal": {"energy": 1e-6, "grms": 3e-4, "gmax": 4.5e-4, "drms": 1.2e-3, "dmax": 1.8e-3},
    "tight": {"energy": 1e-6, "grms": 1e-4, "gmax": 1.5e-4, "drms": 4e-4, "dmax": 6e-4},
    "verytight": {"energy": 1e-7, "grms": 1e-5, "gmax": 1.5e-5, "drms": 4e-5, "dmax": 6e-5},
}
_CRITERIA = ("energy", "grms", "gmax", "drms", "dmax")
_DEFAULT_MAX_STEPS = 300
_ENGINES = ("geometric", "geometric-tric", "geometric-dlc", "lbfgs")
#: coordinate system of each geomeTRIC engine name
_GEOMETRIC_COORDINATES = {"geometric": "auto", "geometric-tric": "tric", "geometric-dlc": "dlc"}
# False runs geomeTRIC's own (unvectorized) coordinate classes: for benchmarks only
_ACCELERATE_GEOMETRIC = True
#: initial Hessian of the geomeTRIC engines when none is asked for: measured, module docstring
#: ("Learning the soft modes faster")
DEFAULT_HESSIAN_GUESS = "lindh-primitive-soft"
#: the same for constrained optimizations (scans, held dihedrals, frozen atoms): measured,
#: module docstring
CONSTRAINED_HESSIAN_GUESS = "lindh-primitive"


def optimizer_path(constrained: bool = False) -> dict:
    """The default optimizer path as it enters a stored result's key: the initial Hessian
    and the number of steps the Hessian update keeps (constrained steps always one)."""
    from .geometric_fast import _SECANT_PAIRS

    if constrained:
        return {"hessian_guess": CONSTRAINED_HESSIAN_GUESS, "hessian_update_steps": 1}
    return {"hessian_guess": DEFAULT_HESSIAN_GUESS, "hessian_update_steps": int(_SECANT_PAIRS)}


@dataclass(frozen=True)
class OptimizationResult:
    """Outcome of one geometry optimization.

    Attributes
    ----------
    positions : (n_atoms, 3) array, angstrom
        Final geometry (read-only).
    energy : float, hartree
        Energy at ``positions``.
    converged : bool
        Whether every convergence criterion (and every constraint) was met.
    steps : int
        Optimization cycles taken.
    gradient_calls : int
        Energy+gradient evaluations by the backend.
    gradient_norm : float, hartree/angstrom
        Root mean square over all 3N components of the final gradient (not projected:
        constrained or frozen coordinates keep their forces).
    max_gradient : float, hartree/angstrom
        Largest absolute component of the final gradient.
    message : str
        Why the optimizer stopped.
    dipole : (3,) array, e*bohr, or None
        Dipole moment at ``positions`` from the optimizer's last engine call (None when the
        backend gives none): no extra single point is needed for it.
    """

    positions: np.ndarray
    energy: float
    converged: bool
    steps: int
    gradient_calls: int
    gradient_norm: float
    max_gradient: float
    message: str
    dipole: np.ndarray | None = None

    def __post_init__(self):
        pos = np.array(self.positions, dtype=float)
        pos.setflags(write=False)
        object.__setattr__(self, "positions", pos)
        if self.dipole is not None:
            dip = np.array(self.dipole, dtype=float)
            dip.setflags(write=False)
            object.__setattr__(self, "dipole", dip)
        object.__setattr__(self, "energy", float(self.energy))


def _criteria(convergence) -> tuple[str, dict[str, float]]:
    if isinstance(convergence, str):
        key = convergence.strip().lower()
        if key in CONVERGENCE_PRESETS:
            return key, dict(CONVERGENCE_PRESETS[key])
    elif isinstance(convergence, Mapping):
        unknown = sorted(set(convergence) - set(_CRITERIA))
        if unknown:
            raise InputError(f"convergence criteria must use the keys {list(_CRITERIA)}, "
                             f"got {unknown}")
        crit = dict(CONVERGENCE_PRESETS["tight"])
        for key, value in convergence.items():
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise InputError(f"convergence criterion {key!r} must be a number > 0, "
                                 f"got {value!r}")
            crit[key] = float(value)
        return "custom", crit
    raise InputError(f"convergence must be one of {list(CONVERGENCE_PRESETS)} or a mapping of "
                     f"{list(_CRITERIA)}, got {convergence!r}")


def _check_index(value, n_atoms: int, what: str) -> int:
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)):
        raise InputError(f"{what} must be 0-based integer atom indices, got {value!r}")
    if not 0 <= value < n_atoms:
        raise InputError(f"{what}: atom index {value} is out of range for {n_atoms} atoms")
    return int(value)


def _check_constraints(dihedral_constraints, frozen_atoms, n_atoms: int):
    dihedrals = []
    for item in dihedral_constraints or ():
        try:
            atoms, target = item
            atoms = tuple(atoms)
        except (TypeError, ValueError):
            raise InputError("dihedral_constraints must be a sequence of ((i, j, k, l), "
                             f"target_degrees_or_None), got item {item!r}") from None
        if len(atoms) != 4:
            raise InputError(f"a dihedral constraint needs 4 atoms, got {atoms!r}")
        atoms = tuple(_check_index(a, n_atoms, "dihedral_constraints") for a in atoms)
        if len(set(atoms)) != 4:
            raise InputError(f"a dihedral constraint needs 4 different atoms, got {atoms!r}")
        if target is not None:
            if isinstance(target, bool) or not isinstance(target, (int, float, np.floating,
                                                                   np.integer)) \
                    or not math.isfinite(target):
                raise InputError(f"dihedral target must be a finite angle in degrees or None, "
                                 f"got {target!r}")
            target = float(target)
        dihedrals.append((atoms, target))
    frozen = sorted({_check_index(a, n_atoms, "frozen_atoms") for a in (frozen_atoms or ())})
    return dihedrals, frozen


@contextlib.contextmanager
def _geometric_silenced():
    """Switch geomeTRIC's logger off and route Python warnings to our debug log."""
    logger = logging.getLogger("geometric.nifty")
    level, propagate = logger.level, logger.propagate
    logger.setLevel(logging.CRITICAL + 1)
    logger.propagate = False
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            yield
        for w in caught:
            if issubclass(w.category, ConfpopWarning):  # ours (e.g. the version fallback)
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
            else:
                _log.debug("geomeTRIC warning: %s", w.message)
    finally:
        logger.setLevel(level)
        logger.propagate = propagate


def _summary(positions, result, steps, calls, converged, message) -> OptimizationResult:
    grad = np.asarray(result.gradient, dtype=float)
    return OptimizationResult(positions=positions, energy=result.energy, converged=converged,
                              steps=int(steps), gradient_calls=int(calls),
                              gradient_norm=float(np.sqrt(np.mean(grad ** 2))),
                              max_gradient=float(np.max(np.abs(grad))), message=message,
                              dipole=result.dipole)


def optimize_positions(backend: Backend, positions, *, convergence="tight", max_steps=None,
                       dihedral_constraints=None, frozen_atoms=None,
                       engine: str = "geometric",
                       hessian_guess: str | None = None) -> OptimizationResult:
    """Minimize the energy of ``backend``'s molecule starting from ``positions``.

    Parameters
    ----------
    backend : confpop.backends.Backend
        Bound to the molecule; must provide gradients.
    positions : (n_atoms, 3) array, angstrom
        Starting geometry.
    convergence : {"loose", "normal", "tight", "verytight"} or mapping
        A preset (see the module docstring) or a mapping with any of the keys
        ``energy, grms, gmax, drms, dmax`` (geomeTRIC units; missing keys from "tight").
    max_steps : int, optional
        Optimization cycle limit (default 300). Reaching it is reported, not raised.
    dihedral_constraints : sequence of ((i, j, k, l), target_degrees or None), optional
        0-based atoms. ``None`` holds the dihedral at its starting value; a number drives it
        to that value (degrees) and holds it there.
    frozen_atoms : sequence of int, optional
        0-based atoms whose Cartesian positions stay fixed (constraints are met to
        1e-3 angstrom or degree; frozen atoms typically move ~1e-4 angstrom).
    engine : {"geometric", "geometric-tric", "geometric-dlc", "lbfgs"}
        ``"geometric"`` (default): geomeTRIC with delocalized internal coordinates (DLC)
        for a molecule in one piece and translation-rotation internal coordinates (TRIC)
        for several fragments (e.g. a salt or a complex). ``"geometric-tric"`` and
        ``"geometric-dlc"`` force one coordinate system (``"geometric-tric"`` is the
        default of earlier versions). ``"lbfgs"``: scipy's L-BFGS-B in Cartesian
        coordinates (no constraints; stops when the largest gradient component is below
        ``gmax`` or the relative energy change falls below ``energy/|E|``; it can stop
        early on flat torsions, see the module docstring). Case is ignored.
    hessian_guess : {"geometric", "lindh", "lindh-primitive", "lindh-primitive-soft"}, optional
        Initial Hessian of the geomeTRIC engines (default :data:`DEFAULT_HESSIAN_GUESS`,
        with constraints :data:`CONSTRAINED_HESSIAN_GUESS`; see the module docstring):
        ``"geometric"`` is geomeTRIC's own guess (the reference
        path), ``"lindh"`` Lindh's model Hessian over all atoms (:mod:`confpop.model_hessian`),
        ``"lindh-primitive"`` Lindh's force constants on geomeTRIC's primitives,
        ``"lindh-primitive-soft"`` the same with the dihedral force constants halved.

    Returns
    -------
    OptimizationResult

    Raises
    ------
    InputError
        Bad positions, options or constraints; constraints with ``engine="lbfgs"``; a
        backend without gradients.
    CalculationFailed
        The backend failed (e.g. SCF not converged), or geomeTRIC stopped on a structural
        error (e.g. a constrained dihedral became linear).

    Notes
    -----
    Non-convergence is never raised: ``converged`` is False and ``message`` says why. The
    function keeps no state between calls; backend and inputs pickle, so it runs in worker
    processes.

    References
    ----------
    L.-P. Wang, C. Song, J. Chem. Phys. 2016, 144, 214108, doi:10.1063/1.4952956 (TRIC).
    J. Baker, A. Kessi, B. Delley, J. Chem. Phys. 1996, 105, 192, doi:10.1063/1.471864
    (delocalized internal coordinates).
    R. H. Byrd, P. Lu, J. Nocedal, C. Zhu, SIAM J. Sci. Comput. 1995, 16, 1190,
    doi:10.1137/0916069 (L-BFGS-B).
    """
    if not isinstance(backend, Backend):
        raise InputError(f"backend must be a confpop Backend, got {type(backend).__name__}")
    if "gradient" not in backend.capabilities:
        raise InputError(f"backend {backend.name!r} provides no gradient; it cannot optimize")
    n_atoms = len(backend.numbers)
    pos = np.asarray(positions, dtype=float)
    if pos.shape != (n_atoms, 3):
        raise InputError(f"positions must have shape ({n_atoms}, 3), got {pos.shape}")
    if not np.all(np.isfinite(pos)):
        raise InputError("positions contain NaN or infinite values")
    preset, crit = _criteria(convergence)
    if max_steps is None:
        max_steps = _DEFAULT_MAX_STEPS
    if isinstance(max_steps, bool) or not isinstance(max_steps, (int, np.integer)) \
            or max_steps < 1:
        raise InputError(f"max_steps must be an integer >= 1, got {max_steps!r}")
    dihedrals, frozen = _check_constraints(dihedral_constraints, frozen_atoms, n_atoms)
    if not isinstance(engine, str) or engine.lower() not in _ENGINES:
        raise InputError(f"engine must be one of {list(_ENGINES)}, got {engine!r}")
    engine = engine.lower()
    if engine == "lbfgs" and (dihedrals or frozen):
        raise InputError("engine='lbfgs' has no constraints; use engine='geometric' for "
                         "dihedral_constraints or frozen_atoms")
    if hessian_guess is None:
        hessian_guess = CONSTRAINED_HESSIAN_GUESS if (dihedrals or frozen) else \
            DEFAULT_HESSIAN_GUESS
    if not isinstance(hessian_guess, str) or hessian_guess.lower() not in HESSIAN_GUESSES:
        raise InputError(f"hessian_guess must be one of {list(HESSIAN_GUESSES)}, "
                         f"got {hessian_guess!r}")
    hessian_guess = hessian_guess.lower()
    if n_atoms == 1 or len(frozen) == n_atoms:
        result = backend.compute(pos, gradient=True)
        return _summary(pos, result, 0, 1, True, "nothing to optimize")
    # each SCF starts from the previous step's solution (Backend.continuation): the same
    # energies to < 1e-9 hartree, ~1.25x cheaper gradients for GFN2 (module docstring)
    with backend.continuation():
        if engine == "lbfgs":
            return _run_lbfgs(backend, pos, crit, preset, int(max_steps))
        return _run_geometric(backend, pos, crit, preset, int(max_steps), dihedrals, frozen,
                              _GEOMETRIC_COORDINATES[engine], hessian_guess)


@functools.cache
def _geometric_classes():
    """geomeTRIC engine adapter and the accelerated coordinate classes (built on first use).

    The coordinate classes live in :mod:`confpop.geometric_fast` (behind its version
    check); this returns (engine adapter, primitives, delocalized coordinates).
    """
    from .geometric_fast import _accelerated_classes

    fast_primitives, fast_delocalized = _accelerated_classes()[:2]
    return _engine_class(), fast_primitives, fast_delocalized


@functools.cache
def _engine_class():
    """geomeTRIC engine adapter around a confpop backend (built on first use)."""
    from geometric.engine import Engine

    class BackendEngine(Engine):
        """geomeTRIC engine that asks a confpop backend (bohr <-> angstrom at the edge)."""

        def __init__(self, molecule, backend):
            super().__init__(molecule)
            self.backend = backend
            self.results = {}  # coordinate bytes (bohr) -> BackendResult
            self.calls = 0

        def calc_new(self, coords, dirname):
            result = self.backend.compute(coords.reshape(-1, 3) * BOHR_ANGSTROM, gradient=True)
            self.calls += 1
            self.results[coords.tobytes()] = result
            # hartree/angstrom -> hartree/bohr
            return {"energy": result.energy, "gradient": result.gradient.ravel() * BOHR_ANGSTROM}

    return BackendEngine


def _run_geometric(backend, pos, crit, preset, max_steps, dihedrals, frozen, coordinates,
                   hessian_guess):
    from geometric.errors import GeomOptNotConvergedError
    from geometric.molecule import Molecule
    from geometric.optimize import OptParams
    from geometric.prepare import parse_constraints
    from rdkit import Chem

    from .geometric_fast import coordinate_classes, optimizer_class, structural_fallback

    table = Chem.GetPeriodicTable()
    with _geometric_silenced(), tempfile.TemporaryDirectory(prefix="confpop-opt-") as scratch:
        molecule = Molecule()
        molecule.elem = [table.GetElementSymbol(int(z)) for z in backend.numbers]
        molecule.xyzs = [pos.copy()]
        molecule.build_topology()
        lines = []
        held = [atoms for atoms, target in dihedrals if target is None]
        driven = [(atoms, target) for atoms, target in dihedrals if target is not None]
        if frozen or held:
            lines.append("$freeze")
            if frozen:
                lines.append("xyz " + ",".join(str(a + 1) for a in frozen))
            lines += ["dihedral " + " ".join(str(a + 1) for a in atoms) for atoms in held]
        if driven:
            lines.append("$set")
            lines += ["dihedral " + " ".join(str(a + 1) for a in atoms) + f" {target:.10f}"
                      for atoms, target in driven]
        constraints, values = (parse_constraints(molecule, "\n".join(lines)) if lines
                               else (None, None))
        engine_class = _engine_class()
        coordinate_class, accelerated = coordinate_classes(
            hessian_guess, accelerate=_ACCELERATE_GEOMETRIC)
        if coordinates == "auto":
            # One covalent fragment: DLC (TRIC's overall rotations only chase the spurious
            # net torque of GBSA gradients, ~2e-4 hartree vs ~4e-7 in the gas phase: 35
            # vs 24 steps for a 22-atom amide in chloroform). Several fragments: TRIC.
            single = len(molecule.molecules) == 1 and len(Chem.GetMolFrags(backend.mol)) == 1
            coordinates = "dlc" if single else "tric"
        # TRIC: connect=False (each fragment gets translations and rotations);
        # DLC: connect=True (fragments joined by extra bonds)
        ic_options = dict(build=True, connect=coordinates == "dlc", addcart=False,
                          constraints=constraints,
                          cvals=values[0] if values is not None else None)
        try:
            ic = coordinate_class(molecule, **ic_options)
        except AttributeError as exc:
            if not accelerated:
                raise
            # a geomeTRIC internal the accelerated classes use was renamed: say so once and
            # go on with geomeTRIC's own classes
            structural_fallback(exc)
            accelerated = False
            from geometric.internal import DelocalizedInternalCoordinates
            ic = DelocalizedInternalCoordinates(molecule, **ic_options)
        params = OptParams(maxiter=max_steps, convergence_energy=crit["energy"],
                           convergence_grms=crit["grms"], convergence_gmax=crit["gmax"],
                           convergence_drms=crit["drms"], convergence_dmax=crit["dmax"],
                           # Constraints are met to 1e-3 angstrom/degree: frozen atoms move
                           # ~1e-4 angstrom. geomeTRIC's exact enforcement ("enforce")
                           # costs ~4x the optimizer time on butane for no chemical gain.
                           convergence_cmax=1e-3 if constraints else 1e-2)
        engine = engine_class(molecule, backend)
        coords = pos.ravel() * ANGSTROM_BOHR
        # geomeTRIC's Optimizer, or with the accelerated coordinates confpop's subclass
        # (one Hessian eigendecomposition per step: geometric_fast.FastOptimizer)
        optimizer = optimizer_class(accelerated)(coords, molecule, ic, engine, scratch, params,
                                                 print_info=False)
        converged, message = True, f"converged ({preset} criteria)"
        try:
            optimizer.optimizeGeometry()
        except GeomOptNotConvergedError:
            converged = False
            message = (f"not converged: reached max_steps={max_steps} before the {preset} "
                       "criteria were met")
        except ConfpopError:
            raise
        except Exception as exc:  # geomeTRIC's own structural errors
            raise CalculationFailed(f"geomeTRIC optimization failed: "
                                    f"{type(exc).__name__}: {str(exc).strip()}") from exc
        final_x = np.asarray(optimizer.X, dtype=float)
        steps = optimizer.Iteration
    final_pos = final_x.reshape(-1, 3) * BOHR_ANGSTROM  # the factor the engine adapter used
    result = engine.results.get(final_x.tobytes())
    calls = engine.calls
    if result is None:  # not expected: the optimizer ends on an evaluated geometry
        result = backend.compute(final_pos, gradient=True)
        calls += 1
    for atoms, target in driven:
        reached = float(dihedral_at(final_pos, atoms))
        miss = wrap_degrees(reached - target)
        if converged and not abs(miss) <= 0.1:  # NaN: a bond angle ended linear
            converged = False
            message = (f"dihedral {atoms} ended at {reached:.2f} deg, target {target:.2f} deg"
                       if math.isfinite(reached) else
                       f"dihedral {atoms} ended undefined (a bond angle became linear), "
                       f"target {target:.2f} deg")
    return _summary(final_pos, result, steps, calls, converged, message)


def _run_lbfgs(backend, pos, crit, preset, max_steps):
    from scipy.optimize import minimize

    calls = 0
    last = {}

    def energy_gradient(x):
        nonlocal calls
        result = backend.compute(x.reshape(-1, 3), gradient=True)
        calls += 1
        last[x.tobytes()] = result
        return result.energy, result.gradient.ravel()

    start = backend.compute(pos, gradient=True)
    calls += 1
    scale = max(abs(start.energy), 1.0)
    # gmax in hartree/bohr -> hartree/angstrom for the largest Cartesian component
    options = {"maxiter": max_steps, "maxfun": 10 * max_steps,
               "gtol": crit["gmax"] * ANGSTROM_BOHR, "ftol": crit["energy"] / scale}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = minimize(energy_gradient, pos.ravel(), jac=True, method="L-BFGS-B",
                       options=options)
    final = np.asarray(res.x, dtype=float)
    result = last.get(final.tobytes())
    if result is None:
        result = backend.compute(final.reshape(-1, 3), gradient=True)
        calls += 1
    converged = bool(res.success)
    msg = res.message if isinstance(res.message, str) else str(res.message)
    message = (f"converged ({preset} criteria, L-BFGS-B: {msg})" if converged
               else f"not converged: L-BFGS-B stopped after {res.nit} steps: {msg}")
    return _summary(final.reshape(-1, 3), result, res.nit, calls, converged, message)


def optimize_structure(mol, method: str = "gfn2", solvent: str | None = None, *, conf_id=-1,
                       charge=None, multiplicity=None, convergence="tight", max_steps=None,
                       dihedral_constraints=None, frozen_atoms=None, **backend_options):
    """Optimize one conformer of an RDKit molecule and return a new molecule.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens and at least one conformer.
    method : str
        Backend name (see :func:`confpop.backends.available_backends`).
    solvent : str or None
        Implicit solvent for the backend.
    conf_id : int
        Conformer to start from (-1: the default conformer).
    charge, multiplicity : int, optional
        As for :class:`confpop.backends.Backend`.
    convergence, max_steps, dihedral_constraints, frozen_atoms
        As for :func:`optimize_positions`.
    **backend_options
        Passed to the backend (e.g. ``accuracy``).

    Returns
    -------
    rdkit.Chem.Mol
        A new molecule with one conformer (id 0) at the optimized geometry and the
        properties ``energy_hartree`` (float), ``converged`` (bool), ``steps``,
        ``gradient_calls`` (int), ``method`` and ``solvent`` (str; empty in the gas phase)
        and ``optimization_message``.

    Raises
    ------
    InputError
        No conformer, unknown method, bad options.
    CalculationFailed
        The backend or the optimizer failed.
    """
    from rdkit import Chem

    from .backends import get_backend

    if not isinstance(mol, Chem.Mol):
        raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
    if mol.GetNumConformers() == 0:
        raise InputError("mol has no conformer to optimize (embed it first)")
    try:
        conformer = mol.GetConformer(int(conf_id))
    except (ValueError, RuntimeError):
        ids = [c.GetId() for c in mol.GetConformers()]
        raise InputError(f"conf_id must be one of {ids} (or -1), got {conf_id!r}") from None
    backend = get_backend(method, mol, charge=charge, multiplicity=multiplicity,
                          solvent=solvent, **backend_options)
    result = optimize_positions(backend, conformer.GetPositions(), convergence=convergence,
                                max_steps=max_steps, dihedral_constraints=dihedral_constraints,
                                frozen_atoms=frozen_atoms)
    out = Chem.Mol(mol)
    out.RemoveAllConformers()
    new_conf = Chem.Conformer(mol.GetNumAtoms())
    for i, xyz in enumerate(result.positions):
        new_conf.SetAtomPosition(i, xyz.tolist())
    new_conf.SetId(0)
    out.AddConformer(new_conf, assignId=False)
    out.SetDoubleProp("energy_hartree", result.energy)
    out.SetBoolProp("converged", result.converged)
    out.SetIntProp("steps", result.steps)
    out.SetIntProp("gradient_calls", result.gradient_calls)
    out.SetProp("method", backend.name)
    out.SetProp("solvent", backend.solvent or "")
    out.SetProp("optimization_message", result.message)
    return out
