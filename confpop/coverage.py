"""Total charge, spin multiplicity, and whether a method has parameters for a molecule.

The element tables name the culprits once RDKit's own typing has said no.
"""

from __future__ import annotations

from rdkit import Chem, rdBase
from rdkit.Chem import rdForceFieldHelpers

from .chem_helpers import _atom, _signed
from .errors import InputError

__all__: list[str] = []


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
