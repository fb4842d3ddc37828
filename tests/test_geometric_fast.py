"""The geomeTRIC acceleration behind its version check, and its fallback.

The reference is geomeTRIC's own coordinate classes: whichever path confpop takes, an
optimization must reach the minimum geomeTRIC's own classes reach (MMFF94 butane keeps
this cheap), and an unsupported geomeTRIC version must say so in one warning naming the
version.
"""

import warnings

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

import confpop.geometric_fast as fast
import confpop.optimize as optimize_module
from confpop.backends import get_backend
from confpop.errors import InputError
from confpop.geometric_fast import GeometricVersionWarning, version_supported
from confpop.optimize import optimize_positions


@pytest.fixture(scope="module")
def butane_mmff():
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    assert AllChem.EmbedMolecule(mol, randomSeed=42) == 0
    return mol, mol.GetConformer().GetPositions()


@pytest.fixture
def fresh_warnings():
    fast._fallback_once.cache_clear()
    yield
    fast._fallback_once.cache_clear()


@pytest.mark.parametrize("version, ok", [("1.1.1", True), ("1.1", True), ("1.1.2rc1", True),
                                         ("1.0.2", False), ("1.2", False), ("2.0.0", False),
                                         ("unknown", False), ("", False)])
def test_version_range(version, ok):
    assert version_supported(version) is ok


def test_installed_geometric_is_supported():
    # the upper pin in pyproject.toml and SUPPORTED_VERSIONS must admit what we test with
    assert version_supported(fast.geometric_version())
    cls, accelerated = fast.coordinate_classes("lindh")
    assert accelerated and cls.hessian_guess == "lindh"


def test_unsupported_version_falls_back_with_a_warning(butane_mmff, monkeypatch,
                                                       fresh_warnings):
    from geometric.internal import DelocalizedInternalCoordinates

    mol, start = butane_mmff
    backend = get_backend("mmff94", mol)
    reference = optimize_positions(backend, start, convergence="normal",
                                   hessian_guess="geometric")
    monkeypatch.setattr(fast, "geometric_version", lambda: "9.9.0")
    with pytest.warns(GeometricVersionWarning, match=r"geomeTRIC 9\.9\.0.*own coordinate"):
        cls, accelerated = fast.coordinate_classes("lindh")
    assert cls is DelocalizedInternalCoordinates and not accelerated
    with warnings.catch_warnings():
        warnings.simplefilter("error", GeometricVersionWarning)  # once per version
        fallback = optimize_positions(backend, start, convergence="normal",
                                      hessian_guess="lindh")
    assert fallback.converged
    # geomeTRIC's own classes with geomeTRIC's guess: the same steps as the accelerated ones
    assert fallback.gradient_calls == reference.gradient_calls
    assert fallback.energy == pytest.approx(reference.energy, abs=1e-8)


def test_renamed_internals_fall_back_with_a_warning(butane_mmff, monkeypatch, fresh_warnings):
    mol, start = butane_mmff

    def broken():
        raise AttributeError("DelocalizedInternalCoordinates.GInverse is missing")

    monkeypatch.setattr(fast, "_accelerated_classes", broken)
    with pytest.warns(GeometricVersionWarning, match="internals changed"):
        res = optimize_positions(get_backend("mmff94", mol), start, convergence="normal")
    assert res.converged


@pytest.mark.parametrize("guess", ["lindh", "lindh-primitive"])
def test_model_hessian_reaches_the_same_minimum(butane_mmff, guess):
    mol, start = butane_mmff
    backend = get_backend("mmff94", mol)
    own = optimize_positions(backend, start, convergence="verytight",
                             hessian_guess="geometric")
    model = optimize_positions(backend, start, convergence="verytight", hessian_guess=guess)
    assert model.converged
    assert model.energy == pytest.approx(own.energy, abs=1e-7)  # hartree
    aligned = model.positions - model.positions.mean(0)
    ref = own.positions - own.positions.mean(0)
    # same structure: compare the sorted interatomic distances (no alignment needed)
    d = lambda x: np.sort(np.linalg.norm(x[:, None] - x[None], axis=2).ravel())  # noqa: E731
    np.testing.assert_allclose(d(aligned), d(ref), atol=1e-3)


def test_model_hessian_with_a_driven_dihedral(butane_mmff):
    mol, start = butane_mmff
    res = optimize_positions(get_backend("mmff94", mol), start, convergence="normal",
                             hessian_guess="lindh", dihedral_constraints=[((0, 1, 2, 3), 100.0)])
    assert res.converged
    from confpop.geometry import dihedral_at
    assert float(dihedral_at(res.positions, (0, 1, 2, 3))) == pytest.approx(100.0, abs=0.1)


def test_several_fragments_keep_geometric_guess():
    # TRIC's overall translations and rotations have no curvature in Lindh's model: for
    # several fragments the model classes must hand out geomeTRIC's own guess
    from geometric.internal import DelocalizedInternalCoordinates
    from geometric.molecule import Molecule

    mol = Chem.AddHs(Chem.MolFromSmiles("C.N"))
    assert AllChem.EmbedMolecule(mol, randomSeed=3) == 0
    molecule = Molecule()
    molecule.elem = [a.GetSymbol() for a in mol.GetAtoms()]
    molecule.xyzs = [mol.GetConformer().GetPositions()]
    molecule.build_topology()
    x = molecule.xyzs[0].ravel() * 1.8897261
    own = DelocalizedInternalCoordinates(molecule, build=True, connect=False)
    model = fast.coordinate_classes("lindh")[0](molecule, build=True, connect=False)
    np.testing.assert_allclose(model.Vecs @ model.guess_hessian(x) @ model.Vecs.T,
                               own.Vecs @ own.guess_hessian(x) @ own.Vecs.T, atol=1e-10)


def test_bad_hessian_guess_is_refused(butane_mmff):
    mol, start = butane_mmff
    with pytest.raises(InputError, match="hessian_guess must be one of"):
        optimize_positions(get_backend("mmff94", mol), start, hessian_guess="exact")


def test_default_hessian_guess_is_a_known_one():
    assert optimize_module.DEFAULT_HESSIAN_GUESS in fast.HESSIAN_GUESSES
