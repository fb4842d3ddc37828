"""The one protocol every energy engine implements.

A backend is bound to one molecule (its topology, charge, multiplicity, solvent and engine
settings) when it is made, and then answers ``compute(positions)``. Positions are in
angstrom (RDKit's unit); energies come back in hartree and gradients in hartree/angstrom.
Backends never cache: caching is the result store's job.
"""

from __future__ import annotations

import contextlib
import dataclasses
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from rdkit import Chem

from ..errors import InputError

__all__ = ["BackendResult", "Backend", "CAPABILITIES"]

CAPABILITIES = frozenset({"energy", "gradient", "dipole", "charges", "solvent"})


@dataclass(frozen=True)
class BackendResult:
    """What one engine call returns.

    Attributes
    ----------
    energy : float, hartree
        Total energy (electronic energy for tight-binding, steric energy for force fields).
    gradient : (n_atoms, 3) array, hartree/angstrom, or None
        dE/dx; read-only.
    dipole : (3,) array, e*bohr (atomic units), or None
    charges : (n_atoms,) array, elementary charges, or None
    """

    energy: float
    gradient: np.ndarray | None = None
    dipole: np.ndarray | None = None
    charges: np.ndarray | None = None

    def __post_init__(self):
        for name in ("gradient", "dipole", "charges"):
            value = getattr(self, name)
            if value is not None:
                arr = np.array(value, dtype=float)
                arr.setflags(write=False)
                object.__setattr__(self, name, arr)
        object.__setattr__(self, "energy", float(self.energy))


class Backend:
    """Base class of all energy engines.

    Subclasses set ``name`` and ``capabilities`` and implement :meth:`_compute`.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        The molecule with explicit hydrogens; its atom order is the order of ``positions``.
    charge : int, optional
        Total charge; default: the sum of the formal charges of ``mol``.
    multiplicity : int, optional
        Spin multiplicity 2S+1; default: 1 + the number of radical electrons of ``mol``.
    solvent : str or None
        Implicit solvent name, for backends with the "solvent" capability.
    """

    name: ClassVar[str] = "base"
    capabilities: ClassVar[frozenset[str]] = frozenset({"energy"})
    #: elements (atomic numbers) the method has parameters for; None means "all"
    elements: ClassVar[frozenset[int] | None] = None

    def __init__(self, mol: Chem.Mol, *, charge: int | None = None,
                 multiplicity: int | None = None, solvent: str | None = None, **options):
        if not isinstance(mol, Chem.Mol):
            raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
        self.mol = Chem.Mol(mol)
        self.numbers = np.array([a.GetAtomicNum() for a in mol.GetAtoms()], dtype=int)
        self.charge = int(Chem.GetFormalCharge(mol) if charge is None else charge)
        n_rad = sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms())
        self.multiplicity = int(1 + n_rad if multiplicity is None else multiplicity)
        if self.multiplicity < 1:
            raise InputError(f"multiplicity must be >= 1, got {self.multiplicity}")
        n_electrons = int(self.numbers.sum()) - self.charge
        if (n_electrons + self.multiplicity - 1) % 2:
            raise InputError(
                f"multiplicity {self.multiplicity} is impossible with {n_electrons} electrons "
                f"(charge {self.charge}); an even electron count needs an odd multiplicity")
        if solvent is not None and "solvent" not in self.capabilities:
            raise InputError(f"backend {self.name!r} has no implicit solvent model; "
                             f"got solvent={solvent!r}")
        self.solvent = solvent
        self.options = dict(options)
        self._check_elements()

    def _check_elements(self) -> None:
        if self.elements is None:
            return
        bad = [f"{a.GetSymbol()}{a.GetIdx() + 1}" for a in self.mol.GetAtoms()
               if a.GetAtomicNum() not in self.elements]
        if bad:
            raise InputError(f"method {self.name!r} has no parameters for atoms {', '.join(bad)}")

    def settings(self) -> dict:
        """Everything that determines this backend's numbers (used in store keys and provenance)."""
        return {"method": self.name, "charge": self.charge, "multiplicity": self.multiplicity,
                "solvent": self.solvent, **{k: self.options[k] for k in sorted(self.options)}}

    def compute(self, positions, *, gradient: bool = True) -> BackendResult:
        """Energy (and gradient) at ``positions``.

        Parameters
        ----------
        positions : (n_atoms, 3) array, angstrom
        gradient : bool
            Whether the gradient is needed.

        Returns
        -------
        BackendResult

        Raises
        ------
        InputError
            Wrong shape or non-finite coordinates.
        CalculationFailed
            The engine ran but failed (the message carries the engine's reason).
        """
        pos = np.asarray(positions, dtype=float)
        if pos.shape != (len(self.numbers), 3):
            raise InputError(f"positions must have shape ({len(self.numbers)}, 3), got {pos.shape}")
        if not np.all(np.isfinite(pos)):
            raise InputError("positions contain NaN or infinite values")
        if gradient and "gradient" not in self.capabilities:
            raise InputError(f"backend {self.name!r} provides no gradient")
        return self._compute(pos, gradient)

    def _compute(self, positions: np.ndarray, gradient: bool) -> BackendResult:  # pragma: no cover
        raise NotImplementedError

    #: whether :meth:`continuation` makes a difference (engines that can restart an SCF)
    restarts: ClassVar[bool] = False

    @contextlib.contextmanager
    def continuation(self):
        """Within this block, each call may start from the previous call's solution.

        For a sequence of nearby geometries (the steps of one optimization) an engine with
        a self-consistent field starts each SCF from the last converged one instead of a
        fresh guess: fewer SCF iterations, the same converged energies (xtb-python GFN2
        along optimization paths: within 1e-8 hartree of a fresh guess, see
        :mod:`confpop.backends.xtb`). Outside the block every call starts fresh, so a
        single result never depends on the call history. Nesting is allowed.
        """
        depth = self.__dict__.get("_continuation_depth", 0)
        self._continuation_depth = depth + 1
        try:
            yield self
        finally:
            self._continuation_depth = depth
            if depth == 0:
                self._forget_solution()

    @property
    def _continuing(self) -> bool:
        return self.__dict__.get("_continuation_depth", 0) > 0

    def _forget_solution(self) -> None:
        """Drop a stored SCF solution (engines that keep one override this)."""

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.name} charge={self.charge} mult={self.multiplicity} solvent={self.solvent}>"
