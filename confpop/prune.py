"""Duplicate removal, mirror images, energy windows and integrity checks.

Two conformers are duplicates when their symmetry-aware RMSD over the heavy atoms and the
polar hydrogens is below a threshold *and* their energies agree within a tolerance. The
symmetry is the molecule's graph automorphisms (RDKit substructure self-matches), so
permuted equivalent atoms (the two oxygens of a carboxylate, the rings of a biphenyl) and
methyl rotamers (methyl hydrogens are left out of the RMSD) collapse. Superposition is the
Kabsch fit restricted to proper rotations; the same fit allowing a reflection finds mirror
images.

For an achiral molecule the mirror image of a chiral conformer (gauche+ / gauche-) is a
distinct conformer of exactly the same energy. Either both are kept as rows, or one row
stands for both with degeneracy 2; populations are the same either way.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem

from .errors import InputError
from .geometry import centered, kabsch_rmsd
from .units import convert

__all__ = ["PruneSettings", "rmsd_atoms", "resonance_hybrid", "automorphisms", "best_rmsd", "is_achiral",
           "conformer_is_chiral", "find_duplicates", "integrity_problems"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class PruneSettings:
    """Thresholds for duplicate removal.

    Attributes
    ----------
    rmsd : float, angstrom
        Symmetry-aware RMSD (heavy atoms + polar H) below which two conformers may be one.
    energy_tolerance : float, kcal/mol
        Largest energy difference between duplicates.

    merge_mirror_images : bool
        Merge a conformer's mirror image into its row with degeneracy 2 (True) or keep both
        as rows (False). Only for achiral molecules.
    max_automorphisms : int
        Cap on the symmetry permutations tried (very symmetric molecules).

    Notes
    -----
    Both defaults come from our measurements (GFN2-xTB, tight geomeTRIC optimizations):

    - re-optimized copies: the lowest minima of five molecules (1-hexanol gas, an aryl
      ether-amide and propranolol in chloroform, methyl beta-D-glucopyranoside and
      phenylalanine in water; ``benchmarks/bench_windows.py``) displaced by 0.1 A of noise
      and re-optimized came back within 0.011 A RMSD (median 0.001-0.004 A) and
      0.022 kcal/mol (implicit-solvent noise; 0.000 in the gas phase);
    - copies from different starts in a flat basin: the propanoate C-C-C-O torsion in water
      is nearly free between 70 and 110 degrees; two force-field starts ended 0.12 A
      (0.15 A without reflection) and 0.004 kcal/mol apart, one minimum in effect;
    - distinct minima: the closest pairs within 1 kcal/mol of each other lay 0.29-0.99 A
      apart (per molecule, same five molecules) and 0.36-0.44 A apart in searches of seven
      small molecules merged at 0.005 A (1-butanol, 1-hexanol, ethylene glycol, ...), even
      at 0.005 kcal/mol energy difference; distinct MMFF94s minima of 1-hexanol came as
      close as 0.27 A.

    0.2 A lies between the flat-basin copies (<= 0.15 A) and the closest distinct minima
    (>= 0.27 A); 0.05 kcal/mol is twice the largest copy spread in solvent. The energy
    criterion rarely decides: distinct minima can be degenerate to 0.005 kcal/mol.
    """

    rmsd: float = 0.2
    energy_tolerance: float = 0.05
    merge_mirror_images: bool = True
    max_automorphisms: int = 5000

    def __post_init__(self):
        # a NaN or negative threshold would silently switch duplicate removal off
        for name in ("rmsd", "energy_tolerance"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) \
                    or not value > 0 or not np.isfinite(value):
                raise InputError(f"{name} must be a finite number > 0, got {value!r}")


def rmsd_atoms(mol: Chem.Mol) -> np.ndarray:
    """Indices of the atoms compared: heavy atoms and hydrogens on N, O, S, P."""
    keep = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() != 1:
            keep.append(atom.GetIdx())
        elif any(n.GetAtomicNum() in (7, 8, 15, 16) for n in atom.GetNeighbors()):
            keep.append(atom.GetIdx())
    return np.array(keep, dtype=int)


# central atoms whose terminal oxygens/sulfurs are equivalent by resonance in the usual
# octet-expanded drawing (sulfonate, sulfate, phosphate, perchlorate, ...): RDKit's resonance
# enumeration does not move charges onto these, so they are added by rule
_HYPERVALENT_CENTRES = (15, 16, 17, 33, 34, 35, 53)


def resonance_hybrid(mol: Chem.Mol) -> Chem.Mol:
    """A copy of ``mol`` for symmetry perception: resonance-equivalent atoms look alike.

    Bonds whose order differs between resonance structures (RDKit's
    :class:`~rdkit.Chem.rdchem.ResonanceMolSupplier`, default flags: carboxylates, amidinium
    and guanidinium ions, nitro groups, imidazolium, enolates, ...) get one bond type
    (``ONEANDAHALF``) and atoms whose formal charge moves between structures lose it;
    terminal oxygens and sulfurs without hydrogens on P, S, Cl, As, Se, Br or I (sulfonate,
    sulfate, phosphate, perchlorate) are treated the same way. Element, connectivity and
    every other bond order are kept, so nothing else becomes equivalent. The copy is not
    sanitized: it is for graph matching only.

    Examples
    --------
    >>> from rdkit import Chem
    >>> hyb = resonance_hybrid(Chem.MolFromSmiles("CC(=O)[O-]"))
    >>> [str(b.GetBondType()) for b in hyb.GetBonds()], [a.GetFormalCharge() for a in hyb.GetAtoms()]
    (['SINGLE', 'ONEANDAHALF', 'ONEANDAHALF'], [0, 0, 0, 0])
    """
    hybrid = Chem.RWMol(mol)
    varying_bonds: set[int] = set()
    varying_atoms: set[int] = set()
    try:
        structures = list(Chem.ResonanceMolSupplier(mol, 0))
    except Exception:  # noqa: BLE001 - RDKit refuses some valences; no resonance then
        structures = []
    if len(structures) > 1:
        for bond in mol.GetBonds():
            kinds = {r.GetBondWithIdx(bond.GetIdx()).GetBondType() for r in structures}
            if len(kinds) > 1:
                varying_bonds.add(bond.GetIdx())
        for atom in mol.GetAtoms():
            charges = {r.GetAtomWithIdx(atom.GetIdx()).GetFormalCharge() for r in structures}
            if len(charges) > 1:
                varying_atoms.add(atom.GetIdx())
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() not in _HYPERVALENT_CENTRES:
            continue
        terminal = [b for b in atom.GetBonds()
                    if (o := b.GetOtherAtom(atom)).GetAtomicNum() in (8, 16)
                    and o.GetDegree() == 1 and o.GetTotalNumHs() == 0]
        if len(terminal) > 1 and len({b.GetBondType() for b in terminal}
                                     | {b.GetOtherAtom(atom).GetFormalCharge() for b in terminal}) > 1:
            for b in terminal:
                varying_bonds.add(b.GetIdx())
                varying_atoms.add(b.GetOtherAtomIdx(atom.GetIdx()))
    for idx in varying_bonds:
        bond = hybrid.GetBondWithIdx(idx)
        bond.SetIsAromatic(False)
        bond.SetBondType(Chem.BondType.ONEANDAHALF)
    for idx in varying_atoms:
        hybrid.GetAtomWithIdx(idx).SetFormalCharge(0)
    out = hybrid.GetMol()
    out.UpdatePropertyCache(strict=False)
    return out


def automorphisms(mol: Chem.Mol, atoms: np.ndarray, max_count: int = 5000) -> np.ndarray:
    """Graph automorphisms of ``mol`` restricted to ``atoms``: (n_perm, n_atoms) index arrays.

    Row p maps compared-atom position a to the atom whose coordinates stand in for it.
    Resonance-equivalent atoms count as equivalent (the two oxygens of a carboxylate, the
    NH₂ groups of a guanidinium ion, the three oxygens of a sulfonate; see
    :func:`resonance_hybrid`). Stereo is ignored (a permutation that would invert a centre
    cannot be realised by a proper rotation of a real conformer, so it never gives a small
    RMSD).
    """
    # match on the compared atoms only: hydrogens left out of the RMSD (methyl groups) would
    # multiply the permutations by 6 per methyl without changing any compared position
    atoms = np.asarray(atoms, dtype=int)
    sub = Chem.RWMol(resonance_hybrid(mol))
    for idx in sorted(set(range(mol.GetNumAtoms())) - set(atoms.tolist()), reverse=True):
        sub.RemoveAtom(idx)
    sub = sub.GetMol()
    sub.UpdatePropertyCache(strict=False)
    matches = sub.GetSubstructMatches(sub, uniquify=False, useChirality=False,
                                      maxMatches=max_count)
    if len(matches) >= max_count:
        log.warning("symmetry permutations capped at %d; duplicates may survive", max_count)
    if not matches:
        matches = (tuple(range(sub.GetNumAtoms())),)
    order = np.sort(atoms)
    return np.unique(order[np.array(matches, dtype=int)], axis=0)


def best_rmsd(ref: np.ndarray, probe: np.ndarray, perms: np.ndarray,
              allow_reflection: bool = False) -> float:
    """Symmetry-aware RMSD of two conformers over the compared atoms.

    Parameters
    ----------
    ref, probe : (n_atoms, 3) arrays, angstrom
        Full coordinate sets of two conformers.
    perms : (n_perm, n_compared) int array
        From :func:`automorphisms`; ``perms[0]`` for identity ordering is included.
    allow_reflection : bool
        Also allow improper superposition (the mirror image of ``probe``).
    """
    atoms = perms[0] if len(perms) == 1 else np.sort(perms[0])
    probes = centered(probe[perms])
    return float(kabsch_rmsd(centered(ref[atoms]), probes, allow_reflection=allow_reflection).min())


def is_achiral(mol: Chem.Mol) -> bool:
    """True when the molecule equals its own mirror image (no stereo, or meso)."""
    base = Chem.RemoveHs(mol)
    smiles = Chem.MolToSmiles(base)
    mirrored = Chem.Mol(base)
    for atom in mirrored.GetAtoms():
        tag = atom.GetChiralTag()
        if tag == Chem.ChiralType.CHI_TETRAHEDRAL_CW:
            atom.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
        elif tag == Chem.ChiralType.CHI_TETRAHEDRAL_CCW:
            atom.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CW)
    return Chem.MolToSmiles(mirrored) == smiles


def conformer_is_chiral(positions: np.ndarray, perms: np.ndarray, rmsd: float) -> bool:
    """True when a conformer cannot be superposed on its own mirror image."""
    mirror = positions.copy()
    mirror[:, 0] *= -1.0
    return best_rmsd(positions, mirror, perms) > rmsd


@dataclass
class DuplicateReport:
    """Outcome of :func:`find_duplicates`.

    Attributes
    ----------
    unique : list of int
        Positions (into the input order) of the kept conformers, lowest energy first.
    duplicate_of : dict
        Position of each removed conformer -> the kept position it repeats.
    times_found : dict
        Kept position -> how many input conformers (itself included) it stands for.
    mirror_of : dict
        Removed position -> kept position whose mirror image it is (merged mirror images).
    chiral_conformer : dict
        Kept position -> whether it differs from its own mirror image.
    comparisons : int
        RMSD evaluations made.
    """

    unique: list[int] = field(default_factory=list)
    duplicate_of: dict[int, int] = field(default_factory=dict)
    times_found: dict[int, int] = field(default_factory=dict)
    mirror_of: dict[int, int] = field(default_factory=dict)
    chiral_conformer: dict[int, bool] = field(default_factory=dict)
    comparisons: int = 0


def find_duplicates(mol: Chem.Mol, positions, energies_hartree, settings: PruneSettings,
                    *, achiral: bool | None = None) -> DuplicateReport:
    """Greedy duplicate search in energy order.

    Each conformer, from the lowest energy up, is compared with the kept conformers whose
    energy lies within ``settings.energy_tolerance``; only those pairs are superposed, so the
    cost grows with the number of near-degenerate pairs, not with n².

    Parameters
    ----------
    mol : Chem.Mol
        The molecule (topology; explicit H).
    positions : sequence of (n_atoms, 3) arrays, angstrom
    energies_hartree : (n,) array
    settings : PruneSettings
    achiral : bool, optional
        Whether the molecule is achiral (mirror images then count as equal-energy partners);
        computed when not given.
    """
    pos = [np.asarray(p, dtype=float) for p in positions]
    e = convert(np.asarray(energies_hartree, dtype=float), "hartree", "kcal/mol")
    if len(pos) != len(e):
        raise InputError(f"need one energy per conformer: {len(pos)} conformers, {len(e)} energies")
    if achiral is None:
        achiral = is_achiral(mol)
    atoms = rmsd_atoms(mol)
    perms = automorphisms(mol, atoms, settings.max_automorphisms)
    order = np.argsort(e, kind="stable")
    report = DuplicateReport()
    kept_e: list[float] = []
    for idx in order:
        idx = int(idx)
        match = None
        # kept conformers are in ascending energy, so scan back from the newest
        for k in range(len(report.unique) - 1, -1, -1):
            if e[idx] - kept_e[k] > settings.energy_tolerance:
                break
            ref = report.unique[k]
            report.comparisons += 1
            if best_rmsd(pos[ref], pos[idx], perms) < settings.rmsd:
                match = ("dup", ref)
                break
            if achiral and settings.merge_mirror_images and report.chiral_conformer[ref]:
                report.comparisons += 1
                if best_rmsd(pos[ref], pos[idx], perms, allow_reflection=True) < settings.rmsd:
                    match = ("mirror", ref)
                    break
        if match is None:
            report.unique.append(idx)
            kept_e.append(e[idx])
            report.times_found[idx] = 1
            report.chiral_conformer[idx] = bool(achiral) and conformer_is_chiral(
                pos[idx], perms, settings.rmsd)
        else:
            kind, ref = match
            report.duplicate_of[idx] = ref
            report.times_found[ref] += 1
            if kind == "mirror":
                report.mirror_of[idx] = ref
    return report


def square_planar_trans_pairs(mol: Chem.Mol, positions) -> dict[int, set]:
    """For every atom tagged square planar (SMILES ``@SP1``-``@SP3``): the pairs of its
    neighbours that stand trans (angle > 135 degrees) in ``positions``."""
    pos = np.asarray(positions, dtype=float)
    out = {}
    for atom in mol.GetAtoms():
        if atom.GetChiralTag() != Chem.ChiralType.CHI_SQUAREPLANAR:
            continue
        c = atom.GetIdx()
        nbrs = [n.GetIdx() for n in atom.GetNeighbors()]
        pairs = set()
        for a in range(len(nbrs)):
            for b in range(a + 1, len(nbrs)):
                u, v = pos[nbrs[a]] - pos[c], pos[nbrs[b]] - pos[c]
                cos = u @ v / (np.linalg.norm(u) * np.linalg.norm(v))
                if cos < np.cos(np.radians(135.0)):
                    pairs.add((nbrs[a], nbrs[b]))
        out[c] = pairs
    return out


def integrity_problems(mol: Chem.Mol, conf_id: int, reference_stereo=None,
                       reference_positions=None) -> list[str]:
    """Reasons why conformer ``conf_id`` no longer is the input molecule (empty when fine).

    Checks that the bonds perceived from interatomic distances are exactly the molecule's
    bonds, and that every stereocentre and stereo double bond keeps its configuration
    (compared with ``reference_stereo`` from :func:`confpop.molecule.stereo_signature`).
    """
    from .molecule import bond_graph_from_coordinates, stereo_signature

    problems = []
    expected = {tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}
    found = {tuple(sorted(b)) for b in bond_graph_from_coordinates(mol, conf_id)}

    def label(pair):
        i, j = pair
        return f"{mol.GetAtomWithIdx(i).GetSymbol()}{i}-{mol.GetAtomWithIdx(j).GetSymbol()}{j}"

    broken = sorted(expected - found)
    formed = sorted(found - expected)
    if broken:
        problems.append("bond broken: " + ", ".join(label(p) for p in broken))
    if formed:
        problems.append("bond formed: " + ", ".join(label(p) for p in formed))
    if reference_stereo is not None and not broken and not formed:
        now = stereo_signature(mol, conf_id)
        changed = [f"{a}: {b} -> {now_map}" for a, b in dict(reference_stereo).items()
                   if (now_map := dict(now).get(a)) is not None and now_map != b]
        if changed:
            problems.append("stereo changed: " + "; ".join(str(c) for c in changed))
    if reference_positions is not None and not broken and not formed:
        before = square_planar_trans_pairs(mol, reference_positions)
        after = square_planar_trans_pairs(mol, mol.GetConformer(conf_id).GetPositions())
        for centre, pairs in before.items():
            if after.get(centre) != pairs:
                symbol = mol.GetAtomWithIdx(centre).GetSymbol()
                problems.append(f"square-planar arrangement at {symbol}{centre + 1} (1-based) "
                                "changed (cis/trans)")
    return problems
