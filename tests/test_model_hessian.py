"""Lindh's model Hessian against its definition, brute force.

Definition and parameters: R. Lindh, A. Bernhardsson, G. Karlstrom, P.-A. Malmqvist,
Chem. Phys. Lett. 1995, 241, 423, doi:10.1016/0009-2614(95)00646-L (Table 1; values from
memory, as in confpop.model_hessian). The brute force below sums every pair, triple and
quadruple of atoms in plain loops with central-difference gradients of the distance, the
bend angle (confpop.geometry.angle_at is not used: numpy arccos here) and the dihedral
(atan2 form), an implementation independent of the vectorized one.
"""

import itertools

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from confpop.model_hessian import _CUTOFF, lindh_hessian, lindh_weights

from reference_values import value


def _embedded(smiles, seed=7):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    z = [a.GetAtomicNum() for a in mol.GetAtoms()]
    return z, mol.GetConformer().GetPositions() * 1.8897261


def _distance(x, i, j):
    return np.linalg.norm(x[i] - x[j])


def _bend(x, i, j, k):
    u, v = x[i] - x[j], x[k] - x[j]
    return np.arccos(np.dot(u, v) / np.linalg.norm(u) / np.linalg.norm(v))


def _dihedral(x, i, j, k, l):
    b1, b2, b3 = x[j] - x[i], x[k] - x[j], x[l] - x[k]
    n1, n2 = np.cross(b1, b2), np.cross(b2, b3)
    m = np.cross(n1, b2 / np.linalg.norm(b2))
    return np.arctan2(np.dot(m, n2), np.dot(n1, n2))


def _gradient(f, x, atoms, h=1e-6):
    g = np.zeros(x.size)
    for a in atoms:
        for c in range(3):
            xp, xm = x.copy(), x.copy()
            xp[a, c] += h
            xm[a, c] -= h
            diff = f(xp, *atoms) - f(xm, *atoms)
            g[3 * a + c] = (diff + np.pi) % (2 * np.pi) - np.pi  # a dihedral near +-180
            g[3 * a + c] /= 2 * h
    return g


def _brute_force(z, x):
    n = len(x)
    rho = lindh_weights(z, x)
    h = np.zeros((3 * n, 3 * n))
    for i, j in itertools.combinations(range(n), 2):
        if rho[i, j] > _CUTOFF:
            g = _gradient(_distance, x, (i, j))
            h += 0.45 * rho[i, j] * np.outer(g, g)
    for j in range(n):
        for i, k in itertools.combinations([a for a in range(n) if a != j], 2):
            w = rho[i, j] * rho[j, k]
            if w > _CUTOFF:
                g = _gradient(_bend, x, (i, j, k))
                h += 0.15 * w * np.outer(g, g)
    for j, k in itertools.combinations(range(n), 2):
        for i in range(n):
            for l in range(n):
                if len({i, j, k, l}) < 4:
                    continue
                w = rho[i, j] * rho[j, k] * rho[k, l]
                if w > _CUTOFF:
                    g = _gradient(_dihedral, x, (i, j, k, l))
                    h += 0.005 * w * np.outer(g, g)
    return h


# no linear bends: the model leaves those out (their bend plane is undefined)
@pytest.mark.parametrize("smiles", ["CCO", "C=CC(=O)N"])
def test_lindh_hessian_equals_its_definition_summed_by_brute_force(smiles):
    z, x = _embedded(smiles)
    np.testing.assert_allclose(lindh_hessian(z, x), _brute_force(z, x), rtol=0, atol=2e-7)


def test_lindh_hessian_of_h2_at_the_reference_distance():
    # rho = 1 at r = r_ref(H-H): the bond curvature is k_r (Lindh et al. 1995, Table 1)
    r_ref, k_r = value("lindh_r_ref_hh"), value("lindh_k_stretch")
    x = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, r_ref]])
    h = lindh_hessian([1, 1], x)
    u = np.array([0.0, 0.0, -1.0, 0.0, 0.0, 1.0]) / np.sqrt(2.0)  # symmetric stretch
    # a displacement s along u stretches r by s*sqrt(2): u.H.u = d2E/ds2 = 2 d2E/dr2
    assert u @ h @ u / 2.0 == pytest.approx(k_r, rel=1e-12)
    assert np.linalg.matrix_rank(h, tol=1e-10) == 1


def test_lindh_hessian_is_positive_semidefinite_with_rigid_motions_free():
    # Physical identity: no energy change on translating or rotating the molecule.
    z, x = _embedded("CC(=O)OCC")
    h = lindh_hessian(z, x)
    values = np.linalg.eigvalsh(h)
    assert values[0] > -1e-10
    assert np.sum(values < 1e-8) == 6
    centred = x - x.mean(axis=0)
    for axis in np.eye(3):
        shift = np.tile(axis, len(x))
        turn = np.cross(axis, centred).ravel()
        assert np.abs(h @ shift).max() < 1e-10
        assert np.abs(h @ turn).max() < 1e-10
