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


def mmff_ensemble(smiles, n=40, seed=1, level="mmff94", solvent=None, energy_gap=0.05):
    """An ensemble of MMFF94 minima from ``n`` ETKDG starts, one structure per distinct
    energy (kcal/mol apart by more than ``energy_gap``), energies stored at ``level``."""
    from confpop.ensemble import Ensemble
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMultipleConfs(mol, n, randomSeed=seed)
    energies = np.array([e for _, e in AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=5000)])
    keep, seen = [], []
    for cid, e in enumerate(energies):        # one structure per distinct MMFF energy
        if all(abs(e - s) > energy_gap for s in seen):
            keep.append(cid)
            seen.append(e)
    out = Chem.Mol(mol)
    out.RemoveAllConformers()
    for cid in keep:
        out.AddConformer(Chem.Conformer(mol.GetConformer(cid)), assignId=True)
    return Ensemble.from_mol(out, energies=energies[keep], level=level, unit="kcal/mol",
                             solvent=solvent)
