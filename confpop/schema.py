"""The schema of the conformer table as written to files: one declaration per column.

Inside confpop the table keeps short names (``energy_gfn2``, ``gcorr_298.15``; hartree in
:attr:`Ensemble.raw_table`, the chosen unit in :meth:`Ensemble.table`). Every file a user
reads (``table.csv``, the SD properties) uses the written names declared here, with the unit
in every name that carries one: ``energy_gfn2_rel_kcal_mol``, ``gcorr_298.15K_kcal_mol``.
A column without a declaration (one a user added with ``Ensemble.with_column``) is written
under its own name, unchanged, and described in ``run.json`` with the unit "unknown":
confpop cannot know what a user's column measures. Every column confpop makes itself is
declared here (tests/test_io_files.py checks that).

Examples
--------
>>> file_name("energy_gfn2", "kcal/mol")
'energy_gfn2_rel_kcal_mol'
>>> file_name("population_298.15K", "kcal/mol")
'population_298.15K'
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from .errors import InputError

__all__ = ["Column", "COLUMNS", "column_spec", "file_name", "file_columns", "unit_suffix",
           "solvent_model"]


def unit_suffix(unit: str) -> str:
    """A unit as a name part: kcal/mol -> kcal_mol, kJ/mol -> kJ_mol, cm-1 -> cm-1."""
    return unit.replace("/", "_").replace(" ", "")


@dataclass(frozen=True)
class Column:
    """One column of the conformer table.

    Attributes
    ----------
    pattern : str
        Regular expression of the internal name; groups are used by ``written``.
    written : str
        Name in files, a format string over the match groups and ``{unit}`` (the energy unit
        as a name part) -- every energy-like column carries its unit.
    dtype : str
        "float", "int", "bool" or "str".
    unit : str
        Unit of the written values ("{energy}" = the table's energy unit, "" = none).
    meaning : str
    """

    pattern: str
    written: str
    dtype: str
    unit: str
    meaning: str


COLUMNS: tuple[Column, ...] = (
    Column(r"relative_energy", "relative_energy_{unit}", "float", "{energy}",
           "energy above the lowest active conformer at the ranking level"),
    Column(r"energy_(.+)", "energy_{0}_rel_{unit}", "float", "{energy}",
           "energy at this level relative to the lowest active conformer at the same level "
           "(absolute hartree in the SDF property energy_<level>_hartree)"),
    Column(r"delta_g_(.+)K", "delta_g_{0}K_{unit}", "float", "{energy}",
           "G(T) = E + gcorr(T) above the lowest active conformer"),
    Column(r"gcorr_(.+)", "gcorr_{0}K_{unit}", "float", "{energy}",
           "thermal correction to the Gibbs energy at T (ZPE included)"),
    Column(r"hcorr_(.+)", "hcorr_{0}K_{unit}", "float", "{energy}",
           "thermal correction to the enthalpy at T (ZPE included)"),
    Column(r"entropy_(.+)", "entropy_{0}K_{unit}_K", "float", "{energy}/K", "entropy at T"),
    Column(r"zpe", "zpe_{unit}", "float", "{energy}", "zero-point energy"),
    Column(r"lowest_frequency", "lowest_frequency_cm-1", "float", "cm-1",
           "lowest harmonic frequency"),
    Column(r"max_gradient", "max_gradient_hartree_angstrom", "float", "hartree/angstrom",
           "largest gradient component at the Hessian geometry"),
    Column(r"population_(.+)K", "population_{0}K", "float", "",
           "Boltzmann population at T (fraction of 1, degeneracy included)"),
    Column(r"dipole_debye", "dipole_debye", "float", "debye", "dipole moment"),
    Column(r"status", "status", "str", "", "ok, or why the conformer failed"),
    Column(r"reason", "reason", "str", "", "why a conformer failed or was removed"),
    Column(r"degeneracy", "degeneracy", "int", "", "number of structures this row stands for "
           "(2 for a merged mirror-image pair)"),
    Column(r"times_found", "times_found", "int", "", "sampling hits of this conformer"),
    Column(r"chiral_conformer", "chiral_conformer", "bool", "",
           "the conformer differs from its mirror image"),
    Column(r"converged", "converged", "bool", "", "geometry optimization converged"),
    Column(r"opt_steps", "opt_steps", "int", "", "optimization steps"),
    Column(r"gradient_calls", "gradient_calls", "int", "", "gradient evaluations"),
    Column(r"minimum_check", "minimum_check", "str", "", "result of the symmetric-minimum check"),
    Column(r"species", "species", "int", "", "slow-exchange species number (0: lowest)"),
    Column(r"species_label", "species_label", "str", "", "states of the slow bonds (1-based atom labels)"),
    Column(r"symmetry_number", "symmetry_number", "int", "", "rotational symmetry number"),
    Column(r"imaginary_modes", "imaginary_modes", "int", "", "imaginary modes below the cut"),
    Column(r"mirror_of", "mirror_of", "int", "", "conformer this one is the mirror image of"),
    Column(r"torsion_(.+)_deg", "torsion_{0}_deg", "float", "degree",
           "a distinguishing torsion (1-based atom labels)"),
    Column(r"ring_(.+)", "ring_{0}", "str", "", "ring pucker (Cremer-Pople), with substituents axial (ax) / equatorial (eq) where they differ"),
    Column(r"hydrogen_bonds", "hydrogen_bonds", "str", "",
           "intramolecular hydrogen bonds, 1-based labels"),
    Column(r"note", "note", "str", "", "optimizer note"),
)


def column_spec(name: str) -> tuple[Column, tuple]:
    """The declaration of an internal column name and its match groups."""
    for col in COLUMNS:
        match = re.fullmatch(col.pattern, str(name))
        if match:
            return col, match.groups()
    raise InputError(f"table column {name!r} has no declaration in confpop.schema.COLUMNS "
                     "(give it a written name and a unit there)")


#: the unit run.json gives a column confpop did not make (a user's with_column)
UNKNOWN_UNIT = "unknown"


def file_name(name: str, unit: str = "kcal/mol") -> str:
    """The written name of an internal column, with ``unit`` for energy-like columns; a
    column without a declaration keeps its name."""
    try:
        col, groups = column_spec(name)
    except InputError:
        return str(name)
    return col.written.format(*groups, unit=unit_suffix(unit))


def file_columns(names, unit: str = "kcal/mol") -> dict:
    """{internal name: written name} for a table's columns (each must be declared)."""
    out = {name: file_name(name, unit) for name in names}
    if len(set(out.values())) != len(out):
        raise InputError(f"two table columns map to one written name: {out}")
    return out


def describe_written(names, unit: str = "kcal/mol") -> dict:
    """{written name: {"unit", "dtype", "meaning"}} for run.json."""
    out = {}
    for name in names:
        try:
            col, groups = column_spec(name)
        except InputError:  # a user's own column: written unchanged, unit unknown
            out[str(name)] = {"unit": UNKNOWN_UNIT, "dtype": "", "meaning": "a column added "
                              "by the user (Ensemble.with_column), written as given"}
            continue
        out[col.written.format(*groups, unit=unit_suffix(unit))] = {
            "unit": col.unit.replace("{energy}", unit), "dtype": col.dtype,
            "meaning": col.meaning}
    return out


#: the implicit solvent model of each engine family (confpop.backends.xtb uses xtb-python's
#: GBSA, the only model its API exposes; confpop.backends.tblite defaults to ALPB;
#: confpop.backends.dft to PySCF's IEF-PCM)
_SOLVENT_MODELS = {"gfn2": "GBSA", "gfn1": "GBSA", "gfnff": "GBSA", "tblite-gfn2": "ALPB",
                   "tblite-gfn1": "ALPB", "dft": "IEF-PCM"}


def solvent_model(method: str, solvent: str | None) -> str | None:
    """The implicit solvent model a method uses, e.g. ``"GBSA(chloroform)"``; None in the gas
    phase.

    Examples
    --------
    >>> solvent_model("gfn2", "water"), solvent_model("tblite-gfn2", "water")
    ('GBSA(water)', 'ALPB(water)')
    """
    if not solvent:
        return None
    model = _SOLVENT_MODELS.get(str(method).lower(), "implicit")
    return f"{model}({solvent})"
