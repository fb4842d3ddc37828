"""Measured 1H and 13C shifts of small rigid molecules: the set our linear scaling is fitted on.

Each entry is a SMILES whose atom-map numbers name the signals, and the measured shifts
(ppm from TMS) of the mapped carbons (``"C<k>"``) and of the protons on mapped atom k
(``"H<k>"``). Exchangeable OH/NH protons are left out (their shift follows concentration and
water content; common practice).

Sources (each value carries its tag in ``source``):

``G97``
    Gottlieb, Kotlyar, Nudelman, "NMR Chemical Shifts of Common Laboratory Solvents as Trace
    Impurities", J. Org. Chem. 1997, 62, 7512, doi:10.1021/jo971176v, CDCl3 columns. The 1H
    values were read from the table as reprinted in a vendor's impurity chart; the 13C
    values of this paper are **from memory**.
``CRC``
    CRC Handbook of Chemistry and Physics, table "13C chemical shifts of useful NMR
    solvents" (non-deuterated entries), read from a reprint of the table.
``F10``
    Fulmer et al., Organometallics 2010, 29, 2176, doi:10.1021/om100106e, CDCl3 column,
    **from memory**.

Carbons bearing chlorine are kept in the set but left out of the 13C fit (``fit_exclude``):
at B3LYP/def2-SVP on GFN2 geometries their errors grow by about 13 ppm per chlorine
(CH2Cl2 +11.6, CHCl3 +26.4, CCl4 +44.0 ppm with them in the fit; the geometry is not the
cause: CCl4 at the experimental C-Cl length moves by 0.8 ppm, def2-TZVP by -10 ppm, HF by
+31 ppm), a failure of the functional that one line cannot absorb. With them in, the 13C MAE
of the other 23 signals rises from 2.3 to 7.0 ppm. :func:`confpop.nmr.shifts.chemical_shifts`
warns when a molecule has such a carbon.

These are solution (CDCl3 or neat) values; the shieldings are gas phase (see
:mod:`confpop.backends.shielding`), so part of the medium effect is absorbed into the fitted
slope and intercept and the rest is in the error the README states.
"""

from __future__ import annotations

__all__ = ["CALIBRATION_SET"]

#: name, SMILES with atom maps, {signal: shift ppm}, {signal: source tag}, and optionally
#: ``fit_exclude`` {signal: why it is left out of the fit}
CALIBRATION_SET: list[dict] = [
    {"name": "acetone", "smiles": "[CH3:1][C:2](=O)[CH3:1]",
     "shifts": {"C1": 30.7, "C2": 206.7, "H1": 2.17},
     "source": {"C1": "CRC", "C2": "CRC", "H1": "G97"}},
    {"name": "acetonitrile", "smiles": "[CH3:1][C:2]#N",
     "shifts": {"C1": 1.89, "C2": 116.43, "H1": 2.10},
     "source": {"C1": "G97", "C2": "G97", "H1": "G97"}},
    {"name": "benzene", "smiles": "[cH:1]1[cH:1][cH:1][cH:1][cH:1][cH:1]1",
     "shifts": {"C1": 128.5, "H1": 7.36}, "source": {"C1": "CRC", "H1": "G97"}},
    {"name": "chloroform", "smiles": "Cl[CH:1](Cl)Cl",
     "shifts": {"C1": 77.2, "H1": 7.26}, "source": {"C1": "CRC", "H1": "G97"},
     "fit_exclude": {"C1": "carbon bearing chlorine (see the module notes)"}},
    {"name": "dichloromethane", "smiles": "Cl[CH2:1]Cl",
     "shifts": {"C1": 53.52, "H1": 5.30}, "source": {"C1": "G97", "H1": "G97"},
     "fit_exclude": {"C1": "carbon bearing chlorine (see the module notes)"}},
    {"name": "cyclohexane", "smiles": "[CH2:1]1[CH2:1][CH2:1][CH2:1][CH2:1][CH2:1]1",
     "shifts": {"C1": 26.94, "H1": 1.43}, "source": {"C1": "G97", "H1": "G97"}},
    {"name": "pyridine", "smiles": "[cH:1]1[cH:2][cH:3][cH:2][cH:1]n1",
     "shifts": {"C1": 149.8, "C2": 123.6, "C3": 135.7, "H1": 8.62, "H2": 7.29, "H3": 7.68},
     "source": {"C1": "CRC", "C2": "CRC", "C3": "CRC", "H1": "G97", "H2": "G97",
                "H3": "G97"}},
    {"name": "dimethyl sulfoxide", "smiles": "[CH3:1]S(=O)[CH3:1]",
     "shifts": {"C1": 40.76, "H1": 2.62}, "source": {"C1": "G97", "H1": "G97"}},
    {"name": "tert-butanol", "smiles": "[CH3:1][C:2]([CH3:1])([CH3:1])O",
     "shifts": {"C1": 31.25, "C2": 69.15, "H1": 1.28},
     "source": {"C1": "G97", "C2": "G97", "H1": "G97"}},
    {"name": "1,4-dioxane", "smiles": "[CH2:1]1[CH2:1]O[CH2:1][CH2:1]O1",
     "shifts": {"C1": 67.14, "H1": 3.71}, "source": {"C1": "G97", "H1": "G97"}},
    {"name": "ethylene", "smiles": "[CH2:1]=[CH2:1]",
     "shifts": {"C1": 123.13, "H1": 5.40}, "source": {"C1": "F10", "H1": "F10"}},
    {"name": "carbon disulfide", "smiles": "S=[C:1]=S",
     "shifts": {"C1": 192.3}, "source": {"C1": "CRC"}},
    {"name": "tetrachloromethane", "smiles": "Cl[C:1](Cl)(Cl)Cl",
     "shifts": {"C1": 96.0}, "source": {"C1": "CRC"},
     "fit_exclude": {"C1": "carbon bearing chlorine (see the module notes)"}},
    {"name": "tert-butyl methyl ether", "smiles": "[CH3:1][C:2]([CH3:1])([CH3:1])O[CH3:3]",
     "shifts": {"C1": 27.24, "C2": 72.87, "C3": 49.45, "H1": 1.19, "H3": 3.22},
     "source": {"C1": "G97", "C2": "G97", "C3": "G97", "H1": "G97", "H3": "G97"}},
    {"name": "toluene", "smiles": "[CH3:1][c:2]1[cH:3][cH:4][cH:5][cH:4][cH:3]1",
     "shifts": {"C1": 21.46, "C2": 137.89, "C3": 129.07, "C4": 128.26, "C5": 125.33,
                "H1": 2.36},
     "source": {"C1": "G97", "C2": "G97", "C3": "G97", "C4": "G97", "C5": "G97",
                "H1": "G97"}},
]
