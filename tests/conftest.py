import os

# one OpenMP thread per process for the tight-binding engines (set before they load).
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MPLBACKEND", "Agg")

import pytest  # noqa: E402  (after the environment is set)


@pytest.fixture(scope="session")
def gfn2_minimum():
    """Build a GFN2-xTB minimum once per test session and hand out copies.

    ``gfn2_minimum(smiles, atoms=None, dihedral=None, constrain=False, seed=3,
    convergence="tight")``: ETKDG embedding with ``seed``, the dihedral ``atoms`` set to
    ``dihedral`` degrees (held there when ``constrain``), then
    :func:`confpop.optimize.optimize_structure` at GFN2-xTB. The same arguments always give
    the same structure, computed once however many test files ask for it (several files use
    the water, ethane and butane minima). Each call returns a fresh copy, so a test may
    change it.
    """
    from rdkit import Chem
    from rdkit.Chem import AllChem, rdMolTransforms

    from confpop.optimize import optimize_structure

    made = {}

    def build(smiles, atoms=None, dihedral=None, constrain=False, seed=3, convergence="tight"):
        key = (smiles, None if atoms is None else tuple(atoms), dihedral, bool(constrain),
               int(seed), convergence)
        if key not in made:
            mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
            AllChem.EmbedMolecule(mol, randomSeed=seed)
            if atoms is not None:
                rdMolTransforms.SetDihedralDeg(mol.GetConformer(), *atoms, dihedral)
            constraints = [(tuple(atoms), dihedral)] if constrain else None
            made[key] = optimize_structure(mol, "gfn2", convergence=convergence,
                                           dihedral_constraints=constraints)
        return Chem.Mol(made[key])

    return build


@pytest.fixture(scope="session")
def gfn2_water(gfn2_minimum):
    """Water at its GFN2-xTB minimum (seed 1, "verytight"), a fresh copy per use."""
    return gfn2_minimum("O", seed=1, convergence="verytight")


@pytest.fixture(scope="session")
def gfn2_butane(gfn2_minimum):
    """n-Butane anti (C-C-C-C 180 deg start) and gauche (65 deg start) GFN2-xTB minimum."""
    return {"anti": gfn2_minimum("CCCC", (0, 1, 2, 3), 180.0),
            "gauche": gfn2_minimum("CCCC", (0, 1, 2, 3), 65.0)}
