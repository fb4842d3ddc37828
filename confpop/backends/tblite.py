"""GFN2-xTB and GFN1-xTB through tblite, with ALPB (default) or GBSA implicit solvent.

tblite is an independent implementation of the same published tight-binding methods as
xtb-python; gas-phase GFN2 energies of the two agree to ~1e-8 hartree. Solvent: tblite's
ALPB (the default here) and GBSA; its GBSA equals xtb-python's to ~1e-8 hartree, while ALPB
and GBSA differ by up to a few kcal/mol for polar molecules (they are different models).

A backend object reuses one engine object between calls (a fresh SCF guess each time),
so it is not safe to share between threads; pickling drops the engine object.

``OMP_NUM_THREADS`` defaults to 1 before the engine loads (parallelism comes from processes).
"""

from __future__ import annotations

import functools
import logging
import os
from typing import ClassVar

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from ..errors import BackendUnavailable, CalculationFailed, InputError  # noqa: E402
from ..units import ANGSTROM_BOHR, BOLTZMANN, HARTREE_J  # noqa: E402
from .base import Backend, BackendResult  # noqa: E402
from .xtb import _check_options, resolve_solvent  # noqa: E402

__all__ = ["TbliteGFN2", "TbliteGFN1"]

_log = logging.getLogger(__name__)

# tblite's spelling where it differs from our canonical name
_TBLITE_SPELLING = {"wet octanol": "woctanol"}


@functools.cache
def _engine():
    """Import tblite (once)."""
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    try:
        from tblite import exceptions, interface
    except ImportError as exc:
        raise BackendUnavailable(
            f"the tblite backends need tblite (pip install tblite): {exc}") from exc
    return interface, (exceptions.TBLiteRuntimeError, exceptions.TBLiteValueError,
                       exceptions.TBLiteTypeError)


def _engine_log(message: str) -> None:
    """Receives the engine's printout (routed to logging instead of stdout)."""
    _log.debug("tblite: %s", message.rstrip())


class _TbliteBackend(Backend):
    """Common code of the tblite backends (see :class:`TbliteGFN2`)."""

    capabilities: ClassVar[frozenset[str]] = frozenset(
        {"energy", "gradient", "dipole", "charges", "solvent"})
    elements: ClassVar[frozenset[int] | None] = frozenset(range(1, 87))
    _method: ClassVar[str] = "GFN2-xTB"
    _family: ClassVar[str] = "gfn2"
    _option_names: ClassVar[tuple[str, ...]] = ("accuracy", "electronic_temperature",
                                                 "max_iterations", "solvent_model")

    def __init__(self, mol, *, charge=None, multiplicity=None, solvent=None, **options):
        unknown = sorted(set(options) - set(self._option_names))
        if unknown:
            raise InputError(f"method {self.name!r} accepts the options "
                             f"{list(self._option_names)}, got {unknown}")
        model = options.pop("solvent_model", "alpb")
        if not isinstance(model, str) or model.lower() not in ("alpb", "gbsa"):
            raise InputError(f"solvent_model must be 'alpb' or 'gbsa', got {model!r}")
        _check_options(options)
        super().__init__(mol, charge=charge, multiplicity=multiplicity, solvent=solvent,
                         **options)
        self.solvent = resolve_solvent(solvent, self._family, model.lower())
        if self.solvent is not None:
            self.options["solvent_model"] = model.lower()
        self._calculator = None
        self._solution = None  # the last SCF solution, kept only inside continuation()
        _engine()  # fail early (BackendUnavailable) if tblite is missing

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
        interface, _ = _engine()
        calc = interface.Calculator(self._method, self.numbers, positions_bohr,
                                    charge=float(self.charge), uhf=self.multiplicity - 1,
                                    color=False, logger=_engine_log)
        calc.set("verbosity", 0)
        if "accuracy" in self.options:
            calc.set("accuracy", float(self.options["accuracy"]))
        if "electronic_temperature" in self.options:
            # tblite takes the smearing temperature as k_B*T in hartree
            calc.set("temperature",
                     float(self.options["electronic_temperature"]) * BOLTZMANN / HARTREE_J)
        if "max_iterations" in self.options:
            calc.set("max-iter", int(self.options["max_iterations"]))
        if self.solvent is not None:
            calc.add(f"{self.options['solvent_model']}-solvation",
                     _TBLITE_SPELLING.get(self.solvent, self.solvent))
        return calc

    def _compute(self, positions: np.ndarray, gradient: bool) -> BackendResult:
        _, errors = _engine()
        xyz = np.ascontiguousarray(positions * ANGSTROM_BOHR)
        try:
            # The calculator is reused across calls; each call starts from a fresh guess,
            # except inside continuation() where it starts from the previous solution.
            if self._calculator is None:
                self._calculator = self._new_calculator(xyz)
            else:
                self._calculator.update(xyz)
            previous = self.__dict__.get("_solution") if self._continuing else None
            if previous is None:
                res = self._calculator.singlepoint()
            else:
                try:
                    res = self._calculator.singlepoint(previous)
                except errors:  # a restart that fails gets a fresh guess
                    self._calculator = self._new_calculator(xyz)
                    res = self._calculator.singlepoint()
            self._solution = res if self._continuing else None
            energy = float(res.get("energy"))
            grad = res.get("gradient") * ANGSTROM_BOHR if gradient else None
            dipole = res.get("dipole")
            charges = res.get("charges")
        except errors as exc:
            self._calculator = None  # do not reuse an engine object after a failure
            self._solution = None
            raise CalculationFailed(f"{self.name} calculation failed: {exc}") from exc
        if not np.isfinite(energy):
            self._calculator = None
            self._solution = None
            raise CalculationFailed(f"{self.name} returned a non-finite energy ({energy})")
        return BackendResult(energy=energy, gradient=grad, dipole=dipole, charges=charges)


class TbliteGFN2(_TbliteBackend):
    """GFN2-xTB through tblite.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens (elements H-Rn).
    charge, multiplicity : int, optional
        Total charge and spin multiplicity (``uhf = multiplicity - 1``).
    solvent : str or None
        Implicit solvent, any spelling accepted by
        :func:`confpop.backends.xtb.canonical_solvent`.
    solvent_model : {"alpb", "gbsa"}
        Implicit solvent model (default ALPB; solvation free energy "gsolv" state).
    accuracy : float, optional
        SCF accuracy (lower is tighter; engine default 1.0).
    electronic_temperature : float, optional
        Fermi smearing temperature in K (engine default ~300 K).
    max_iterations : int, optional
        SCF iteration limit (engine default 250).

    References
    ----------
    C. Bannwarth, S. Ehlert, S. Grimme, J. Chem. Theory Comput. 2019, 15, 1652,
    doi:10.1021/acs.jctc.8b01176. ALPB: S. Ehlert, M. Stahn, S. Spicher, S. Grimme,
    J. Chem. Theory Comput. 2021, 17, 4250, doi:10.1021/acs.jctc.1c00471.
    """

    name: ClassVar[str] = "tblite-gfn2"
    _method: ClassVar[str] = "GFN2-xTB"
    _family: ClassVar[str] = "gfn2"


class TbliteGFN1(_TbliteBackend):
    """GFN1-xTB through tblite (options as :class:`TbliteGFN2`).

    References
    ----------
    S. Grimme, C. Bannwarth, P. Shushkov, J. Chem. Theory Comput. 2017, 13, 1989,
    doi:10.1021/acs.jctc.7b00118.
    """

    name: ClassVar[str] = "tblite-gfn1"
    _method: ClassVar[str] = "GFN1-xTB"
    _family: ClassVar[str] = "gfn1"
