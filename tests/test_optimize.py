"""Geometry optimization: minima, constraints, stated non-convergence, quietness.

References used below: the verytight geomeTRIC result and an independent optimizer (ASE's
BFGS driving xtb-python's own ASE calculator) for the same start geometry; n-butane
gauche-anti enthalpy difference 0.67 +- 0.10 kcal/mol (Herrebout et al., J. Phys. Chem.
1995, 99, 578).
"""

import logging
import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdMolTransforms

from confpop.backends import get_backend
from confpop.backends.base import Backend, BackendResult
from confpop.errors import CalculationFailed, InputError
from confpop.optimize import OptimizationResult, optimize_positions, optimize_structure
from confpop.units import convert

CCCC = (0, 1, 2, 3)  # carbon chain of butane from SMILES "CCCC"


def kcal(hartree):
    return convert(hartree, "hartree", "kcal/mol")


def butane_at(phi, seed=42):
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    rdMolTransforms.SetDihedralDeg(mol.GetConformer(), *CCCC, phi)
    return mol


def dihedral(positions, atoms):
    conf = Chem.Conformer(len(positions))
    for i, xyz in enumerate(positions):
        conf.SetAtomPosition(i, xyz.tolist())
    return rdMolTransforms.GetDihedralDeg(conf, *atoms)


def angle_diff(a, b):
    return (a - b + 180.0) % 360.0 - 180.0


@pytest.fixture(scope="module")
def anti_start():
    return butane_at(170.0)


@pytest.fixture(scope="module")
def anti_tight(anti_start):
    backend = get_backend("gfn2", anti_start)
    return optimize_positions(backend, anti_start.GetConformer().GetPositions())


def test_butane_reaches_the_anti_minimum(anti_start, anti_tight):
    backend = get_backend("gfn2", anti_start)
    start = anti_start.GetConformer().GetPositions()
    reference = optimize_positions(backend, start, convergence="verytight")
    assert anti_tight.converged and reference.converged
    assert isinstance(anti_tight, OptimizationResult)
    # design requirement: the default preset is within 0.05 kcal/mol of verytight
    assert kcal(anti_tight.energy - reference.energy) == pytest.approx(0.0, abs=0.05)
    # the anti minimum is at 180 degrees by symmetry
    assert angle_diff(dihedral(anti_tight.positions, CCCC), 180.0) == pytest.approx(0.0, abs=0.5)
    # the reported energy is the backend's energy at the reported positions
    assert backend.compute(anti_tight.positions).energy == pytest.approx(anti_tight.energy,
                                                                         abs=1e-9)
    # the reported gradient summary is small at a tight minimum (hartree/angstrom)
    assert anti_tight.max_gradient == pytest.approx(0.0, abs=3e-4)
    assert 0 < anti_tight.gradient_norm <= anti_tight.max_gradient
    assert anti_tight.gradient_calls >= anti_tight.steps >= 1
    assert not anti_tight.positions.flags.writeable


def test_independent_optimizer_finds_the_same_minimum(anti_start, anti_tight):
    # ASE's BFGS with xtb-python's ASE calculator: another optimizer and another route to
    # the engine (eV and angstrom); the minima must agree within 0.05 kcal/mol.
    from ase import Atoms
    from ase.optimize import BFGS
    from xtb.ase.calculator import XTB

    atoms = Atoms(numbers=[a.GetAtomicNum() for a in anti_start.GetAtoms()],
                  positions=anti_start.GetConformer().GetPositions())
    atoms.calc = XTB(method="GFN2-xTB")
    BFGS(atoms, logfile=None).run(fmax=1e-4, steps=500)
    energy = convert(atoms.get_potential_energy(), "eV", "hartree")
    assert kcal(anti_tight.energy - energy) == pytest.approx(0.0, abs=0.05)


def test_butane_gauche_anti_gap(anti_tight):
    gauche_start = butane_at(65.0)
    backend = get_backend("gfn2", gauche_start)
    gauche = optimize_positions(backend, gauche_start.GetConformer().GetPositions())
    assert gauche.converged
    assert abs(dihedral(gauche.positions, CCCC)) == pytest.approx(65.0, abs=10.0)
    # experiment 0.67 +- 0.10 kcal/mol (Herrebout 1995, a Delta H); GFN2 gives ~0.6 --
    # the tolerance allows the method's typical error, not the optimizer's.
    assert kcal(gauche.energy - anti_tight.energy) == pytest.approx(0.67, abs=0.35)


def test_dihedral_set_to_a_target():
    mol = butane_at(-60.0)
    backend = get_backend("gfn2", mol)
    result = optimize_positions(backend, mol.GetConformer().GetPositions(),
                                dihedral_constraints=[(CCCC, 100.0)])
    assert result.converged, result.message
    assert angle_diff(dihedral(result.positions, CCCC), 100.0) == pytest.approx(0.0, abs=0.1)


def test_dihedral_held_at_its_start_value():
    mol = butane_at(-60.0)
    start = mol.GetConformer().GetPositions()
    held = optimize_positions(get_backend("gfn2", mol), start,
                              dihedral_constraints=[(CCCC, None)])
    assert held.converged
    # unconstrained, the dihedral would relax to the gauche minimum (~67 deg observed)
    assert angle_diff(dihedral(held.positions, CCCC), -60.0) == pytest.approx(0.0, abs=0.1)


def test_frozen_atoms_do_not_move():
    mol = butane_at(-60.0)
    start = mol.GetConformer().GetPositions()
    frozen = [0, 1, 4]
    result = optimize_positions(get_backend("gfn2", mol), start, frozen_atoms=frozen)
    assert result.converged
    # geomeTRIC meets constraints to its tolerance (1e-3 angstrom set here; ~1e-4 observed)
    np.testing.assert_allclose(result.positions[frozen], start[frozen], rtol=0, atol=1e-3)
    moving = [i for i in range(len(start)) if i not in frozen]
    assert np.abs(result.positions[moving] - start[moving]).max() > 0.01


def test_step_limit_is_flagged_not_raised():
    mol = butane_at(-60.0)
    result = optimize_positions(get_backend("gfn2", mol), mol.GetConformer().GetPositions(),
                                max_steps=2)
    assert result.converged is False
    assert result.steps == 2
    assert "max_steps=2" in result.message
    assert np.isfinite(result.energy)


def test_lbfgs_baseline_and_its_limits(anti_start, anti_tight):
    backend = get_backend("gfn2", anti_start)
    start = anti_start.GetConformer().GetPositions()
    result = optimize_positions(backend, start, engine="lbfgs")
    # Cartesian L-BFGS-B tends to stop early on flat torsions; it still lands near the
    # same minimum (observed 0.009 kcal/mol above).
    assert kcal(result.energy - anti_tight.energy) == pytest.approx(0.0, abs=0.1)
    assert "L-BFGS-B" in result.message
    with pytest.raises(InputError, match="engine='lbfgs' has no constraints"):
        optimize_positions(backend, start, engine="lbfgs", frozen_atoms=[0])


def test_engine_failure_raises(anti_start):
    backend = get_backend("gfn2", anti_start, max_iterations=1)
    with pytest.raises(CalculationFailed, match="did not converge"):
        optimize_positions(backend, anti_start.GetConformer().GetPositions())


def test_bad_arguments_are_refused(anti_start):
    backend = get_backend("gfn2", anti_start)
    x = anti_start.GetConformer().GetPositions()
    with pytest.raises(InputError, match="convergence must be one of"):
        optimize_positions(backend, x, convergence="extreme")
    with pytest.raises(InputError, match="convergence criteria must use the keys"):
        optimize_positions(backend, x, convergence={"force": 1e-4})
    with pytest.raises(InputError, match="positions must have shape"):
        optimize_positions(backend, x[:3])
    with pytest.raises(InputError, match="out of range for 14 atoms"):
        optimize_positions(backend, x, frozen_atoms=[14])
    with pytest.raises(InputError, match="4 different atoms"):
        optimize_positions(backend, x, dihedral_constraints=[((0, 1, 1, 2), None)])
    with pytest.raises(InputError, match="dihedral_constraints must be a sequence"):
        optimize_positions(backend, x, dihedral_constraints=[(0, 1, 2, 3)])
    with pytest.raises(InputError, match="max_steps must be an integer >= 1"):
        optimize_positions(backend, x, max_steps=0)
    with pytest.raises(InputError, match="engine must be one of"):
        optimize_positions(backend, x, engine="bfgs")


class _EnergyOnly(Backend):
    name = "energy-only-test"
    capabilities = frozenset({"energy"})

    def _compute(self, positions, gradient):
        return BackendResult(energy=0.0)


def test_backend_without_gradient_is_refused(anti_start):
    with pytest.raises(InputError, match="provides no gradient"):
        optimize_positions(_EnergyOnly(anti_start), anti_start.GetConformer().GetPositions())


def test_optimizer_is_quiet_and_tidy(tmp_path, monkeypatch, capfd, caplog):
    # geomeTRIC logs a lot and writes files; none of it may reach the user.
    monkeypatch.chdir(tmp_path)
    mol = butane_at(-60.0)
    with caplog.at_level(logging.DEBUG):
        result = optimize_positions(get_backend("gfn2", mol), mol.GetConformer().GetPositions(),
                                    convergence="loose", dihedral_constraints=[(CCCC, None)])
    assert result.converged
    assert os.listdir(tmp_path) == []
    captured = capfd.readouterr()
    assert captured.out == ""
    assert captured.err == ""
    assert [r for r in caplog.records if r.name.startswith("geometric")] == []


def test_optimize_structure_returns_a_new_molecule():
    mol = butane_at(170.0)
    before = mol.GetConformer().GetPositions()
    out = optimize_structure(mol, "gfn2", solvent="water", convergence="normal")
    np.testing.assert_array_equal(mol.GetConformer().GetPositions(), before)  # untouched
    assert out is not mol and out.GetNumConformers() == 1
    assert out.GetConformer().GetId() == 0
    assert out.GetBoolProp("converged")
    assert out.GetProp("method") == "gfn2"
    assert out.GetProp("solvent") == "water"
    assert out.GetIntProp("gradient_calls") >= out.GetIntProp("steps") >= 1
    backend = get_backend("gfn2", mol, solvent="water")
    energy = backend.compute(out.GetConformer().GetPositions()).energy
    assert out.GetDoubleProp("energy_hartree") == pytest.approx(energy, abs=1e-9)
    with pytest.raises(InputError, match="no conformer"):
        optimize_structure(Chem.AddHs(Chem.MolFromSmiles("CC")))
    with pytest.raises(InputError, match="conf_id must be one of"):
        optimize_structure(mol, conf_id=7)


def _optimize_in_worker(backend, positions):
    return optimize_positions(backend, positions, convergence="loose")


def test_runs_in_a_fresh_worker_process(anti_start):
    # spawn (not fork): the backend and inputs must pickle; nothing relies on global state
    backend = get_backend("gfn2", anti_start)
    x = anti_start.GetConformer().GetPositions()
    backend.compute(x)  # an engine object now exists inside; it must not be pickled
    local = _optimize_in_worker(backend, x)
    context = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=1, mp_context=context) as pool:
        remote = pool.submit(_optimize_in_worker, backend, x).result(timeout=300)
    assert remote.energy == pytest.approx(local.energy, abs=1e-8)
    assert remote.gradient_calls == local.gradient_calls


# --- vectorized geomeTRIC coordinates -------------------------------------------------
# confpop evaluates geomeTRIC's distances, angles, dihedrals and out-of-plane angles with
# numpy instead of one Python call per primitive. The reference for each check is
# geomeTRIC's own per-primitive code (geometric 1.1.1) on the same coordinates.

# invented test molecule: nitrile (linear angle), amide (out-of-plane), ether chain
NITRILE_AMIDE = "N#CCC(=O)N(C)CCOC"


def _geometric_coordinates(mol, connect):
    from geometric.internal import DelocalizedInternalCoordinates
    from geometric.molecule import Molecule

    from confpop.optimize import _geometric_classes

    molecule = Molecule()
    molecule.elem = [a.GetSymbol() for a in mol.GetAtoms()]
    molecule.xyzs = [mol.GetConformer().GetPositions()]
    molecule.build_topology()
    plain = DelocalizedInternalCoordinates(molecule, build=True, connect=connect)
    fast = _geometric_classes()[2](molecule, build=True, connect=connect)
    return plain, fast


@pytest.mark.parametrize("connect", [False, True], ids=["tric", "dlc"])
def test_vectorized_primitives_equal_geometric_own(connect):
    mol = Chem.AddHs(Chem.MolFromSmiles(NITRILE_AMIDE))
    assert AllChem.EmbedMolecule(mol, randomSeed=11) == 0
    plain, fast = _geometric_coordinates(mol, connect)
    kinds = {type(p).__name__ for p in fast.Prims.Internals}
    assert {"Distance", "Angle", "Dihedral", "OutOfPlane", "LinearAngle"} <= kinds
    assert ("RotationA" in kinds) is not connect  # TRIC adds rotations, DLC does not
    rng = np.random.default_rng(5)
    x = mol.GetConformer().GetPositions().ravel() * 1.8897261  # bohr (any scale will do)
    # a large random displacement: many dihedrals cross +-180 degrees
    y = x + rng.normal(scale=0.4, size=x.shape)
    np.testing.assert_allclose(fast.Prims.calculate(y), plain.Prims.calculate(y),
                               rtol=0, atol=1e-12)
    np.testing.assert_allclose(fast.Prims.derivatives(y), plain.Prims.derivatives(y),
                               rtol=0, atol=1e-12)
    np.testing.assert_allclose(fast.Prims.calcDiff(y, x), plain.Prims.calcDiff(y, x),
                               rtol=0, atol=1e-12)
    # the delocalized coordinates built from them span the same space (the vectors
    # themselves are arbitrary within degenerate eigenvalues), and the G pseudo-inverse
    # (symmetric eigendecomposition here, SVD in geomeTRIC) is the same matrix
    np.testing.assert_allclose(fast.Vecs @ fast.Vecs.T, plain.Vecs @ plain.Vecs.T,
                               rtol=0, atol=1e-8)
    np.testing.assert_allclose(fast.GInverse(y), fast.GInverse_SVD(y), rtol=0, atol=1e-9)


def test_vectorized_primitives_edge_cases():
    # geomeTRIC special-cases exactly linear angles (its own reference axis) and zeroes
    # the dihedral terms of a nearly linear angle; both must match its code.
    from geometric.internal import Angle, Dihedral, Distance, OutOfPlane

    from confpop.optimize import _geometric_classes

    fast_class = _geometric_classes()[1]
    x = np.array([[0.0, 0.0, 0.0], [1.5, 0.0, 0.0], [3.0, 0.0, 0.0],    # a straight line
                  [3.0, 1.4, 0.3], [-0.2, 1.3, -0.4], [1.5, 1e-4, 1.0]]).ravel()
    prims = fast_class.__new__(fast_class)
    prims.Internals = [Angle(0, 1, 2), Angle(2, 1, 0), Angle(3, 2, 1), Dihedral(0, 1, 2, 3),
                       Dihedral(4, 0, 1, 2), Dihedral(4, 0, 2, 3), Dihedral(3, 2, 1, 4),
                       OutOfPlane(1, 0, 2, 5), Distance(5, 1)]
    values = np.array([p.value(x) for p in prims.Internals])
    derivatives = np.array([p.derivative(x) for p in prims.Internals])
    np.testing.assert_allclose(prims.calculate(x), values, rtol=0, atol=1e-12)
    np.testing.assert_allclose(prims.derivatives(x), derivatives, rtol=0, atol=1e-12)
    assert np.isfinite(prims.derivatives(x)).all()
    # periodic differences: -179 deg minus +179 deg is +2 deg, as geomeTRIC wraps it
    y = x.reshape(-1, 3).copy()
    y[3] = [3.0, -1.4, 0.3]
    diffs = [p.calcDiff(y.ravel(), x) for p in prims.Internals]
    np.testing.assert_allclose(prims.calcDiff(y.ravel(), x), diffs, rtol=0, atol=1e-12)


@pytest.mark.parametrize("engine", ["geometric", "geometric-dlc"])
def test_vectorized_geometric_takes_geometric_own_steps(engine, monkeypatch):
    # Same algorithm, faster arithmetic: the optimization must follow geomeTRIC's own
    # coordinate classes step for step (MMFF94 keeps this cheap; constraints included).
    import confpop.geometric_fast as fast
    import confpop.optimize as optimize_module

    # geomeTRIC's own Optimizer updates its Hessian with the last step only (BFGS); the
    # multi-secant update (the default) is tested in test_geometric_fast.py
    monkeypatch.setattr(fast, "_SECANT_PAIRS", 1)
    mol = Chem.AddHs(Chem.MolFromSmiles("N#CCC(=O)NC"))  # invented: nitrile + amide
    assert AllChem.EmbedMolecule(mol, randomSeed=3) == 0
    start = mol.GetConformer().GetPositions()
    runs = []
    for accelerate in (False, True):
        monkeypatch.setattr(optimize_module, "_ACCELERATE_GEOMETRIC", accelerate)
        backend = get_backend("mmff94", mol)
        # geomeTRIC's own classes start from geomeTRIC's own guess Hessian
        runs.append((optimize_positions(backend, start, engine=engine, convergence="normal",
                                        hessian_guess="geometric"),
                     optimize_positions(backend, start, engine=engine, convergence="normal",
                                        frozen_atoms=[0], hessian_guess="geometric",
                                        dihedral_constraints=[((1, 2, 3, 5), None)])))
    for own, fast in zip(*runs):
        assert own.converged and fast.converged
        assert fast.gradient_calls == own.gradient_calls
        assert fast.energy == pytest.approx(own.energy, abs=1e-10)
        np.testing.assert_allclose(fast.positions, own.positions, rtol=0, atol=1e-6)


def _two_waters():
    # invented test system: two water molecules 3 angstrom apart (two fragments)
    mol = Chem.AddHs(Chem.MolFromSmiles("O.O"))
    assert AllChem.EmbedMolecule(mol, randomSeed=2) == 0
    x = mol.GetConformer().GetPositions()
    second = list(Chem.GetMolFrags(mol)[1])
    x[second] += np.array([3.0, 0.0, 0.0]) - x[second[0]] + x[0]
    return mol, x


def test_default_engine_dlc_for_one_fragment_tric_for_several():
    # The default picks geomeTRIC's coordinates by fragment count; it must take exactly
    # the steps of the engine it picked (MMFF94 keeps this cheap).
    mol = butane_at(-60.0)
    start = mol.GetConformer().GetPositions()
    backend = get_backend("mmff94", mol)
    default = optimize_positions(backend, start)
    dlc = optimize_positions(backend, start, engine="geometric-dlc")
    assert default.gradient_calls == dlc.gradient_calls
    assert default.energy == pytest.approx(dlc.energy, abs=1e-12)
    waters, x = _two_waters()
    backend = get_backend("mmff94", waters)
    default = optimize_positions(backend, x)
    tric = optimize_positions(backend, x, engine="GEOMETRIC-TRIC")  # names ignore case
    assert default.converged and tric.converged
    assert default.gradient_calls == tric.gradient_calls
    assert default.energy == pytest.approx(tric.energy, abs=1e-12)


def test_tric_engine_reaches_the_same_butane_minimum(anti_start, anti_tight):
    # TRIC (the default before) and the default engine (DLC here) agree on the minimum;
    # design requirement: within 0.05 kcal/mol of each other.
    backend = get_backend("gfn2", anti_start)
    tric = optimize_positions(backend, anti_start.GetConformer().GetPositions(),
                              engine="geometric-tric")
    assert tric.converged
    assert kcal(tric.energy - anti_tight.energy) == pytest.approx(0.0, abs=0.05)


@pytest.mark.parametrize("smiles", ["O", "[H][H]", "C#C"])
def test_small_molecules_without_some_primitive_kinds(smiles):
    # water has no dihedrals, H2 no angles, acetylene only linear angles: the vectorized
    # coordinates must cope with empty groups and give geomeTRIC's own result.
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=1) == 0
    start = mol.GetConformer().GetPositions()
    backend = get_backend("gfn2", mol)
    default = optimize_positions(backend, start)
    tric = optimize_positions(backend, start, engine="geometric-tric")
    assert default.converged and tric.converged
    assert kcal(default.energy - tric.energy) == pytest.approx(0.0, abs=1e-4)
    if smiles == "C#C":  # linear by symmetry
        angle = rdMolTransforms.GetAngleDeg(_conformer(default.positions), 2, 0, 1)
        assert angle == pytest.approx(180.0, abs=0.5)


def _conformer(positions):
    conf = Chem.Conformer(len(positions))
    for i, xyz in enumerate(positions):
        conf.SetAtomPosition(i, xyz.tolist())
    return conf


def test_final_dipole_and_energy_come_from_the_last_engine_call():
    # The search takes the dipole from the optimizer's last evaluation instead of a
    # separate single point: it must be the dipole of a fresh single point at the final
    # geometry (invented small polar molecule: methanol), the energy likewise.
    mol = Chem.AddHs(Chem.MolFromSmiles("CO"))
    assert AllChem.EmbedMolecule(mol, randomSeed=5) == 0
    res = optimize_positions(get_backend("gfn2", mol), mol.GetConformer().GetPositions())
    fresh = get_backend("gfn2", mol).compute(res.positions, gradient=False)
    assert res.dipole is not None and not res.dipole.flags.writeable
    # e*bohr; the last step restarted its SCF (Backend.continuation): equal to the SCF
    # tolerance, 1e-4 e*bohr = 2.5e-4 debye
    np.testing.assert_allclose(res.dipole, fresh.dipole, rtol=0, atol=1e-4)
    assert res.energy == pytest.approx(fresh.energy, abs=1e-8)
