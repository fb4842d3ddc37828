"""Known weaknesses of the energy methods that can make NMR predictions mislead.

Each caution applies to a recognisable case (a molecule class, a method, a solvent) and
states the size of the error measured for this project. They are issued as
:class:`MethodWarning` (a ``UserWarning``: filterable and testable) by the functions whose
results they concern, returned by :func:`method_cautions` for display, and printed by the
command line. They do not change any number: they say how far to trust it, and defer to
experiment and qualified judgement.

Measured cases (issue 14; the numbers are repeated in README "Method cautions"):

- **Polyols and sugars in water, tight-binding level.** Methyl beta-D-glucopyranoside,
  GFN2-xTB + GBSA(water), two sampling seeds: the hydroxymethyl group comes out 47-69 % tg
  (measured in water: gt and gg, tg at most about 10 %), up to 22 % of the population off
  the 4C1 chair, and J(H5,H6proR) / J(H5,H6proS) = 2.7-3.5 / 6.2-8.1 Hz against about
  5.8 / 2.1 Hz measured [from memory], errors of 2.3-6.0 Hz. Re-ranking the two lowest
  conformers of each hydroxymethyl family (seed 0) with B3LYP-D3(BJ)/def2-SVP + PCM(water)
  single points moved tg from 0.69 to 0.43 but left gt at 0.02 (GFN2: 0.04): J5,6R / J5,6S
  1.87 / 6.43 Hz against 2.69 / 8.12 Hz at GFN2 on the same conformers, errors 3.9 / 4.3 Hz
  against 3.1 / 6.0: no real improvement (implicit solvent misses water's hydrogen bonds to
  the hydroxymethyl group).
- **Amide C-N barriers, tight-binding level.** GFN2-xTB barriers are 1.4-3.2 kcal/mol
  below experiment (N,N-dimethylacetamide gas 13.8 vs 15.6; DMF in chloroform 19.6 vs
  about 21): rates 10-200 times too fast (see :mod:`confpop.species`). Measured here for
  N,N-dimethylacetamide (gas): relaxed GFN2-xTB scan 13.61 kcal/mol; B3LYP-D3(BJ)/def2-SVPD
  single points at its extrema (:func:`confpop.torsion.rescore_barrier`) 14.27, a third of
  the way to experiment.
- **Fluorine gauche effect in the gas phase, tight-binding level.** 1,2-Difluoroethane,
  GFN2-xTB gas phase: anti 0.94 kcal/mol below gauche, where experiment puts gauche about
  0.6-0.8 kcal/mol below anti [from memory]: an error of about 1.5-1.7 kcal/mol
  with the wrong sign (gauche population 0.29 instead of about 0.85).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

from rdkit import Chem

from ..errors import ConfpopWarning

__all__ = ["MethodWarning", "MethodCaution", "method_cautions", "warn_cautions",
           "amide_barrier_caution", "TIGHT_BINDING_LEVELS"]

#: level names (ensemble ``level`` / scan ``method``) that are tight-binding methods
TIGHT_BINDING_LEVELS = ("gfn2", "gfn1", "gfnff", "gfn0", "tblite-gfn2", "tblite-gfn1", "xtb")

_WATER = ("water", "h2o")


class MethodWarning(ConfpopWarning):
    """A known weakness of the energy method applies to this result."""


@dataclass(frozen=True)
class MethodCaution:
    """One applicable caution.

    Attributes
    ----------
    key : str
        "polyol-water", "amide-barrier" or "fluorine-gauche-gas".
    message : str
        What is wrong, by how much (measured), and what to do.
    """

    key: str
    message: str


POLYOL_WATER = (
    "GFN2-xTB with implicit water misranks polyol and sugar conformers: for methyl "
    "beta-D-glucopyranoside it gave the hydroxymethyl group 47-69 % tg (measured: gt/gg, "
    "tg <= ~10 %), up to 22 % non-chair ring, and H5-H6 couplings 2.3-6.0 Hz off the "
    "measured values; re-ranking with DFT and implicit water (B3LYP-D3(BJ)/def2-SVP/PCM) "
    "did not fix it (tg 43 %, gt 2 %, errors 3.9 and 4.3 Hz). Treat the averages as "
    "qualitative and rely on the measured couplings (fit_populations reports the rotamer "
    "families they determine).")

AMIDE_BARRIER = (
    "GFN2-xTB amide C-N rotation barriers are 1.4-3.2 kcal/mol below experiment (measured: "
    "N,N-dimethylacetamide gas 13.8 vs 15.6; DMF in chloroform 19.6 vs ~21 kcal/mol), so "
    "these rates are 10-200 times too fast; the exchange regime may really be slower. "
    "DFT single points at the scan extrema (confpop.torsion.rescore_barrier) recover part "
    "of it (+0.66 kcal/mol for N,N-dimethylacetamide).")

FLUORINE_GAUCHE = (
    "GFN2-xTB in the gas phase gets the fluorine gauche effect wrong: for 1,2-difluoroethane "
    "it puts anti 0.94 kcal/mol below gauche, where experiment puts gauche ~0.6-0.8 "
    "kcal/mol below anti (error ~1.6 kcal/mol, gauche population 0.29 instead of ~0.85). "
    "Rotamer populations about C-C bonds bearing F (or F and O/N) are unreliable; use an "
    "implicit solvent or DFT energies.")


def _level(ens) -> str:
    return str(getattr(ens, "level", "") or "").lower()


def _is_tight_binding(name: str) -> bool:
    return any(name == t or name.startswith(t + "-") or name.startswith(t + "_")
               for t in TIGHT_BINDING_LEVELS)


def _polyol(mol: Chem.Mol) -> bool:
    """Three or more hydroxyl groups on sp3 carbons, or a sugar ring (a ring O flanked by a
    carbon that also bears an O: the anomeric carbon)."""
    pattern_oh = Chem.MolFromSmarts("[CX4][OX2H1]")
    if len(mol.GetSubstructMatches(pattern_oh)) >= 3:
        return True
    sugar = Chem.MolFromSmarts("[OX2;R][CX4;R][OX2;!R]")
    return mol.HasSubstructMatch(sugar) and len(mol.GetSubstructMatches(pattern_oh)) >= 2


def _vicinal_fluorine(mol: Chem.Mol) -> bool:
    return mol.HasSubstructMatch(Chem.MolFromSmarts("F[CX4][CX4][F,O,N]"))


def method_cautions(ens) -> list[MethodCaution]:
    """The cautions that apply to an ensemble's populations (by its ranking level, solvent
    and molecule). An ensemble ranked at a level that is not tight binding (DFT, a user
    level) gets none of the tight-binding cautions."""
    if not hasattr(ens, "mol"):
        return []
    level = _level(ens)
    if not _is_tight_binding(level):
        return []
    mol = ens.mol
    solvent = str(getattr(ens, "solvent", "") or "").lower()
    out = []
    if solvent in _WATER and _polyol(mol):
        out.append(MethodCaution("polyol-water", POLYOL_WATER))
    if not solvent and _vicinal_fluorine(mol):
        out.append(MethodCaution("fluorine-gauche-gas", FLUORINE_GAUCHE))
    return out


def amide_barrier_caution(method, kind: str) -> MethodCaution | None:
    """The amide-barrier caution when a tight-binding ``method`` scanned an amide,
    thioamide or carbamate C-N bond (``kind`` from :class:`confpop.species.SlowBond` or
    :class:`confpop.torsion.Torsion`)."""
    name = str(getattr(method, "name", method) or "").lower()
    if _is_tight_binding(name) and kind in ("amide", "thioamide", "carbamate"):
        return MethodCaution("amide-barrier", AMIDE_BARRIER)
    return None


def warn_cautions(cautions, stacklevel: int = 3) -> None:
    """Issue each caution as a :class:`MethodWarning`."""
    for c in cautions:
        warnings.warn(c.message, MethodWarning, stacklevel=stacklevel)
