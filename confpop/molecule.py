"""Turning user input into a checked RDKit molecule.

:func:`load_molecule` takes a SMILES string, an RDKit ``Mol`` or a MOL/SDF/XYZ file and
returns one sanitized RDKit molecule with explicit hydrogens, its total charge and spin
multiplicity stored as the integer properties ``"charge"`` and ``"multiplicity"``, and the
input's 3D conformers kept. Everything that would make later steps silently wrong is refused
with a :class:`~confpop.errors.InputError` that names the problem: unparsable input, valence
errors, several disconnected fragments, elements a chosen method has no parameters for,
stereocentres or double bonds whose configuration was not given, an impossible
multiplicity.

:func:`stereoisomers` expands the unassigned stereo elements into one molecule per
stereoisomer. :func:`stereo_signature` and :func:`bond_graph_from_coordinates` read the
configuration and the bonds back from a conformer's coordinates, so a later step can check
that an optimization kept every stereocentre and every bond.

Atom indices in messages and results count from 0, as in RDKit; records of an SDF file and
frames of an XYZ file count from 1, as a text editor shows them.

Examples
--------
>>> from confpop.molecule import load_molecule
>>> mol = load_molecule("CC(=O)[O-]")
>>> mol.GetNumAtoms(), mol.GetIntProp("charge"), mol.GetIntProp("multiplicity")
(7, -1, 1)
"""

from __future__ import annotations

import itertools
import logging
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import (AllChem, rdCIPLabeler, rdDetermineBonds, rdForceFieldHelpers,
                        rdMolDescriptors)
from rdkit.Chem.EnumerateStereoisomers import EnumerateStereoisomers, StereoEnumerationOptions
from scipy.spatial import cKDTree

from .errors import InputError
from .geometry import dihedral_at

__all__ = [
    "load_molecule",
    "stereoisomers",
    "stereo_signature",
    "configuration_smiles",
    "bond_graph_from_coordinates",
    "molecule_summary",
    "STEREO_POLICIES",
    "BOND_TOLERANCE",
]

logger = logging.getLogger(__name__)

#: values accepted by ``load_molecule(stereo=...)``
STEREO_POLICIES = ("refuse", "ignore")

#: default relative tolerance of :func:`bond_graph_from_coordinates`: two atoms are bonded when
#: closer than (1 + 0.3) times the sum of their covalent radii, the factor 1.3 that RDKit's
#: ``rdDetermineBonds.DetermineConnectivity`` uses by default (common practice).
BOND_TOLERANCE = 0.3

_SDF_SUFFIXES = (".sdf", ".sd", ".mol")
_XYZ_SUFFIXES = (".xyz",)
_SMILES_SUFFIXES = (".smi", ".smiles")
_UNSUPPORTED_SUFFIXES = {
    ".mol2": "MOL2 files are not supported (their atom types and bond orders are too often "
             "ambiguous); convert the file to SDF",
    ".pdb": "PDB files are not supported (they carry no bond orders); convert the file to SDF",
    ".cif": "CIF files are not supported; convert the file to SDF or XYZ",
}
_KNOWN_SUFFIXES = _SDF_SUFFIXES + _XYZ_SUFFIXES + _SMILES_SUFFIXES + tuple(_UNSUPPORTED_SUFFIXES)

# Atoms closer than this in an input conformer are taken as a broken geometry (the shortest
# real bond, H-H in H2, is 0.74 angstrom).
_MIN_DISTANCE = 0.5

# MMFF94 covers these elements in covalent molecules, plus a few free ions (Halgren,
# J. Comput. Chem. 1996, 17, 490, doi:10.1002/(SICI)1096-987X(199604)17:5/6<490::AID-JCC1>3.0.CO;2-P;
# atom types 87-99) [from memory]. Used only to name the culprits once RDKit has said no.
_MMFF_ELEMENTS = frozenset({1, 6, 7, 8, 9, 14, 15, 16, 17, 35, 53})
_MMFF_IONS = {3: {1}, 11: {1}, 19: {1}, 12: {2}, 20: {2}, 26: {2, 3}, 29: {1, 2}, 30: {2}}
# GFN1-xTB, GFN2-xTB and GFN-FF are parametrized for Z = 1-86 (Bannwarth, Ehlert, Grimme,
# J. Chem. Theory Comput. 2019, 15, 1652, doi:10.1021/acs.jctc.8b01176) [from memory].
_GFN_MAX_Z = 86
_METHOD_FAMILY = {
    "mmff94": "mmff", "mmff94s": "mmff", "uff": "uff",
    "gfn2": "gfn", "gfn1": "gfn", "gfnff": "gfn", "tblite-gfn2": "gfn", "tblite-gfn1": "gfn",
    "gfn2-xtb": "gfn", "gfn1-xtb": "gfn", "model": None,
}

# Junction atoms of small bridged or fused ring systems have their relative configuration
# forced by the rings (in/out isomers of a bridged system need rings of eight or more atoms;
# a trans junction needs more than four atoms in each fused ring) [common practice]. RDKit
# flags them as independent centres, which would make norbornane or adamantane "chiral".
_FORCED_BRIDGED_MAX_RING = 7
_FORCED_FUSED_MAX_RING = 4
_PROBE_SEED = 0x5EED

_PT = Chem.GetPeriodicTable()
_SYMBOL_TO_Z = {_PT.GetElementSymbol(z).lower(): z for z in range(1, 119)}


# --------------------------------------------------------------------------------------
# public functions
# --------------------------------------------------------------------------------------

def load_molecule(source, *, charge=None, multiplicity=None, keep_largest_fragment=False,
                  stereo="refuse", method=None, name=None) -> Chem.Mol:
    """Read a molecule from user input and check it.

    Parameters
    ----------
    source : str, pathlib.Path or rdkit.Chem.Mol
        A SMILES string (an optional name may follow after a space), an RDKit molecule, or
        the path of a file: MOL/SDF (``.mol``, ``.sdf``, ``.sd``), XYZ (``.xyz``) or a
        one-line SMILES file (``.smi``). A string is read as a path when a file of that name
        exists or when it ends in a file suffix; otherwise as SMILES.
    charge : int, optional
        Total charge. For SMILES, MOL/SDF and RDKit input it must equal the sum of the
        formal charges of the input (default: that sum); a different value is refused, since
        force fields read the formal charges and tight-binding methods the total, and the
        two must describe the same molecule. For XYZ input it is the charge used to assign
        bond orders and formal charges (default 0).
    multiplicity : int, optional
        Spin multiplicity 2S + 1. Default: 1 + the number of radical electrons of the input
        (a molecule property ``"multiplicity"`` of an RDKit input is honoured). Any value
        compatible with the electron count is accepted (``"O=O"`` with 3 is triplet O2).
    keep_largest_fragment : bool, default False
        Several disconnected fragments (a salt, a solvate) are refused unless this is True;
        then the fragment with most heavy atoms is kept (ties broken by the total number of
        atoms; distinct fragments of equal size are refused) and the SMILES of the removed
        ones is stored in the property ``"removed_fragments"``. The charge is that of the
        kept fragment.
    stereo : {"refuse", "ignore"}, default "refuse"
        What to do with stereocentres and stereogenic double bonds whose configuration the
        input leaves open. ``"refuse"`` raises an InputError that lists them. ``"ignore"``
        accepts them: conformer generation then picks a configuration at random for each
        conformer, so an ensemble mixes stereoisomers (diastereomers have different
        energies and NMR spectra: populations computed over such a mix are meaningless
        unless the configurations are checked afterwards). To work on every stereoisomer
        call :func:`stereoisomers`, which takes the same arguments and returns a list;
        ``stereo="enumerate"`` is refused here with a message saying so, because this
        function always returns exactly one molecule. 3D input (SDF, XYZ, a Mol with 3D
        conformers) has its configuration read from the coordinates.
    method : str, optional
        Energy method the molecule is meant for; its element coverage is checked:
        ``"mmff94"``/``"mmff94s"`` (RDKit's MMFF94 typing), ``"uff"``, the GFN methods
        (``"gfn2"``, ``"gfn1"``, ``"gfnff"``, ``"tblite-gfn2"``, ``"tblite-gfn1"``: Z = 1-86).
        None or another name: no check.
    name : str, optional
        Stored as ``"_Name"``. Default: the name after the SMILES, the SDF title, the file
        stem, or the SMILES itself.

    Returns
    -------
    rdkit.Chem.Mol
        Sanitized, with explicit hydrogens (placed from the heavy atoms when the input has
        3D coordinates and lacks them), stereo assigned, conformers with ids 0, 1, ... (the
        input's 3D conformers; 2D or no coordinates give no conformer). Properties:
        ``"charge"`` and ``"multiplicity"`` (int), ``"_Name"``, ``"source"`` (str),
        ``"removed_fragments"`` (str, only when fragments were removed),
        ``"unassigned_stereo"`` (str, only with ``stereo="ignore"``). Per conformer: the SD
        data of its SDF record or the comment line of its XYZ frame (``"title"``).

    Raises
    ------
    InputError
        For every input that cannot be used; the message names the problem (atom, record,
        frame) and how to proceed.

    Notes
    -----
    Multi-record SDF and multi-frame XYZ files must hold conformers of one molecule (same
    atoms, bonds and configuration; SDF records written in another atom order are
    renumbered to the first record's order). Bonds of XYZ input are perceived with RDKit's
    ``rdDetermineBonds.DetermineBonds`` from the first frame; later frames must show the same
    bonds (:func:`bond_graph_from_coordinates`). Axial chirality (allenes, hindered biaryls)
    is not perceived by RDKit from a graph and is not checked.

    Examples
    --------
    >>> mol = load_molecule("[CH3]")
    >>> mol.GetIntProp("multiplicity")
    2
    >>> load_molecule("O=O", multiplicity=3).GetIntProp("multiplicity")
    3
    >>> load_molecule("CC(O)CC")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    confpop.errors.InputError: 1 stereo element of SMILES 'CC(O)CC' has no assigned configuration ...
    """
    return _load(source, charge=charge, multiplicity=multiplicity,
                 keep_largest_fragment=keep_largest_fragment, stereo=stereo, method=method,
                 name=name)


def _load(source, *, charge, multiplicity, keep_largest_fragment, stereo, method, name,
          warn_open_stereo=True):
    stereo = _check_stereo_policy(stereo)
    charge = _check_int("charge", charge)
    multiplicity = _check_int("multiplicity", multiplicity)
    if multiplicity is not None and multiplicity < 1:
        raise InputError(f"multiplicity must be an integer >= 1 (2S + 1), got {multiplicity}")
    if keep_largest_fragment not in (True, False):
        raise InputError(f"keep_largest_fragment must be True or False, "
                         f"got {keep_largest_fragment!r}")
    method_key = _check_method(method)
    if name is not None and not isinstance(name, str):
        raise InputError(f"name must be a string, got {type(name).__name__}")

    parsed = _read_source(source, charge)
    return _finish(parsed, charge=charge, multiplicity=multiplicity,
                   keep_largest_fragment=keep_largest_fragment, stereo=stereo,
                   method=method_key, name=name, warn=warn_open_stereo)


def stereoisomers(source, *, max_isomers=64, embeddable_only=False, charge=None,
                  multiplicity=None, keep_largest_fragment=False, method=None,
                  name=None) -> list[Chem.Mol]:
    """All stereoisomers of the input, one checked molecule each.

    Configurations given in the input are kept; only the unassigned stereocentres and
    double bonds are enumerated (RDKit's ``EnumerateStereoisomers`` with
    ``onlyUnassigned=True``). An input without unassigned stereo gives a one-element list.

    Parameters
    ----------
    source : str, pathlib.Path or rdkit.Chem.Mol
        As for :func:`load_molecule`.
    max_isomers : int, default 64
        Refuse inputs with more possible stereoisomers than this (2 to the power of the
        number of unassigned elements, before symmetry): assign some of them instead.
    embeddable_only : bool, default False
        Drop isomers for which RDKit cannot embed 3D coordinates (e.g. a trans-fused
        bicyclo[1.1.0] system). Slower: one embedding attempt per isomer.
    charge, multiplicity, keep_largest_fragment, method, name
        As for :func:`load_molecule`.

    Returns
    -------
    list of rdkit.Chem.Mol
        Each with explicit hydrogens, all stereo assigned, ``"_Name"`` = its isomeric SMILES,
        properties ``"charge"``, ``"multiplicity"``, ``"parent_name"`` (the input's name) and
        ``"stereoisomer"`` (int index in the list). Isomers carry no conformers unless the
        input had 3D coordinates.

    Raises
    ------
    InputError
        As :func:`load_molecule`; also when there would be more than ``max_isomers``.

    Examples
    --------
    >>> [m.GetProp("_Name") for m in stereoisomers("CC(O)CC")]
    ['CC[C@H](C)O', 'CC[C@@H](C)O']
    >>> [m.GetProp("_Name") for m in stereoisomers("C[C@@H](O)C=CC")]
    ['C/C=C/[C@@H](C)O', 'C/C=C\\\\[C@@H](C)O']
    """
    max_isomers = _check_int("max_isomers", max_isomers)
    if max_isomers is None or max_isomers < 1:
        raise InputError(f"max_isomers must be an integer >= 1, got {max_isomers!r}")
    mol = _load(source, charge=charge, multiplicity=multiplicity,
                keep_largest_fragment=keep_largest_fragment, stereo="ignore", method=method,
                name=name, warn_open_stereo=False)
    parent_name = mol.GetProp("_Name")
    mol, open_elements, units = _open_stereo(mol)
    _refuse_cumulenes(open_elements, mol)
    if 2 ** len(open_elements) > max_isomers:
        raise InputError(
            f"{parent_name} has {len(open_elements)} unassigned stereo elements, up to "
            f"{2 ** len(open_elements)} stereoisomers, more than max_isomers={max_isomers}; "
            f"assign some of them in the input or raise max_isomers")

    if not open_elements:
        isomers = [Chem.Mol(mol)]
    else:
        options = StereoEnumerationOptions(onlyUnassigned=True, unique=True,
                                           tryEmbedding=bool(embeddable_only),
                                           maxIsomers=max(1024, max_isomers))
        isomers = []
        seen = set()
        pending = [mol]
        # a pseudo-asymmetric centre becomes stereogenic only once its neighbours are
        # assigned, so enumerate again until nothing is left open (at most a few rounds)
        for _ in range(4):
            next_round = []
            for parent in pending:
                with rdBase.BlockLogs():
                    produced = list(EnumerateStereoisomers(parent, options=options))
                for iso in produced:
                    if not _fits_units(iso, units):
                        continue  # a ring system with an impossible set of junctions
                    Chem.AssignStereochemistry(iso, cleanIt=True, force=True)
                    if [e for e in _unassigned_stereo(iso) if not e.cumulene]:
                        next_round.append(iso)
                        continue
                    key = Chem.MolToSmiles(iso)
                    if key not in seen:
                        seen.add(key)
                        isomers.append(iso)
            if not next_round:
                break
            pending = next_round
        else:  # still open after several rounds (not seen in practice): keep them as they are
            for iso in pending:
                if Chem.MolToSmiles(iso) not in seen:
                    seen.add(Chem.MolToSmiles(iso))
                    isomers.append(iso)
        if not isomers:
            why = ("could be embedded in 3D (embeddable_only=True)" if embeddable_only
                   else "is geometrically possible")
            raise InputError(f"no stereoisomer of {parent_name} {why}; check the structure")
        if len(isomers) > max_isomers:
            raise InputError(f"{parent_name} has {len(isomers)} stereoisomers, more than "
                             f"max_isomers={max_isomers}; assign some stereo elements in the "
                             f"input or raise max_isomers")

    result = []
    for index, iso in enumerate(isomers):
        iso = Chem.Mol(iso)
        for key in ("charge", "multiplicity"):
            iso.SetIntProp(key, mol.GetIntProp(key))
        if iso.HasProp("unassigned_stereo"):
            iso.ClearProp("unassigned_stereo")
        iso.SetProp("_Name", _isomeric_smiles(iso))
        iso.SetProp("parent_name", parent_name)
        iso.SetIntProp("stereoisomer", index)
        result.append(iso)
    return result


def stereo_signature(mol: Chem.Mol, conf_id: int = -1) -> tuple:
    """The configuration of every stereocentre and stereogenic double bond in one conformer.

    The configuration is read from the conformer's 3D coordinates alone (the stereo flags
    stored on ``mol`` are not used), so the signatures of two geometries differ when a
    centre was inverted or a double bond isomerized in between. The comparison is per atom:
    the two mirror-image conformers of a meso compound differ although they are one
    stereoisomer; :func:`configuration_smiles` compares blind to symmetry. Junctions of
    cages (adamantane, quinuclidine), which cannot invert on their own, are left out.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens and at least one 3D conformer.
    conf_id : int, default -1
        Conformer id (-1: the first conformer).

    Returns
    -------
    tuple of (tuple of int, str)
        Sorted pairs ``((atom,), label)`` for tetrahedral centres and ``((i, j), label)``
        for double bonds between atoms i < j. Labels are CIP descriptors from RDKit's new
        CIP labeller (``"R"``, ``"S"``, ``"r"``, ``"s"``, ``"E"``, ``"Z"``); where CIP gives
        none, the parity of the centre relative to RDKit's neighbour order (``"@"``,
        ``"@@"``) or ``"cis"``/``"trans"`` for the lowest-index neighbours of a double bond;
        ``"?"`` when the geometry does not define it (a flattened centre).

    Raises
    ------
    InputError
        If ``mol`` is not an RDKit molecule or has no such conformer.

    Examples
    --------
    >>> from rdkit.Chem import AllChem
    >>> mol = load_molecule("C[C@@H](O)/C=C/C")
    >>> AllChem.EmbedMolecule(mol, randomSeed=7)
    0
    >>> stereo_signature(mol, 0)
    (((1,), 'R'), ((3, 4), 'E'))
    """
    conf = _get_conformer(mol, conf_id, "stereo_signature")
    work = Chem.Mol(mol, True)  # quick copy: graph only, no conformers or properties
    work.AddConformer(Chem.Conformer(conf), assignId=True)
    Chem.RemoveStereochemistry(work)
    _assign_from_coordinates(work, work.GetConformer().GetId())
    return _stereo_labels(work, conf)


def configuration_smiles(mol: Chem.Mol, conf_id: int = -1) -> str:
    """Isomeric SMILES of the stereoisomer that one conformer's coordinates show.

    Unlike a per-atom comparison of :func:`stereo_signature`, equality of these strings is
    blind to the molecule's symmetry: the two mirror-image conformers of a meso compound
    (atom 1 R and atom 2 S in one, atom 1 S and atom 2 R in the other) give the same string.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens and at least one 3D conformer.
    conf_id : int, default -1
        Conformer id (-1: the first conformer).

    Returns
    -------
    str
        Canonical isomeric SMILES (hydrogens implicit), configuration from the coordinates.

    Examples
    --------
    >>> from rdkit.Chem import AllChem
    >>> mol = load_molecule("C[C@@H](O)CC")
    >>> AllChem.EmbedMolecule(mol, randomSeed=7)
    0
    >>> configuration_smiles(mol, 0)
    'CC[C@@H](C)O'
    """
    conf = _get_conformer(mol, conf_id, "configuration_smiles")
    work = Chem.Mol(mol, True)
    work.AddConformer(Chem.Conformer(conf), assignId=True)
    Chem.RemoveStereochemistry(work)
    _assign_from_coordinates(work, work.GetConformer().GetId())
    return _isomeric_smiles(work)


def bond_graph_from_coordinates(mol: Chem.Mol, conf_id: int = -1, tolerance: float = BOND_TOLERANCE
                                ) -> set[tuple[int, int]]:
    """Bonds perceived from the interatomic distances of one conformer.

    Atoms i and j are bonded when d_ij <= (1 + tolerance) (r_i + r_j), with r the covalent
    radii of RDKit's periodic table (``GetRcovalent``).

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with at least one conformer.
    conf_id : int, default -1
        Conformer id (-1: the first conformer).
    tolerance : float, default 0.3
        Relative tolerance on the sum of covalent radii. The default gives the factor 1.3 of
        RDKit's ``DetermineConnectivity``: a C-C bond is recognized up to 1.98 angstrom, a
        C-H bond up to 1.39 angstrom, while 1,3 neighbours (C...C about 2.5 angstrom) stay
        unbonded.

    Returns
    -------
    set of (int, int)
        Pairs of atom indices (i < j). Compare with the molecule's bonds,
        ``{tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}``.

    Raises
    ------
    InputError
        If ``mol`` has no such conformer or ``tolerance`` is not in [0, 1).

    Examples
    --------
    >>> from rdkit.Chem import AllChem
    >>> mol = load_molecule("CO")
    >>> AllChem.EmbedMolecule(mol, randomSeed=1)
    0
    >>> sorted(bond_graph_from_coordinates(mol, 0))
    [(0, 1), (0, 2), (0, 3), (0, 4), (1, 5)]
    """
    try:
        tolerance = float(tolerance)
    except (TypeError, ValueError):
        raise InputError(f"tolerance must be a number, got {tolerance!r}") from None
    if not 0.0 <= tolerance < 1.0:
        raise InputError(f"tolerance must be in [0, 1) (a relative tolerance on the sum of "
                         f"covalent radii), got {tolerance}")
    conf = _get_conformer(mol, conf_id, "bond_graph_from_coordinates")
    positions = np.asarray(conf.GetPositions(), dtype=float)
    if len(positions) < 2:
        return set()
    radii = np.array([_PT.GetRcovalent(a.GetAtomicNum()) for a in mol.GetAtoms()])
    # candidate pairs from a k-d tree (no n x n matrix for large molecules), then the
    # pair-specific limit
    pairs = cKDTree(positions).query_pairs(r=(1.0 + tolerance) * 2.0 * radii.max(),
                                           output_type="ndarray")
    if len(pairs) == 0:
        return set()
    i_idx, j_idx = pairs[:, 0], pairs[:, 1]
    distances = np.linalg.norm(positions[i_idx] - positions[j_idx], axis=1)
    keep = distances <= (1.0 + tolerance) * (radii[i_idx] + radii[j_idx])
    return {(int(min(i, j)), int(max(i, j))) for i, j in zip(i_idx[keep], j_idx[keep])}


def molecule_summary(mol: Chem.Mol) -> dict:
    """A few facts about a molecule, for printing.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Typically the result of :func:`load_molecule`; the properties ``"charge"`` and
        ``"multiplicity"`` are used when present, else inferred as load_molecule does.

    Returns
    -------
    dict
        ``name``, ``smiles`` (isomeric, hydrogens implicit), ``formula`` (Hill order, with
        the charge), ``atoms``, ``heavy_atoms``, ``charge``, ``multiplicity``,
        ``rotatable_bonds`` (RDKit's strict definition, counted on the heavy-atom graph so
        that methyl and hydroxy rotors do not count), ``ring_sizes`` (sorted list over the
        smallest set of smallest rings), ``stereo_elements`` (number of stereocentres and
        stereogenic double bonds), ``conformers``.

    Examples
    --------
    >>> s = molecule_summary(load_molecule("CCCC"))
    >>> s["formula"], s["heavy_atoms"], s["rotatable_bonds"], s["ring_sizes"]
    ('C4H10', 4, 1, [])
    """
    if not isinstance(mol, Chem.Mol):
        raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
    try:
        with rdBase.BlockLogs():
            heavy = Chem.RemoveHs(mol)
    except Exception:  # noqa: BLE001 - RDKit raises several types for unsanitizable input
        raise InputError("molecule_summary: the molecule cannot be sanitized; load it with "
                         "load_molecule first") from None
    charge = mol.GetIntProp("charge") if mol.HasProp("charge") else _formal_charge(mol)
    if mol.HasProp("multiplicity"):
        multiplicity = mol.GetIntProp("multiplicity")
    else:
        multiplicity = 1 + sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms())
    return {
        "name": mol.GetProp("_Name") if mol.HasProp("_Name") else "",
        "smiles": _isomeric_smiles(mol),
        "formula": rdMolDescriptors.CalcMolFormula(mol),
        "atoms": Chem.AddHs(mol).GetNumAtoms(),
        "heavy_atoms": mol.GetNumHeavyAtoms(),
        "charge": int(charge),
        "multiplicity": int(multiplicity),
        "rotatable_bonds": int(rdMolDescriptors.CalcNumRotatableBonds(heavy)),
        "ring_sizes": sorted(len(r) for r in Chem.GetSymmSSSR(heavy)),
        "stereo_elements": len(_stereo_elements(mol)),
        "conformers": mol.GetNumConformers(),
    }


# --------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------

@dataclass
class _Parsed:
    """A sanitized molecule as read, before the common checks."""

    mol: Chem.Mol
    label: str                      # how the input is named in messages
    name: str                       # default "_Name"
    source: str                     # stored as the "source" property
    is3d: bool = False
    unit: str = "conformer"         # what a conformer is called in messages ("record", ...)
    conformer_labels: list = field(default_factory=list)
    multiplicity_hint: int | None = None  # from a Mol's "multiplicity" property
    stereo_from_3d: bool = False    # stereo flags already read from the coordinates


class SmilesText(str):
    """A string that is SMILES and never a file path (a line of a batch file): a batch
    "SMILES" that happens to name a local file must not make confpop read that file."""

    __slots__ = ()


def _read_source(source, charge):
    if isinstance(source, SmilesText):
        text = source.strip()
        if not text:
            raise InputError("empty input: expected a SMILES string")
        return _read_smiles(text, label=None, file_hint=False)
    if isinstance(source, Chem.Mol):
        return _read_rdkit_mol(source)
    if isinstance(source, os.PathLike):
        return _read_file(Path(source), charge)
    if isinstance(source, bytes):
        raise InputError("source must be a str (SMILES or path), a pathlib.Path or an RDKit "
                         "Mol, got bytes; decode it first")
    if not isinstance(source, str):
        raise InputError(f"source must be a SMILES string, a file path or an RDKit Mol, "
                         f"got {type(source).__name__}")
    text = source.strip()
    if not text:
        raise InputError("empty input: expected a SMILES string, a MOL/SDF/XYZ file path "
                         "or an RDKit Mol")
    if os.path.isdir(text):
        raise InputError(f"{text} is a directory; expected a SMILES string or a MOL/SDF/XYZ file")
    if os.path.isfile(text) or text.lower().endswith(_KNOWN_SUFFIXES):
        return _read_file(Path(text), charge)
    return _read_smiles(text, label=None)


def _read_smiles(text, label, file_hint=True):
    parts = text.split(None, 1)
    smiles = parts[0]
    given_name = parts[1].strip() if len(parts) > 1 else ""
    label = label or f"SMILES {smiles!r}"
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        _diagnose_smiles(smiles, label, text if file_hint else "")
    if mol.GetNumAtoms() == 0:
        raise InputError(f"{label} holds no atoms")
    return _Parsed(mol=mol, label=label, name=given_name or smiles, source=f"smiles:{smiles}")


def _diagnose_smiles(smiles, label, original):
    """Raise an InputError saying why a SMILES string does not parse."""
    with rdBase.BlockLogs():
        raw = Chem.MolFromSmiles(smiles, sanitize=False)
    if raw is not None:
        _raise_chemistry_problem(raw, label)
    reason = _smiles_syntax_reason(smiles)
    hint = ""
    if "/" in original or "\\" in original or re.search(r"\.[A-Za-z]{2,5}$", original):
        hint = f" (no file named {original!r} exists either)"
    raise InputError(f"could not read {label}: {reason}{hint}")


def _smiles_syntax_reason(smiles):
    depth = 0
    for ch in smiles:
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0:
                return "a ')' closes a branch that was never opened"
    if depth > 0:
        return "a '(' branch is never closed"
    if smiles.count("[") != smiles.count("]"):
        return "unbalanced square brackets [ ]"
    outside = re.sub(r"\[[^\]]*\]", "", smiles)
    bad_elements = [m.group(1) for m in re.finditer(r"\[\d*([A-Za-z][a-z]?)", smiles)
                    if m.group(1).lower() not in _SYMBOL_TO_Z]
    if bad_elements:
        return f"unknown element symbol {bad_elements[0]!r}"
    ring_labels = re.findall(r"%\d\d|\d", outside)
    open_labels = {}
    for lab in ring_labels:
        open_labels[lab] = open_labels.get(lab, 0) + 1
    unclosed = sorted(lab for lab, n in open_labels.items() if n % 2)
    if unclosed:
        return f"ring bond {unclosed[0].lstrip('%')} is opened but never closed"
    return "not valid SMILES syntax"


def _read_rdkit_mol(source):
    mol = Chem.Mol(source)
    label = "the RDKit molecule"
    if mol.HasProp("_Name") and mol.GetProp("_Name").strip():
        label = f"the RDKit molecule {mol.GetProp('_Name').strip()!r}"
    if mol.GetNumAtoms() == 0:
        raise InputError(f"{label} has no atoms")
    try:
        with rdBase.BlockLogs():
            Chem.SanitizeMol(mol)
    except Exception:  # noqa: BLE001 - RDKit raises several types; we explain it ourselves
        _raise_chemistry_problem(Chem.Mol(source), label)
        raise InputError(f"{label} could not be sanitized by RDKit") from None
    hint = None
    if mol.HasProp("multiplicity"):
        try:
            hint = int(mol.GetProp("multiplicity"))
        except ValueError:
            raise InputError(f"{label} has a property multiplicity="
                             f"{mol.GetProp('multiplicity')!r}, not an integer") from None
    name = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
    conformers = [c for c in mol.GetConformers() if c.Is3D()]
    labels = [f"conformer {c.GetId()}" for c in conformers]
    is3d = bool(conformers)
    _keep_conformers(mol, conformers)
    return _Parsed(mol=mol, label=label, name=name or _isomeric_smiles(mol), source="rdkit-mol",
                   is3d=is3d, unit="conformer", conformer_labels=labels,
                   multiplicity_hint=hint)


def _read_file(path, charge):
    suffix = path.suffix.lower()
    if suffix in _UNSUPPORTED_SUFFIXES:
        raise InputError(f"{path}: {_UNSUPPORTED_SUFFIXES[suffix]}")
    path = path.expanduser()
    if not path.exists():
        raise InputError(f"file not found: {path}")
    if not path.is_file():
        raise InputError(f"{path} is not a file")
    if suffix not in _SDF_SUFFIXES + _XYZ_SUFFIXES + _SMILES_SUFFIXES:
        raise InputError(f"unsupported file type {suffix or '(no suffix)'!r} for {path}; "
                         f"expected .sdf, .mol, .xyz or .smi (a string is read as a path when "
                         f"a file of that name exists)")
    try:
        text = path.read_text()
    except UnicodeDecodeError:
        raise InputError(f"{path} is not a text file") from None
    if not text.strip():
        raise InputError(f"{path} is empty: it holds no molecule")
    if suffix in _SDF_SUFFIXES:
        return _read_sdf(path, text)
    if suffix in _XYZ_SUFFIXES:
        return _read_xyz(path, text, 0 if charge is None else charge)
    return _read_smiles_file(path, text)


def _read_smiles_file(path, text):
    lines = [(n, ln.strip()) for n, ln in enumerate(text.splitlines(), 1)
             if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{path} holds no SMILES line (only comments)")
    parsed = [(n, _read_smiles(ln, label=f"line {n} of {path}")) for n, ln in lines]
    first_key = Chem.MolToSmiles(parsed[0][1].mol)
    for n, p in parsed[1:]:
        if Chem.MolToSmiles(p.mol) != first_key:
            raise InputError(f"line {n} of {path} is a different molecule from line "
                             f"{parsed[0][0]}; a file must hold one molecule")
    first = parsed[0][1]
    first.source = f"smi:{path}"
    return first


def _read_sdf(path, text):
    supplier = Chem.SDMolSupplier()
    supplier.SetData(text, sanitize=True, removeHs=False)
    with rdBase.BlockLogs():
        count = len(supplier)
    if count == 0:
        raise InputError(f"{path} holds no MOL record")
    records = []
    for index in range(count):
        label = f"record {index + 1} of {path}"
        with rdBase.BlockLogs():
            mol = supplier[index]
        if mol is None:
            raw = Chem.SDMolSupplier()
            raw.SetData(text, sanitize=False, removeHs=False)
            with rdBase.BlockLogs():
                unsanitized = raw[index]
            if unsanitized is None:
                raise InputError(f"{label} is not a readable MOL block (check the counts "
                                 f"line and the atom and bond lines)")
            _raise_chemistry_problem(unsanitized, label)
            raise InputError(f"{label} could not be sanitized by RDKit")
        if mol.GetNumAtoms() == 0:
            raise InputError(f"{label} has no atoms")
        title = mol.GetProp("_Name").strip() if mol.HasProp("_Name") else ""
        if title:
            label = f"record {index + 1} ({title!r}) of {path}"
        records.append((label, title, mol))

    dims = {label: (m.GetNumConformers() > 0 and m.GetConformer().Is3D())
            for label, _, m in records}
    is3d = dims[records[0][0]]
    for label, _, _ in records[1:]:
        if dims[label] != is3d:
            raise InputError(f"{label} has {'3D' if dims[label] else '2D'} coordinates but "
                             f"record 1 has {'3D' if is3d else '2D'}; records must be "
                             f"conformers of one molecule, all in 3D")
    first_label, first_title, first = records[0]
    if not is3d:
        # 2D records carry the structure only: they must all be the same molecule
        key = Chem.MolToSmiles(first)
        for label, _, mol in records[1:]:
            if Chem.MolToSmiles(mol) != key:
                raise _different_molecule(label, first_label, mol, first)
        first = Chem.Mol(first)
        first.RemoveAllConformers()
        return _Parsed(mol=first, label=str(path), name=first_title or path.stem,
                       source=f"sdf:{path}")

    prepared = []
    for label, title, mol in records:
        mol = Chem.AddHs(mol, addCoords=True)
        with rdBase.BlockLogs():
            Chem.AssignStereochemistryFrom3D(mol)
        prepared.append((label, title, mol))
    ref_label, _, ref = prepared[0]
    ref_iso = Chem.MolToSmiles(ref)
    merged = Chem.Mol(ref)
    merged.RemoveAllConformers()
    for key in merged.GetPropNames():  # SD data belong to each record's conformer
        merged.ClearProp(key)
    labels = []
    for index, (label, title, mol) in enumerate(prepared):
        if index > 0:
            if Chem.MolToSmiles(mol) != ref_iso:
                raise _different_molecule(label, ref_label, mol, ref)
            mol = _renumber_like(mol, ref, label)
        conf = Chem.Conformer(mol.GetConformer())
        for key in mol.GetPropNames():  # public SD data, kept as the text of the file
            conf.SetProp(key, mol.GetProp(key))
        conf.SetProp("title", title)
        conf.SetId(index)
        merged.AddConformer(conf, assignId=False)
        labels.append(label.replace(f" of {path}", ""))
    return _Parsed(mol=merged, label=str(path), name=first_title or path.stem,
                   source=f"sdf:{path}", is3d=True, unit="record", conformer_labels=labels,
                   stereo_from_3d=True)


def _different_molecule(label, ref_label, mol, ref):
    flat, ref_flat = (Chem.MolToSmiles(Chem.RemoveHs(m), isomericSmiles=False) for m in (mol, ref))
    if flat == ref_flat:
        return InputError(f"{label} is a different stereoisomer ({_isomeric_smiles(mol)}) from "
                          f"{ref_label} ({_isomeric_smiles(ref)}); a file must hold conformers "
                          f"of one stereoisomer")
    return InputError(f"{label} is a different molecule ({_isomeric_smiles(mol)}) from "
                      f"{ref_label} ({_isomeric_smiles(ref)}); a file must hold conformers of "
                      f"one molecule")


def _renumber_like(mol, ref, label):
    """Return ``mol`` with its atoms in the order of ``ref`` (same molecule)."""
    same_order = (
        all(a.GetAtomicNum() == b.GetAtomicNum() for a, b in zip(mol.GetAtoms(), ref.GetAtoms()))
        and all(mol.GetBondBetweenAtoms(b.GetBeginAtomIdx(), b.GetEndAtomIdx()) is not None
                for b in ref.GetBonds()))
    if same_order:
        return mol
    match = mol.GetSubstructMatch(ref, useChirality=True)
    if len(match) != ref.GetNumAtoms():
        raise InputError(f"{label}: could not map its atoms onto record 1's atom order")
    return Chem.RenumberAtoms(mol, list(match))


def _read_xyz(path, text, charge):
    frames = _parse_xyz_frames(path, text)
    elements0 = frames[0][1]
    for number, (_, elements, _, line) in enumerate(frames[1:], 2):
        if len(elements) != len(elements0):
            raise InputError(f"frame {number} of {path} (line {line}) has {len(elements)} atoms, "
                             f"frame 1 has {len(elements0)}; frames must be conformers of one "
                             f"molecule")
        for i, (a, b) in enumerate(zip(elements, elements0)):
            if a != b:
                raise InputError(
                    f"frame {number} of {path}: atom {i} is {_PT.GetElementSymbol(a)}, in frame "
                    f"1 it is {_PT.GetElementSymbol(b)}; frames must list the atoms in the "
                    f"same order")
    electrons = sum(elements0) - charge
    if electrons < 0:
        raise InputError(f"charge={charge} removes more electrons than {path} has "
                         f"({sum(elements0)})")
    if electrons % 2:
        raise InputError(
            f"{path} has {electrons} electrons with total charge {charge}, an odd number: bond "
            f"orders can be assigned from coordinates only to closed-shell structures; if the "
            f"molecule is an ion give its charge (charge=..., command line --charge); a "
            f"radical must be given as SMILES or SDF with the unpaired electron marked")

    mol = Chem.RWMol()
    for z in elements0:
        mol.AddAtom(Chem.Atom(int(z)))
    mol = mol.GetMol()
    conf = Chem.Conformer(len(elements0))
    conf.Set3D(True)
    for i, xyz in enumerate(frames[0][2]):
        conf.SetAtomPosition(i, xyz.tolist())
    mol.AddConformer(conf, assignId=True)
    try:
        with rdBase.BlockLogs():
            rdDetermineBonds.DetermineBonds(mol, charge=int(charge))
            Chem.SanitizeMol(mol)
    except Exception:  # noqa: BLE001 - RDKit raises ValueError or RuntimeError here
        raise InputError(
            f"could not perceive the bonds of {path} with total charge {charge}: no set of "
            f"bond orders and formal charges fits the geometry and that charge; if the "
            f"molecule is charged, give its charge (charge=..., command line --charge), "
            f"otherwise check the geometry (units must be angstrom)") from None

    # later frames must show the same bonds as the first
    ref_graph = bond_graph_from_coordinates(mol, 0)
    merged = Chem.Mol(mol)
    merged.RemoveAllConformers()
    labels = []
    for number, (comment, _, positions, line) in enumerate(frames, 1):
        conf = Chem.Conformer(len(elements0))
        conf.Set3D(True)
        for i, xyz in enumerate(positions):
            conf.SetAtomPosition(i, xyz.tolist())
        conf.SetProp("title", comment)
        conf.SetId(number - 1)
        merged.AddConformer(conf, assignId=False)
        if number > 1:
            graph = bond_graph_from_coordinates(merged, number - 1)
            if graph != ref_graph:
                extra = sorted(graph - ref_graph)
                missing = sorted(ref_graph - graph)
                what = "; ".join(
                    [f"new bond {_atom(merged, i)}-{_atom(merged, j)}" for i, j in extra[:3]]
                    + [f"no bond {_atom(merged, i)}-{_atom(merged, j)}" for i, j in missing[:3]])
                raise InputError(f"frame {number} of {path} (line {line}) has other bonds than "
                                 f"frame 1 ({what}); frames must be conformers of one molecule")
        labels.append(f"frame {number}")
    return _Parsed(mol=merged, label=str(path), name=path.stem, source=f"xyz:{path}",
                   is3d=True, unit="frame", conformer_labels=labels, stereo_from_3d=True)


def _parse_xyz_frames(path, text):
    """[(comment, atomic numbers, (n, 3) positions, first line number), ...]"""
    lines = text.splitlines()
    frames = []
    i = 0
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        head = lines[i].split()
        try:
            n_atoms = int(head[0])
        except ValueError:
            raise InputError(f"line {i + 1} of {path}: expected the number of atoms of frame "
                             f"{len(frames) + 1}, got {lines[i].strip()[:40]!r}") from None
        if n_atoms < 1:
            raise InputError(f"line {i + 1} of {path}: frame {len(frames) + 1} declares "
                             f"{n_atoms} atoms")
        start = i
        comment = lines[i + 1].strip() if i + 1 < len(lines) else ""
        atom_lines = lines[i + 2:i + 2 + n_atoms]
        if len(atom_lines) < n_atoms:
            raise InputError(f"{path}: frame {len(frames) + 1} (line {start + 1}) declares "
                             f"{n_atoms} atoms but the file ends after {len(atom_lines)}")
        elements, positions = [], []
        for offset, raw in enumerate(atom_lines):
            number = i + 3 + offset
            parts = raw.split()
            if len(parts) < 4:
                raise InputError(f"line {number} of {path}: expected 'element x y z', "
                                 f"got {raw.strip()[:60]!r}")
            z = _element_number(parts[0])
            if z is None:
                raise InputError(f"line {number} of {path}: unknown element {parts[0]!r}")
            try:
                xyz = [float(v) for v in parts[1:4]]
            except ValueError:
                raise InputError(f"line {number} of {path}: coordinates must be numbers, got "
                                 f"{' '.join(parts[1:4])!r}") from None
            if not all(math.isfinite(v) for v in xyz):
                raise InputError(f"line {number} of {path}: coordinates must be finite, got "
                                 f"{' '.join(parts[1:4])!r}")
            elements.append(z)
            positions.append(xyz)
        frames.append((comment, elements, np.array(positions, dtype=float), start + 1))
        i += 2 + n_atoms
    if not frames:
        raise InputError(f"{path} holds no XYZ frame")
    return frames


def _element_number(token):
    if token.isdigit():
        z = int(token)
        return z if 1 <= z <= 118 else None
    return _SYMBOL_TO_Z.get(re.sub(r"[^A-Za-z]", "", token).lower() or "?")


# --------------------------------------------------------------------------------------
# the common checks
# --------------------------------------------------------------------------------------

def _finish(parsed, *, charge, multiplicity, keep_largest_fragment, stereo, method, name, warn):
    mol = parsed.mol
    label = parsed.label
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 0:
            raise InputError(f"{label}: atom {atom.GetIdx()} is a dummy atom "
                             f"({atom.GetSymbol()!r}); every atom must be a real element")

    mol = Chem.AddHs(mol, addCoords=parsed.is3d)
    mol, removed = _handle_fragments(mol, label, keep_largest_fragment)
    if parsed.is3d:
        _check_geometry(mol, parsed)
        mol = _assign_stereo_from_coordinates(mol, parsed)

    units = []
    if parsed.is3d:
        open_elements = _unassigned_stereo(mol)
    else:
        mol, open_elements, units = _open_stereo(mol)
    if parsed.is3d:
        # the coordinates fix an allene's axis even though RDKit cannot record it
        for element in (e for e in open_elements if e.cumulene):
            logger.info("%s: %s is fixed by the coordinates but not recorded", label,
                        element.text)
        open_elements = [e for e in open_elements if not e.cumulene]
        if open_elements and stereo == "refuse":
            raise InputError(
                f"{label}: the coordinates of {_conformer_label(parsed, 0)} do not define the "
                f"configuration of {'; '.join(e.text.split(':')[0] for e in open_elements)} "
                f"(flat or distorted geometry); fix the geometry or pass stereo='ignore'")
    elif stereo == "refuse":
        _refuse_cumulenes(open_elements, mol)
        if open_elements:
            raise _unassigned_stereo_error(mol, open_elements, label, units)
    unassigned_note = "; ".join(e.text for e in open_elements)
    if open_elements and stereo == "ignore" and warn:
        logger.warning("%s: stereo left open (%s); conformer generation will pick each "
                       "configuration at random", label, unassigned_note)

    total_charge, spin = _charge_and_multiplicity(mol, label, charge, multiplicity,
                                                  parsed.multiplicity_hint)
    if method is not None:
        _check_method_coverage(mol, method, label)

    # an RDKit input may carry stale properties from earlier steps
    for key in ("removed_fragments", "unassigned_stereo"):
        if mol.HasProp(key):
            mol.ClearProp(key)
    mol.SetIntProp("charge", total_charge)
    mol.SetIntProp("multiplicity", spin)
    mol.SetProp("_Name", name if name is not None else parsed.name)
    mol.SetProp("source", parsed.source)
    if removed:
        mol.SetProp("removed_fragments", removed)
    if open_elements and stereo == "ignore":
        mol.SetProp("unassigned_stereo", unassigned_note)
    return mol


def _keep_conformers(mol, conformers):
    """Keep only ``conformers`` (copies), renumbered 0, 1, ..."""
    kept = [Chem.Conformer(c) for c in conformers]
    mol.RemoveAllConformers()
    for new_id, conf in enumerate(kept):
        conf.SetId(new_id)
        mol.AddConformer(conf, assignId=False)


def _handle_fragments(mol, label, keep_largest):
    frags = Chem.GetMolFrags(mol, asMols=False, sanitizeFrags=False)
    if len(frags) <= 1:
        return mol, ""

    def frag_smiles(atoms):
        return Chem.MolFragmentToSmiles(mol, atomsToUse=list(atoms), isomericSmiles=True,
                                        allHsExplicit=False)

    def heavy(atoms):
        return sum(1 for i in atoms if mol.GetAtomWithIdx(i).GetAtomicNum() > 1)

    described = [(frag_smiles(f), heavy(f), len(f)) for f in frags]
    if not keep_largest:
        listing = ", ".join(f"{_plain_smiles(s)} ({h} heavy atom{'s' if h != 1 else ''})"
                            for s, h, _ in described)
        raise InputError(
            f"{label} has {len(frags)} disconnected fragments: {listing}; confpop treats one "
            f"molecule at a time: remove the others, or pass keep_largest_fragment=True "
            f"(command line --keep-largest-fragment) to keep the one with most heavy atoms")
    order = sorted(range(len(frags)), key=lambda k: (described[k][1], described[k][2]),
                   reverse=True)
    best, runner = order[0], order[1]
    if described[best][1:] == described[runner][1:] and (
            _plain_smiles(described[best][0]) != _plain_smiles(described[runner][0])):
        raise InputError(
            f"{label}: the largest fragments {_plain_smiles(described[best][0])} and "
            f"{_plain_smiles(described[runner][0])} have the same size, so "
            f"keep_largest_fragment cannot choose; remove one of them from the input")
    drop = sorted((i for k, f in enumerate(frags) if k != best for i in f), reverse=True)
    editable = Chem.RWMol(mol)
    editable.BeginBatchEdit()
    for i in drop:
        editable.RemoveAtom(i)
    editable.CommitBatchEdit()
    kept = editable.GetMol()
    kept.UpdatePropertyCache(strict=False)
    Chem.GetSymmSSSR(kept)  # atom removal clears the ring information that force fields need
    removed = ".".join(_plain_smiles(described[k][0]) for k in range(len(frags)) if k != best)
    logger.info("%s: kept fragment %s, removed %s", label, _plain_smiles(described[best][0]),
                removed)
    return kept, removed


def _check_geometry(mol, parsed):
    for conf in mol.GetConformers():
        positions = conf.GetPositions()
        where = _conformer_label(parsed, conf.GetId())
        if not np.all(np.isfinite(positions)):
            raise InputError(f"{parsed.label}: {where} has coordinates that are not finite")
        if len(positions) < 2:
            continue
        close = cKDTree(positions).query_pairs(r=_MIN_DISTANCE, output_type="ndarray")
        if len(close):
            i, j = sorted(int(k) for k in close[0])
            distance = float(np.linalg.norm(positions[i] - positions[j]))
            raise InputError(f"{parsed.label}: in {where} atoms {_atom(mol, i)} and "
                             f"{_atom(mol, j)} are {distance:.2f} angstrom apart (less than "
                             f"{_MIN_DISTANCE}): the geometry is broken or not in angstrom")


def _conformer_label(parsed, conf_id):
    if 0 <= conf_id < len(parsed.conformer_labels):
        return parsed.conformer_labels[conf_id]
    return f"{parsed.unit} {conf_id + 1}"


def _assign_stereo_from_coordinates(mol, parsed):
    """Read the configuration from the first conformer; all others must agree."""
    conf_ids = [c.GetId() for c in mol.GetConformers()]
    first = conf_ids[0]
    declared = {key: lab for key, lab in _stereo_labels(mol, None)
                if lab not in ("?",)} if not parsed.stereo_from_3d else {}
    reference = stereo_signature(mol, first)
    ref_map = dict(reference)
    for key, lab in declared.items():
        if key in ref_map and ref_map[key] != lab:
            raise InputError(
                f"{parsed.label}: its stereo flags say {_element_text(mol, key)} is {lab}, but "
                f"the coordinates of {_conformer_label(parsed, first)} make it {ref_map[key]}; "
                f"fix the flags or the coordinates")
    Chem.RemoveStereochemistry(mol)
    _assign_from_coordinates(mol, first)
    ref_smiles = configuration_smiles(mol, first)
    for conf_id in conf_ids[1:]:
        if configuration_smiles(mol, conf_id) != ref_smiles:
            signature = dict(stereo_signature(mol, conf_id))
            diffs = [f"{_element_text(mol, key)} is {signature.get(key, 'not stereogenic')} "
                     f"there, {ref_map.get(key, 'not stereogenic')} in "
                     f"{_conformer_label(parsed, first)}"
                     for key in sorted(set(signature) | set(ref_map))
                     if signature.get(key) != ref_map.get(key)]
            raise InputError(
                f"{parsed.label}: {_conformer_label(parsed, conf_id)} is a different "
                f"stereoisomer ({'; '.join(diffs[:3])}); all conformers must have the same "
                f"configuration")
    return mol


# --------------------------------------------------------------------------------------
# stereo
# --------------------------------------------------------------------------------------

@dataclass(frozen=True)
class _StereoElement:
    key: tuple          # (atom,) or (i, j); the junction atoms for a ring unit
    text: str           # "atom 2 (C): unassigned tetrahedral centre"
    cumulene: bool = False
    unit: bool = False


@dataclass(frozen=True)
class _RingUnit:
    """Junction centres of one ring system whose configurations can only change together."""

    atoms: tuple        # atom indices
    tags: tuple         # one feasible set of chiral tags; the other is its mirror image


_INVERTED = {Chem.ChiralType.CHI_TETRAHEDRAL_CW: Chem.ChiralType.CHI_TETRAHEDRAL_CCW,
             Chem.ChiralType.CHI_TETRAHEDRAL_CCW: Chem.ChiralType.CHI_TETRAHEDRAL_CW}


def _open_stereo(mol):
    """(mol with forced stereo assigned, open stereo elements, ring units).

    Two kinds of RDKit flags are settled here because they are no choice at all: junction
    atoms of small bridged or fused ring systems whose configurations the rings force
    (norbornane, adamantane, quinuclidine), and flags whose every assignment gives the same
    molecule (C2 of 2-methyladamantane). Junctions of a chiral ring system (camphor) stay
    open as one element with two mirror-image forms.
    """
    elements = _unassigned_stereo(mol)
    settled, units = _settle_ring_junctions(mol, elements)
    if settled is not mol:
        elements = _unassigned_stereo(settled)
    in_units = {a for u in units for a in u.atoms}
    merged = [e for e in elements if not (len(e.key) == 1 and e.key[0] in in_units)]
    for unit in units:
        atoms = ", ".join(_atom(settled, a) for a in unit.atoms)
        merged.append(_StereoElement(unit.atoms, f"atoms {atoms}: unassigned configuration of "
                                                 f"the ring system (two mirror-image forms)",
                                     unit=True))
    choices = [e for e in merged if not e.cumulene]
    if choices and len(choices) <= 6:
        distinct = _distinct_isomers(settled, units, limit=2)
        if len(distinct) == 1:
            settled = distinct[0]
            merged = [e for e in merged if e.cumulene]
            units = []
    return settled, merged, units


def _settle_ring_junctions(mol, elements):
    """Assign forced ring junctions; return (mol, chiral ring units left open)."""
    open_atoms = {e.key[0] for e in elements if len(e.key) == 1}
    if not open_atoms:
        return mol, []
    centres = {i.centeredOn for i in _stereo_elements(mol)
               if i.type == Chem.StereoType.Atom_Tetrahedral}
    forced = _forced_junctions(mol, centres)
    forced_open = sorted(open_atoms & forced)
    if not forced_open:
        return mol, []
    probe = Chem.Mol(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = _PROBE_SEED
    with rdBase.BlockLogs():
        if AllChem.EmbedMolecule(probe, params) < 0:
            return mol, []  # cannot tell: every centre stays open
    positions = probe.GetConformer().GetPositions()
    system_of = _ring_systems(mol)
    settled = Chem.Mol(mol)
    units = []
    for system in sorted({system_of[a] for a in forced_open}):
        unit_atoms = [a for a in forced_open if system_of[a] == system]
        fixed_partners = [a for a in forced if system_of[a] == system and a not in open_atoms]
        tags = [_tag_from_geometry(mol, a, positions) for a in unit_atoms]
        candidate = _with_tags(settled, unit_atoms, tags)
        if not fixed_partners:
            mirror = _with_tags(settled, unit_atoms, [_INVERTED[t] for t in tags])
            if _isomeric_smiles(candidate) != _isomeric_smiles(mirror):
                units.append(_RingUnit(tuple(unit_atoms), tuple(tags)))
                continue
        settled = candidate  # only one configuration exists (up to symmetry)
    return settled, units


def _distinct_isomers(mol, units, limit):
    """Up to ``limit`` distinct stereoisomers completing ``mol`` (ring units respected)."""
    options = StereoEnumerationOptions(onlyUnassigned=True, unique=True, maxIsomers=1024)
    found = {}
    with rdBase.BlockLogs():
        for isomer in EnumerateStereoisomers(mol, options=options):
            if not _fits_units(isomer, units):
                continue
            found.setdefault(_isomeric_smiles(isomer), isomer)
            if len(found) >= limit:
                break
    return list(found.values())


def _tag_from_geometry(mol, idx, positions, min_volume=0.0):
    """RDKit's chiral tag of atom ``idx`` in the given geometry (None if flatter than allowed).

    The tag is CCW when the unit vectors to the first three neighbours, in the atom's bond
    order, span a positive volume (checked against ``AssignStereochemistryFrom3D`` for
    three- and four-coordinate centres); it works for amine nitrogens (aziridines, bridgehead
    amines), which RDKit's own 3D assignment skips. A regular tetrahedral centre gives a
    volume of 0.77, a planar one 0.
    """
    atom = mol.GetAtomWithIdx(idx)
    nbrs = [b.GetOtherAtomIdx(idx) for b in atom.GetBonds()][:3]
    if len(nbrs) < 3:
        return None
    vectors = positions[nbrs] - positions[idx]
    lengths = np.linalg.norm(vectors, axis=1)
    if np.any(lengths == 0):
        return None
    vectors = vectors / lengths[:, None]
    volume = float(np.dot(vectors[0], np.cross(vectors[1], vectors[2])))
    if abs(volume) <= min_volume:
        return None
    return (Chem.ChiralType.CHI_TETRAHEDRAL_CCW if volume > 0
            else Chem.ChiralType.CHI_TETRAHEDRAL_CW)


# a centre flatter than this (normalized volume, see _tag_from_geometry) has no configuration
_MIN_CHIRAL_VOLUME = 0.1


def _assign_from_coordinates(mol, conf_id):
    """Stereo flags of ``mol`` from one conformer, amine nitrogens included."""
    with rdBase.BlockLogs():
        Chem.AssignStereochemistryFrom3D(mol, confId=conf_id)
    positions = mol.GetConformer(conf_id).GetPositions()
    for _ in range(3):  # a newly set centre can make another one stereogenic
        changed = False
        for info in _stereo_elements(mol):
            if (info.type != Chem.StereoType.Atom_Tetrahedral
                    or info.specified == Chem.StereoSpecified.Specified):
                continue
            tag = _tag_from_geometry(mol, info.centeredOn, positions, _MIN_CHIRAL_VOLUME)
            if tag is not None:
                mol.GetAtomWithIdx(info.centeredOn).SetChiralTag(tag)
                changed = True
        if not changed:
            break


def _forced_junctions(mol, centres):
    rings = [set(r) for r in mol.GetRingInfo().AtomRings()]
    forced = set()
    for idx in centres:
        atom = mol.GetAtomWithIdx(idx)
        if sum(1 for b in atom.GetBonds() if b.IsInRing()) < 3:
            continue
        mine = [r for r in rings if idx in r]
        if any(len(r) > _FORCED_BRIDGED_MAX_RING for r in mine):
            continue
        for a, b in itertools.combinations(mine, 2):
            shared = len(a & b)
            if shared >= 3 or (shared == 2 and max(len(a), len(b)) <= _FORCED_FUSED_MAX_RING):
                forced.add(idx)
                break
    return forced


def _ring_systems(mol):
    """Map ring atom -> id of its ring system (rings joined through shared atoms)."""
    parent = {}

    def find(x):
        while parent.setdefault(x, x) != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for ring in mol.GetRingInfo().AtomRings():
        for a in ring[1:]:
            parent[find(a)] = find(ring[0])
    return {a: find(a) for a in parent}


def _with_tags(mol, atoms, tags):
    out = Chem.Mol(mol)
    for a, tag in zip(atoms, tags):
        out.GetAtomWithIdx(a).SetChiralTag(tag)
    return out


def _fits_units(isomer, units):
    for unit in units:
        tags = tuple(isomer.GetAtomWithIdx(a).GetChiralTag() for a in unit.atoms)
        if tags != unit.tags and tags != tuple(_INVERTED.get(t, t) for t in unit.tags):
            return False
    return True


def _stereo_elements(mol):
    """RDKit's stereo elements of ``mol`` (true stereo only: symmetric centres are dropped)."""
    work = Chem.Mol(mol, True)  # quick copy: FindPotentialStereo may change flags
    with rdBase.BlockLogs():
        infos = Chem.FindPotentialStereo(work, cleanIt=True, flagPossible=True)
    return list(infos)


def _unassigned_stereo(mol):
    out = []
    for info in _stereo_elements(mol):
        if info.specified == Chem.StereoSpecified.Specified:
            continue
        if info.type == Chem.StereoType.Atom_Tetrahedral:
            idx = info.centeredOn
            out.append(_StereoElement((idx,), f"atom {_atom(mol, idx)}: unassigned "
                                              f"tetrahedral centre"))
        elif info.type in (Chem.StereoType.Bond_Double, Chem.StereoType.Bond_Cumulene_Even):
            bond = mol.GetBondWithIdx(info.centeredOn)
            i, j = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
            cumulene = info.type == Chem.StereoType.Bond_Cumulene_Even or _is_cumulated(mol, bond)
            what = "allene/cumulene axis" if cumulene else "double bond"
            out.append(_StereoElement((i, j), f"bond {i + 1}-{j + 1}: unassigned {what}", cumulene))
        # other kinds (square-planar, trigonal-bipyramidal, octahedral centres) are flagged
        # by RDKit without regard to identical ligands (SF6 would count): not checked
    return out


def _is_cumulated(mol, bond):
    for atom in (bond.GetBeginAtom(), bond.GetEndAtom()):
        doubles = [b for b in atom.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE]
        if len(doubles) > 1:
            return True
    return False


def _refuse_cumulenes(elements, mol):
    cumulenes = [e for e in elements if e.cumulene]
    if cumulenes:
        raise InputError(
            f"{_isomeric_smiles(mol)}: {'; '.join(e.text for e in cumulenes)}: RDKit cannot "
            f"record the axial configuration of an allene or cumulene, so it can neither be "
            f"checked nor enumerated; pass stereo='ignore' (and check the conformers' axis "
            f"yourself) or leave out the cumulene")


def _unassigned_stereo_error(mol, elements, label, units):
    n = len(elements)
    example = ""
    try:
        options = StereoEnumerationOptions(onlyUnassigned=True, maxIsomers=256)
        with rdBase.BlockLogs():
            for isomer in EnumerateStereoisomers(mol, options=options):
                if _fits_units(isomer, units):
                    example = f" (for example {_isomeric_smiles(isomer)})"
                    break
    except Exception:  # noqa: BLE001 - an example is a courtesy only
        example = ""
    return InputError(
        f"{n} stereo element{'s' if n != 1 else ''} of {label} "
        f"{'have' if n != 1 else 'has'} no assigned configuration "
        f"({'; '.join(e.text for e in elements)}); assign {'them' if n != 1 else 'it'} in the "
        f"SMILES{example}, or work on every stereoisomer with confpop.stereoisomers() "
        f"(command line --enumerate-stereo), or pass stereo='ignore' to let conformer "
        f"generation pick a configuration at random (the ensemble then mixes stereoisomers)")


def _stereo_labels(mol, conf):
    """Sorted ((atoms), label) for the stereo elements of ``mol``, from its stereo flags.

    With ``conf`` given, double bonds without a CIP label are read as cis/trans from its
    coordinates; else from the bond's stereo flag.
    """
    infos = [i for i in _stereo_elements(mol)
             if i.type in (Chem.StereoType.Atom_Tetrahedral, Chem.StereoType.Bond_Double)]
    work = Chem.Mol(mol, True)  # quick copy: the labeller writes properties
    try:
        with rdBase.BlockLogs():
            rdCIPLabeler.AssignCIPLabels(work)
    except Exception:  # noqa: BLE001 - too complex for the labeller: parities are used
        pass
    labels = []
    for info in infos:
        if info.type == Chem.StereoType.Atom_Tetrahedral:
            atom = work.GetAtomWithIdx(info.centeredOn)
            if info.specified != Chem.StereoSpecified.Specified:
                lab = "?"
            elif atom.HasProp("_CIPCode"):
                lab = atom.GetProp("_CIPCode")
            else:
                tag = atom.GetChiralTag()
                lab = {Chem.ChiralType.CHI_TETRAHEDRAL_CCW: "@",
                       Chem.ChiralType.CHI_TETRAHEDRAL_CW: "@@"}.get(tag, "?")
                if lab != "?" and _inversion_changes_nothing(mol, info.centeredOn):
                    continue  # a cage junction (adamantane): no configuration of its own
            labels.append(((info.centeredOn,), lab))
        else:
            bond = work.GetBondWithIdx(info.centeredOn)
            if _is_cumulated(work, bond):
                continue
            key = tuple(sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx())))
            if info.specified != Chem.StereoSpecified.Specified:
                lab = "?"
            elif bond.HasProp("_CIPCode"):
                lab = bond.GetProp("_CIPCode")
            elif conf is not None:
                lab = _cis_trans_from_coordinates(work, bond, conf)
            else:
                lab = _cis_trans_from_flags(bond)
            labels.append((key, lab))
    return tuple(sorted(labels))


def _inversion_changes_nothing(mol, idx):
    flipped = Chem.Mol(mol, True)
    atom = flipped.GetAtomWithIdx(idx)
    atom.SetChiralTag(_INVERTED.get(atom.GetChiralTag(), atom.GetChiralTag()))
    return _isomeric_smiles(flipped) == _isomeric_smiles(Chem.Mol(mol, True))


def _lowest_other_neighbour(atom, other_idx):
    idx = [n.GetIdx() for n in atom.GetNeighbors() if n.GetIdx() != other_idx]
    return min(idx) if idx else None


def _cis_trans_from_coordinates(mol, bond, conf):
    a, b = bond.GetBeginAtom(), bond.GetEndAtom()
    na = _lowest_other_neighbour(a, b.GetIdx())
    nb = _lowest_other_neighbour(b, a.GetIdx())
    if na is None or nb is None:
        return "?"
    p = conf.GetPositions()
    angle = dihedral_at(p, (na, a.GetIdx(), b.GetIdx(), nb))
    if np.isnan(angle):  # a linear bond angle at the double bond: no cis or trans
        return "?"
    return "cis" if abs(angle) < 90.0 else "trans"


def _cis_trans_from_flags(bond):
    stereo = bond.GetStereo()
    atoms = list(bond.GetStereoAtoms())
    if stereo not in (Chem.BondStereo.STEREOCIS, Chem.BondStereo.STEREOTRANS) or len(atoms) != 2:
        return "?"
    a, b = bond.GetBeginAtom(), bond.GetEndAtom()
    flips = (atoms[0] != _lowest_other_neighbour(a, b.GetIdx())) + (
        atoms[1] != _lowest_other_neighbour(b, a.GetIdx()))
    cis = (stereo == Chem.BondStereo.STEREOCIS) ^ bool(flips % 2)
    return "cis" if cis else "trans"


def _element_text(mol, key):
    if len(key) == 1:
        return f"atom {_atom(mol, key[0])}"
    return f"bond {key[0] + 1}-{key[1] + 1}"


# --------------------------------------------------------------------------------------
# charge, multiplicity, method coverage
# --------------------------------------------------------------------------------------

def _formal_charge(mol):
    return sum(a.GetFormalCharge() for a in mol.GetAtoms())


def _charge_and_multiplicity(mol, label, charge, multiplicity, hint):
    formal = _formal_charge(mol)
    if charge is not None and charge != formal:
        charged = [f"{_atom(mol, a.GetIdx())} {a.GetFormalCharge():+d}" for a in mol.GetAtoms()
                   if a.GetFormalCharge()]
        where = ", ".join(charged[:6]) if charged else "no charged atoms"
        raise InputError(
            f"charge={_signed(charge)} does not match {label}, whose formal charges add "
            f"up to {_signed(formal)} ({where}); mark the charged atoms in the input (e.g. [NH4+], "
            f"[O-]): the total charge must equal the sum of the formal charges so that every "
            f"method sees the same molecule")
    radicals = sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms())
    if multiplicity is not None:
        spin, origin = multiplicity, f"multiplicity={multiplicity}"
    elif hint is not None:
        spin, origin = hint, f"the molecule's property multiplicity={hint}"
    else:
        spin, origin = 1 + radicals, f"the inferred multiplicity {1 + radicals}"
    electrons = sum(a.GetAtomicNum() for a in mol.GetAtoms()) - formal
    if electrons < 0:
        raise InputError(f"{label}: a total charge of {_signed(formal)} leaves "
                         f"{electrons} electrons")
    unpaired = spin - 1
    if spin < 1 or unpaired > electrons or (electrons - unpaired) % 2:
        allowed = list(range(1 + electrons % 2, electrons + 2, 2))
        if len(allowed) == 1:
            allowed_text = f"only multiplicity {allowed[0]}"
        elif len(allowed) <= 4:
            allowed_text = (f"multiplicities {', '.join(map(str, allowed[:-1]))} or "
                            f"{allowed[-1]}")
        else:
            allowed_text = (f"multiplicities {', '.join(map(str, allowed[:3]))}, ... up to "
                            f"{allowed[-1]}")
        raise InputError(
            f"{origin} is impossible for {label}: it has {electrons} "
            f"electron{'s' if electrons != 1 else ''} (charge {_signed(formal)}), which "
            f"allows {allowed_text}")
    return formal, spin


def _check_method_coverage(mol, method, label):
    family = _METHOD_FAMILY.get(method)
    if family is None:
        return
    name = {"mmff": method.upper(), "uff": "UFF", "gfn": method.upper()}[family]
    if family == "gfn":
        bad = [a for a in mol.GetAtoms() if a.GetAtomicNum() > _GFN_MAX_Z]
        if bad:
            raise _coverage_error(mol, label, name, bad, f"it covers Z = 1-{_GFN_MAX_Z}")
        return
    if family == "mmff":
        variant = "MMFF94s" if method == "mmff94s" else "MMFF94"
        mol = Chem.Mol(mol)
        Chem.FastFindRings(mol)  # ring perception is lost when fragments were removed
        with rdBase.BlockLogs():
            ok = rdForceFieldHelpers.MMFFHasAllMoleculeParams(mol)
        if ok:
            return
        bad = [a for a in mol.GetAtoms() if not _mmff_covers(a)]
        if bad:
            raise _coverage_error(mol, label, variant, bad,
                                  "it covers H, C, N, O, F, Si, P, S, Cl, Br, I and a few "
                                  "free metal ions")
        raise InputError(
            f"{variant} has no atom types for {label} (RDKit's MMFF typing "
            f"failed although every element is covered: unusual bonding such as "
            f"hypervalent atoms); use method 'uff' or a GFN method")
    with rdBase.BlockLogs():
        ok = rdForceFieldHelpers.UFFHasAllMoleculeParams(mol)
        if ok:
            return
        bad = [mol.GetAtomWithIdx(i) for i in range(mol.GetNumAtoms())
               if rdForceFieldHelpers.GetUFFVdWParams(mol, i, i) is None]
    if bad:
        raise _coverage_error(mol, label, "UFF", bad, "RDKit's UFF typing found no atom type")
    raise InputError(f"UFF has no parameters for {label}; use a GFN method")


def _mmff_covers(atom):
    z = atom.GetAtomicNum()
    if z in _MMFF_ELEMENTS:
        return True
    return atom.GetDegree() == 0 and atom.GetFormalCharge() in _MMFF_IONS.get(z, ())


def _coverage_error(mol, label, method_name, atoms, why):
    listing = ", ".join(f"atom {_atom(mol, a.GetIdx())}" for a in atoms[:8])
    more = f" and {len(atoms) - 8} more" if len(atoms) > 8 else ""
    return InputError(f"{method_name} has no parameters for {listing}{more} of "
                      f"{label} ({why}); choose another method")


# --------------------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------------------

def _check_stereo_policy(stereo):
    if isinstance(stereo, str) and stereo.lower() == "enumerate":
        raise InputError(
            "load_molecule returns one molecule, so stereo='enumerate' is not accepted "
            "here; call confpop.stereoisomers(source, ...) instead, which takes the same "
            "arguments and returns one molecule per stereoisomer")
    if not isinstance(stereo, str) or stereo.lower() not in STEREO_POLICIES:
        raise InputError(f"stereo must be one of {', '.join(map(repr, STEREO_POLICIES))}, "
                         f"got {stereo!r}")
    return stereo.lower()


def _check_int(argument, value):
    if value is None:
        return None
    if isinstance(value, bool):
        raise InputError(f"{argument} must be an integer, got {value!r}")
    if isinstance(value, float):
        if not value.is_integer():
            raise InputError(f"{argument} must be an integer, got {value!r}")
        return int(value)
    try:
        return int(value.__index__())
    except (AttributeError, TypeError):
        raise InputError(f"{argument} must be an integer, got {value!r}") from None


def _check_method(method):
    if method is None:
        return None
    if not isinstance(method, str) or not method.strip():
        raise InputError(f"method must be a method name such as 'gfn2' or 'mmff94', "
                         f"got {method!r}")
    return method.strip().lower()


def _raise_chemistry_problem(raw, label):
    """Raise an InputError describing the first sanitization problem of ``raw``, if any."""
    with rdBase.BlockLogs():
        problems = Chem.DetectChemistryProblems(raw)
    if not problems:
        return
    problem = problems[0]
    kind = problem.GetType()
    if kind == "AtomValenceException":
        idx = problem.GetAtomIdx()
        atom = raw.GetAtomWithIdx(idx)
        match = re.search(r",\s*(\d+),", problem.Message())
        valence = match.group(1) if match else "too high"
        allowed = ""
        if atom.GetFormalCharge() == 0:
            valences = [v for v in _PT.GetValenceList(atom.GetAtomicNum()) if v >= 0]
            if valences:
                allowed = f" ({max(valences)})"
        raise InputError(f"{label}: atom {_atom(raw, idx)} has valence {valence}, more than "
                         f"allowed{allowed}; check its bonds, hydrogens and formal charge")
    if kind in ("KekulizeException", "AtomKekulizeException"):
        atoms = list(problem.GetAtomIndices()) if hasattr(problem, "GetAtomIndices") else [
            problem.GetAtomIdx()]
        listing = ", ".join(_atom(raw, i) for i in atoms[:10])
        raise InputError(f"{label}: cannot assign alternating single and double bonds to the "
                         f"aromatic atoms {listing}; check the aromatic ring (a pyrrole-type "
                         f"nitrogen needs its hydrogen written as [nH])")
    raise InputError(f"{label}: RDKit cannot sanitize it ({problem.Message().strip()})")


def _signed(n):
    return f"{n:+d}" if n else "0"


def _atom(mol, idx):
    """"3 (N)": the atom's 1-based number (as molecule viewers count) and its element."""
    atom = mol.GetAtomWithIdx(int(idx))
    return f"{int(idx) + 1} ({atom.GetSymbol()})"


def _get_conformer(mol, conf_id, caller):
    if not isinstance(mol, Chem.Mol):
        raise InputError(f"{caller}: mol must be an RDKit Mol, got {type(mol).__name__}")
    if mol.GetNumConformers() == 0:
        raise InputError(f"{caller}: the molecule has no conformer")
    conf_id = _check_int("conf_id", conf_id)
    if conf_id is None:
        conf_id = -1
    try:
        return mol.GetConformer(conf_id)
    except ValueError:
        ids = [c.GetId() for c in mol.GetConformers()]
        raise InputError(f"{caller}: no conformer with id {conf_id} (ids present: "
                         f"{ids[:10]}{' ...' if len(ids) > 10 else ''})") from None


def _isomeric_smiles(mol):
    with rdBase.BlockLogs():
        return Chem.MolToSmiles(Chem.RemoveHs(mol, sanitize=False))


def _plain_smiles(smiles):
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles)
    return Chem.MolToSmiles(mol) if mol is not None else smiles


