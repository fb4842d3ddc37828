"""Energy engines behind one protocol, found by name.

The registry maps a method name to ``"module:Class"``; the module is imported only when the
method is asked for, so a missing engine costs nothing until it is used.

Examples
--------
>>> "gfn2" in available_backends()
True
"""

from __future__ import annotations

import importlib

from ..errors import BackendUnavailable, InputError
from .base import Backend, BackendResult

__all__ = ["Backend", "BackendResult", "get_backend", "backend_class", "register_backend",
           "available_backends"]

_REGISTRY: dict[str, str] = {
    "mmff94": "confpop.backends.forcefield:MMFF94",
    "mmff94s": "confpop.backends.forcefield:MMFF94s",
    "uff": "confpop.backends.forcefield:UFF",
    "gfn2": "confpop.backends.xtb:GFN2",
    "gfn1": "confpop.backends.xtb:GFN1",
    "gfnff": "confpop.backends.xtb:GFNFF",
    "tblite-gfn2": "confpop.backends.tblite:TbliteGFN2",
    "tblite-gfn1": "confpop.backends.tblite:TbliteGFN1",
    "model": "confpop.backends.model:ModelTorsion",
    "dft": "confpop.backends.dft:DFT",
}

_EXTRA = {"confpop.backends.xtb": "xtb (pip install xtb typing_extensions)",
          "confpop.backends.tblite": "tblite (pip install tblite)",
          "confpop.backends.dft": "pyscf and dftd3 (pip install 'confpop[dft]')"}


def available_backends() -> list[str]:
    """Names of all registered methods (installed or not)."""
    return sorted(_REGISTRY)


def register_backend(name: str, target) -> None:
    """Register a backend class (or a ``"module:Class"`` string) under ``name``.

    Raises
    ------
    InputError
        If ``name`` is already registered.
    """
    key = name.lower()
    if key in _REGISTRY:
        raise InputError(f"a backend named {name!r} is already registered ({_REGISTRY[key]})")
    if isinstance(target, str):
        _REGISTRY[key] = target
    else:
        _REGISTRY[key] = f"{target.__module__}:{target.__qualname__}"


def backend_class(name: str) -> type[Backend]:
    """The class registered under ``name`` (imports its module)."""
    if not isinstance(name, str) or name.lower() not in _REGISTRY:
        raise InputError(f"method must be one of {available_backends()}, got {name!r}")
    module_name, cls_name = _REGISTRY[name.lower()].split(":")
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        need = _EXTRA.get(module_name, exc.name or module_name)
        raise BackendUnavailable(f"method {name!r} needs {need}: {exc}") from exc
    return getattr(module, cls_name)


def get_backend(name: str, mol, **kwargs) -> Backend:
    """Make the backend ``name`` bound to ``mol`` (see :class:`Backend` for the keywords)."""
    return backend_class(name)(mol, **kwargs)
