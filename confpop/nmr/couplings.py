"""Vicinal proton-proton couplings: which pairs, which protons are equivalent, and J per conformer.

The pairs come from the bond graph (every H-X-Y-H with X, Y heavy atoms). Each pair gets a
parameter set by its fragment ("auto"):

- H-C-C-H between two sp3 carbons of an acyclic CH3-CH3, CH3-CH2 or CH2-CH2 fragment (alkyl
  chains, ethyl and propyl groups): the extended Karplus equation of Donders, de Leeuw and
  Altona (``donders-altona-1989``), which reproduces their measured couplings (0.19 Hz mean
  absolute error on 13 handbook values; the HLA sets give 0.92 Hz, all too low).
- every other H-C-C-H between two sp3 carbons (rings, sugars, CH-CH and CH2-CH with more
  substituents): the Haasnoot-de Leeuw-Altona equation, set chosen by the
  number of non-H substituents on the fragment (``haasnoot-general`` for 0-1,
  ``haasnoot-2``/``-3``/``-4``); when an atom within two bonds of the fragment has no Huggins
  electronegativity in the table the pair falls back to ``karplus-generic``.
- H-N-C-H with an amide N (bonded to a carbonyl carbon) and an sp3 carbon, fragment name
  ``"H-N(amide)-C-H"``: ``hu-bax-1997``.
- anything else (alkene and aromatic H-C=C-H, H-C-O-H, H-C(sp3)-C(sp2)-H, ...): listed by
  :func:`vicinal_pairs` with ``parameter_set`` None and the reason, and left out of
  :func:`couplings` (no conformer-dependent Karplus set is shipped for them).

Equivalent protons: protons are grouped when they are homotopic or enantiotopic (the
substitution test: replacing either by deuterium gives the same molecule or its mirror
image, judged by canonical isomeric SMILES with stereo read from 3D). Diastereotopic
protons (a CH2 next to a stereocentre, the two methyls of an isopropyl group next to one)
stay apart. A methyl's three protons form one group.

Labels: ``"H7(C2)"`` is atom index 7 (0-based, the RDKit atom order of ``ens.mol``), a
hydrogen, sitting on atom 2, a carbon. A group of equivalent protons is labelled
``"H7/H8/H9(C2)"``.
"""

from __future__ import annotations

import logging
from collections import defaultdict
from dataclasses import dataclass

import numpy as np
import pandas as pd
from rdkit import Chem

from ..errors import InputError
from . import karplus as kp
from .cautions import method_cautions, warn_cautions
from .identity import _labelled_smiles, consistent_proton_identity, prochiral_labels

__all__ = [
    "ProtonGroup",
    "proton_groups",
    "vicinal_pairs",
    "couplings",
    "average_couplings",
    "group_couplings",
    "coupling_spread",
    "population_spread",
]

log = logging.getLogger(__name__)

_PAIR_COLUMNS = ["atom_a", "atom_b", "label", "group", "parameter_set"]


# --------------------------------------------------------------------------- input handling
def _mol_and_ids(ens):
    """(mol, active conformer ids) from an Ensemble or an RDKit Mol with conformers."""
    if isinstance(ens, Chem.Mol):
        mol = ens
        ids = [c.GetId() for c in mol.GetConformers()]
    elif hasattr(ens, "mol") and hasattr(ens, "ids"):
        mol = ens.mol
        ids = list(ens.ids())
    else:
        raise InputError(f"ens must be a confpop Ensemble or an RDKit Mol with conformers, "
                         f"got {type(ens).__name__}")
    if mol.GetNumConformers() == 0 or not ids:
        raise InputError("the molecule has no (active) conformers to compute couplings for")
    if not any(a.GetAtomicNum() == 1 for a in mol.GetAtoms()):
        raise InputError("the molecule has no explicit hydrogens; build it with Chem.AddHs "
                         "(addCoords=True) before embedding conformers")
    if isinstance(ens, Chem.Mol):
        # an Ensemble is put in this order when it is made; a bare molecule here, keeping
        # its first conformer as the user gave it (the indices refer to it)
        mol = consistent_proton_identity(mol, reference="first")
    return mol, ids


def _positions(mol: Chem.Mol, ids) -> np.ndarray:
    """(n_conformers, n_atoms, 3) angstrom."""
    return np.stack([mol.GetConformer(int(i)).GetPositions() for i in ids])


def _label(mol: Chem.Mol, h: int, stereo: dict | None = None) -> str:
    """"H7(C2)", or "H7(C2,pro-R)" for one of a stereoheterotopic pair (``stereo`` from
    :func:`confpop.nmr.identity.prochiral_labels`)."""
    heavy = mol.GetAtomWithIdx(h).GetNeighbors()
    tag = f",{stereo[h]}" if stereo and h in stereo else ""
    on = f"({heavy[0].GetSymbol()}{heavy[0].GetIdx()}{tag})" if heavy else ""
    return f"H{h}{on}"


# --------------------------------------------------------------------------- proton groups
@dataclass(frozen=True)
class ProtonGroup:
    """Protons that give one NMR signal (homotopic or enantiotopic).

    Attributes
    ----------
    atoms : tuple of int
        Hydrogen atom indices (0-based), ascending.
    heavy_atoms : tuple of int
        The atom each proton sits on, in the same order.
    label : str
        E.g. ``"H7/H8/H9(C2)"`` or ``"H12(C4)/H15(C6)"``.
    """

    atoms: tuple
    heavy_atoms: tuple
    label: str




def proton_groups(mol: Chem.Mol, conf_id: int | None = None) -> list[ProtonGroup]:
    """Group the hydrogens of ``mol`` into sets of NMR-equivalent protons.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        With explicit hydrogens and at least one conformer (its 3D structure fixes the
        configuration of every stereocentre).
    conf_id : int, optional
        The conformer to read the configuration from; default: the first.

    Returns
    -------
    list of ProtonGroup
        Sorted by the smallest atom index in each group.

    Notes
    -----
    Candidates are protons with equal graph-symmetry class (RDKit canonical ranks without
    tie breaking and without chirality). Within a class, proton a and b are equivalent when
    replacing a by deuterium gives the same canonical isomeric SMILES as replacing b
    (homotopic), or as the mirror image of the b-labelled molecule (enantiotopic).
    Diastereotopic protons give diastereomers and are kept apart. Equivalence by fast
    conformational exchange (a methyl rotating, a ring flipping) is included because it
    does not change the labelled molecule.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("CC[C@H](C)O"))   # (S)-butan-2-ol
    >>> AllChem.EmbedMolecule(mol, randomSeed=7)
    0
    >>> [g.label for g in proton_groups(mol) if g.heavy_atoms[0] == 1]   # diastereotopic CH2
    ['H8(C1,pro-S)', 'H9(C1,pro-R)']
    """
    if mol.GetNumConformers() == 0:
        raise InputError("proton_groups needs a molecule with a 3D conformer")
    if conf_id is None:
        conf_id = mol.GetConformers()[0].GetId()
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False))
    classes: dict[int, list[int]] = defaultdict(list)
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 1:
            classes[ranks[atom.GetIdx()]].append(atom.GetIdx())
    groups: list[list[int]] = []
    for members in classes.values():
        if len(members) == 1:
            groups.append(members)
            continue
        plain = {h: _labelled_smiles(mol, h, conf_id, mirror=False) for h in members}
        mirrored = {h: _labelled_smiles(mol, h, conf_id, mirror=True) for h in members}
        remaining = list(members)
        while remaining:
            first = remaining.pop(0)
            keys = {plain[first], mirrored[first]}
            same = [h for h in remaining if plain[h] in keys]
            groups.append([first] + same)
            remaining = [h for h in remaining if h not in same]
    stereo = prochiral_labels(mol, conf_id)
    out = []
    for g in sorted((sorted(g) for g in groups), key=lambda g: g[0]):
        heavy = tuple(mol.GetAtomWithIdx(h).GetNeighbors()[0].GetIdx()
                      if mol.GetAtomWithIdx(h).GetDegree() else -1 for h in g)
        out.append(ProtonGroup(tuple(g), heavy, _group_label(mol, g, heavy, stereo)))
    return out


def _group_label(mol, atoms, heavy, stereo=None) -> str:
    if len(atoms) == 1:
        return _label(mol, atoms[0], stereo)
    if len(set(heavy)) == 1:
        sym = mol.GetAtomWithIdx(heavy[0]).GetSymbol() if heavy[0] >= 0 else ""
        return "/".join(f"H{h}" for h in atoms) + (f"({sym}{heavy[0]})" if sym else "")
    return "/".join(_label(mol, h, stereo) for h in atoms)


def _group_index(groups: list[ProtonGroup]) -> dict[int, int]:
    return {h: k for k, g in enumerate(groups) for h in g.atoms}


# --------------------------------------------------------------------------- vicinal pairs
@dataclass(frozen=True)
class _Pair:
    h_a: int
    x: int
    y: int
    h_b: int
    kind: str
    parameter_set: str | None
    reason: str
    substituents: tuple  # ((atom, on_carbon, delta_chi), ...) for HLA


def _is_amide_n(atom: Chem.Atom) -> bool:
    if atom.GetAtomicNum() != 7 or atom.GetIsAromatic():
        return False
    for nb in atom.GetNeighbors():
        if nb.GetAtomicNum() == 6:
            for bond in nb.GetBonds():
                other = bond.GetOtherAtom(nb)
                if (bond.GetBondType() == Chem.BondType.DOUBLE and other.GetAtomicNum() in (8, 16)):
                    return True
    return False


def _is_sp3_carbon(atom: Chem.Atom) -> bool:
    return (atom.GetAtomicNum() == 6 and not atom.GetIsAromatic()
            and atom.GetHybridization() == Chem.HybridizationType.SP3)


def _delta_chi(z: int) -> float | None:
    chi = kp.HUGGINS_ELECTRONEGATIVITY.get(z)
    return None if chi is None else chi - kp.HUGGINS_ELECTRONEGATIVITY[1]


def _hla_substituents(mol, h_a, x, y, h_b):
    """Non-H substituents on x (not y) and y (not x) as (atom, carbon, delta_alpha, [delta_beta])."""
    subs = []
    for carbon, other in ((x, y), (y, x)):
        for nb in mol.GetAtomWithIdx(carbon).GetNeighbors():
            if nb.GetIdx() == other or nb.GetAtomicNum() == 1:
                continue
            da = _delta_chi(nb.GetAtomicNum())
            betas = [_delta_chi(b.GetAtomicNum()) for b in nb.GetNeighbors() if b.GetIdx() != carbon]
            if da is None or any(b is None for b in betas):
                return None
            subs.append((nb.GetIdx(), carbon, da, betas))
    return subs


_BOND_MARK = {Chem.BondType.SINGLE: "-", Chem.BondType.DOUBLE: "=", Chem.BondType.TRIPLE: "#",
              Chem.BondType.AROMATIC: ":"}


def _atom_mark(atom: Chem.Atom) -> str:
    if atom.GetIsAromatic():
        return f"{atom.GetSymbol()}(ar)"
    hyb = atom.GetHybridization()
    if atom.GetAtomicNum() == 6 and hyb in (Chem.HybridizationType.SP2, Chem.HybridizationType.SP):
        return f"{atom.GetSymbol()}({str(hyb).lower()})"
    return atom.GetSymbol()


def _fragment_name(mol, x, y) -> str:
    """E.g. "H-C-C-H" (sp3-sp3 single bond), "H-C(sp2)=C(sp2)-H", "H-C-O-H", "H-C(sp2)-C-H"
    (amides are renamed "H-N(amide)-C-H" by the caller)."""
    ax, ay = mol.GetAtomWithIdx(x), mol.GetAtomWithIdx(y)
    bond = _BOND_MARK.get(mol.GetBondBetweenAtoms(x, y).GetBondType(), "~")
    # the same name whichever end comes first: the alphabetically smaller spelling
    return min(f"H-{_atom_mark(ax)}{bond}{_atom_mark(ay)}-H", f"H-{_atom_mark(ay)}{bond}{_atom_mark(ax)}-H")


#: the set for acyclic CH3-CH3 / CH3-CH2 / CH2-CH2 fragments. Measured here (README "Alkyl
#: couplings", tests/test_nmr_karplus.py): on 13 handbook couplings of ethyl and propyl
#: fragments the mean absolute error is 0.19 Hz with this set and 0.92 Hz with the HLA sets
#: (which were fitted to more substituted fragments and stay in use everywhere else).
ALKYL_SET = "donders-altona-1989"


def _is_alkyl_fragment(mol, x, y) -> bool:
    """An acyclic C-C bond between two carbons that each carry at least two hydrogens."""
    bond = mol.GetBondBetweenAtoms(x, y)
    if bond is None or bond.IsInRing():
        return False
    for idx in (x, y):
        atom = mol.GetAtomWithIdx(idx)
        if sum(1 for n in atom.GetNeighbors() if n.GetAtomicNum() == 1) < 2:
            return False
    return True


def _classify(mol, h_a, x, y, h_b, overrides) -> _Pair:
    ax, ay = mol.GetAtomWithIdx(x), mol.GetAtomWithIdx(y)
    kind = _fragment_name(mol, x, y)
    if _is_sp3_carbon(ax) and _is_sp3_carbon(ay):
        kind = "H-C-C-H"
    elif ({ax.GetAtomicNum(), ay.GetAtomicNum()} == {6, 7}
          and mol.GetBondBetweenAtoms(x, y).GetBondType() == Chem.BondType.SINGLE):
        n_atom, c_atom = (ax, ay) if ax.GetAtomicNum() == 7 else (ay, ax)
        if _is_amide_n(n_atom) and _is_sp3_carbon(c_atom):
            kind = "H-N(amide)-C-H"
    chosen = overrides.get(kind) if overrides else None
    if kind == "H-C-C-H":
        subs = _hla_substituents(mol, h_a, x, y, h_b)
        if chosen is not None:
            pset = kp.get_parameters(chosen)
        elif subs is None:
            pset = kp.PARAMETER_SETS["karplus-generic"]
        elif _is_alkyl_fragment(mol, x, y):
            pset = kp.PARAMETER_SETS[ALKYL_SET]
        else:
            pset = kp.haasnoot_set_for(len(subs))
        packed = ()
        if isinstance(pset, kp.SUBSTITUENT_SETS) and subs is not None:
            packed = tuple((a, c, pset.group_electronegativity(da, db)) for a, c, da, db in subs)
        elif isinstance(pset, kp.SUBSTITUENT_SETS):
            return _Pair(h_a, x, y, h_b, kind, None,
                         "an atom near the fragment has no Huggins electronegativity", ())
        return _Pair(h_a, x, y, h_b, kind, pset.name, "", packed)
    if kind == "H-N(amide)-C-H":
        pset = kp.get_parameters(chosen if chosen is not None else "hu-bax-1997")
        if isinstance(pset, kp.SUBSTITUENT_SETS):
            raise InputError(f"the generalized (H-C-C-H) set {pset.name!r} cannot be used for "
                             "amide H-N-C-H couplings")
        return _Pair(h_a, x, y, h_b, kind, pset.name, "", ())
    if chosen is not None:
        pset = kp.get_parameters(chosen)
        if isinstance(pset, kp.SUBSTITUENT_SETS):
            raise InputError(f"the generalized set {pset.name!r} applies to H-C-C-H between "
                             f"sp3 carbons only, not {kind}")
        return _Pair(h_a, x, y, h_b, kind, pset.name, "", ())
    why = "no conformer-dependent Karplus set for this fragment"
    if mol.GetBondBetweenAtoms(x, y).GetBondType() != Chem.BondType.SINGLE:
        why = "not a single bond (cis/trans coupling, no rotamers)"
    return _Pair(h_a, x, y, h_b, kind, None, why, ())


def _parse_parameters(parameters):
    """-> (overrides by fragment kind, custom objects by name) ; 'auto' -> ({}, {})."""
    if isinstance(parameters, str) and parameters.strip().lower() == "auto":
        return {}, {}
    if isinstance(parameters, dict):
        overrides = {}
        for key, value in parameters.items():
            if not isinstance(key, str) or not (key.startswith("H-") and key.endswith("-H")):
                raise InputError(f"parameters dict keys must be fragments like 'H-C-C-H' or "
                                 f"'H-N(amide)-C-H' (as in vicinal_pairs()['fragment']), got {key!r}")
            overrides[key.strip()] = kp.get_parameters(value)
        return overrides, {p.name: p for p in overrides.values()}
    pset = kp.get_parameters(parameters)
    return {pset.pathway: pset}, {pset.name: pset}


def _find_pairs(mol: Chem.Mol, overrides) -> list[_Pair]:
    seen = set()
    pairs = []
    for h in mol.GetAtoms():
        if h.GetAtomicNum() != 1 or h.GetDegree() != 1:
            continue
        x = h.GetNeighbors()[0]
        if x.GetAtomicNum() == 1:
            continue
        for y in x.GetNeighbors():
            if y.GetAtomicNum() == 1:
                continue
            for h2 in y.GetNeighbors():
                if h2.GetAtomicNum() != 1 or h2.GetIdx() == h.GetIdx():
                    continue
                a, b = h.GetIdx(), h2.GetIdx()
                xa, yb = x.GetIdx(), y.GetIdx()
                if a > b:
                    a, b, xa, yb = b, a, yb, xa
                if (a, b) in seen:
                    continue
                seen.add((a, b))
                pairs.append(_classify(mol, a, xa, yb, b, overrides))
    pairs.sort(key=lambda p: (p.h_a, p.h_b))
    return pairs


def vicinal_pairs(mol: Chem.Mol, parameters="auto", include_unsupported: bool = True) -> pd.DataFrame:
    """Every vicinal H-X-Y-H pair of ``mol`` with the parameter set it gets.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        With explicit hydrogens and a conformer (for the proton groups).
    parameters : "auto", str, parameter object, (A, B, C) or dict
        See :func:`couplings`.
    include_unsupported : bool
        Also list pairs no set applies to (``parameter_set`` None, ``reason`` says why).

    Returns
    -------
    pandas.DataFrame
        Columns ``atom_a``, ``atom_b`` (0-based H indices, a < b), ``label``, ``group``,
        ``parameter_set``, ``fragment`` (e.g. "H-C-C-H"), ``path`` (the four atoms),
        ``n_substituents``, ``reason``.
    """
    if isinstance(mol, Chem.Mol):
        m = mol
    else:
        m, _ = _mol_and_ids(mol)
    overrides, _ = _parse_parameters(parameters)
    m = consistent_proton_identity(m, reference="first")
    groups = proton_groups(m)
    gidx = _group_index(groups)
    stereo = prochiral_labels(m)
    rows = []
    for p in _find_pairs(m, overrides):
        if p.parameter_set is None and not include_unsupported:
            continue
        rows.append({"atom_a": p.h_a, "atom_b": p.h_b,
                     "label": f"{_label(m, p.h_a, stereo)}–{_label(m, p.h_b, stereo)}",
                     "group": _group_pair_label(groups, gidx, p.h_a, p.h_b),
                     "parameter_set": p.parameter_set, "fragment": p.kind,
                     "path": (p.h_a, p.x, p.y, p.h_b), "n_substituents": len(p.substituents),
                     "reason": p.reason})
    cols = _PAIR_COLUMNS + ["fragment", "path", "n_substituents", "reason"]
    return pd.DataFrame(rows, columns=cols)


def _group_pair_label(groups, gidx, a, b) -> str:
    ga, gb = sorted((gidx[a], gidx[b]))
    return f"{groups[ga].label}–{groups[gb].label}"


# --------------------------------------------------------------------------- evaluation
def _pair_j(pair: _Pair, pos: np.ndarray, psets) -> np.ndarray:
    """J (Hz) of one pair over conformers; pos is (n_conf, n_atoms, 3)."""
    pset = psets[pair.parameter_set]
    ha, x, y, hb = pos[:, pair.h_a], pos[:, pair.x], pos[:, pair.y], pos[:, pair.h_b]
    phi = kp.dihedral(ha, x, y, hb)
    if isinstance(pset, kp.SUBSTITUENT_SETS):
        subs = []
        for atom, carbon, delta in pair.substituents:
            if carbon == pair.x:
                xi = kp.orientation_sign(ha, x, y, pos[:, atom])
            else:
                xi = kp.orientation_sign(hb, y, x, pos[:, atom])
            subs.append((delta, xi))
        return pset.j(phi, subs)
    return pset.j(phi)


def _coupling_matrix(mol, ids, parameters="auto"):
    """(pairs list, J array (n_pairs, n_conf), groups, group index)."""
    overrides, custom = _parse_parameters(parameters)
    pairs = [p for p in _find_pairs(mol, overrides) if p.parameter_set is not None]
    psets = dict(kp.PARAMETER_SETS)
    psets.update(custom)
    pos = _positions(mol, ids)
    jmat = np.array([_pair_j(p, pos, psets) for p in pairs]).reshape(len(pairs), len(ids))
    groups = proton_groups(mol, conf_id=int(ids[0]))
    return pairs, jmat, groups, _group_index(groups)


def couplings(ens, parameters="auto") -> pd.DataFrame:
    """Vicinal 3J(H,H) of every conformer.

    Parameters
    ----------
    ens : Ensemble or rdkit.Chem.Mol
        An ensemble (its active conformers) or a molecule with explicit H and conformers.
    parameters : "auto", str, KarplusParameters, GeneralizedKarplus, (A, B, C) or dict
        "auto" picks a set per pair (see the module docstring). A set name or object
        replaces the automatic choice for the fragment it was made for (its ``pathway``,
        e.g. a user (A, B, C) set applies to every H-C-C-H between sp3 carbons); a dict maps
        fragment names as listed by :func:`vicinal_pairs` (``"H-C-C-H"`` for sp3-sp3,
        ``"H-N(amide)-C-H"``, or others such as ``"H-C-O-H"``, ``"H-C-N-H"`` (an amine),
        ``"H-C(sp2)-C-H"``) to sets.

    Returns
    -------
    pandas.DataFrame
        One row per proton pair: ``atom_a``, ``atom_b`` (0-based H indices), ``label``
        (e.g. "H7(C2)–H10(C3)"), ``group`` (the pair of equivalence groups), ``parameter_set``,
        then one column per conformer id (int) holding J in Hz.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    >>> AllChem.EmbedMolecule(mol, randomSeed=1)
    0
    >>> table = couplings(mol)
    >>> table[["atom_a", "atom_b", "parameter_set"]].head(2).to_string(index=False)
    ' atom_a  atom_b       parameter_set\\n      3       6 donders-altona-1989\\n      3       7 donders-altona-1989'
    """
    mol, ids = _mol_and_ids(ens)
    pairs, jmat, groups, gidx = _coupling_matrix(mol, ids, parameters)
    stereo = prochiral_labels(mol)
    info = pd.DataFrame({
        "atom_a": [p.h_a for p in pairs],
        "atom_b": [p.h_b for p in pairs],
        "label": [f"{_label(mol, p.h_a, stereo)}–{_label(mol, p.h_b, stereo)}" for p in pairs],
        "group": [_group_pair_label(groups, gidx, p.h_a, p.h_b) for p in pairs],
        "parameter_set": [p.parameter_set for p in pairs],
    })
    values = pd.DataFrame(jmat, columns=[int(i) for i in ids])
    return pd.concat([info, values], axis=1)


# --------------------------------------------------------------------------- averages
def _populations(ens, temperatures, energy) -> pd.DataFrame:
    if not hasattr(ens, "populations"):
        raise InputError("population averages need a confpop Ensemble (energies); for a bare "
                         "molecule use confpop.Ensemble.from_mol(mol, energies=...)")
    return ens.populations(temperatures, energy=energy)


def _group_rows(table: pd.DataFrame, value_columns) -> pd.DataFrame:
    """Average the pair rows of each group pair (vicinal pairs between equivalent groups),
    within each species when the table has a ``species`` column."""
    keys = ["species", "group"] if "species" in table.columns else ["group"]
    rows = []
    for key, sub in table.groupby(keys, sort=False):
        key = key if isinstance(key, tuple) else (key,)
        rows.append({**dict(zip(keys, key)),
                     "atoms_a": tuple(sorted(set(sub["atom_a"]))),
                     "atoms_b": tuple(sorted(set(sub["atom_b"]))),
                     "n_pairs": len(sub),
                     "parameter_set": ",".join(sorted(set(sub["parameter_set"]))),
                     **{c: float(sub[c].mean()) for c in value_columns}})
    cols = ["group", "atoms_a", "atoms_b", "n_pairs", "parameter_set"] + list(value_columns)
    if "species" in table.columns:
        cols.insert(1, "species")
    return pd.DataFrame(rows, columns=cols)


def _species(ens, ids) -> pd.Series | None:
    """Species number per conformer id, or None when there is only one species."""
    if not hasattr(ens, "ids"):
        return None
    from ..species import species_table
    sp = species_table(ens, ids=ids)["species"]
    return sp if sp.nunique() > 1 else None


def average_couplings(ens, temperatures, parameters="auto", energy: str = "auto",
                      by: str = "pair", species: bool = True) -> pd.DataFrame:
    """Boltzmann-averaged vicinal couplings at each temperature.

    Parameters
    ----------
    ens : Ensemble
    temperatures : float or sequence of float, K
    parameters : see :func:`couplings`
    energy : str
        Which energies weight the conformers (passed to ``ens.populations``).
    by : {"pair", "group"}
        "pair": one row per proton pair. "group": one row per pair of equivalence groups,
        the mean over the vicinal pairs between them (a methyl's three protons, or the
        symmetry-related H2/H6 and H3/H5 protons of a ring, give one observed coupling);
        columns ``group``, ``atoms_a``, ``atoms_b`` (tuples), ``n_pairs``, ``parameter_set``.
    species : bool
        True (default): average within each species (conformers separated by a slow bond
        rotation, see :mod:`confpop.species`), one block of rows per species with a
        ``species`` column; ``attrs["species"]`` gives each species' label and share of the
        population. False: one average over every conformer, as if all exchange were fast.

    Returns
    -------
    pandas.DataFrame
        The identification columns of :func:`couplings` (or of the group rows), ``species``
        (always present; 0 when there is one species) and one float-keyed column per
        temperature: <J> = sum_i p_i(T) J_i / sum_i p_i(T) over the species' conformers, Hz.
        ``attrs["cautions"]`` lists the method cautions that apply (see below).

    Warns
    -----
    confpop.nmr.MethodWarning
        When a known weakness of the ranking method applies (polyols and sugars in water,
        the gas-phase fluorine gauche effect; :mod:`confpop.nmr.cautions`).

    Notes
    -----
    Averaging J over conformers assumes exchange fast on the NMR time scale (rates well
    above the spread of J in Hz), true for rotamers and ring flips at room temperature and
    not across the slow bonds that separate species.
    """
    if by not in ("pair", "group"):
        raise InputError(f"by must be 'pair' or 'group', got {by!r}")
    mol, ids = _mol_and_ids(ens)
    pops = _populations(ens, temperatures, energy)
    table = couplings(ens, parameters)
    conf_ids = [int(i) for i in pops.index]
    jmat = table[conf_ids].to_numpy(dtype=float)
    weights = pops.to_numpy(dtype=float)
    sp = _species(ens, conf_ids) if species else None
    labels = {0: ""}
    shares = {0: {float(t): 1.0 for t in pops.columns}}
    blocks = []
    members = {0: np.ones(len(conf_ids), bool)} if sp is None else \
        {int(s): (sp.to_numpy() == s) for s in sorted(sp.unique())}
    if sp is not None:
        from ..species import species_table
        lab = species_table(ens, ids=conf_ids)
        labels = {int(s): str(lab.loc[lab["species"] == s, "species_label"].iloc[0]) for s in members}
    for s, mask in members.items():
        w = weights * mask[:, None]
        total = w.sum(axis=0)
        shares[s] = {float(t): float(v) for t, v in zip(pops.columns, total)}
        avg = jmat @ (w / np.where(total > 0, total, 1.0))
        block = table[_PAIR_COLUMNS].copy()
        block["species"] = s
        for k, t in enumerate(pops.columns):
            block[float(t)] = avg[:, k]
        blocks.append(block)
    out = pd.concat(blocks, ignore_index=True)
    out.attrs["species"] = {s: {"label": labels.get(s, ""), "share": shares[s]} for s in members}
    cautions = method_cautions(ens)
    out.attrs["cautions"] = [c.message for c in cautions]
    warn_cautions(cautions)
    if by == "group":
        grouped = _group_rows(out, [float(t) for t in pops.columns])
        grouped.attrs.update(out.attrs)
        return grouped
    return out


def group_couplings(table: pd.DataFrame) -> pd.DataFrame:
    """Collapse a per-pair table (from :func:`couplings` or :func:`average_couplings`) to one
    row per pair of equivalence groups (means over the vicinal pairs between the groups)."""
    missing = [c for c in _PAIR_COLUMNS if c not in table.columns]
    if missing:
        raise InputError(f"table must come from couplings() or average_couplings(); missing "
                         f"columns {missing}")
    values = [c for c in table.columns if c not in _PAIR_COLUMNS and c != "species"]
    return _group_rows(table, values)


# --------------------------------------------------------------------------- uncertainty
def _sample_weights(ens, temperatures, energy, energy_sigma, n_samples, seed):
    """Nominal and Monte-Carlo populations: (ids, temps, nominal (n_T, n_c), samples (n_T, S, n_c))."""
    from scipy.special import logsumexp

    from ..units import gas_constant

    if not hasattr(ens, "energies"):
        raise InputError("uncertainty estimates need a confpop Ensemble with energies")
    sigma = float(energy_sigma)
    if not np.isfinite(sigma) or sigma < 0:
        raise InputError(f"energy_sigma must be >= 0 kcal/mol, got {energy_sigma!r}")
    n_samples = int(n_samples)
    if n_samples < 2:
        raise InputError(f"n_samples must be >= 2, got {n_samples}")
    temps = [float(t) for t in np.atleast_1d(np.asarray(temperatures, dtype=float))]
    nominal = ens.populations(temps, energy=energy)
    ids = [int(i) for i in nominal.index]
    g = np.asarray(ens.degeneracy.reindex(ids), dtype=float)
    rng = np.random.default_rng(seed)
    noise = rng.normal(0.0, sigma, size=(n_samples, len(ids)))  # kcal/mol, same at every T
    samples = np.empty((len(temps), n_samples, len(ids)))
    for k, t in enumerate(temps):
        e = ens.energies(unit="kcal/mol", energy=energy, temperature=t).reindex(ids).to_numpy(float)
        logw = -(e[None, :] + noise) / (gas_constant("kcal/mol") * t) + np.log(g)[None, :]
        samples[k] = np.exp(logw - logsumexp(logw, axis=1, keepdims=True))
    return ids, temps, nominal.to_numpy(dtype=float).T, samples


def _summaries(nominal, samples):
    return {"value": nominal, "mean": samples.mean(axis=0), "std": samples.std(axis=0, ddof=1),
            "p05": np.percentile(samples, 5, axis=0), "p95": np.percentile(samples, 95, axis=0)}


def population_spread(ens, temperatures, energy: str = "auto", energy_sigma: float = 1.0,
                      n_samples: int = 1000, seed: int = 0) -> pd.DataFrame:
    """Populations with a spread from the energy method's error (Monte Carlo).

    Each sample adds independent Gaussian noise of ``energy_sigma`` (kcal/mol) to every
    conformer's energy (the same noise at every temperature: the error of a method is
    systematic for a structure) and recomputes the Boltzmann populations.

    Parameters
    ----------
    ens : Ensemble
    temperatures : float or sequence of float, K
    energy : str
        Passed to ``ens.populations`` / ``ens.energies``.
    energy_sigma : float, kcal/mol
        Standard deviation of the per-conformer energy error; 1 kcal/mol is a typical
        GFN2-xTB conformer-energy error (0.5-1.5 kcal/mol, common practice).
    n_samples : int
    seed : int
        Seeds a private ``numpy.random.Generator``.

    Returns
    -------
    pandas.DataFrame
        Long format, one row per (conformer, temperature): ``conformer``, ``temperature``,
        ``value`` (the nominal population), ``mean``, ``std``, ``p05``, ``p95``.
    """
    ids, temps, nominal, samples = _sample_weights(ens, temperatures, energy, energy_sigma,
                                                   n_samples, seed)
    rows = []
    for k, t in enumerate(temps):
        s = _summaries(nominal[k], samples[k])
        for c, cid in enumerate(ids):
            rows.append({"conformer": cid, "temperature": t, **{n: float(v[c]) for n, v in s.items()}})
    return pd.DataFrame(rows)


def coupling_spread(ens, temperatures, parameters="auto", energy: str = "auto",
                    energy_sigma: float = 1.0, n_samples: int = 1000, seed: int = 0,
                    by: str = "pair", species: bool = True) -> pd.DataFrame:
    """Averaged couplings with a spread from the energy method's error (Monte Carlo).

    The per-conformer couplings are fixed; the populations are resampled as in
    :func:`population_spread`. A narrow 5-95 % interval means the prediction does not hinge
    on energy differences the method cannot resolve.

    Parameters
    ----------
    species : bool
        As for :func:`average_couplings`: averages (nominal and sampled) within each species.

    Returns
    -------
    pandas.DataFrame
        Long format, one row per (pair or group, species, temperature): the identification
        columns of :func:`average_couplings` (``by``), ``species``, ``temperature``, ``value``
        (nominal <J>), ``mean``, ``std``, ``p05``, ``p95`` in Hz.
    """
    if by not in ("pair", "group"):
        raise InputError(f"by must be 'pair' or 'group', got {by!r}")
    ids, temps, nominal, samples = _sample_weights(ens, temperatures, energy, energy_sigma,
                                                   n_samples, seed)
    table = couplings(ens, parameters)
    if by == "group":
        table = group_couplings(table)
        id_cols = ["group", "atoms_a", "atoms_b", "n_pairs", "parameter_set"]
    else:
        id_cols = list(_PAIR_COLUMNS)
    jmat = table[ids].to_numpy(dtype=float)
    sp = _species(ens, ids) if species else None
    members = {0: np.ones(len(ids), bool)} if sp is None else \
        {int(v): (sp.to_numpy() == v) for v in sorted(sp.unique())}
    frames = []
    for k, t in enumerate(temps):
        for number, mask in members.items():
            nom = nominal[k] * mask
            smp = samples[k] * mask[None, :]
            nom = nom / nom.sum()
            smp = smp / smp.sum(axis=1, keepdims=True)
            s = _summaries(jmat @ nom, smp @ jmat.T)
            frame = table[id_cols].copy()
            frame["species"] = number
            frame["temperature"] = t
            for name, v in s.items():
                frame[name] = v
            frames.append(frame)
    return pd.concat(frames, ignore_index=True)
