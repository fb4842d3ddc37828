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
stereoisomer.

The work is split by concept: the readers (:mod:`confpop.reading`), stereo
(:mod:`confpop.stereo`), charge and method coverage (:mod:`confpop.coverage`), bonds from
coordinates (:mod:`confpop.bonds`); this module holds the entry points and the common checks.

Atom indices in messages and results count from 0, as in RDKit; records of an SDF file and
frames of an XYZ file count from 1, as a text editor shows them.

Examples
--------
>>> from confpop.loading import load_molecule
>>> mol = load_molecule("CC(=O)[O-]")
>>> mol.GetNumAtoms(), mol.GetIntProp("charge"), mol.GetIntProp("multiplicity")
(7, -1, 1)
"""

from __future__ import annotations

import logging

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import rdMolDescriptors
from rdkit.Chem.EnumerateStereoisomers import EnumerateStereoisomers, StereoEnumerationOptions
from scipy.spatial import cKDTree

from .checks import _check_int, _check_method
from .chem_helpers import _atom, _element_text, _isomeric_smiles, _plain_smiles
from .coverage import _charge_and_multiplicity, _check_method_coverage, _formal_charge
from .errors import InputError, StereoWarning, caution
from .reading import _conformer_label, _read_source
from .stereo import (_assign_from_coordinates, _fits_units, _open_stereo, _refuse_cumulenes,
                     _stereo_elements, _stereo_labels, _unassigned_stereo,
                     _unassigned_stereo_error, configuration_smiles, stereo_signature)

__all__ = ["load_molecule", "stereoisomers", "molecule_summary", "STEREO_POLICIES"]

logger = logging.getLogger(__name__)


#: values accepted by ``load_molecule(stereo=...)``
STEREO_POLICIES = ("refuse", "ignore")

# Atoms closer than this in an input conformer are taken as a broken geometry (the shortest
# real bond, H-H in H2, is 0.74 angstrom).
_MIN_DISTANCE = 0.5


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
        caution(logger, StereoWarning, "%s: stereo left open (%s); conformer generation will "
                "pick each configuration at random", label, unassigned_note, stacklevel=5)

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
