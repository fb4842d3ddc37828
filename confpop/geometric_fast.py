"""geomeTRIC, accelerated: vectorized primitive coordinates, cheaper steps, a model Hessian.

confpop drives geomeTRIC through its internal-coordinate classes. Most of geomeTRIC's own
time went into Python loops over its primitive coordinates (one call per distance, angle
and dihedral, several times per step); the subclasses here evaluate distances, angles,
dihedrals and out-of-plane angles for all primitives at once with numpy, with geomeTRIC's
formulas and edge cases: the same steps (final positions agree to 1e-12 angstrom) in about
half the time. They can also start the optimizer from a model Hessian
(:mod:`confpop.model_hessian`) instead of geomeTRIC's diagonal guess (``hessian_guess``).

What was left of geomeTRIC's own work per step was mostly dense linear algebra done more
often than needed, and :class:`FastOptimizer` with the coordinate classes here does each
once (same algorithm, same decisions, only rounding differs):

- the Hessian: geomeTRIC decomposes the same H in ``update_hessian`` (its lowest
  eigenvalue), again in the next step's ``SortedEigenvalues``, and inverts H + v I by an SVD
  for every trial v of the trust-radius search; one symmetric eigendecomposition, cached by
  H's content, now serves them all (the step is Q diag(1/(lambda + v)) Q^T g);
- G = B B^T: every back-transformation micro-iteration inverted it by a decomposition; it is
  now inverted by Cholesky (LAPACK potrf/potri, about a quarter of an eigendecomposition),
  used only when the inverse's norm proves every eigenvalue above 1e-5, ten times the 1e-6
  below which geomeTRIC's pseudo-inverse drops them (the DLC G of the benchmark molecules:
  lowest eigenvalue 4e-4 to 3e-3); otherwise the eigendecomposition as before;
- primitive values at a micro-iteration's geometry (computed as the end of one iteration
  and again as the start of the next), the Cartesian norm of the step geomeTRIC takes
  (asked twice, choosing it and taking it), the Wilson B matrix's row-by-row copy, and
  geomeTRIC's version (read from package metadata at every optimization).

Measured and the default of unconstrained optimizations (see :mod:`confpop.optimize`): a
multi-secant Hessian update over the last 3 steps (:func:`multisecant_update`,
``_SECANT_PAIRS``) and a softer initial Hessian, ``"lindh-primitive-soft"`` (Lindh's
dihedral constants halved): 10-19 % fewer gradient calls (median, two sets of 30 starts)
to the same minima.

Measured with ``benchmarks/bench_geometric_step.py --starts 10`` (GFN2-xTB, xtb-python,
one thread, the default initial Hessian and SCF restarts; the search's own starts, paths
interleaved start by start on a shared 2-core machine at load 6-7; geomeTRIC's own CPU =
CPU per optimization minus CPU inside xtb-python's calls; floor = gradient calls x one
fresh-guess gradient's CPU):

========================== ===== ====== ========================= ======================
molecule (invented)        atoms steps  geomeTRIC's own CPU,      CPU / floor of the
                                 (med.) ms per step, before ->    optimizations,
                                        after (after / before)    before -> after
========================== ===== ====== ========================= ======================
methoxy-amide (3 starts)   22    18     6.6 -> 3.8 (0.58)         1.55 -> 1.24
hydroxy-ester              31    18     10.3 -> 5.7 (0.56)        1.28 -> 1.05
ether-amide                35    26     14.2 -> 6.7 (0.47)        1.39 -> 1.07
aryl ester                 43    22     14.9 -> 7.4 (0.50)        1.18 -> 0.96
========================== ===== ====== ========================= ======================

The floor is a fresh-guess gradient; inside an optimization each SCF restarts from the last
one and costs less, which is how a ratio can fall below 1. Final energies agree to 1e-9
hartree on every start and gradient calls on 32 of 33. Final positions agree to 1e-12
angstrom on most starts, but GFN2's SCF noise amplifies any rounding: on a few starts the
paths part along flat modes (up to 7e-3 angstrom; the previous acceleration did the same,
to 7e-8 angstrom, on one start), as they would for any change of rounding. With MMFF94 the
paths agree to 1e-8 angstrom (tests). Against geomeTRIC "verytight" minima
(``bench_search.py --starts 30 --paths lindh-primitive+oldsteps,lindh-primitive``, 30
starts of each of the three larger molecules): median (p90) gradient calls unchanged (20
(28), 24 (38), 30 (50)), the same worst energy above the reference on both paths (0.000,
0.215, 0.000 kcal/mol; the 0.215 is the neighbouring minimum described in
:mod:`confpop.optimize`), CPU / floor 1.25 -> 1.06, 1.43 -> 1.10, 1.15 -> 0.97.

The subclasses use geomeTRIC's internals (method names, private attributes such as
``stored_Ginverse`` and ``Prims.Internals``, and a class swap of a live primitive set), which
a new geomeTRIC release may rename. They are therefore used only for the geomeTRIC versions
they were checked with (:data:`SUPPORTED_VERSIONS`); any other version gets geomeTRIC's own
classes and Optimizer (the same optimizer, about three times its step time, geomeTRIC's own
initial Hessian) and one :class:`GeometricVersionWarning` that names the version. A
structural error of the subclasses (a missing attribute) falls back the same way.

Examples
--------
>>> version_supported("1.1.1"), version_supported("2.0")
(True, False)
"""

from __future__ import annotations

import functools
import warnings

import numpy as np

from .errors import ConfpopWarning

__all__ = ["SUPPORTED_VERSIONS", "GeometricVersionWarning", "geometric_version",
           "version_supported", "coordinate_classes", "HESSIAN_GUESSES"]

#: geomeTRIC versions the accelerated classes were checked with: low <= version < high
#: (checked: 1.1.1, the version pinned in pyproject.toml's range; 1.0.x has other internals)
SUPPORTED_VERSIONS = ((1, 1), (1, 2))
#: geomeTRIC drops the eigenvalues of G = B B^T below this from its pseudo-inverse
_G_CUT = 1e-6
#: G is inverted by Cholesky only when its lowest eigenvalue provably exceeds this (10x _G_CUT)
_G_MARGIN = 1e-5
#: geometries whose primitive values are remembered (a back-transformation needs two)
_VALUE_MEMORY = 4
# False: the step work of geomeTRIC's own Optimizer and an eigendecomposition for every G
# inverse (the accelerated classes as they were before); for benchmarks and tests only
_FAST_STEPS = True
#: steps whose secant equations the Hessian update keeps at once (1: geomeTRIC's BFGS update
#: with the last step; more: :func:`multisecant_update`). 3: measured, confpop.optimize's
#: docstring ("Learning the soft modes faster"); constrained steps always use 1
_SECANT_PAIRS = 3
#: largest relative antisymmetric part of S^T Y for a step to join a multi-secant update
_SECANT_ASYMMETRY = 0.1
#: smallest H-orthogonal part of a step (relative) for it to join a multi-secant update
_SECANT_INDEPENDENCE = 0.1
#: initial Hessians: "geometric" = geomeTRIC's own diagonal guess on its primitives
#: (Schlegel-type rules); "lindh" = Lindh's model Hessian over all atoms (Cartesian,
#: projected on the delocalized coordinates); "lindh-primitive" = Lindh's force constants
#: on geomeTRIC's primitives (diagonal); "lindh-primitive-soft" = the same with the dihedral
#: force constants times :data:`_SOFT_TORSION_SCALE`
HESSIAN_GUESSES = ("geometric", "lindh", "lindh-primitive", "lindh-primitive-soft")
#: dihedral force constants of "lindh-primitive-soft" relative to Lindh's 0.005 hartree/rad^2
#: (measured: benchmarks/bench_search.py, see confpop.optimize)
_SOFT_TORSION_SCALE = 0.5


class GeometricVersionWarning(ConfpopWarning):
    """The installed geomeTRIC is not one the accelerated coordinates were checked with."""


@functools.cache
def geometric_version() -> str:
    """The installed geomeTRIC's version string (from the package metadata, read once)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("geometric")
    except PackageNotFoundError:  # an unpackaged checkout
        import geometric
        return str(getattr(geometric, "__version__", "unknown"))


def _release(text: str) -> tuple[int, ...] | None:
    parts = []
    for piece in str(text).split("."):
        digits = ""
        for ch in piece:
            if not ch.isdigit():
                break
            digits += ch
        if not digits:
            break
        parts.append(int(digits))
        if len(digits) != len(piece):
            break
    return tuple(parts) or None


def version_supported(version: str) -> bool:
    """Whether the accelerated classes were checked with this geomeTRIC version."""
    release = _release(version)
    low, high = SUPPORTED_VERSIONS
    return release is not None and low <= release < high


def _warn_fallback(version: str, reason: str) -> None:
    low, high = (".".join(map(str, v)) for v in SUPPORTED_VERSIONS)
    warnings.warn(GeometricVersionWarning(
        f"geomeTRIC {version}: {reason}; confpop uses geomeTRIC's own coordinate classes "
        f"(the same optimizer with geomeTRIC's initial Hessian, about twice the optimizer "
        f"time). The accelerated classes were checked with {low} <= version < {high}."),
        stacklevel=3)


def coordinate_classes(hessian_guess: str = "geometric", *, accelerate: bool = True):
    """The delocalized-coordinate class to hand to geomeTRIC, and whether it is ours.

    Parameters
    ----------
    hessian_guess : {"geometric", "lindh", "lindh-primitive", "lindh-primitive-soft"}
        Initial Hessian (see :data:`HESSIAN_GUESSES`); only the accelerated classes can
        use a model Hessian.
    accelerate : bool
        False returns geomeTRIC's own class (benchmarks and tests).

    Returns
    -------
    (class, bool)
        geomeTRIC's ``DelocalizedInternalCoordinates`` or confpop's subclass, and True
        for confpop's. With an unsupported geomeTRIC version a
        :class:`GeometricVersionWarning` is given (once per process and version).
    """
    from geometric.internal import DelocalizedInternalCoordinates

    if not accelerate:
        return DelocalizedInternalCoordinates, False
    version = geometric_version()
    if not version_supported(version):
        _fallback_once(version, "not a version the accelerated coordinates were checked with")
        return DelocalizedInternalCoordinates, False
    try:
        classes = _accelerated_classes()
    except (AttributeError, ImportError, TypeError) as exc:  # renamed internals
        _fallback_once(version, f"its internals changed ({type(exc).__name__}: {exc})")
        return DelocalizedInternalCoordinates, False
    return classes[2][hessian_guess], True


@functools.cache
def _fallback_once(version: str, reason: str) -> None:
    _warn_fallback(version, reason)


def structural_fallback(exc: Exception) -> None:
    """Report that the accelerated classes failed on a renamed geomeTRIC internal."""
    _fallback_once(geometric_version(),
                   f"its internals changed ({type(exc).__name__}: {exc})")


@functools.cache
def _accelerated_classes():
    """geomeTRIC's coordinate classes with the vectorized primitives (built on first use)."""
    from geometric.internal import (Angle, DelocalizedInternalCoordinates, Dihedral, Distance,
                                    OutOfPlane, PrimitiveInternalCoordinates)
    from geometric.molecule import Elements
    from geometric.nifty import ang2bohr, logger
    from geometric.optimize import Optimizer
    from geometric.step import Froot

    from .model_hessian import lindh_hessian, lindh_weights

    needed = {PrimitiveInternalCoordinates: ("calculate", "calcDiff", "derivatives",
                                             "guess_hessian"),
              DelocalizedInternalCoordinates: ("GInverse", "GMatrix", "build_dlc", "trimCache",
                                               "wilsonB", "guess_hessian", "calcGrad",
                                               "derivatives",
                                               "calcDiff"),
              Optimizer: ("SortedEigenvalues", "get_delta_prime", "trust_step", "createFroot",
                          "UpdateHessian", "get_cartesian_norm"),
              Froot: ("evaluate",)}
    for cls, names in needed.items():
        for name in names:
            if not callable(getattr(cls, name, None)):
                raise AttributeError(f"{cls.__name__}.{name} is missing")

    kinds = {Distance: "distance", Angle: "angle", Dihedral: "torsion", OutOfPlane: "torsion"}

    class FastPrimitives(PrimitiveInternalCoordinates):
        """geomeTRIC's primitive coordinates with the per-primitive Python loops vectorized.

        Distances, angles, dihedrals and out-of-plane angles (geomeTRIC's own formulas,
        edge cases included) are evaluated together with numpy; any other primitive
        (translations, rotations, linear angles, Cartesians) keeps its own method.
        """

        def _groups(self):
            # the key holds the primitive objects themselves (compared by identity first),
            # so a changed coordinate list is always noticed
            key = tuple(self.Internals)
            cached = self.__dict__.get("_confpop_groups")
            if cached is not None and cached[0] == key:
                return cached[1]
            rows = {"distance": [], "angle": [], "torsion": []}
            atoms = {"distance": [], "angle": [], "torsion": []}
            other = []
            for k, prim in enumerate(self.Internals):
                kind = kinds.get(type(prim))
                if kind is None:
                    other.append(k)
                    continue
                rows[kind].append(k)
                atoms[kind].append((prim.a, prim.b) if kind == "distance" else
                                   (prim.a, prim.b, prim.c) if kind == "angle" else
                                   (prim.a, prim.b, prim.c, prim.d))
            width = {"distance": 2, "angle": 3, "torsion": 4}
            groups = {kind: (np.array(rows[kind], dtype=int),
                             np.array(atoms[kind], dtype=int).reshape(-1, width[kind]))
                      for kind in rows}
            groups["other"] = other
            groups["memory"] = {}  # geometry bytes -> values (see _kind_values)
            self._confpop_groups = (key, groups)
            return groups

        def calculate(self, xyz):
            return _primitive_values(self, self._groups(), xyz)

        def calcDiff(self, xyz1, xyz2):  # noqa: N802 (geomeTRIC's name)
            return _primitive_differences(self, self._groups(), xyz1, xyz2)

        def derivatives(self, xyz):
            return _primitive_derivatives(self, self._groups(), xyz)

        def lindh_diagonal(self, coords, torsion_scale=1.0):
            """geomeTRIC's diagonal guess with Lindh's force constants for distances,
            angles and dihedrals (k rho_ij [rho_jk [rho_kl]]; dihedrals times
            ``torsion_scale``); other primitives keep geomeTRIC's values."""
            h = np.array(PrimitiveInternalCoordinates.guess_hessian(self, coords))
            numbers = [Elements.index(e) for e in self.elem]
            rho = lindh_weights(numbers, np.asarray(coords).reshape(-1, 3))
            for k, prim in enumerate(self.Internals):
                kind = type(prim)
                if kind is Distance:
                    h[k, k] = 0.45 * rho[prim.a, prim.b]
                elif kind is Angle:
                    h[k, k] = 0.15 * rho[prim.a, prim.b] * rho[prim.b, prim.c]
                elif kind is Dihedral:
                    h[k, k] = (0.005 * torsion_scale * rho[prim.a, prim.b] * rho[prim.b, prim.c]
                               * rho[prim.c, prim.d])
            return h

    class FastDelocalized(DelocalizedInternalCoordinates):
        """Delocalized internal coordinates (TRIC or DLC) over :class:`FastPrimitives`.

        ``GInverse`` uses a symmetric eigendecomposition of G = B B^T instead of an SVD
        (the same pseudo-inverse, singular values below 1e-6 dropped, in about a third of
        the time). geomeTRIC rebuilds coordinates through ``self.__class__``, so a rebuilt
        system stays accelerated and keeps its initial-Hessian choice.
        """

        hessian_guess = "geometric"

        def __init__(self, molecule, imagenr=0, build=False, **kwargs):
            super().__init__(molecule, imagenr=imagenr, build=False, **kwargs)
            self.Prims.__class__ = FastPrimitives
            if build:
                self.build_dlc(molecule.xyzs[imagenr].flatten() * ang2bohr)

        def GInverse(self, xyz):  # noqa: N802 (geomeTRIC's name)
            key = hash(np.asarray(xyz).reshape(-1, 3).tobytes())
            inverse = self.stored_Ginverse.get(key)
            if inverse is None:
                g = self.GMatrix(xyz)
                inverse = _cholesky_inverse(g)
                if inverse is None:
                    values, vectors = np.linalg.eigh(g)
                    keep = np.abs(values) > _G_CUT
                    inverse = (vectors[:, keep] / values[keep]) @ vectors[:, keep].T
                self.stored_Ginverse[key] = inverse
                self.trimCache()
            return inverse

        def wilsonB(self, xyz):  # noqa: N802 (geomeTRIC's name)
            # geomeTRIC's wilsonB (cached by the coordinates' bytes) without its row-by-row
            # flatten and copy (like geomeTRIC: a copy when computed, the stored matrix
            # when found)
            key = hash(np.asarray(xyz).tobytes())
            b = self.stored_wilsonB.get(key)
            if b is None:
                der = self.derivatives(xyz)
                b = self.stored_wilsonB[key] = der.reshape(der.shape[0], -1)
                self.trimCache()
                return b.copy()
            return b

        def guess_hessian(self, coords):
            rigid = any(type(p).__name__.startswith(("Translation", "Rotation"))
                        for p in self.Prims.Internals)
            if self.hessian_guess == "lindh" and not rigid:
                # Lindh's Cartesian model projected on these coordinates:
                # H_q = G^- B H_x B^T G^- (the gradient term of an exact transformation
                # is left out, as for any guess). TRIC's overall translations and
                # rotations have no curvature in the model: TRIC keeps geomeTRIC's guess.
                numbers = [Elements.index(e) for e in self.Prims.elem]
                hx = lindh_hessian(numbers, np.asarray(coords).reshape(-1, 3))
                b = self.wilsonB(coords)
                g_inv = self.GInverse(coords)
                h = g_inv @ b @ hx @ b.T @ g_inv
                return 0.5 * (h + h.T)
            if self.hessian_guess in ("lindh-primitive", "lindh-primitive-soft"):
                scale = _SOFT_TORSION_SCALE if self.hessian_guess.endswith("soft") else 1.0
                h = self.Prims.lindh_diagonal(coords, torsion_scale=scale)
                return self.Vecs.T @ h @ self.Vecs
            return super().guess_hessian(coords)

    by_guess = {"geometric": FastDelocalized}
    for guess in HESSIAN_GUESSES[1:]:
        by_guess[guess] = type(f"FastDelocalized_{guess.replace('-', '_')}",
                               (FastDelocalized,), {"hessian_guess": guess})
    class FastFroot(Froot):
        """geomeTRIC's Froot (Cartesian step length minus the trust radius, as a function
        of the internal step length) asking the optimizer's own step methods."""

        def __init__(self, optimizer, v0):
            super().__init__(optimizer.trust, v0, optimizer.X, optimizer.G, optimizer.H,
                             optimizer.IC, optimizer.params)
            self.optimizer = optimizer

        def evaluate(self, trial):
            # geomeTRIC's Froot.evaluate, with the step from the optimizer's methods
            if trial == 0.0:
                self.from_above = False
                return -self.trust
            if trial in self.stores:
                cnorm = self.stores[trial]
                self.from_above = False
            else:
                dy, _ = self.optimizer.trust_step(trial, self.v0)
                cnorm = self.optimizer.get_cartesian_norm(dy)
                self.from_above = self.above_flag and not self.IC.bork and cnorm < self.trust
                self.stores[trial] = cnorm
                self.counter += 1
            if cnorm - self.target < 0:
                if self.stored_val is None or cnorm > self.stored_val:
                    self.stored_arg = trial
                    self.stored_val = cnorm
            return cnorm - self.target

    class FastOptimizer(Optimizer):
        """geomeTRIC's optimizer with one eigendecomposition of the Hessian per step.

        geomeTRIC decomposes the same Hessian several times a step: ``update_hessian``
        checks its lowest eigenvalue, the next step's ``SortedEigenvalues`` sorts them
        again, and every trust-radius trial inverts H + v I by an SVD. Here one symmetric
        eigendecomposition (cached by the Hessian's content) serves all of them: the
        trust-radius step is Q diag(1/(lambda + v)) Q^T g, with geomeTRIC's 1e-12 cut on
        |lambda + v|, and the BFGS update is geomeTRIC's formula. The algorithm and its
        decisions are geomeTRIC's; only rounding differs. Constrained optimizations keep
        geomeTRIC's trust-radius step (on the Hessian augmented by the constraints' rows,
        which H's eigenvectors do not diagonalize); transition-state, IRC and verbose runs
        keep geomeTRIC's methods throughout.
        """

        def _own_steps(self):
            p = self.params
            return not _FAST_STEPS or p.transition or p.irc or p.verbose

        def _plain_step(self):
            return not (self._own_steps() or self.IC.haveConstraints() or self.IC.rigid)

        def _eigh(self, h):
            cached = self.__dict__.get("_confpop_eigh")
            if cached is not None and cached[0].shape == h.shape and np.array_equal(cached[0], h):
                return cached[1], cached[2]
            values, vectors = np.linalg.eigh(h)
            self._confpop_eigh = (np.array(h), values, vectors)
            return values, vectors

        def SortedEigenvalues(self, H):  # noqa: N802,N803 (geomeTRIC's names)
            if self._own_steps():
                return super().SortedEigenvalues(H)
            eig = sorted(self._eigh(H)[0])
            if len(eig) >= 6:
                logger.info("Hessian Eigenvalues: %.5e %.5e %.5e ... %.5e %.5e %.5e\n"
                            % (eig[0], eig[1], eig[2], eig[-3], eig[-2], eig[-1]))
            else:
                logger.info("Hessian Eigenvalues: " + " ".join("%.5e" % e for e in eig) + "\n")
            return eig

        def get_delta_prime(self, v0, verbose=None):
            if not self._plain_step():
                return super().get_delta_prime(v0, verbose)
            return _trm_step(v0, self.G, self.H, *self._eigh(self.H))

        def trust_step(self, iopt, v0, verbose=None):
            if not self._plain_step():
                return super().trust_step(iopt, v0, verbose)
            return _trust_step(iopt, v0, self.get_delta_prime)

        def createFroot(self, v0):  # noqa: N802 (geomeTRIC's name)
            if not self._plain_step():
                return super().createFroot(v0)
            return FastFroot(self, v0)

        def get_cartesian_norm(self, dy, verbose=None):
            # geomeTRIC asks twice for the norm of the step it takes (once choosing it, once
            # taking it): the second answer, and the back-transformation's failure flag,
            # come from memory
            if self._own_steps() or (self.IC.haveConstraints() and self.params.enforce):
                return super().get_cartesian_norm(dy, verbose)
            # (remembered for this geometry and this coordinate system only)
            here, key = self.X.tobytes(), np.asarray(dy).tobytes()
            memory = self.__dict__.get("_confpop_norms")
            if memory is None or memory[0] is not self.IC or memory[1] != here:
                memory = self._confpop_norms = (self.IC, here, {})
            found = memory[2].get(key)
            if found is not None:
                self.IC.bork = found[1]
                return found[0]
            norm = super().get_cartesian_norm(dy, verbose)
            memory[2][key] = (norm, getattr(self.IC, "bork", False))
            return norm

        def UpdateHessian(self):  # noqa: N802 (geomeTRIC's name)
            # geomeTRIC's update_hessian with one step of history (its call here): BFGS,
            # then back to the guess when an eigenvalue falls to params.epsilon; with
            # _SECANT_PAIRS > 1 and no constraints, the multi-secant update over the last
            # steps instead (multisecant_update; measured in confpop.optimize)
            if self._own_steps():
                return super().UpdateHessian()
            ic, p = self.IC, self.params
            h = self.H.copy()
            dy = ic.calcDiff(self.X, self.Xprev)
            dg = ic.calcGrad(self.X, self.gradx) - ic.calcGrad(self.Xprev, self.Gxprev)
            pairs = None
            history = getattr(self, "X_hist", [])
            # the multi-secant update (unconstrained steps only): the history must end with
            # this step
            if (_SECANT_PAIRS > 1 and self._plain_step() and len(history) > 2
                    and np.array_equal(history[-1], self.X)
                    and np.array_equal(history[-2], self.Xprev)):
                memory = self.__dict__.get("_confpop_gradients")
                if memory is None or memory[0] is not ic:  # per coordinate system
                    memory = self._confpop_gradients = (ic, {})
                pairs = _secant_history(ic, history, self.Gx_hist, _SECANT_PAIRS, memory[1])
            if pairs is not None and pairs[0].shape[1] > 1:
                h = multisecant_update(h, *pairs)
            elif np.linalg.norm(dg) >= 1e-6 and np.linalg.norm(dy) >= 1e-6:
                hdy = h @ dy
                h += np.outer(dg, dg) / (dg @ dy) - np.outer(hdy, hdy) / (dy @ hdy)
            if p.reset and np.min(self._eigh(h)[0]) <= p.epsilon:
                logger.info("Eigenvalues below %.4e - returning guess\n" % p.epsilon)
                h = ic.guess_hessian(self.X)
            self.H = h

    return FastPrimitives, FastDelocalized, by_guess, FastOptimizer


def _secant_history(ic, xs, gxs, most, memory):
    """The last steps and gradient changes in the current internal coordinates.

    Returns (S, Y), (n_coordinates, k) arrays, newest step first, of the consecutive accepted
    points in ``xs`` (Cartesian, bohr) and ``gxs`` (Cartesian gradients), k <= ``most``; steps or
    gradient changes below 1e-6 (geomeTRIC's cut for its BFGS update) end the history.
    ``memory`` (a dict for this coordinate system) keeps the internal gradients of the points.
    """
    steps, changes = [], []
    count = min(most, len(xs) - 1)
    grads = []
    for i in range(count + 1):
        key = xs[-1 - i].tobytes()
        if key not in memory:
            memory[key] = ic.calcGrad(xs[-1 - i], gxs[-1 - i])
        grads.append(memory[key])
    for key in list(memory)[:-(most + 2)]:
        del memory[key]
    for i in range(count):
        dy = ic.calcDiff(xs[-1 - i], xs[-2 - i])
        dg = grads[i] - grads[i + 1]
        if np.linalg.norm(dy) < 1e-6 or np.linalg.norm(dg) < 1e-6:
            break
        steps.append(dy)
        changes.append(dg)
    if not steps:
        return None
    return np.array(steps).T, np.array(changes).T


def multisecant_update(h, s, y, *, asymmetry=None, independence=None):
    """Symmetric multi-secant (block BFGS) update of a Hessian over the last steps.

    H+ = H - H S (S^T H S)^-1 S^T H + Y C^-1 Y^T,  C = (S^T Y + Y^T S) / 2,

    so that H+ S = Y holds for every step kept at once when S^T Y is symmetric (exactly so
    on a quadratic surface: S^T Y = S^T A S), and H+ - H lies in the span of H S and Y
    (H is kept wherever the steps tell nothing). With one step it is the BFGS update.
    Sequential BFGS updates keep only the latest secant equation; older ones hold only
    after exact line searches on a quadratic, which a trust-radius Newton optimizer does
    not make.

    Steps are taken newest first while they keep (a) C positive definite, (b) S^T Y close to
    symmetric (relative antisymmetric part below ``asymmetry``; larger means curvature that
    changed between the steps, or gradient noise) and (c) each new step's part H-orthogonal
    to the newer steps at least ``independence`` of its H-norm (nearly parallel steps make
    S^T H S singular and add no direction).

    Parameters
    ----------
    h : (n, n) array
        Current Hessian (symmetric positive definite).
    s, y : (n, k) arrays
        Steps and gradient changes, newest first.
    asymmetry, independence : float, optional
        The limits (b) and (c) (default :data:`_SECANT_ASYMMETRY`,
        :data:`_SECANT_INDEPENDENCE`).

    Returns
    -------
    (n, n) array
        The updated Hessian. If not even the newest step qualifies under (a), the plain BFGS
        update with it (geomeTRIC's update, which does not check the curvature).

    References
    ----------
    R. B. Schnabel, "Quasi-Newton methods using multiple secant equations", Technical
    Report CU-CS-247-83, University of Colorado at Boulder, 1983.
    """
    asymmetry = _SECANT_ASYMMETRY if asymmetry is None else asymmetry
    independence = _SECANT_INDEPENDENCE if independence is None else independence
    h = np.asarray(h, dtype=float)
    keep = 0
    for k in range(1, s.shape[1] + 1):
        sk, yk = s[:, :k], y[:, :k]
        m = sk.T @ h @ sk
        c = sk.T @ yk
        cs = 0.5 * (c + c.T)
        if k > 1:
            if np.linalg.norm(c - c.T) > asymmetry * np.linalg.norm(cs):
                break
            # the newest k-1 steps' H-metric projection of step k
            m_old = m[:k - 1, :k - 1]
            b = m[:k - 1, k - 1]
            rest = m[k - 1, k - 1] - b @ np.linalg.solve(m_old, b)
            if not rest > independence ** 2 * m[k - 1, k - 1]:
                break
        if np.min(np.linalg.eigvalsh(cs)) <= 0:
            break
        keep = k
    if keep == 0:
        dy, dg = s[:, 0], y[:, 0]
        hdy = h @ dy
        return h + np.outer(dg, dg) / (dg @ dy) - np.outer(hdy, hdy) / (dy @ hdy)
    sk, yk = s[:, :keep], y[:, :keep]
    hs = h @ sk
    c = sk.T @ yk
    cs = 0.5 * (c + c.T)
    out = h - hs @ np.linalg.solve(sk.T @ hs, hs.T) + yk @ np.linalg.solve(cs, yk.T)
    return 0.5 * (out + out.T)


def optimizer_class(accelerated: bool):
    """geomeTRIC's ``Optimizer``, or confpop's subclass for the accelerated coordinates."""
    if accelerated:
        return _accelerated_classes()[3]
    from geometric.optimize import Optimizer
    return Optimizer


def _trm_step(v, g, h, values, vectors):
    """geomeTRIC's trust-radius Newton step for H + v I from H's eigendecomposition.

    Returns (dy, expected energy change, d|dy|/dv) as ``geometric.step.get_delta_prime_trm``
    without constraints: its SVD pseudo-inverse drops singular values |lambda + v| <= 1e-12.
    """
    shifted = values + v
    keep = np.abs(shifted) > 1e-12
    inverse = np.zeros_like(shifted)
    inverse[keep] = 1.0 / shifted[keep]
    a = inverse * (vectors.T @ g)
    dy = -(vectors @ a)
    d_prime = vectors @ (inverse * a)
    norm = np.linalg.norm(dy)
    dy_prime = (dy @ d_prime) / norm
    expect = 0.5 * (dy @ (h @ dy)) + dy @ g
    return dy, expect, dy_prime


def _trust_step(target, v0, delta_prime):
    """geomeTRIC's ``trust_step`` (Hebden's iteration for v until |dy| = target)."""
    dy, sol, dy_prime = delta_prime(v0)
    ndy = np.linalg.norm(dy)
    if ndy < target:
        return dy, sol
    v = v0
    niter = 0
    ndy_last = 0
    m_ndy, m_dy, m_sol = ndy, dy.copy(), sol
    while True:
        v += (1 - ndy / target) * (ndy / dy_prime)
        dy, sol, dy_prime = delta_prime(v)
        ndy = np.linalg.norm(dy)
        if np.abs((ndy - target) / target) < 0.001:
            return dy, sol
        if niter > 10 and np.abs(ndy_last - ndy) / ndy < 0.001:
            return dy, sol
        niter += 1
        ndy_last = ndy
        if ndy < m_ndy:
            m_ndy, m_dy, m_sol = ndy, dy.copy(), sol
        if niter % 100 == 99:
            # geomeTRIC breaks oscillations with its global random generator; kept, so
            # that the steps stay geomeTRIC's
            v += np.random.random() * niter / 100
        if niter % 1000 == 999:
            return m_dy, m_sol


def _cholesky_inverse(g):
    """G^-1 by Cholesky when every eigenvalue of G is provably above geomeTRIC's cut.

    For a symmetric positive definite G, lambda_min(G) = 1 / ||G^-1||_2 >= 1 / ||G^-1||_F.
    When that bound puts every eigenvalue above :data:`_G_MARGIN` (10x the 1e-6 below which
    geomeTRIC drops eigenvalues from its pseudo-inverse), the pseudo-inverse is the plain
    inverse, which LAPACK's Cholesky routines (potrf, potri) give in a fraction of an
    eigendecomposition's time. A (nearly) singular G fails the factorization or the bound
    (its computed inverse is huge: Cholesky is backward stable), and gives None: the caller
    then decomposes G as geomeTRIC does.
    """
    if not _FAST_STEPS:
        return None
    potrf, potri = _lapack_cholesky()
    factor, info = potrf(g, lower=False, clean=False)
    if info != 0:
        return None
    inverse, info = potri(factor, lower=False)
    if info != 0:
        return None
    lower = np.tril_indices_from(inverse, -1)
    inverse[lower] = inverse.T[lower]  # potri fills the upper triangle
    norm = np.linalg.norm(inverse)
    if not (np.isfinite(norm) and norm * _G_MARGIN < 1.0):
        return None
    return inverse


@functools.cache
def _lapack_cholesky():
    from scipy.linalg.lapack import dpotrf, dpotri
    return dpotrf, dpotri


def _cross_rows(a, b):
    out = np.empty(np.broadcast_shapes(a.shape, b.shape))
    out[:, 0] = a[:, 1] * b[:, 2] - a[:, 2] * b[:, 1]
    out[:, 1] = a[:, 2] * b[:, 0] - a[:, 0] * b[:, 2]
    out[:, 2] = a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]
    return out


def _distance_values(x, at):
    return np.sqrt(np.sum((x[at[:, 0]] - x[at[:, 1]]) ** 2, axis=1))


def _angle_values(x, at):
    v1 = x[at[:, 0]] - x[at[:, 1]]
    v2 = x[at[:, 2]] - x[at[:, 1]]
    cosine = np.sum(v1 * v2, axis=1) / (np.sqrt(np.sum(v1 ** 2, axis=1))
                                        * np.sqrt(np.sum(v2 ** 2, axis=1)))
    return np.arccos(np.clip(cosine, -1.0, 1.0))


def _torsion_values(x, at):
    # geomeTRIC's Dihedral.value (also used for OutOfPlane), deliberately not
    # confpop.geometry.dihedral: geomeTRIC's own formula (atan2 of |v2| v1.(v2 x v3) and
    # (v2 x v3).(v1 x v2)), its range [-pi, pi] and no guard for linear arrangements, so that
    # the accelerated coordinates give bit-for-bit the values geomeTRIC's classes give and the
    # optimizer takes exactly geomeTRIC's steps. The same holds for the distance, angle and
    # derivative functions here and for the periodic difference rule below.
    v1 = x[at[:, 1]] - x[at[:, 0]]
    v2 = x[at[:, 2]] - x[at[:, 1]]
    v3 = x[at[:, 3]] - x[at[:, 2]]
    c1 = _cross_rows(v2, v3)
    c2 = _cross_rows(v1, v2)
    return np.arctan2(np.sum(v1 * c1, axis=1) * np.sqrt(np.sum(v2 ** 2, axis=1)),
                      np.sum(c1 * c2, axis=1))


def _kind_values(groups, x):
    """Distances, angles and dihedrals at x, remembered for the last few geometries.

    The back-transformation evaluates each micro-iteration's geometry twice (as the new
    point, then as the next start): the second time comes from here, bit for bit the same.
    Only these three kinds are remembered; geomeTRIC's other primitives (rotations hold a
    reference geometry that changes) are always evaluated afresh.
    """
    key = x.tobytes()
    memory = groups["memory"]
    found = memory.get(key)
    if found is None:
        found = tuple(function(x, groups[kind][1]) for kind, function in
                      (("distance", _distance_values), ("angle", _angle_values),
                       ("torsion", _torsion_values)))
        memory[key] = found
        while len(memory) > _VALUE_MEMORY:
            del memory[next(iter(memory))]
    return found


def _primitive_values(prims, groups, xyz):
    x = np.asarray(xyz, dtype=float).reshape(-1, 3)
    out = np.empty(len(prims.Internals))
    for kind, values in zip(("distance", "angle", "torsion"), _kind_values(groups, x)):
        out[groups[kind][0]] = values
    for k in groups["other"]:
        out[k] = prims.Internals[k].value(xyz)
    return out


def _primitive_differences(prims, groups, xyz1, xyz2):
    x1 = np.asarray(xyz1, dtype=float).reshape(-1, 3)
    x2 = np.asarray(xyz2, dtype=float).reshape(-1, 3)
    d1, a1, t1 = _kind_values(groups, x1)
    d2, a2, t2 = _kind_values(groups, x2)
    out = np.empty(len(prims.Internals))
    out[groups["distance"][0]] = d1 - d2
    out[groups["angle"][0]] = a1 - a2
    diff = t1 - t2
    # geomeTRIC's periodic rule: take +-2 pi when it makes the difference smaller
    plus = diff + 2 * np.pi
    diff = np.where(np.abs(diff) > np.abs(plus), plus, diff)
    minus = diff - 2 * np.pi
    out[groups["torsion"][0]] = np.where(np.abs(diff) > np.abs(minus), minus, diff)
    for k in groups["other"]:
        out[k] = prims.Internals[k].calcDiff(xyz1, xyz2)
    return out


def _primitive_derivatives(prims, groups, xyz):
    """(n_primitives, n_atoms, 3) first derivatives, geomeTRIC's formulas row by row."""
    x = np.asarray(xyz).reshape(-1, 3)
    out = np.zeros((len(prims.Internals), len(x), 3))
    rows, at = groups["distance"]
    if len(rows):
        d = x[at[:, 0]] - x[at[:, 1]]
        u = d / np.linalg.norm(d, axis=1)[:, None]
        out[rows, at[:, 0]] = u
        out[rows, at[:, 1]] = -u
    rows, at = groups["angle"]
    if len(rows):
        m, o, n = at.T
        u_vec, v_vec = x[m] - x[o], x[n] - x[o]
        u_norm, v_norm = np.linalg.norm(u_vec, axis=1), np.linalg.norm(v_vec, axis=1)
        u, v = u_vec / u_norm[:, None], v_vec / v_norm[:, None]
        w = _cross_rows(u, v)
        # (anti)parallel bonds: geomeTRIC picks a reference axis; left to its own method
        straight = ((np.linalg.norm(u + v, axis=1) < 1e-10)
                    | (np.linalg.norm(u - v, axis=1) < 1e-10))
        w = w / np.linalg.norm(np.where(straight[:, None], 1.0, w), axis=1)[:, None]
        term1 = _cross_rows(u, w) / u_norm[:, None]
        term2 = _cross_rows(w, v) / v_norm[:, None]
        out[rows, m] = term1
        out[rows, n] = term2
        out[rows, o] = -(term1 + term2)
        for k in rows[straight]:
            out[k] = prims.Internals[k].derivative(xyz)
    rows, at = groups["torsion"]
    if len(rows):
        m, o, p, n = at.T
        u_vec, w_vec, v_vec = x[m] - x[o], x[p] - x[o], x[n] - x[p]
        u_norm = np.linalg.norm(u_vec, axis=1)
        w_norm = np.linalg.norm(w_vec, axis=1)
        v_norm = np.linalg.norm(v_vec, axis=1)
        u, w, v = u_vec / u_norm[:, None], w_vec / w_norm[:, None], v_vec / v_norm[:, None]
        uw, vw = np.sum(u * w, axis=1), np.sum(v * w, axis=1)
        sin2_u, sin2_v = 1 - uw ** 2, 1 - vw ** 2
        # geomeTRIC zeroes the terms of a (nearly) linear angle
        ok_u, ok_v = sin2_u >= 1e-6, sin2_v >= 1e-6
        sin2_u, sin2_v = np.where(ok_u, sin2_u, 1.0), np.where(ok_v, sin2_v, 1.0)
        cross_uw, cross_vw = _cross_rows(u, w), _cross_rows(v, w)
        term1 = np.where(ok_u[:, None], cross_uw / (u_norm * sin2_u)[:, None], 0.0)
        term3 = np.where(ok_u[:, None], cross_uw * (uw / (w_norm * sin2_u))[:, None], 0.0)
        term2 = np.where(ok_v[:, None], cross_vw / (v_norm * sin2_v)[:, None], 0.0)
        term4 = np.where(ok_v[:, None], cross_vw * (vw / (w_norm * sin2_v))[:, None], 0.0)
        out[rows, m] = term1
        out[rows, n] = -term2
        out[rows, o] = -term1 + term3 - term4
        out[rows, p] = term2 - term3 + term4
    for k in groups["other"]:
        out[k] = prims.Internals[k].derivative(xyz)
    return out


