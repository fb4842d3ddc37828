"""GFN2-xTB, GFN1-xTB and GFN-FF through xtb-python.

The engine library is loaded the first time a backend of this module is made. Before it
loads, ``OMP_NUM_THREADS`` defaults to 1: confpop runs one engine thread per process and gets
its parallelism from processes (on two cores an unset variable makes a GFN2 single point
several times slower).

Implicit solvent: xtb-python 22.1 (libxtb 6.5.1) exposes only the GBSA model through its
API (``Calculator.set_solvent``); its energies agree with tblite's GBSA to ~1e-8 hartree.
For ALPB use the ``"tblite-gfn2"`` / ``"tblite-gfn1"`` backends.

A backend object reuses one engine object between calls (a fresh SCF guess each time),
so it is not safe to share between threads; pickling drops the engine object.

This module also holds the solvent-name table shared with :mod:`confpop.backends.tblite`.

Examples
--------
>>> canonical_solvent("CHCl3")
'chloroform'
>>> canonical_solvent("Diethyl Ether")
'diethyl ether'
"""

from __future__ import annotations

import contextlib
import functools
import os
import sys
import tempfile
import threading
from typing import ClassVar

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from ..errors import BackendUnavailable, CalculationFailed, InputError  # noqa: E402
from ..units import ANGSTROM_BOHR  # noqa: E402
from .base import Backend, BackendResult  # noqa: E402

__all__ = ["GFN2", "GFN1", "GFNFF", "SOLVENT_ALIASES", "canonical_solvent", "solvents_for"]

#: canonical solvent name -> other accepted spellings (matching is case-insensitive)
SOLVENT_ALIASES: dict[str, tuple[str, ...]] = {
    "water": ("h2o",),
    "chloroform": ("chcl3", "trichloromethane"),
    "dichloromethane": ("ch2cl2", "methylene chloride", "dcm"),
    "dmso": ("dimethyl sulfoxide", "dimethylsulfoxide"),
    "methanol": ("meoh", "ch3oh"),
    "acetonitrile": ("mecn", "ch3cn"),
    "toluene": (),
    "thf": ("tetrahydrofuran",),
    "hexane": ("n-hexane", "nhexane"),
    "benzene": (),
    "acetone": (),
    "dmf": ("dimethylformamide", "n,n-dimethylformamide"),
    "diethyl ether": ("ether", "diethylether", "et2o"),
    "cs2": ("carbon disulfide", "carbondisulfide"),
    # parameterised for ALPB only
    "ethanol": ("etoh",),
    "ethyl acetate": ("ethylacetate", "etoac"),
    "octanol": ("1-octanol", "n-octanol"),
    "wet octanol": ("woctanol",),
    "hexadecane": ("n-hexadecane",),
    "furan": ("furane",),
    "phenol": (),
    "aniline": (),
    "benzaldehyde": (),
    "dioxane": ("1,4-dioxane",),
    "nitromethane": ("ch3no2",),
}

_LOOKUP = {alias: name for name, aliases in SOLVENT_ALIASES.items() for alias in (name, *aliases)}

_GBSA_CORE = frozenset(list(SOLVENT_ALIASES)[:14])
# which solvents each (method, model) has parameters for; checked against the engines
# (xtb-python 22.1 and tblite 0.8): GFN1 has no GBSA parameters for hexane and DMF.
_AVAILABLE: dict[tuple[str, str], frozenset[str]] = {
    ("gfn2", "gbsa"): _GBSA_CORE,
    ("gfn1", "gbsa"): _GBSA_CORE - {"hexane", "dmf"},
    ("gfnff", "gbsa"): _GBSA_CORE,
    ("gfn2", "alpb"): frozenset(SOLVENT_ALIASES),
    ("gfn1", "alpb"): frozenset(SOLVENT_ALIASES),
}

# spelling of each solvent in xtb-python's Solvent enum
_XTB_SPELLING = {"water": "h2o", "chloroform": "chcl3", "dichloromethane": "ch2cl2",
                 "hexane": "nhexane", "diethyl ether": "ether"}


def canonical_solvent(name: str) -> str:
    """Canonical (lower-case) name of a solvent given in any accepted spelling.

    Raises
    ------
    InputError
        If ``name`` is not a known solvent; the message lists the known names.
    """
    if isinstance(name, str):
        key = " ".join(name.strip().lower().split())
        if key in _LOOKUP:
            return _LOOKUP[key]
    raise InputError(f"solvent must be one of {sorted(SOLVENT_ALIASES)} (or None for the gas "
                     f"phase), got {name!r}")


def solvents_for(method: str, model: str) -> list[str]:
    """Canonical names of the solvents a method has parameters for in a solvent model.

    Parameters
    ----------
    method : {"gfn2", "gfn1", "gfnff"}
    model : {"alpb", "gbsa"}
    """
    return sorted(_AVAILABLE.get((method, model), ()))


def resolve_solvent(name: str | None, method: str, model: str) -> str | None:
    """Canonical solvent name, checked against what ``method``/``model`` supports."""
    if name is None:
        return None
    valid = solvents_for(method, model)
    try:
        canonical = canonical_solvent(name)
    except InputError:
        canonical = None
    if canonical not in valid:
        raise InputError(f"solvent {name!r} is not available for {method} with {model.upper()}; "
                         f"valid solvents: {', '.join(valid)}")
    return canonical


_LOAD_LOCK = threading.Lock()


@functools.cache
def _engine():
    """Import xtb-python (once)."""
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    try:
        from xtb import interface, libxtb
    except ImportError as exc:
        raise BackendUnavailable(
            f"the GFN backends need xtb-python (pip install xtb typing_extensions): {exc}") from exc
    return interface, libxtb


@functools.cache
def _fortran_flush():
    """The Fortran runtime's FLUSH of the runtime xtb-python links, or None if not found."""
    import ctypes
    import ctypes.util
    import glob

    interface, _ = _engine()
    package_dir = os.path.dirname(os.path.dirname(os.path.abspath(interface.__file__)))
    candidates = sorted(glob.glob(os.path.join(package_dir, "xtb.libs", "libgfortran*")))
    found = ctypes.util.find_library("gfortran")
    candidates += [found] if found else []
    for path in candidates:
        try:
            flush = ctypes.CDLL(path)._gfortran_flush_i4
        except (OSError, AttributeError):
            continue
        flush.argtypes = [ctypes.c_void_p]
        flush.restype = None
        return flush
    return None


@contextlib.contextmanager
def _quiet_scratch():
    """Run in an empty temporary directory with stdout/stderr (file descriptors) silenced.

    GFN-FF prints its topology setup before the verbosity can be set, and writes
    ``gfnff_topo``/``gfnff_adjacency`` into the working directory (and would read stale ones
    found there). Changing directory is process-wide, hence the lock.
    """
    with _LOAD_LOCK, tempfile.TemporaryDirectory(prefix="confpop-xtb-") as scratch:
        for stream in (sys.stdout, sys.stderr):
            with contextlib.suppress(Exception):
                stream.flush()
        saved = [os.dup(1), os.dup(2)]
        devnull = os.open(os.devnull, os.O_WRONLY)
        cwd = os.getcwd()
        try:
            os.dup2(devnull, 1)
            os.dup2(devnull, 2)
            os.chdir(scratch)
            yield
        finally:
            # the Fortran runtime buffers its output: empty it while it still goes nowhere
            flush = _fortran_flush()
            if flush is not None:
                flush(None)
            os.chdir(cwd)
            os.dup2(saved[0], 1)
            os.dup2(saved[1], 2)
            for fd in (*saved, devnull):
                os.close(fd)


class _XTBBackend(Backend):
    """Common code of the xtb-python backends (see :class:`GFN2`)."""

    capabilities: ClassVar[frozenset[str]] = frozenset(
        {"energy", "gradient", "dipole", "charges", "solvent"})
    elements: ClassVar[frozenset[int] | None] = frozenset(range(1, 87))
    _param: ClassVar[str] = "GFN2xTB"
    _option_names: ClassVar[tuple[str, ...]] = ("accuracy", "electronic_temperature",
                                                 "max_iterations", "solvent_model")

    def __init__(self, mol, *, charge=None, multiplicity=None, solvent=None, **options):
        unknown = sorted(set(options) - set(self._option_names))
        if unknown:
            raise InputError(f"method {self.name!r} accepts the options "
                             f"{list(self._option_names)}, got {unknown}")
        model = options.pop("solvent_model", "gbsa")
        if not isinstance(model, str) or model.lower() != "gbsa":
            raise InputError(f"solvent_model for {self.name!r} (xtb-python) must be 'gbsa', "
                             f"got {model!r}; ALPB is available with 'tblite-{self.name}'")
        _check_options(options)
        super().__init__(mol, charge=charge, multiplicity=multiplicity, solvent=solvent,
                         **options)
        self.solvent = resolve_solvent(solvent, self.name, "gbsa")
        if self.solvent is not None:
            self.options["solvent_model"] = "gbsa"
        self._calculator = None
        self._solution = None  # the last SCF solution, kept only inside continuation()
        _engine()  # fail early (BackendUnavailable) if xtb-python is missing

    restarts: ClassVar[bool] = True

    # The engine objects hold C pointers: never pickle them (workers rebuild them).
    def __getstate__(self):
        state = self.__dict__.copy()
        state["_calculator"] = None
        state["_solution"] = None
        state["_continuation_depth"] = 0
        return state

    def _forget_solution(self) -> None:
        self._solution = None

    def _new_calculator(self, positions_bohr):
        interface, libxtb = _engine()
        calc = interface.Calculator(getattr(interface.Param, self._param), self.numbers,
                                    positions_bohr, charge=float(self.charge),
                                    uhf=self.multiplicity - 1)
        calc.set_verbosity(libxtb.VERBOSITY_MUTED)
        if "accuracy" in self.options:
            calc.set_accuracy(float(self.options["accuracy"]))
        if "electronic_temperature" in self.options:
            calc.set_electronic_temperature(float(self.options["electronic_temperature"]))
        if "max_iterations" in self.options:
            calc.set_max_iterations(int(self.options["max_iterations"]))
        if self.solvent is not None:
            calc.set_solvent(getattr(interface.Solvent,
                                     _XTB_SPELLING.get(self.solvent, self.solvent)))
        return calc

    def _compute(self, positions: np.ndarray, gradient: bool) -> BackendResult:
        interface, _ = _engine()
        xyz = np.ascontiguousarray(positions * ANGSTROM_BOHR)
        try:
            # The calculator (parameters, solvent model) is reused across calls; each call
            # starts from a fresh guess, except inside continuation() where it starts from
            # the previous solution (Backend.continuation).
            if self._calculator is None:
                self._calculator = self._new_calculator(xyz)
            else:
                self._calculator.update(xyz)
            keep = self._continuing and self.restarts
            previous = self.__dict__.get("_solution") if keep else None
            if previous is None:
                res = self._calculator.singlepoint()
            else:
                try:
                    res = self._calculator.singlepoint(previous)
                except interface.XTBException:  # a restart that fails gets a fresh guess
                    self._calculator = self._new_calculator(xyz)
                    res = self._calculator.singlepoint()
            self._solution = res if keep else None
            energy = res.get_energy()
            grad = res.get_gradient() * ANGSTROM_BOHR if gradient else None
            dipole = res.get_dipole() if "dipole" in self.capabilities else None
            charges = res.get_charges() if "charges" in self.capabilities else None
        except interface.XTBException as exc:
            self._calculator = None  # do not reuse an engine object after a failure
            self._solution = None
            raise CalculationFailed(f"{self.name} calculation failed: {exc}") from exc
        if not np.isfinite(energy):
            self._calculator = None
            self._solution = None
            raise CalculationFailed(f"{self.name} returned a non-finite energy ({energy})")
        return BackendResult(energy=energy, gradient=grad, dipole=dipole, charges=charges)


def _check_options(options: dict) -> None:
    acc = options.get("accuracy")
    if acc is not None and not (isinstance(acc, (int, float)) and 1e-4 <= acc <= 1e3):
        raise InputError(f"accuracy must be a number between 1e-4 and 1000, got {acc!r}")
    temp = options.get("electronic_temperature")
    if temp is not None and not (isinstance(temp, (int, float)) and temp > 0):
        raise InputError(f"electronic_temperature must be > 0 K, got {temp!r}")
    iters = options.get("max_iterations")
    if iters is not None and not (isinstance(iters, (int, np.integer))
                                  and not isinstance(iters, bool) and iters >= 1):
        raise InputError(f"max_iterations must be an integer >= 1, got {iters!r}")


class GFN2(_XTBBackend):
    """GFN2-xTB tight binding through xtb-python.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens (elements H-Rn).
    charge, multiplicity : int, optional
        Total charge and spin multiplicity; the engine gets ``uhf = multiplicity - 1``
        unpaired electrons.
    solvent : str or None
        Implicit solvent (GBSA), any spelling accepted by :func:`canonical_solvent`;
        stored under its canonical name.
    accuracy : float, optional
        Engine accuracy (lower is tighter; engine default 1.0).
    electronic_temperature : float, optional
        Fermi smearing temperature in K (engine default 300 K).
    max_iterations : int, optional
        SCF iteration limit (engine default 250).

    Notes
    -----
    Energies in hartree; gradients converted from hartree/bohr to hartree/angstrom; dipole
    in e*bohr; Mulliken partial charges in elementary charges.

    References
    ----------
    C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 2019, 15, 1652,
    doi:10.1021/acs.jctc.8b01176.
    """

    name: ClassVar[str] = "gfn2"
    _param: ClassVar[str] = "GFN2xTB"


class GFN1(_XTBBackend):
    """GFN1-xTB tight binding through xtb-python (options as :class:`GFN2`).

    References
    ----------
    S. Grimme, C. Bannwarth, P. Shushkov, J. Chem. Theory Comput. 2017, 13, 1989,
    doi:10.1021/acs.jctc.7b00118.
    """

    name: ClassVar[str] = "gfn1"
    _param: ClassVar[str] = "GFN1xTB"


class GFNFF(_XTBBackend):
    """GFN-FF force field through xtb-python.

    Provides energy, gradient and dipole (no partial charges); options: ``accuracy``.
    GBSA solvents as for GFN2. The topology setup runs in a private temporary directory
    (the engine writes files there).

    References
    ----------
    S. Spicher, S. Grimme, Angew. Chem. Int. Ed. 2020, 59, 15665,
    doi:10.1002/anie.202004239.
    """

    name: ClassVar[str] = "gfnff"
    restarts: ClassVar[bool] = False  # no SCF to restart
    capabilities: ClassVar[frozenset[str]] = frozenset({"energy", "gradient", "dipole", "solvent"})
    _param: ClassVar[str] = "GFNFF"
    _option_names: ClassVar[tuple[str, ...]] = ("accuracy", "solvent_model")

    def _new_calculator(self, positions_bohr):
        with _quiet_scratch():
            return super()._new_calculator(positions_bohr)
