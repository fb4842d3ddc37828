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


def _geometric_molecule(mol):
    """geomeTRIC's Molecule of an embedded RDKit molecule, and its coordinates in bohr."""
    from geometric.molecule import Molecule

    molecule = Molecule()
    molecule.elem = [a.GetSymbol() for a in mol.GetAtoms()]
    molecule.xyzs = [mol.GetConformer().GetPositions()]
    molecule.build_topology()
    return molecule, molecule.xyzs[0].ravel() * 1.8897261


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

    mol = Chem.AddHs(Chem.MolFromSmiles("C.N"))
    assert AllChem.EmbedMolecule(mol, randomSeed=3) == 0
    molecule, x = _geometric_molecule(mol)
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


# --- The step work (FastOptimizer, Cholesky G inverse): the reference is geomeTRIC 1.1.1's
# own code (geometric.step, geometric.internal) on the same numbers, or a whole optimization
# by geomeTRIC's own classes from the same start.

def _random_hessian(rng, n, low):
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    values = np.concatenate([[low, 1e-13], rng.uniform(0.01, 2.0, n - 2)])
    return (q * values) @ q.T


@pytest.mark.parametrize("low", [0.3, -0.05], ids=["positive", "one-negative"])
def test_trust_radius_step_equals_geometric_own(low):
    # geomeTRIC inverts H + v I by an SVD for every trial v; confpop by H's eigenvectors.
    # One eigenvalue of H is 1e-13: geomeTRIC drops |lambda + v| <= 1e-12 at v = 0.
    from geometric.step import get_delta_prime_trm, trust_step

    rng = np.random.default_rng(7)
    n = 24
    h = _random_hessian(rng, n, low)
    g = rng.normal(scale=0.02, size=n)
    values, vectors = np.linalg.eigh(h)
    for v in (0.0, 1e-5, 0.07, 0.9):
        ours = fast._trm_step(v, g, h, values, vectors)
        own = get_delta_prime_trm(v, None, g, h, None)
        np.testing.assert_allclose(ours[0], own[0], rtol=1e-9, atol=1e-12)
        assert ours[1] == pytest.approx(own[1], rel=1e-9)
        assert ours[2] == pytest.approx(own[2], rel=1e-9)
    v0 = max(0.0, 1e-5 - values[0])  # geomeTRIC's shift when an eigenvalue is below epsilon
    for target in (0.05, 0.3, 5.0):
        dy, expect = fast._trust_step(
            target, v0, lambda v: fast._trm_step(v, g, h, values, vectors))
        own_dy, own_expect = trust_step(target, v0, None, g, h, None, False)
        np.testing.assert_allclose(dy, own_dy, rtol=1e-8, atol=1e-11)
        assert expect == pytest.approx(own_expect, rel=1e-8)


def test_cholesky_g_inverse_equals_geometric_svd_inverse():
    from geometric.internal import DelocalizedInternalCoordinates

    mol = Chem.AddHs(Chem.MolFromSmiles("COCCN(C)C(=O)C"))  # invented ether-amide
    assert AllChem.EmbedMolecule(mol, randomSeed=5) == 0
    molecule, x = _geometric_molecule(mol)
    ours = fast.coordinate_classes("geometric")[0](molecule, build=True, connect=True)
    own = DelocalizedInternalCoordinates(molecule, build=True, connect=True)
    g = ours.GMatrix(x)
    inverse = fast._cholesky_inverse(g)
    assert inverse is not None  # a DLC G is well conditioned
    np.testing.assert_allclose(inverse, own.GInverse_SVD(x), rtol=0, atol=1e-9)
    np.testing.assert_allclose(ours.GInverse(x), own.GInverse_SVD(x), rtol=0, atol=1e-9)


@pytest.mark.parametrize("spectrum", [[1.0, 0.5, 0.0], [1.0, 0.5, 5e-7], [1.0, 0.5, 2e-6],
                                      [1.0, -0.3, 0.2]],
                         ids=["singular", "below-cut", "below-margin", "indefinite"])
def test_cholesky_inverse_refuses_what_geometric_would_cut(spectrum):
    # geomeTRIC drops eigenvalues below 1e-6 from G's pseudo-inverse; Cholesky must leave
    # such a G (and anything not safely above the cut) to the eigendecomposition
    rng = np.random.default_rng(3)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    assert fast._cholesky_inverse((q * spectrum) @ q.T) is None


def test_cholesky_inverse_of_a_well_conditioned_matrix():
    rng = np.random.default_rng(4)
    q, _ = np.linalg.qr(rng.normal(size=(5, 5)))
    g = (q * [2.0, 1.0, 0.3, 0.01, 1e-4]) @ q.T
    np.testing.assert_allclose(fast._cholesky_inverse(g), np.linalg.inv(g), rtol=1e-10)


def test_optimizer_class_follows_the_coordinates():
    from geometric.optimize import Optimizer

    assert fast.optimizer_class(False) is Optimizer
    assert issubclass(fast.optimizer_class(True), Optimizer)


# invented test molecule: a methoxy-amide, in DLC (the default for one fragment), with
# frozen atoms and a held dihedral, and in TRIC. Two fragments (a molecule and a water) are
# left out on purpose: their flat intermolecular surface makes any rounding change the path
# (MMFF94, 10 starts of N#CCC(=O)NC.O: geomeTRIC's own classes 1,328 gradient calls, the
# accelerated ones before this step work 1,498, after 1,423; the water ends up to 3 angstrom
# elsewhere on every path), so no path is a reference for another there.
_STEP_CASES = {
    "dlc": ("COCC(=O)N(C)C", {}),
    "dlc-constrained": ("COCC(=O)N(C)C",
                        {"frozen_atoms": [5], "dihedral_constraints": [((0, 1, 2, 3), None)]}),
    "tric": ("COCC(=O)N(C)C", {"engine": "geometric-tric"}),
}


def _paths_from(start, backend, monkeypatch, **options):
    # the step work is compared with geomeTRIC's own on geomeTRIC's one-step BFGS update (the
    # multi-secant update, the default, is tested on its own below)
    monkeypatch.setattr(fast, "_SECANT_PAIRS", 1)
    runs = {}
    for path, (accelerate, steps) in {"own": (False, False), "before": (True, False),
                                      "fast": (True, True)}.items():
        monkeypatch.setattr(optimize_module, "_ACCELERATE_GEOMETRIC", accelerate)
        monkeypatch.setattr(fast, "_FAST_STEPS", steps)
        runs[path] = optimize_positions(backend, start, convergence="tight",
                                        hessian_guess="geometric", **options)
    return runs


@pytest.mark.parametrize("case", [c if c != "tric" else pytest.param(c, marks=pytest.mark.slow)
                                  for c in _STEP_CASES])
def test_fast_steps_take_geometric_own_steps(case, monkeypatch):
    # Same algorithm, one Hessian eigendecomposition per step and Cholesky G inverses: from
    # each start the optimization must follow geomeTRIC's own Optimizer and coordinate
    # classes step for step (MMFF94 keeps this cheap): the same gradient calls, final
    # positions within 1e-8 angstrom and energies within 1e-9 hartree.
    smiles, options = _STEP_CASES[case]
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    ids = AllChem.EmbedMultipleConfs(mol, numConfs=2, randomSeed=17)
    assert len(ids) == 2
    backend = get_backend("mmff94", mol)
    for conf_id in ids:
        runs = _paths_from(mol.GetConformer(conf_id).GetPositions(), backend, monkeypatch,
                           **options)
        for path in ("before", "fast"):
            res, own = runs[path], runs["own"]
            assert res.converged == own.converged
            assert res.gradient_calls == own.gradient_calls, path
            assert res.energy == pytest.approx(own.energy, abs=1e-9), path
            np.testing.assert_allclose(res.positions, own.positions, rtol=0, atol=1e-8)


@pytest.mark.slow
def test_fast_steps_with_a_driven_dihedral(monkeypatch):
    # A driven dihedral (geomeTRIC's "$set") amplifies rounding: geomeTRIC's own classes and
    # the accelerated ones as they were before this step work (eigendecomposed G inverses,
    # geomeTRIC's Optimizer) already end 7e-8 angstrom apart here, and up to 2e-3 angstrom
    # apart along the constraint's flat directions for the longer chain COCCN(C)C(=O)CC(C)O
    # (measured, 3 starts, energies within 6e-9 hartree, the same gradient calls). So the
    # step work must keep the steps and the energy, the positions to 1e-6 angstrom.
    from confpop.geometry import dihedral_at

    mol = Chem.AddHs(Chem.MolFromSmiles("COCC(=O)N(C)C"))  # invented methoxy-amide
    ids = AllChem.EmbedMultipleConfs(mol, numConfs=2, randomSeed=17)
    backend = get_backend("mmff94", mol)
    for conf_id in ids:
        runs = _paths_from(mol.GetConformer(conf_id).GetPositions(), backend, monkeypatch,
                           dihedral_constraints=[((0, 1, 2, 3), 75.0)])
        own = runs["own"]
        for path in ("before", "fast"):
            res = runs[path]
            assert res.converged and own.converged
            assert res.gradient_calls == own.gradient_calls, path
            assert res.energy == pytest.approx(own.energy, abs=1e-9), path
            np.testing.assert_allclose(res.positions, own.positions, rtol=0, atol=1e-6)
            assert float(dihedral_at(res.positions, (0, 1, 2, 3))) == pytest.approx(75.0,
                                                                                    abs=0.1)


def test_fast_steps_with_the_model_hessian(monkeypatch):
    # the default initial Hessian has no geomeTRIC counterpart: the step work must not
    # change its path either (reference: the accelerated classes with geomeTRIC's step code)
    monkeypatch.setattr(fast, "_SECANT_PAIRS", 1)  # geomeTRIC's step code has the one-step BFGS
    mol = Chem.AddHs(Chem.MolFromSmiles("CCOC(=O)C[C@H](O)CC"))  # invented hydroxy-ester
    ids = AllChem.EmbedMultipleConfs(mol, numConfs=3, randomSeed=23)
    backend = get_backend("mmff94", mol)
    for conf_id in ids:
        start = mol.GetConformer(conf_id).GetPositions()
        runs = []
        for steps in (False, True):
            monkeypatch.setattr(fast, "_FAST_STEPS", steps)
            runs.append(optimize_positions(backend, start, hessian_guess="lindh-primitive"))
        before, after = runs
        assert after.converged and after.gradient_calls == before.gradient_calls
        assert after.energy == pytest.approx(before.energy, abs=1e-9)
        np.testing.assert_allclose(after.positions, before.positions, rtol=0, atol=1e-8)


# --- The multi-secant Hessian update and the softer torsion guess (issue "Speed"): the
# references are a quadratic surface built with a known Hessian (the secant equations then
# hold exactly: y = A s), geomeTRIC 1.1.1's own BFGS update (geometric.step), and the minima
# geomeTRIC's own classes reach.

def _spd(rng, n, low=0.05, high=2.0):
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return (q * rng.uniform(low, high, n)) @ q.T


def test_multisecant_update_holds_every_secant_of_a_quadratic():
    # on a quadratic E = x.A x / 2 every step s has the gradient change y = A s (by
    # construction), so the updated Hessian must map each kept step onto A s
    rng = np.random.default_rng(5)
    n = 9
    a, h0 = _spd(rng, n), _spd(rng, n)
    s = rng.normal(size=(n, 3))
    y = a @ s
    h = fast.multisecant_update(h0, s, y, asymmetry=1e-8, independence=0.01)
    np.testing.assert_allclose(h @ s, a @ s, rtol=0, atol=1e-10)
    np.testing.assert_allclose(h, h.T, rtol=0, atol=1e-12)
    assert np.linalg.eigvalsh(h).min() > 0  # positive definite, as BFGS keeps it
    # n independent steps determine A completely
    s = rng.normal(size=(n, n))
    h = fast.multisecant_update(h0, s, a @ s, asymmetry=1e-8, independence=1e-3)
    np.testing.assert_allclose(h, a, rtol=0, atol=1e-8)


def test_sequential_bfgs_loses_older_secants_the_block_update_keeps():
    # the reason for the block update: after two BFGS updates (geomeTRIC's own formula) the
    # older secant equation no longer holds on a quadratic; after the block update it does
    from geometric.step import get_hessian_update_bfgs

    rng = np.random.default_rng(8)
    n = 7
    a, h0 = _spd(rng, n), _spd(rng, n)
    s = rng.normal(size=(n, 2))  # newest first
    h_seq = h0.copy()
    for k in (1, 0):  # the older step first
        col = s[:, k:k + 1]
        h_seq = h_seq + get_hessian_update_bfgs(col, a @ col, h_seq)
    h_block = fast.multisecant_update(h0, s, a @ s)
    np.testing.assert_allclose(h_block @ s, a @ s, rtol=0, atol=1e-10)
    np.testing.assert_allclose(h_seq @ s[:, 0], a @ s[:, 0], rtol=0, atol=1e-10)
    assert np.linalg.norm(h_seq @ s[:, 1] - a @ s[:, 1]) > 1e-3 * np.linalg.norm(a @ s[:, 1])


def test_multisecant_update_with_one_step_is_geometric_bfgs():
    from geometric.step import get_hessian_update_bfgs

    rng = np.random.default_rng(11)
    n = 6
    h0 = _spd(rng, n)
    s = rng.normal(size=(n, 1))
    y = _spd(rng, n) @ s
    expected = h0 + get_hessian_update_bfgs(s, y, h0)
    np.testing.assert_allclose(fast.multisecant_update(h0, s, y), expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("older", ["parallel", "inconsistent", "negative curvature"])
def test_multisecant_update_leaves_out_unusable_older_steps(older):
    # an older step parallel to the newest, one whose gradient change comes from another
    # surface (S^T Y far from symmetric) or one of negative curvature must be left out:
    # the result is then the BFGS update with the newest step alone
    from geometric.step import get_hessian_update_bfgs

    rng = np.random.default_rng(21)
    n = 6
    a, h0 = _spd(rng, n), _spd(rng, n)
    new = rng.normal(size=n)
    if older == "parallel":
        old = 2.0 * new + 1e-6 * rng.normal(size=n)
        y_old = a @ old
    elif older == "inconsistent":
        old = rng.normal(size=n)
        y_old = _spd(rng, n, 5.0, 10.0) @ old
    else:
        old = rng.normal(size=n)
        y_old = -a @ old
    s = np.column_stack([new, old])
    y = np.column_stack([a @ new, y_old])
    expected = h0 + get_hessian_update_bfgs(s[:, :1], y[:, :1], h0)
    np.testing.assert_allclose(fast.multisecant_update(h0, s, y), expected, rtol=0, atol=1e-10)


def test_soft_guess_halves_only_the_dihedral_force_constants():
    # "lindh-primitive-soft" is Lindh's diagonal with the dihedral constants halved; every
    # other primitive keeps its value (the reference: the "lindh-primitive" guess)
    from geometric.internal import Dihedral

    mol = Chem.AddHs(Chem.MolFromSmiles("CCOC(=O)C"))
    assert AllChem.EmbedMolecule(mol, randomSeed=3) == 0
    molecule, x = _geometric_molecule(mol)
    ic = fast.coordinate_classes("lindh-primitive")[0](molecule, build=True, connect=True)
    plain = np.diag(ic.Prims.lindh_diagonal(x))
    soft = np.diag(ic.Prims.lindh_diagonal(x, torsion_scale=fast._SOFT_TORSION_SCALE))
    dihedral = np.array([type(p) is Dihedral for p in ic.Prims.Internals])
    assert dihedral.sum() > 0
    np.testing.assert_allclose(soft[dihedral], 0.5 * plain[dihedral], rtol=1e-12)
    np.testing.assert_allclose(soft[~dihedral], plain[~dihedral], rtol=1e-12)
    soft_ic = fast.coordinate_classes("lindh-primitive-soft")[0](molecule, build=True,
                                                                  connect=True)
    np.testing.assert_allclose(soft_ic.guess_hessian(x),
                               soft_ic.Vecs.T @ np.diag(soft) @ soft_ic.Vecs, atol=1e-12)


def test_multisecant_path_reaches_geometric_own_minima(monkeypatch):
    # the update changes the path, not the end: MMFF94 minima of an invented hydroxy-ester
    # from three embeddings, against geomeTRIC's own classes and guess (verytight both)
    mol = Chem.AddHs(Chem.MolFromSmiles("CCOC(=O)C[C@H](O)CC"))
    ids = AllChem.EmbedMultipleConfs(mol, numConfs=3, randomSeed=29)
    backend = get_backend("mmff94", mol)
    used = []
    original = fast.multisecant_update

    def counted(*args, **kwargs):
        used.append(args[1].shape[1])
        return original(*args, **kwargs)

    monkeypatch.setattr(fast, "multisecant_update", counted)
    d = lambda x: np.sort(np.linalg.norm(x[:, None] - x[None], axis=2).ravel())  # noqa: E731
    for conf_id in ids:
        start = mol.GetConformer(conf_id).GetPositions()
        monkeypatch.setattr(fast, "_SECANT_PAIRS", 1)
        own = optimize_positions(backend, start, convergence="verytight",
                                 hessian_guess="geometric")
        monkeypatch.setattr(fast, "_SECANT_PAIRS", 3)
        for guess in ("lindh-primitive", "lindh-primitive-soft"):
            res = optimize_positions(backend, start, convergence="verytight",
                                     hessian_guess=guess)
            assert res.converged and own.converged
            assert res.energy == pytest.approx(own.energy, abs=1e-7)  # hartree
            np.testing.assert_allclose(d(res.positions), d(own.positions), atol=2e-3)
    assert used and max(used) > 1  # the block update did run with several steps


def test_constrained_optimizations_keep_the_one_step_update_and_their_own_guess(monkeypatch):
    # the multi-secant update (the default, _SECANT_PAIRS = 3) is for unconstrained steps
    # only, and constrained optimizations (scans) start from CONSTRAINED_HESSIAN_GUESS: with
    # a held dihedral and a frozen atom the block update is never called and the result
    # equals the one-step BFGS path's to 1e-10 angstrom (MMFF94, invented methoxy-amide)
    calls = []
    original = fast.multisecant_update

    def counting(*args, **kwargs):
        calls.append(1)
        return original(*args, **kwargs)

    monkeypatch.setattr(fast, "multisecant_update", counting)
    mol = Chem.AddHs(Chem.MolFromSmiles("COCC(=O)N(C)C"))
    assert AllChem.EmbedMolecule(mol, randomSeed=5) == 0
    start = mol.GetConformer().GetPositions()
    backend = get_backend("mmff94", mol)
    options = {"dihedral_constraints": [((0, 1, 2, 3), None)], "frozen_atoms": [5]}
    monkeypatch.setattr(fast, "_SECANT_PAIRS", 3)
    held = optimize_positions(backend, start, **options)
    assert held.converged and not calls
    monkeypatch.setattr(fast, "_SECANT_PAIRS", 1)
    one_step = optimize_positions(backend, start, **options)
    np.testing.assert_allclose(held.positions, one_step.positions, rtol=0, atol=1e-10)
    assert optimize_module.optimizer_path(constrained=True) == {
        "hessian_guess": optimize_module.CONSTRAINED_HESSIAN_GUESS, "hessian_update_steps": 1}
    # unconstrained, the same start uses the block update
    monkeypatch.setattr(fast, "_SECANT_PAIRS", 3)
    free = optimize_positions(backend, start)
    assert free.converged and calls
