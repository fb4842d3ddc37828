"""Species: sets of conformers that interconvert fast on the NMR time scale.

Rotation about most single bonds is fast at room temperature (barriers below about
12 kcal/mol, rates above 10^4 s^-1), so an NMR spectrum shows one population-weighted
average over those conformers. A few bond classes rotate slowly: their conformers give
separate signal sets, and averaging across them (as if fast) gives numbers no spectrum
shows. This module splits an ensemble at those bonds: every conformer gets a ``species``
number, NMR averages are taken within a species, and the species' shares of the total
population are reported beside them.

The slow classes and their room-temperature barriers (free energies of activation; ranges
from memory of the physical-organic literature, "common practice" for the thresholds):

============================  =================  =========================================
bond                          ΔG‡ (kcal/mol)     split when
============================  =================  =========================================
amide C(=O)-N                 15-23              the two ends of the N are not equivalent
thioamide C(=S)-N             18-25              (tertiary amides with two different
carbamate O-C(=O)-N           14-17              N-substituents; secondary amides, cis/trans)
hindered biaryl axis          15 to > 30         two or more ortho substituents, and both
                                                 rings without a local twofold axis
============================  =================  =========================================

A barrier of 15 kcal/mol gives k ≈ 60 s^-1 at 298 K (Eyring): slow or intermediate exchange
for shift differences above about 30 Hz, so these conformers are not averaged. Ureas
(N-C(=O)-N, barriers of about 10-13 kcal/mol, from memory) and plain single bonds are
treated as fast.

E/Z isomers of imines (C=N isomerization 15-27 kcal/mol, lowest for N-aryl imines),
oximes and hydrazones (> 25), alkenes, and the configurations of stereocentres are
normally fixed by the input (see :func:`confpop.molecule.load_molecule`, ``stereo``). An
ensemble read or built with ``stereo="ignore"`` can mix them; conformers that disagree on
any of them are then split into species too (:func:`configuration_elements`): such
isomers never average on the NMR time scale (most never interconvert at all).

Method error: where a barrier is computed rather than taken from the class (a relaxed
GFN2-xTB scan, :func:`confpop.torsion.exchange_summary`), GFN2-xTB puts amide C-N barriers
1.4-3.2 kcal/mol below experiment (measured for issue 14: N,N-dimethylacetamide gas 13.8
vs 15.6 kcal/mol measured; DMF in chloroform 19.6 vs about 21), i.e. rates 10-200 times too
fast; :data:`AMIDE_BARRIER_ERROR_KCAL` holds that range and the species split does not
depend on it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from rdkit import Chem

from .errors import InputError
from .geometry import dihedral_at

__all__ = ["SlowBond", "slow_bonds", "configuration_elements", "species_table",
           "species_populations", "within_species_populations", "CONFIGURATION_CLASSES",
           "AMIDE_BARRIER_ERROR_KCAL", "SLOW_CLASSES"]

#: GFN2-xTB amide C-N rotation barriers minus experiment, kcal/mol (issue 14 measurement:
#: N,N-dimethylacetamide gas 13.8 vs 15.6; DMF in chloroform 19.6 vs ~21)
AMIDE_BARRIER_ERROR_KCAL = (-3.2, -1.4)

#: room-temperature barrier ranges of the slow classes, kcal/mol [from memory; see module docs]
SLOW_CLASSES = {
    "amide": (15.0, 23.0),
    "thioamide": (18.0, 25.0),
    "carbamate": (14.0, 17.0),
    "hindered biaryl": (15.0, 30.0),
    "imine E/Z": (15.0, 27.0),
    "oxime/hydrazone E/Z": (25.0, float("inf")),
    "alkene E/Z": (40.0, float("inf")),
    "stereocentre": (float("inf"), float("inf")),
}

#: classes that are configurations (set by the input's stereo): they split species only
#: where the conformers of one ensemble disagree (an input read with stereo="ignore")
CONFIGURATION_CLASSES = ("imine E/Z", "oxime/hydrazone E/Z", "alkene E/Z", "stereocentre")


@dataclass(frozen=True)
class SlowBond:
    """A bond whose rotation is slow on the NMR time scale.

    Attributes
    ----------
    kind : str
        A key of :data:`SLOW_CLASSES`.
    atoms : (i, j, k, l) tuple of int
        The reference dihedral (0-based): for an amide O=C-N-R with R the N-substituent
        named in the label; for a biaryl axis the two ortho atoms on the substituted side.
    label : str
        Atoms numbered from 1 like every label users see (``atoms`` stay 0-based Python
        indices), e.g. "C2(=O)-N4" or "C3-C9".
    barrier_range : (float, float), kcal/mol
    """

    kind: str
    atoms: tuple
    label: str
    barrier_range: tuple

    def state(self, positions: np.ndarray) -> np.ndarray:
        """Per-conformer state from (n_conformers, n_atoms, 3) positions: for an amide "cis"
        (|dihedral| < 90, the carbonyl O cis to R) or "trans"; for an axis "+" or "-"
        (the sign of the dihedral)."""
        i, j, k, l = self.atoms
        phi = dihedral_at(positions, self.atoms)
        if self.kind in ("hindered biaryl", "stereocentre"):
            if self.kind == "stereocentre":  # sign of the triple product of three neighbours
                c = positions[:, j]
                phi = np.einsum("...i,...i->...", positions[:, i] - c,
                                np.cross(positions[:, k] - c, positions[:, l] - c))
            return np.where(phi >= 0.0, "+", "-")
        return np.where(np.abs(phi) < 90.0, "cis", "trans")

    def describe(self, state: str, mol: Chem.Mol) -> str:
        i, j, k, l = self.atoms
        sym = [f"{mol.GetAtomWithIdx(a).GetSymbol()}{a + 1}" for a in self.atoms]  # 1-based
        if self.kind == "hindered biaryl":
            return f"{sym[1]}-{sym[2]} axis {state}"
        if self.kind == "stereocentre":
            return f"{sym[1]} configuration {state}"
        if self.kind in CONFIGURATION_CLASSES:
            return f"{sym[1]}={sym[2]} {sym[0]} {state} to {sym[3]}"
        return f"{sym[1]}-{sym[2]} {sym[0]} {state} to {sym[3]}"


def _double_partner(atom: Chem.Atom, elements) -> Chem.Atom | None:
    for bond in atom.GetBonds():
        other = bond.GetOtherAtom(atom)
        if bond.GetBondType() == Chem.BondType.DOUBLE and other.GetAtomicNum() in elements:
            return other
    return None


def _amide_bonds(mol, ranks):
    out = []
    for bond in mol.GetBonds():
        if bond.GetBondType() != Chem.BondType.SINGLE or bond.IsInRing():
            continue
        for c, n in ((bond.GetBeginAtom(), bond.GetEndAtom()), (bond.GetEndAtom(), bond.GetBeginAtom())):
            if c.GetAtomicNum() != 6 or n.GetAtomicNum() != 7 or n.GetIsAromatic():
                continue
            x = _double_partner(c, (8, 16))
            if x is None:
                continue
            others_c = [a for a in c.GetNeighbors() if a.GetIdx() not in (n.GetIdx(), x.GetIdx())]
            if any(a.GetAtomicNum() == 7 for a in others_c):
                continue  # urea: fast (about 10-13 kcal/mol, from memory)
            if n.GetDegree() != 3:
                continue
            kind = "thioamide" if x.GetAtomicNum() == 16 else (
                "carbamate" if any(a.GetAtomicNum() == 8 for a in others_c) else "amide")
            subs = [a for a in n.GetNeighbors() if a.GetIdx() != c.GetIdx()]
            if len(subs) != 2 or ranks[subs[0].GetIdx()] == ranks[subs[1].GetIdx()]:
                continue  # NH2, NMe2, N-piperidinyl ...: both states are the same molecule
            # the reference substituent: heavy before H, then the higher canonical rank
            ref = max(subs, key=lambda a: (a.GetAtomicNum() > 1, ranks[a.GetIdx()]))
            sym_c, sym_n = f"C{c.GetIdx() + 1}", f"N{n.GetIdx() + 1}"
            label = f"{sym_c}(={x.GetSymbol()})-{sym_n}"
            out.append(SlowBond(kind, (x.GetIdx(), c.GetIdx(), n.GetIdx(), ref.GetIdx()), label,
                                SLOW_CLASSES[kind]))
    return out


def _ortho(mol, ring_atom, axis_partner):
    """The two ring neighbours of ``ring_atom`` (not the partner across the axis)."""
    return [a for a in mol.GetAtomWithIdx(ring_atom).GetNeighbors()
            if a.GetIdx() != axis_partner and mol.GetBondBetweenAtoms(ring_atom, a.GetIdx()).IsInRing()]


def _substituted(atom: Chem.Atom, ring_members: set) -> bool:
    """An ortho atom carrying a non-H substituent or a fused ring."""
    if atom.GetAtomicNum() != 6:
        return False  # a ring N: no substituent (its lone pair is small)
    for n in atom.GetNeighbors():
        if n.GetAtomicNum() > 1 and n.GetIdx() not in ring_members:
            return True
    return False


def _biaryl_bonds(mol, ranks):
    out = []
    ring_info = mol.GetRingInfo()
    for bond in mol.GetBonds():
        a, b = bond.GetBeginAtom(), bond.GetEndAtom()
        if bond.IsInRing() or not (a.GetIsAromatic() and b.GetIsAromatic()):
            continue
        if bond.GetBondType() != Chem.BondType.SINGLE:
            continue
        ends = []
        n_subst = 0
        for atom, partner in ((a, b), (b, a)):
            ring = next((set(r) for r in ring_info.AtomRings() if atom.GetIdx() in r), set())
            ortho = _ortho(mol, atom.GetIdx(), partner.GetIdx())
            if len(ortho) != 2:
                ends = []
                break
            flags = [_substituted(o, ring) for o in ortho]
            n_subst += sum(flags)
            if ranks[ortho[0].GetIdx()] == ranks[ortho[1].GetIdx()]:
                ends = []
                break  # a local twofold axis: both states are the same molecule
            # reference: the substituted ortho atom (the higher rank if both or none)
            ref = max(zip(ortho, flags), key=lambda t: (t[1], ranks[t[0].GetIdx()]))[0]
            ends.append(ref.GetIdx())
        if len(ends) != 2 or n_subst < 2:
            continue
        label = f"{a.GetSymbol()}{a.GetIdx() + 1}-{b.GetSymbol()}{b.GetIdx() + 1}"
        out.append(SlowBond("hindered biaryl", (ends[0], a.GetIdx(), b.GetIdx(), ends[1]),
                            label, SLOW_CLASSES["hindered biaryl"]))
    return out


def _double_bonds(mol, ranks):
    """Stereogenic non-ring double bonds C=C and C=N (E/Z), reference atoms the
    higher-ranked substituent on each end."""
    out = []
    for bond in mol.GetBonds():
        if bond.GetBondType() != Chem.BondType.DOUBLE or bond.IsInRing():
            continue
        a, b = bond.GetBeginAtom(), bond.GetEndAtom()
        if {a.GetAtomicNum(), b.GetAtomicNum()} not in ({6}, {6, 7}):
            continue
        refs = []
        for atom, other in ((a, b), (b, a)):
            subs = [n for n in atom.GetNeighbors() if n.GetIdx() != other.GetIdx()]
            if not subs or (len(subs) == 2 and ranks[subs[0].GetIdx()] == ranks[subs[1].GetIdx()]):
                refs = []
                break
            refs.append(max(subs, key=lambda n: (n.GetAtomicNum() > 1, ranks[n.GetIdx()])).GetIdx())
        if len(refs) != 2:
            continue
        if {a.GetAtomicNum(), b.GetAtomicNum()} == {6}:
            kind = "alkene E/Z"
        else:
            n_atom = a if a.GetAtomicNum() == 7 else b
            hetero = any(x.GetAtomicNum() in (7, 8) for x in n_atom.GetNeighbors()
                         if x.GetIdx() not in (a.GetIdx(), b.GetIdx()))
            kind = "oxime/hydrazone E/Z" if hetero else "imine E/Z"
        label = f"{a.GetSymbol()}{a.GetIdx() + 1}={b.GetSymbol()}{b.GetIdx() + 1}"
        out.append(SlowBond(kind, (refs[0], a.GetIdx(), b.GetIdx(), refs[1]), label,
                            SLOW_CLASSES[kind]))
    return out


def _stereocentres(mol):
    """Tetrahedral stereocentres (assigned or not): their configuration is fixed."""
    out = []
    for idx, _ in Chem.FindMolChiralCenters(mol, includeUnassigned=True,
                                             useLegacyImplementation=False):
        nbrs = [n.GetIdx() for n in mol.GetAtomWithIdx(idx).GetNeighbors()]
        if len(nbrs) < 3:
            continue
        label = f"{mol.GetAtomWithIdx(idx).GetSymbol()}{idx + 1}"
        out.append(SlowBond("stereocentre", (nbrs[0], idx, nbrs[1], nbrs[2]), label,
                            SLOW_CLASSES["stereocentre"]))
    return out


def configuration_elements(mol: Chem.Mol) -> list[SlowBond]:
    """Stereogenic double bonds (C=C, C=N) and stereocentres: configurations that do not
    interconvert (or only over barriers of 15-27 kcal/mol for imines) and split species
    where conformers of one ensemble disagree on them."""
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False))
    return _double_bonds(mol, ranks) + _stereocentres(mol)


def slow_bonds(mol: Chem.Mol) -> list[SlowBond]:
    """The bonds of ``mol`` whose rotation is slow on the NMR time scale (see module notes).

    Examples
    --------
    >>> from rdkit import Chem
    >>> [b.label for b in slow_bonds(Chem.AddHs(Chem.MolFromSmiles("CC(=O)N(C)Cc1ccccc1")))]
    ['C2(=O)-N4']
    >>> slow_bonds(Chem.AddHs(Chem.MolFromSmiles("CC(=O)N(C)C")))   # both N-methyls alike
    []
    """
    if not isinstance(mol, Chem.Mol):
        raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=True))
    return _amide_bonds(mol, ranks) + _biaryl_bonds(mol, ranks)


def species_table(ens, ids=None) -> pd.DataFrame:
    """Species of each conformer.

    Parameters
    ----------
    ens : Ensemble (or an RDKit Mol with conformers)
    ids : sequence of int, optional
        Conformer ids (default: every conformer of the ensemble, failed ones included).

    Returns
    -------
    pandas.DataFrame
        Indexed by conformer id: ``species`` (int; 0 for the species holding the lowest
        conformer at the ranking level when energies are known, then in order of first
        appearance) and ``species_label`` (e.g. "C2-N4 O3 cis to C5"; "" when the molecule
        has no slow bond); atoms in labels are numbered from 1, as in molecule viewers.
    """
    if isinstance(ens, Chem.Mol):
        mol = ens
        all_ids = [c.GetId() for c in mol.GetConformers()]
    else:
        mol = ens.mol
        all_ids = ens.ids(active=False)
    ids = all_ids if ids is None else [int(i) for i in ids]
    index = pd.Index(ids, name="conformer")
    bonds = slow_bonds(mol)
    configs = configuration_elements(mol) if ids else []
    if not (bonds or configs) or not ids:
        return pd.DataFrame({"species": np.zeros(len(ids), dtype=int), "species_label": ""},
                            index=index)
    pos = np.stack([np.asarray(mol.GetConformer(int(i)).GetPositions()) for i in ids])
    finite = np.isfinite(pos).all(axis=(1, 2))
    # configurations count only where the conformers disagree (mixed stereoisomers)
    varying = [b for b in configs if len(set(b.state(pos[finite]))) > 1] if finite.any() else []
    bonds = bonds + varying
    if not bonds:
        return pd.DataFrame({"species": np.zeros(len(ids), dtype=int), "species_label": ""},
                            index=index)
    states = np.stack([b.state(pos) for b in bonds], axis=1)  # (n_conf, n_bonds)
    labels = ["; ".join(b.describe(s, mol) for b, s in zip(bonds, row)) if ok
              else "no coordinates" for row, ok in zip(states, finite)]
    order = list(range(len(ids)))
    if not isinstance(ens, Chem.Mol):
        try:
            rel = ens.raw_table[f"energy_{ens.level}"].reindex(ids).to_numpy(dtype=float)
            status_ok = (ens.raw_table["status"].reindex(ids) == "ok").to_numpy()
            key = np.where(status_ok & np.isfinite(rel), rel, np.inf)
            order = list(np.argsort(key, kind="stable"))
        except (KeyError, ValueError):
            pass
    number: dict[str, int] = {}
    for k in order:
        number.setdefault(labels[k], len(number))
    return pd.DataFrame({"species": [number[lab] for lab in labels], "species_label": labels},
                        index=index)


def within_species_populations(ens, temperatures, energy: str = "auto") -> pd.DataFrame:
    """Conformer populations normalized within each species.

    Returns
    -------
    pandas.DataFrame
        Index: conformer id; ``species`` and one float column per temperature; within each
        species the populations sum to 1 (the weights of that species' NMR averages).
    """
    pops = ens.populations(temperatures, energy=energy)
    table = species_table(ens, ids=list(pops.index))
    totals = pops.groupby(table["species"]).transform("sum")
    out = pops / totals
    out.insert(0, "species", table["species"])
    return out


def species_populations(ens, temperatures, energy: str = "auto") -> pd.DataFrame:
    """Populations between species (each species' share) at each temperature.

    The shares assume the species are in equilibrium with each other (slow on the NMR time
    scale, but equilibrated over the minutes a sample stands: true for amide rotamers; not
    for atropisomers with half-lives of hours or more, whose shares are set by how the
    sample was made).

    Returns
    -------
    pandas.DataFrame
        Index: species number; columns ``species_label``, ``n_conformers`` and one float
        column per temperature (shares summing to 1).
    """
    pops = ens.populations(temperatures, energy=energy)
    table = species_table(ens, ids=list(pops.index))
    grouped = pops.groupby(table["species"]).sum()
    out = pd.DataFrame({"species_label": table.groupby("species")["species_label"].first(),
                        "n_conformers": table.groupby("species").size()})
    out = pd.concat([out, grouped], axis=1)
    out.index.name = "species"
    return out
