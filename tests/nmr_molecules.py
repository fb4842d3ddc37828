"""Test molecules shared by the NMR tests (MMFF94 rotamers built with RDKit)."""

import numpy as np
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdForceFieldHelpers as FF
from rdkit.Chem import rdMolTransforms


def rotamers(smiles, torsion, angles, seed=7):
    """One MMFF94 minimum per start angle of ``torsion`` (constrained, then released)."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=seed)
    props = FF.MMFFGetMoleculeProperties(mol)
    out = Chem.Mol(mol)
    out.RemoveAllConformers()
    energies = []
    for k, angle in enumerate(angles):
        m = Chem.Mol(mol)
        rdMolTransforms.SetDihedralDeg(m.GetConformer(), *torsion, float(angle))
        ff = FF.MMFFGetMoleculeForceField(m, props)
        ff.MMFFAddTorsionConstraint(*torsion, False, float(angle), float(angle), 200.0)
        ff.Minimize(maxIts=2000)
        ff = FF.MMFFGetMoleculeForceField(m, props)
        ff.Minimize(maxIts=2000)
        energies.append(ff.CalcEnergy())
        conf = Chem.Conformer(m.GetConformer())
        conf.SetId(k)
        out.AddConformer(conf, assignId=False)
    return out, np.array(energies)
