"""The shared geometry primitives against independent references.

Dihedrals: RDKit's rdMolTransforms.GetDihedralDeg (an independent C++ implementation).
Kabsch RMSD: scipy.spatial.transform.Rotation.align_vectors (an independent proper-rotation
fit) and, for the reflection case, the same fit on the mirrored probe (every improper
orthogonal matrix is a proper rotation times one fixed mirror).
"""

import math

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms
from scipy.spatial.transform import Rotation

from confpop.errors import InputError
from confpop.geometry import centered, dihedral, dihedral_at, kabsch_rmsd, wrap_degrees
from confpop.torsion import dihedral_angle


def _circular_gap(a, b):
    """|a - b| on the circle in degrees, computed without confpop."""
    d = abs(a - b) % 360.0
    return min(d, 360.0 - d)


def _quads(mol):
    """Every bonded path i-j-k-l (each dihedral the molecule has)."""
    out = []
    for bond in mol.GetBonds():
        j, k = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        for i in (a.GetIdx() for a in mol.GetAtomWithIdx(j).GetNeighbors()):
            for l in (a.GetIdx() for a in mol.GetAtomWithIdx(k).GetNeighbors()):
                if i != k and l != j and i != l:
                    out.append((i, j, k, l))
    return out


@pytest.fixture(scope="module")
def butanol():
    mol = Chem.AddHs(Chem.MolFromSmiles("CC(O)CC"))
    AllChem.EmbedMultipleConfs(mol, 4, randomSeed=7)
    return mol


# ----------------------------------------------------------------------------- dihedral
def test_dihedral_matches_rdkit_on_random_conformers(butanol):
    # reference: RDKit rdMolTransforms.GetDihedralDeg, every dihedral of four ETKDG conformers
    quads = _quads(butanol)
    assert len(quads) > 20
    for conf in butanol.GetConformers():
        pos = conf.GetPositions()
        for quad in quads:
            ours = dihedral_at(pos, quad)
            assert -180.0 < ours <= 180.0
            assert _circular_gap(ours, rdMolTransforms.GetDihedralDeg(conf, *quad)) < 1e-8


def test_dihedral_vectorized_equals_one_at_a_time(butanol):
    quads = np.array(_quads(butanol))
    pos = np.array([c.GetPositions() for c in butanol.GetConformers()])  # (4, n_atoms, 3)
    stacked = pos[:, quads]  # (n_conf, n_quads, 4, 3)
    batch = dihedral(stacked)
    assert batch.shape == (len(pos), len(quads))
    single = np.array([[dihedral(stacked[c, q]) for q in range(len(quads))]
                       for c in range(len(pos))])
    np.testing.assert_array_equal(batch, single)
    np.testing.assert_allclose(dihedral(stacked, degrees=False), np.radians(batch), rtol=0,
                               atol=1e-15)
    # dihedral_at over a stack of structures is the same as indexing first
    np.testing.assert_array_equal(dihedral_at(pos, quads[0]), batch[:, 0])


@pytest.mark.parametrize("target", [180.0, -180.0, 179.9999999, -179.9999999, 0.0, 1e-7,
                                    -1e-7, 90.0, -90.0])
def test_dihedral_near_antiperiplanar_and_synperiplanar_matches_rdkit(target):
    # reference: RDKit sets the C-C-C-C dihedral of butane (SetDihedralDeg) and reads it back
    mol = Chem.AddHs(Chem.MolFromSmiles("CCCC"))
    AllChem.EmbedMolecule(mol, randomSeed=5)
    conf = mol.GetConformer()
    rdMolTransforms.SetDihedralDeg(conf, 0, 1, 2, 3, target)
    ours = float(dihedral_at(conf.GetPositions(), (0, 1, 2, 3)))
    assert -180.0 < ours <= 180.0
    assert _circular_gap(ours, rdMolTransforms.GetDihedralDeg(conf, 0, 1, 2, 3)) < 1e-6
    assert _circular_gap(ours, target) < 1e-6


def test_exact_antiperiplanar_is_plus_180_whatever_the_sign_of_zero():
    # p3 a hair (1e-300 A) to either side of the plane: atan2 alone gives -180 on one side
    # (shown first, so this test fails without the convention), the convention says +180
    assert math.degrees(math.atan2(-1e-300, -1.0)) == -180.0
    pts = np.array([[[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [-1.0, -1e-300, 1.5]],
                    [[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [-1.0, 1e-300, 1.5]],
                    [[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [-1.0, 0.0, 1.5]]])
    np.testing.assert_array_equal(dihedral(pts), [180.0, 180.0, 180.0])
    np.testing.assert_array_equal(dihedral(pts, degrees=False), [np.pi, np.pi, np.pi])
    assert dihedral(pts[0]) == 180.0
    # synperiplanar is exactly 0; the sign convention (IUPAC): +90 when p0 turns clockwise
    assert dihedral([[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [1.0, 0, 1.5]]) == 0.0
    assert dihedral([[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [0, 1.0, 1.5]]) == pytest.approx(90.0)


def test_undefined_dihedral_is_nan_and_named_by_dihedral_angle():
    linear = np.array([[0.0, 0, -1], [0, 0, 0], [0, 0, 1.5], [1.0, 0, 2.0]])
    on_top = np.array([[1.0, 0, 0], [0, 0, 0], [0, 0, 0], [0, 1.0, 1.0]])
    fine = np.array([[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [0, 1.0, 1.5]])
    out = dihedral(np.stack([linear, on_top, fine]))
    assert np.isnan(out[0]) and np.isnan(out[1]) and out[2] == pytest.approx(90.0)
    with pytest.raises(InputError, match="bond angle at atom 1 or 2 is linear"):
        dihedral_angle(linear, (0, 1, 2, 3))
    with pytest.raises(InputError, match="atoms 1 and 2 sit on top of each other"):
        dihedral_angle(on_top, (0, 1, 2, 3))


def test_dihedral_rejects_wrong_shapes():
    with pytest.raises(InputError, match=r"shape \(\.\.\., 4, 3\)"):
        dihedral(np.zeros((3, 3)))
    with pytest.raises(InputError, match="four atoms"):
        dihedral_at(np.zeros((5, 3)), (0, 1, 2))


def test_wrap_degrees_range():
    # definition of the dihedral range (-180, 180]: 180 stays, -180 becomes 180
    np.testing.assert_array_equal(wrap_degrees([-180.0, 180.0, 540.0, -190.0, 359.5, 0.0]),
                                  [180.0, 180.0, 180.0, 170.0, -0.5, 0.0])
    assert wrap_degrees(-540.0) == 180.0


# ----------------------------------------------------------------------------- Kabsch
def _scipy_rmsd(ref, probe):
    """Best proper-rotation RMSD about the origin: scipy's align_vectors (ref ~ R probe)."""
    _, rssd = Rotation.align_vectors(ref, probe)
    return rssd / math.sqrt(len(ref))


def test_kabsch_matches_scipy_align_vectors():
    rng = np.random.default_rng(4)
    ref = centered(rng.normal(size=(7, 3)) * 1.5)
    rot = Rotation.random(5, random_state=rng).as_matrix()
    probes = centered(np.einsum("pij,nj->pni", rot, ref) + rng.normal(scale=0.2, size=(5, 7, 3)))
    mirror = probes * np.array([1.0, 1.0, -1.0])
    proper = kabsch_rmsd(ref, probes)
    improper = kabsch_rmsd(ref, probes, allow_reflection=True)
    for p in range(5):
        assert proper[p] == pytest.approx(_scipy_rmsd(ref, probes[p]), abs=1e-9)
        assert kabsch_rmsd(ref, probes[p]) == pytest.approx(proper[p], abs=1e-12)
        assert improper[p] == pytest.approx(min(_scipy_rmsd(ref, probes[p]),
                                                _scipy_rmsd(ref, mirror[p])), abs=1e-9)
    # the mirror images of noisy copies are far away for proper rotations only
    for p in range(5):
        assert kabsch_rmsd(ref, mirror[p]) == pytest.approx(_scipy_rmsd(ref, mirror[p]), abs=1e-9)
        assert kabsch_rmsd(ref, mirror[p]) > 0.5
        assert kabsch_rmsd(ref, mirror[p], allow_reflection=True) == pytest.approx(improper[p],
                                                                                   abs=1e-9)


def test_kabsch_exact_copies_and_brute_force_rotation_search():
    # a chiral tetrahedron: a rotated copy fits exactly, its mirror image only with a reflection
    ref = centered(np.array([[0.0, 0, 0], [1.0, 0, 0], [0, 2.0, 0], [0, 0, 3.0]]))
    rot = Rotation.from_euler("zyx", [40, -25, 110], degrees=True).as_matrix()
    assert kabsch_rmsd(ref, ref @ rot.T) == pytest.approx(0.0, abs=1e-6)
    mirror = (ref @ rot.T) * np.array([-1.0, 1.0, 1.0])
    assert kabsch_rmsd(ref, mirror, allow_reflection=True) == pytest.approx(0.0, abs=1e-6)
    # brute force: the best of 20,000 random rotations can only be worse than the optimum,
    # and not by much (random rotations come within a few degrees of any rotation)
    rng = np.random.default_rng(9)
    trial = Rotation.random(20000, random_state=rng).as_matrix()
    moved = np.einsum("rij,nj->rni", trial, mirror)
    brute = np.sqrt(np.mean(np.sum((moved - ref) ** 2, axis=2), axis=1)).min()
    best = kabsch_rmsd(ref, mirror)
    assert best > 0.5
    assert best - 1e-9 <= brute <= best + 0.15          # two-sided: optimum, and close to it


def test_kabsch_rejects_mismatched_shapes():
    with pytest.raises(InputError, match="same n"):
        kabsch_rmsd(np.zeros((4, 3)), np.zeros((2, 5, 3)))


def test_centered_by_mass():
    # identity: the mass-weighted mean of the centred points is the origin
    pos = np.array([[0.0, 0, 0.1173], [0, 0.7572, -0.4692], [0, -0.7572, -0.4692]])
    masses = np.array([15.999, 1.008, 1.008])
    r = centered(pos, masses)
    np.testing.assert_allclose(masses @ r, 0.0, atol=1e-12)
    np.testing.assert_allclose(r - pos, np.broadcast_to(r[0] - pos[0], pos.shape), atol=1e-15)
    np.testing.assert_allclose(centered(pos).mean(axis=0), 0.0, atol=1e-15)
