"""GIAO nuclear magnetic shieldings by Kohn-Sham DFT through PySCF.

One function, :func:`compute_shieldings`, turns atoms and coordinates into isotropic
shieldings (ppm) of every nucleus. It is the one place in confpop that imports PySCF's
shielding code, behind a version check.

Which shielding code
--------------------
PySCF itself has no NMR module since 2.0: it lives in the add-on ``pyscf.prop`` (the
``pyscf/properties`` repository of the PySCF developers). Measured here with PySCF 2.14,
B3LYP/def2-SVP, methanol (MMFF geometry), one thread:

* ``pyscf-properties`` 0.1.0 (the only release on the package index, March 2021) fails in
  the DFT grid loop (``assert blksize % BLKSIZE == 0`` in ``pyscf.dft.numint``); the fix is
  merged upstream (pull request 7 of ``pyscf/properties``, January 2025) but not released.
  Hartree-Fock shieldings work. Pinning a PySCF old enough for 0.1.0 would pin every DFT
  energy and gradient of confpop to a years-old PySCF, so that route is not taken.
* ``pyscf-properties-sidereus`` 0.1.1 (package index, January 2026) packages the upstream
  code with that fix: its ``prop/nmr/rks.py`` grid-block lines are identical to upstream's
  master. Methanol: SCF 1.3-1.8 s, shieldings 1.2 s; C 140.4, H(C) 28.2-28.3, H(O) 32.3 ppm
  (B3LYP/def2-SVP).

So confpop uses the upstream PySCF developers' shielding code as packaged by that fork
(extra ``shifts``), pinned to the versions tested (PySCF < 2.15), and checks the code at
import: the GIAO result must not depend on where the molecule sits (gauge-origin
independence is tested in ``tests/test_shifts.py``), and a broken grid loop is caught and
named. When the upstream project releases a fixed ``pyscf-properties``, swap the
requirement; the import path ``pyscf.prop.nmr`` is the same.

Implicit solvent: the upstream shielding code refuses an SCF with a solvent model
(``NotImplementedError('NMR shielding with Solvent')``), so shieldings are gas-phase
(populations may still come from solvated energies). Asking for a solvent here raises
:class:`~confpop.errors.InputError` rather than returning gas-phase numbers under a solvent's
name.

References
----------
Wolinski, Hinton, Pulay, J. Am. Chem. Soc. 1990, 112, 8251, doi:10.1021/ja00179a005 (GIAO).
Sun et al., J. Chem. Phys. 2020, 153, 024109, doi:10.1063/5.0006074 (PySCF).
"""

from __future__ import annotations

import contextlib
import logging
import time
import warnings

import numpy as np

from ..errors import BackendUnavailable, CalculationFailed, InputError

__all__ = ["compute_shieldings", "shielding_versions", "SHIELDING_DEFAULTS",
           "TESTED_PYSCF"]

log = logging.getLogger(__name__)

#: PySCF versions the shielding route was measured with (lower bound inclusive, upper bound
#: exclusive); outside them a ConfpopWarning says the numbers are untested.
TESTED_PYSCF = ((2, 7), (2, 15))

#: defaults of :func:`compute_shieldings`. The level was chosen by the comparison against
#: experiment (``python benchmarks/bench_shifts.py accuracy``, README "Chemical shifts"):
#: on the 15 rigid molecules of confpop.nmr.calibration.CALIBRATION_SET, after our linear
#: scaling, PBE0/def2-SVP gave 13C MAE 1.89 ppm (leave-one-molecule-out 2.16) and 1H 0.125
#: (0.153); B3LYP/def2-SVP 2.34 (2.70) and 0.150 (0.189). Both are hybrids on the same
#: basis and grid, so they cost the same (bench_shifts.py cost). Grid level 3 is PySCF's
#: default.
SHIELDING_DEFAULTS = {"functional": "pbe0", "basis": "def2-svp", "grid_level": 3,
                      "conv_tol": 1e-9, "max_cycle": 100}


def _import_nmr():
    try:
        import pyscf
        from pyscf import dft, gto
        with warnings.catch_warnings():  # the add-on announces its untested modules on import
            warnings.simplefilter("ignore", UserWarning)
            from pyscf.prop import nmr
    except ImportError as exc:
        raise BackendUnavailable(
            "GIAO shieldings need PySCF's shielding add-on (pip install 'confpop[shifts]', "
            "which installs pyscf and pyscf-properties-sidereus)") from exc
    try:
        parts = tuple(int(p) for p in pyscf.__version__.split(".")[:2])
    except ValueError:  # pragma: no cover - exotic version string
        parts = None
    if parts is not None and not (TESTED_PYSCF[0] <= parts < TESTED_PYSCF[1]):
        from ..errors import ConfpopWarning
        warnings.warn(f"GIAO shieldings were tested with PySCF {TESTED_PYSCF[0][0]}."
                      f"{TESTED_PYSCF[0][1]} to below {TESTED_PYSCF[1][0]}.{TESTED_PYSCF[1][1]};"
                      f" this is PySCF {pyscf.__version__}", ConfpopWarning, stacklevel=3)
    return gto, dft, nmr


def shielding_versions() -> dict:
    """Versions of the packages that make the shieldings (None for one not installed)."""
    from importlib.metadata import PackageNotFoundError, version
    out = {}
    for name in ("pyscf", "pyscf-properties-sidereus", "pyscf-properties"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


@contextlib.contextmanager
def _threads(n):
    if n is None:
        yield
        return
    from pyscf import lib
    old = lib.num_threads()
    lib.num_threads(int(n))
    try:
        yield
    finally:
        lib.num_threads(old)


def compute_shieldings(symbols, positions, *, charge: int = 0, multiplicity: int = 1,
                       functional: str = SHIELDING_DEFAULTS["functional"],
                       basis: str = SHIELDING_DEFAULTS["basis"],
                       grid_level: int = SHIELDING_DEFAULTS["grid_level"],
                       conv_tol: float = SHIELDING_DEFAULTS["conv_tol"],
                       max_cycle: int = SHIELDING_DEFAULTS["max_cycle"],
                       solvent=None, threads: int | None = None) -> dict:
    """Isotropic GIAO shieldings of every nucleus of one structure.

    Parameters
    ----------
    symbols : sequence of str
        Element symbols.
    positions : (n_atoms, 3) array, angstrom
    charge, multiplicity : int
        Closed shells only (multiplicity 1).
    functional, basis, grid_level, conv_tol, max_cycle
        Kohn-Sham settings (PySCF/libxc names). ``functional="hf"`` gives Hartree-Fock.
    solvent : None
        Implicit solvent is not available for shieldings (see the module notes); anything
        but None raises InputError.
    threads : int, optional
        PySCF's OpenMP threads for this call.

    Returns
    -------
    dict
        ``shielding_ppm`` (n_atoms,) list of float: isotropic shielding σ = tr(σ)/3;
        ``energy`` (hartree), ``scf_seconds``, ``shielding_seconds``.

    Raises
    ------
    InputError
        Open shell, a solvent, or a basis/functional PySCF does not know.
    CalculationFailed
        SCF not converged (also with second-order SCF), or the shielding code failed.
    BackendUnavailable
        PySCF's shielding add-on is not installed.
    """
    gto, dft, nmr = _import_nmr()
    if solvent is not None:
        raise InputError("GIAO shieldings with an implicit solvent are not available (PySCF's "
                         "shielding code refuses a solvent model); compute them in the gas "
                         f"phase (solvent=None), got solvent={solvent!r}")
    if int(multiplicity) != 1:
        raise InputError(f"GIAO shieldings are for closed shells (multiplicity 1), got "
                         f"multiplicity {multiplicity}")
    xyz = np.asarray(positions, dtype=float)
    symbols = [str(s) for s in symbols]
    if xyz.shape != (len(symbols), 3) or not np.all(np.isfinite(xyz)):
        raise InputError(f"positions must be a finite ({len(symbols)}, 3) array, got shape "
                         f"{xyz.shape}")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            pmol = gto.M(atom=list(zip(symbols, map(tuple, xyz))), basis=str(basis),
                         unit="Angstrom", charge=int(charge), spin=0, verbose=0)
    except (RuntimeError, KeyError, ValueError) as exc:
        raise InputError(f"basis {basis!r} cannot be built for this molecule: "
                         f"{' '.join(str(exc).split())}") from None
    hf = str(functional).lower() == "hf"
    with _threads(threads):
        t0 = time.perf_counter()
        if hf:
            from pyscf import scf
            mf = scf.RHF(pmol)
        else:
            try:
                dft.libxc.parse_xc(str(functional))
            except (KeyError, ValueError, NotImplementedError) as exc:
                raise InputError(f"functional {functional!r} is not known to PySCF/libxc: "
                                 f"{exc}") from None
            mf = dft.RKS(pmol)
            mf.xc = str(functional)
            mf.grids.level = int(grid_level)
        mf.conv_tol = float(conv_tol)
        mf.max_cycle = int(max_cycle)
        energy = mf.kernel()
        if not mf.converged:
            mf = mf.newton()
            energy = mf.kernel(mf.make_rdm1())
        if not mf.converged:
            raise CalculationFailed(f"SCF ({functional}/{basis}) did not converge in "
                                    f"{max_cycle} cycles, also with second-order SCF")
        t1 = time.perf_counter()
        try:
            tensors = (nmr.RHF if hf else nmr.RKS)(mf).kernel()
        except AssertionError as exc:  # the grid-block bug of pyscf-properties 0.1.0
            raise CalculationFailed(
                "PySCF's shielding code failed in its DFT grid loop (pyscf-properties 0.1.0 "
                "does this with PySCF >= 2.3); install pyscf-properties-sidereus instead "
                f"(pip install 'confpop[shifts]'): AssertionError {exc}") from exc
        except NotImplementedError as exc:
            raise CalculationFailed(f"PySCF's shielding code cannot do this: {exc}") from exc
        t2 = time.perf_counter()
    iso = np.trace(np.asarray(tensors), axis1=1, axis2=2) / 3.0
    if not np.all(np.isfinite(iso)):
        raise CalculationFailed("GIAO shieldings came out NaN or infinite")
    return {"shielding_ppm": iso.astype(float).tolist(), "energy": float(energy),
            "scf_seconds": t1 - t0, "shielding_seconds": t2 - t1}
