"""Force fields through RDKit: MMFF94, MMFF94s and UFF.

Energies are steric energies (kcal/mol in RDKit, hartree here); only differences between
conformers of one molecule mean anything.

References
----------
Halgren, J. Comput. Chem. 1996, 17, 490 (MMFF94), doi:10.1002/(SICI)1096-987X(199604)17:5/6<490::AID-JCC1>3.0.CO;2-P
Halgren, J. Comput. Chem. 1999, 20, 720 (MMFF94s), doi:10.1002/(SICI)1096-987X(199905)20:7<720::AID-JCC7>3.0.CO;2-X
Rappé et al., J. Am. Chem. Soc. 1992, 114, 10024 (UFF), doi:10.1021/ja00051a040
"""

from __future__ import annotations

import numpy as np
from rdkit import Chem, RDLogger
from rdkit.Chem import rdForceFieldHelpers as ffh
from rdkit.Geometry import Point3D

from ..errors import InputError
from ..units import convert
from .base import Backend, BackendResult

__all__ = ["MMFF94", "MMFF94s", "UFF", "minimize_conformers", "sampling_force_field",
           "SAMPLING_FALLBACKS"]

_KCAL_TO_HARTREE = convert(1.0, "kcal/mol", "hartree")


# elements MMFF94 has atom types for (Halgren 1996, Table I; the ions only as free ions)
_MMFF_ELEMENTS = frozenset({1, 6, 7, 8, 9, 14, 15, 16, 17, 35, 53, 3, 11, 12, 19, 20, 26, 29, 30})


def _mmff_missing_atoms(mol: Chem.Mol, variant: str) -> list[str]:
    """Atoms MMFF cannot type (empty list when the whole molecule is parameterised)."""
    RDLogger.DisableLog("rdApp.*")
    try:
        props = ffh.MMFFGetMoleculeProperties(mol, mmffVariant=variant)
        if props is not None and ffh.MMFFHasAllMoleculeParams(mol):
            return []
        bad = [f"{a.GetSymbol()}{a.GetIdx() + 1}" for a in mol.GetAtoms()
               if a.GetAtomicNum() not in _MMFF_ELEMENTS
               or (props is not None and props.GetMMFFAtomType(a.GetIdx()) == 0)]
        return bad or ["a bond, angle or torsion term of this molecule"]
    finally:
        RDLogger.EnableLog("rdApp.*")


class _QuietRDKit:
    """Keep RDKit's C++ log lines (UFFTYPER, MMFF typing) off the user's terminal."""

    def __enter__(self):
        RDLogger.DisableLog("rdApp.*")
        return self

    def __exit__(self, *exc):
        RDLogger.EnableLog("rdApp.*")
        return False


def _uff_types(mol: Chem.Mol) -> bool:
    with _QuietRDKit():
        return bool(ffh.UFFHasAllMoleculeParams(mol))


#: Force fields tried, in order, when the requested one cannot type a molecule: UFF where
#: RDKit's UFF typer knows every atom, else GFN-FF (xtb-python: parameters for Z = 1-86).
#: Molecules with a d- or f-block metal go to GFN-FF directly: UFF typed cis-[Pt(NH3)2Cl2]
#: (@SP1) but relaxed it to N-Pt-N 84-100 degrees with no trans pair left (measured here),
#: GFN-FF kept it square planar (88-90 and 177 degrees).
SAMPLING_FALLBACKS = ("uff", "gfnff")


def is_metal(z: int) -> bool:
    """d- and f-block elements (Sc-Zn, Y-Cd, La-Hg, Ac-Cn)."""
    return 21 <= z <= 30 or 39 <= z <= 48 or 57 <= z <= 80 or 89 <= z <= 112


def _has_metal(mol: Chem.Mol) -> bool:
    return any(is_metal(a.GetAtomicNum()) for a in mol.GetAtoms())


def sampling_force_field(mol: Chem.Mol, preferred: str = "mmff94s") -> tuple[str, str]:
    """The force field that relaxes trial structures of ``mol``, and why (empty when it is
    the preferred one).

    MMFF94s has no parameters for metals and hypervalent main-group atoms (SF6, PCl5);
    such molecules are relaxed with UFF where it types every atom, else with GFN-FF.

    Raises
    ------
    InputError
        No force field covers the molecule (the message names the atoms).
    """
    preferred = preferred.lower()
    reasons = []
    if preferred in ("mmff94", "mmff94s"):
        bad = _mmff_missing_atoms(mol, "MMFF94s" if preferred == "mmff94s" else "MMFF94")
        if not bad:
            return preferred, ""
        reasons.append(f"{preferred} has no parameters for {', '.join(bad)}")
    elif preferred == "uff":
        if _uff_types(mol):
            return preferred, ""
        reasons.append("uff cannot type every atom")
    elif preferred == "gfnff":
        return preferred, ""
    else:
        raise InputError(f"sampling force field must be 'mmff94', 'mmff94s', 'uff' or 'gfnff', "
                         f"got {preferred!r}")
    for candidate in SAMPLING_FALLBACKS:
        if candidate == preferred:
            continue
        if candidate == "uff":
            if _has_metal(mol):
                reasons.append("uff does not hold metal coordination geometries")
                continue
            if _uff_types(mol):
                return "uff", "; ".join(reasons)
            reasons.append("uff cannot type every atom")
        else:
            from . import get_backend
            try:
                get_backend("gfnff", mol)
            except Exception as exc:  # noqa: BLE001 - the engine says why
                reasons.append(f"gfnff: {exc}")
                continue
            return "gfnff", "; ".join(reasons)
    raise InputError("no force field can relax this molecule's trial structures: "
                     + "; ".join(reasons))


class _RDKitForceField(Backend):
    capabilities = frozenset({"energy", "gradient"})

    def __init__(self, mol, **kwargs):
        super().__init__(mol, **kwargs)
        self._mol = Chem.Mol(self.mol)
        if self._mol.GetNumConformers() == 0:
            conf = Chem.Conformer(self._mol.GetNumAtoms())
            conf.Set3D(True)
            self._mol.AddConformer(conf, assignId=True)
        self._check_parameters()
        self._ff = None

    def _check_parameters(self) -> None:  # pragma: no cover - overridden
        raise NotImplementedError

    def _forcefield(self, conf_id: int = -1):
        raise NotImplementedError

    def _compute(self, positions, gradient):
        if self._ff is None:
            self._ff = self._forcefield()
        flat = positions.ravel().tolist()
        energy = self._ff.CalcEnergy(flat) * _KCAL_TO_HARTREE
        grad = None
        if gradient:
            grad = np.asarray(self._ff.CalcGrad(flat)).reshape(-1, 3) * _KCAL_TO_HARTREE
        return BackendResult(energy=energy, gradient=grad)


class MMFF94(_RDKitForceField):
    """MMFF94 through RDKit."""

    name = "mmff94"
    variant = "MMFF94"

    def _check_parameters(self):
        bad = _mmff_missing_atoms(self._mol, self.variant)
        if bad:
            raise InputError(f"method {self.name!r} has no parameters for atoms {', '.join(bad)}; "
                             "try method='uff' or a tight-binding method")
        self._props = ffh.MMFFGetMoleculeProperties(self._mol, mmffVariant=self.variant)

    def _forcefield(self, conf_id=-1):
        return ffh.MMFFGetMoleculeForceField(self._mol, self._props, confId=conf_id,
                                             ignoreInterfragInteractions=False)


class MMFF94s(MMFF94):
    """MMFF94s (planar-nitrogen variant, the usual choice for conformer work) through RDKit."""

    name = "mmff94s"
    variant = "MMFF94s"


class UFF(_RDKitForceField):
    """The universal force field through RDKit."""

    name = "uff"

    def _check_parameters(self):
        if not _uff_types(self._mol):
            raise InputError("method 'uff' has no parameters for some atom of this molecule "
                             f"({Chem.MolToSmiles(Chem.RemoveHs(self._mol))})")

    def _forcefield(self, conf_id=-1):
        return ffh.UFFGetMoleculeForceField(self._mol, confId=conf_id,
                                            ignoreInterfragInteractions=False)


def minimize_conformers(mol: Chem.Mol, method: str = "mmff94s", max_iterations: int = 2000,
                        threads: int = 0) -> tuple[Chem.Mol, list[tuple[bool, float]]]:
    """Minimize every conformer of ``mol`` with RDKit's own minimizer (multi-threaded).

    Parameters
    ----------
    mol : Chem.Mol
        Molecule with explicit hydrogens and conformers.
    method : {"mmff94", "mmff94s", "uff", "gfnff"}
        "gfnff" (xtb-python) relaxes one conformer after another (L-BFGS-B, "tight"):
        for molecules no RDKit force field types (metals).
    max_iterations : int
        Minimizer iterations per conformer; a conformer that hits the limit is reported as
        not converged.
    threads : int
        0 uses every core.

    Returns
    -------
    mol : Chem.Mol
        A new molecule with the minimized conformers (same conformer ids).
    results : list of (converged, energy_hartree)
        One per conformer, in conformer order.
    """
    method = method.lower()
    out = Chem.Mol(mol)
    if method in ("mmff94", "mmff94s"):
        cls = MMFF94 if method == "mmff94" else MMFF94s
        cls(out)  # checks parameters with a clear error
        raw = ffh.MMFFOptimizeMoleculeConfs(out, numThreads=threads, maxIters=max_iterations,
                                            mmffVariant=cls.variant)
    elif method == "uff":
        UFF(out)
        with _QuietRDKit():
            raw = ffh.UFFOptimizeMoleculeConfs(out, numThreads=threads, maxIters=max_iterations)
    elif method == "gfnff":
        from ..errors import CalculationFailed
        from ..optimize import optimize_positions
        from . import get_backend
        backend = get_backend("gfnff", out)
        results = []
        for conf in out.GetConformers():
            try:
                # L-BFGS-B in Cartesians: GFN-FF gradients cost ~0.1 ms, so its many cheap
                # steps beat geomeTRIC's ~1 s of coordinate work per structure (measured on
                # cisplatin: 0.02 s vs 0.8-2.2 s; "tight" ends within 0.001 hartree of
                # "verytight", the same square-planar structure)
                res = optimize_positions(backend, conf.GetPositions(), convergence="tight",
                                         engine="lbfgs", max_steps=max_iterations)
            except CalculationFailed:
                results.append((False, float("nan")))
                continue
            set_positions(out, conf.GetId(), res.positions)
            results.append((bool(res.converged), float(res.energy)))
        return out, results
    else:
        raise InputError(f"method for force-field minimization must be 'mmff94', 'mmff94s' "
                         f"or 'uff', got {method!r}")
    return out, [(flag == 0, e * _KCAL_TO_HARTREE) for flag, e in raw]


def set_positions(mol: Chem.Mol, conf_id: int, positions) -> None:
    """Write (n, 3) angstrom positions into conformer ``conf_id`` of ``mol`` in place."""
    conf = mol.GetConformer(conf_id)
    for i, (x, y, z) in enumerate(np.asarray(positions, dtype=float)):
        conf.SetAtomPosition(i, Point3D(x, y, z))
