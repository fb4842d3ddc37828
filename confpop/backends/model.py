"""A tiny analytic model potential, so every pipeline step can be tested without an engine.

E = Σ_bonds k_b (r - r₀)² + Σ_angles k_θ (θ - θ₀)² + Σ_rotors V/2 [1 - cos(n φ - γ)]

r₀ and θ₀ are taken from the reference geometry (the molecule's first conformer, or an
RDKit embedding), so that geometry is a minimum of the stretch/bend part; each rotatable
bond carries one n-fold torsion term on its first heavy-atom (else hydrogen) dihedral. The
torsion profile of such a model is known exactly, which makes it a check for scans,
barriers and rates. Energies are returned in hartree like every backend; the parameters
are given in kcal/mol.
"""

from __future__ import annotations

import numpy as np
from rdkit import Chem
from rdkit.Chem import AllChem

from ..errors import InputError
from ..geometry import dihedral_at
from ..units import convert
from .base import Backend, BackendResult

__all__ = ["ModelTorsion", "rotor_dihedrals"]

_ROTOR = Chem.MolFromSmarts("[!$([NH])&!$([NH2])&!$([OH])&!#1&!D1]-&!@[!$([NH])&!$([NH2])&!D1&!#1]")


def rotor_dihedrals(mol: Chem.Mol) -> list[tuple[int, int, int, int]]:
    """One dihedral (i, j, k, l) per rotatable single bond j-k, heavy atoms preferred for i, l."""
    out = []
    for j, k in mol.GetSubstructMatches(_ROTOR):
        def pick(center, other):
            nbrs = [a for a in mol.GetAtomWithIdx(center).GetNeighbors() if a.GetIdx() != other]
            nbrs.sort(key=lambda a: (a.GetAtomicNum() == 1, a.GetIdx()))
            return nbrs[0].GetIdx() if nbrs else None
        i, l = pick(j, k), pick(k, j)
        if i is not None and l is not None:
            out.append((i, j, k, l))
    return out


class ModelTorsion(Backend):
    """Harmonic stretch and bend plus one n-fold torsion term per rotatable bond.

    Options
    -------
    barrier : float, kcal/mol (default 3.0)
        V, the height of each torsion term.
    periodicity : int (default 3)
    phase : float, degrees (default 180: minima at ±60° and 180° for n = 3)
    """

    name = "model"
    capabilities = frozenset({"energy", "gradient"})

    def __init__(self, mol, **kwargs):
        kwargs.setdefault("barrier", 3.0)
        kwargs.setdefault("periodicity", 3)
        kwargs.setdefault("phase", 180.0)
        super().__init__(mol, **kwargs)
        ref = Chem.Mol(self.mol)
        if ref.GetNumConformers() == 0:
            if AllChem.EmbedMolecule(ref, randomSeed=7) != 0:
                raise InputError("model backend could not make a reference geometry")
        pos = next(iter(ref.GetConformers())).GetPositions()
        self._bonds = np.array([(b.GetBeginAtomIdx(), b.GetEndAtomIdx()) for b in ref.GetBonds()],
                               dtype=int).reshape(-1, 2)
        self._r0 = np.linalg.norm(pos[self._bonds[:, 0]] - pos[self._bonds[:, 1]], axis=1)
        angles = []
        for atom in ref.GetAtoms():
            nb = [a.GetIdx() for a in atom.GetNeighbors()]
            for x in range(len(nb)):
                for y in range(x + 1, len(nb)):
                    angles.append((nb[x], atom.GetIdx(), nb[y]))
        self._angles = np.array(angles, dtype=int).reshape(-1, 3)
        self._theta0 = self._angle_values(pos)
        self._rotors = rotor_dihedrals(ref)
        self._kb = convert(300.0, "kcal/mol", "hartree")   # per Å²
        self._ka = convert(60.0, "kcal/mol", "hartree")    # per rad²
        self._v = convert(float(self.options["barrier"]), "kcal/mol", "hartree")
        self._n = int(self.options["periodicity"])
        self._gamma = np.radians(float(self.options["phase"]))

    def _angle_values(self, p):
        """Bend angles (radians) for p of shape (n, 3) or (B, n, 3)."""
        p = np.asarray(p)
        batch = p[None] if p.ndim == 2 else p
        if len(self._angles) == 0:
            out = np.zeros((batch.shape[0], 0))
        else:
            a = batch[:, self._angles[:, 0]] - batch[:, self._angles[:, 1]]
            c = batch[:, self._angles[:, 2]] - batch[:, self._angles[:, 1]]
            cos = np.sum(a * c, axis=2) / (np.linalg.norm(a, axis=2) * np.linalg.norm(c, axis=2))
            out = np.arccos(np.clip(cos, -1.0, 1.0))
        return out[0] if p.ndim == 2 else out

    def _energies(self, batch):
        """Energies (hartree) of a batch of geometries, shape (B, n, 3) -> (B,)."""
        r = np.linalg.norm(batch[:, self._bonds[:, 0]] - batch[:, self._bonds[:, 1]], axis=2)
        e = self._kb * np.sum((r - self._r0) ** 2, axis=1)
        e = e + self._ka * np.sum((self._angle_values(batch) - self._theta0) ** 2, axis=1)
        for d in self._rotors:
            phi = dihedral_at(batch, d, degrees=False)
            e = e + 0.5 * self._v * (1.0 - np.cos(self._n * phi - self._gamma))
        return e

    def _compute(self, positions, gradient):
        energy = float(self._energies(positions[None])[0])
        grad = None
        if gradient:
            # central differences, all 6N displaced geometries in one vectorized call
            h = 1e-5
            n3 = positions.size
            steps = np.eye(n3).reshape(n3, *positions.shape) * h
            batch = np.concatenate([positions[None] + steps, positions[None] - steps])
            e = self._energies(batch)
            grad = ((e[:n3] - e[n3:]) / (2 * h)).reshape(positions.shape)
        return BackendResult(energy=energy, gradient=grad)
