"""Every public name of confpop resolves (run as other modules add names)."""

import importlib

import pytest

import confpop


@pytest.mark.parametrize("name", sorted(confpop.__all__))
def test_public_name_resolves(name):
    value = getattr(confpop, name)
    assert value is not None
    if name != "__version__":
        module = importlib.import_module(f"confpop.{confpop._PUBLIC[name]}")
        assert getattr(module, name) is value
        # the defining module lists it in its own __all__ too
        assert name in getattr(module, "__all__", [name])


def test_all_is_sorted_unique_and_matches_registry():
    names = [n for n in confpop.__all__ if n != "__version__"]
    assert len(names) == len(set(names))
    assert set(names) == set(confpop._PUBLIC)
    assert "__version__" in confpop.__all__
    assert isinstance(confpop.__version__, str) and confpop.__version__


def test_unknown_name_raises_attribute_error():
    with pytest.raises(AttributeError, match="has no attribute 'no_such_name'"):
        confpop.no_such_name  # noqa: B018


def test_dir_lists_public_names():
    listed = dir(confpop)
    for name in confpop._PUBLIC:
        assert name in listed


@pytest.mark.parametrize("name", sorted(confpop._MACHINERY))
def test_machinery_names_still_resolve_from_the_package(name):
    # moved out of __all__ (plumbing, not science) but importable as before
    value = getattr(confpop, name)
    module = importlib.import_module(f"confpop.{confpop._MACHINERY[name]}")
    assert getattr(module, name) is value
    assert name not in confpop.__all__ and name in dir(confpop)


def test_the_old_module_paths_still_resolve():
    # the split of molecule.py and torsion.py kept every old import path
    from confpop.molecule import (BOND_TOLERANCE, STEREO_POLICIES, SmilesText, _load,  # noqa: F401
                                  _parse_xyz_frames, bond_graph_from_coordinates,
                                  configuration_smiles, load_molecule, molecule_summary,
                                  stereo_signature, stereoisomers)
    from confpop.torsion import (BARRIER_NOTE, BarrierCorrection, Interconversion,  # noqa: F401
                                 Torsion, TorsionProfile, _check_dihedral_atoms, dihedral_angle,
                                 exchange_summary, interconversion, rescore_barrier,
                                 rotatable_torsions, scan_torsion, set_dihedral,
                                 torsion_for_bond, torsion_changes)
    import confpop.molecule
    import confpop.torsion
    assert confpop.molecule._check_int is importlib.import_module("confpop.checks")._check_int
    assert confpop.torsion._walk is importlib.import_module("confpop.torsion_scan")._walk
    with pytest.raises(AttributeError, match="no_such_name"):
        confpop.molecule.no_such_name  # noqa: B018
