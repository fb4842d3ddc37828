"""The conformer ensemble: one RDKit molecule with conformers plus one table row per conformer.

Steps never change an ensemble in place; they return a new one. Energies are stored in
hartree (absolute, one column ``energy_<level>`` per level of theory) and converted only
when shown.
"""

from __future__ import annotations

import copy
from typing import Iterable, Sequence

import numpy as np
import pandas as pd
from rdkit import Chem

from . import thermo
from .errors import InputError
from .records import step_record, temperature_key  # noqa: F401 (defined there, kept here)
from .units import convert, normalize_unit

__all__ = ["Ensemble"]

_STATUS_OK = "ok"


class Ensemble:
    """Conformers of one molecule with energies, degeneracies, status and provenance.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Molecule with explicit hydrogens; one conformer per table row, conformer ids equal to
        the table index.
    table : pandas.DataFrame
        One row per conformer, indexed by conformer id; must hold ``status``, ``reason`` and
        ``degeneracy``; energy columns are named ``energy_<level>`` and hold hartree.
    level : str
        The energy column that ranks the conformers (``energy_<level>``).
    charge, multiplicity : int
    solvent : str or None
    provenance : list of dict
        One entry per step: what was done, with which settings, counts in and out, wall time.

    Examples
    --------
    >>> from rdkit import Chem
    >>> from rdkit.Chem import AllChem
    >>> mol = Chem.AddHs(Chem.MolFromSmiles("CCO"))
    >>> ids = AllChem.EmbedMultipleConfs(mol, 2, randomSeed=1)
    >>> ens = Ensemble.from_mol(mol, energies=[0.0, 0.6], level="test", unit="kcal/mol")
    >>> pops = ens.populations([298.15])
    >>> round(float(pops[298.15].sum()), 12)
    1.0
    >>> round(float(pops.loc[0, 298.15]), 4)
    0.7335
    """

    def __init__(self, mol: Chem.Mol, table: pd.DataFrame, *, level: str,
                 charge: int = 0, multiplicity: int = 1, solvent: str | None = None,
                 provenance: list[dict] | None = None, name: str = ""):
        ids = [c.GetId() for c in mol.GetConformers()]
        if sorted(ids) != sorted(int(i) for i in table.index):
            raise InputError(f"ensemble table index {list(table.index)} does not match the "
                             f"molecule's conformer ids {ids}")
        for col in ("status", "reason", "degeneracy"):
            if col not in table.columns:
                raise InputError(f"ensemble table needs a {col!r} column")
        if f"energy_{level}" not in table.columns:
            raise InputError(f"ensemble has no energy column for level {level!r}; "
                             f"columns: {list(table.columns)}")
        # one atom index = one pro-R/pro-S proton in every conformer (confpop.nmr.identity)
        from .nmr.identity import consistent_proton_identity
        self._mol = consistent_proton_identity(mol)
        self._table = table.copy()
        self._table.index.name = "conformer"
        self.level = level
        self.charge = int(charge)
        self.multiplicity = int(multiplicity)
        self.solvent = solvent
        self.provenance = copy.deepcopy(list(provenance or []))
        self.name = name

    def __reduce__(self):
        # RDKit pickles coordinates in single precision and drops properties by default
        flags = Chem.PropertyPickleOptions.AllProps | Chem.PropertyPickleOptions.CoordsAsDouble
        return (_rebuild, (self._mol.ToBinary(flags), self._table, self.level, self.charge,
                           self.multiplicity, self.solvent, self.provenance, self.name))

    # ----------------------------------------------------------------- construction
    @classmethod
    def from_mol(cls, mol: Chem.Mol, energies=None, *, level: str = "input",
                 unit: str = "hartree", charge: int | None = None,
                 multiplicity: int | None = None, solvent: str | None = None,
                 degeneracy=None, name: str = "") -> "Ensemble":
        """An ensemble from a molecule's conformers and (optionally) one energy per conformer.

        Parameters
        ----------
        mol : rdkit.Chem.Mol
            With explicit hydrogens and at least one conformer.
        energies : sequence of float, optional
            One per conformer in conformer order, in ``unit``; all zero when missing (every
            conformer then gets the same population, scaled by degeneracy).
        """
        if not isinstance(mol, Chem.Mol):
            raise InputError(f"mol must be an RDKit Mol, got {type(mol).__name__}")
        n = mol.GetNumConformers()
        if n == 0:
            raise InputError("mol has no conformers; generate some with confpop.search")
        ids = [c.GetId() for c in mol.GetConformers()]
        if energies is None:
            values = np.zeros(n)
        else:
            values = np.asarray(energies, dtype=float).ravel()
            if values.size != n:
                raise InputError(f"energies must have one value per conformer ({n}), "
                                 f"got {values.size}")
            values = convert(values, unit, "hartree")
        deg = np.ones(n, dtype=int) if degeneracy is None else np.asarray(degeneracy, dtype=int)
        table = pd.DataFrame({"status": _STATUS_OK, "reason": "", "degeneracy": deg,
                              f"energy_{level}": values}, index=pd.Index(ids, name="conformer"))
        if charge is None:
            charge = mol.GetIntProp("charge") if mol.HasProp("charge") else Chem.GetFormalCharge(mol)
        if multiplicity is None:
            multiplicity = (mol.GetIntProp("multiplicity") if mol.HasProp("multiplicity")
                            else 1 + sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms()))
        return cls(mol, table, level=level, charge=charge, multiplicity=multiplicity,
                   solvent=solvent, name=name or (mol.GetProp("_Name") if mol.HasProp("_Name") else ""))

    def _replace(self, *, mol=None, table=None, level=None, step: dict | None = None,
                 solvent=None) -> "Ensemble":
        prov = list(self.provenance)
        if step is not None:
            prov.append(step)
        return Ensemble(self._mol if mol is None else mol,
                        self._table if table is None else table,
                        level=self.level if level is None else level,
                        charge=self.charge, multiplicity=self.multiplicity,
                        solvent=self.solvent if solvent is None else solvent,
                        provenance=prov, name=self.name)

    # ----------------------------------------------------------------- views
    @property
    def mol(self) -> Chem.Mol:
        """A copy of the RDKit molecule; its conformer ids match the table index."""
        return Chem.Mol(self._mol)

    @property
    def method(self) -> str:
        """The level of theory that ranks the conformers."""
        return self.level

    @property
    def levels(self) -> list[str]:
        """Every level with an energy column, in the order they were added."""
        return [c[len("energy_"):] for c in self._table.columns if c.startswith("energy_")]

    def ids(self, active: bool = True) -> list[int]:
        """Conformer ids; with ``active`` only those whose status is "ok"."""
        if not active:
            return [int(i) for i in self._table.index]
        return [int(i) for i in self._table.index[self._table["status"] == _STATUS_OK]]

    def __len__(self) -> int:
        return int((self._table["status"] == _STATUS_OK).sum())

    @property
    def degeneracy(self) -> pd.Series:
        """Degeneracy of each active conformer (2 for a merged mirror-image pair)."""
        return self._table.loc[self.ids(), "degeneracy"].astype(int).copy()

    def positions(self, conf_id: int) -> np.ndarray:
        """Coordinates of one conformer, (n_atoms, 3) angstrom (a copy)."""
        try:
            return np.array(self._mol.GetConformer(int(conf_id)).GetPositions())
        except ValueError:
            raise InputError(f"conf_id must be one of {self.ids(active=False)}, got {conf_id}") from None

    def column(self, name: str) -> pd.Series:
        """A raw table column (all rows, stored units)."""
        if name not in self._table.columns:
            raise InputError(f"ensemble has no column {name!r}; columns: {list(self._table.columns)}")
        return self._table[name].copy()

    @property
    def raw_table(self) -> pd.DataFrame:
        """The stored table (hartree), a copy."""
        return self._table.copy()

    def table(self, unit: str = "kcal/mol") -> pd.DataFrame:
        """Energies (in ``unit``), relative energy at the ranking level, degeneracy, status.

        Every ``energy_<level>`` column is shown relative to the lowest active conformer at
        that level (absolute hartree values stay in :attr:`raw_table`); ``gcorr_``/``hcorr_``
        corrections and ``zpe`` are converted but not shifted, ``entropy_`` columns are in
        ``unit``/K. ``species`` numbers the sets of conformers that interconvert fast on the
        NMR time scale (0 holds the lowest conformer; see :mod:`confpop.species`) and
        ``species_label`` names the slow bonds' states. Rows are sorted by relative energy;
        failed conformers come last with their reason.
        """
        unit = normalize_unit(unit)
        out = self._table.copy()
        active = out["status"] == _STATUS_OK
        for c in [c for c in out.columns if c.startswith("entropy_")]:  # hartree/K -> unit/K
            out[c] = convert(out[c].to_numpy(dtype=float), "hartree", unit)
        for c in [c for c in out.columns if c.startswith(("energy_", "gcorr_", "hcorr_"))
                  or c == "zpe"]:
            values = convert(out[c].to_numpy(dtype=float), "hartree", unit)
            if c.startswith("energy_") and active.any():
                values = values - np.nanmin(np.where(active, values, np.nan)) \
                    if np.isfinite(np.where(active, values, np.nan)).any() else values
            out[c] = values
        ref = out.loc[active, f"energy_{self.level}"].min() if active.any() else np.nan
        if "species" not in out.columns:  # conformers that exchange slowly on the NMR time scale
            from .species import species_table
            out = out.join(species_table(self))
        out.insert(0, "relative_energy", out[f"energy_{self.level}"] - ref)
        out.loc[~active, "relative_energy"] = np.nan
        out.attrs["unit"] = unit
        return out.sort_values(["relative_energy"], na_position="last")

    # ----------------------------------------------------------------- energies & populations
    def _energy_matrix(self, temps: list[float], energy: str) -> np.ndarray:
        """(n_T, n_active) energies in hartree for the chosen kind of energy."""
        ids = self.ids()
        t = self._table.loc[ids]
        kind = energy.lower()
        base_col = f"energy_{self.level}"
        if kind in ("auto", "electronic", "e"):
            return np.tile(t[base_col].to_numpy(dtype=float), (len(temps), 1))
        if kind in ("free", "g", "enthalpy", "h", "dft+free", "dft+g"):
            prefix = "hcorr_" if kind in ("enthalpy", "h") else "gcorr_"
            base = t["energy_dft"] if kind.startswith("dft") else t[base_col]
            if kind.startswith("dft") and "energy_dft" not in t.columns:
                raise InputError("energy='dft+free' needs DFT energies; run ens.rescore('dft') first")
            rows = []
            for temp in temps:
                col = prefix + temperature_key(temp)
                if col not in t.columns:
                    have = sorted(float(c[len(prefix):]) for c in t.columns if c.startswith(prefix))
                    raise InputError(
                        f"no {'enthalpy' if prefix == 'hcorr_' else 'free-energy'} correction at "
                        f"{temp} K; computed at {have or 'no temperature'}: run "
                        f"ens.add_free_energies(temperatures=[...]) with this temperature")
                rows.append(base.to_numpy(dtype=float) + t[col].to_numpy(dtype=float))
            return np.array(rows)
        col = energy if energy.startswith("energy_") else f"energy_{energy}"
        if col not in t.columns:
            raise InputError(f"energy must be 'auto', 'free', 'enthalpy', 'dft+free' or one of "
                             f"the levels {self.levels}, got {energy!r}")
        return np.tile(t[col].to_numpy(dtype=float), (len(temps), 1))

    def _check_active(self):
        if len(self) == 0:
            raise InputError("ensemble has no active conformers (all failed or were removed); "
                             "see ens.table() for the reasons")

    def energies(self, unit: str = "kcal/mol", energy: str = "auto",
                 temperature: float = 298.15) -> pd.Series:
        """Relative energies of the active conformers (the minimum is 0), in ``unit``."""
        self._check_active()
        e = self._energy_matrix(thermo.check_temperatures(temperature), energy)[0]
        return pd.Series(convert(e - e.min(), "hartree", unit), index=pd.Index(self.ids(), name="conformer"),
                         name="relative_energy")

    def populations(self, temperatures, energy: str = "auto") -> pd.DataFrame:
        """Boltzmann populations of the active conformers, degeneracy included.

        Parameters
        ----------
        temperatures : float or sequence of float, K
        energy : str
            "auto" (electronic energy at the ranking level), "free" (E + G_corr(T), needs
            :meth:`add_free_energies`), "enthalpy", "dft+free", or a level name.

        Returns
        -------
        pandas.DataFrame
            Index: conformer id; one column per temperature (float key); columns sum to 1.
        """
        self._check_active()
        temps = thermo.check_temperatures(temperatures)
        e = self._energy_matrix(temps, energy)
        g = self.degeneracy.to_numpy()
        weights = np.vstack([thermo.boltzmann_weights(e[k], temps[k], unit="hartree", degeneracy=g)
                             for k in range(len(temps))])
        return pd.DataFrame(weights.T, index=pd.Index(self.ids(), name="conformer"), columns=temps)

    def free_energy_gaps(self, temperature: float = 298.15, unit: str = "kcal/mol",
                         energy: str = "auto") -> pd.DataFrame:
        """Per-conformer gap to the lowest one, and the effective gap including degeneracy.

        ``gap`` is G_i - G_min of one structure; ``effective_gap`` = gap - RT ln g_i is the gap
        that reproduces the row's population (a doubly degenerate row counts twice).
        """
        self._check_active()
        e = self.energies(unit=unit, energy=energy, temperature=temperature)
        rt = thermo_rt(temperature, unit)
        g = self.degeneracy
        eff = e - rt * np.log(g.to_numpy())
        return pd.DataFrame({"gap": e, "degeneracy": g, "effective_gap": eff - eff.min()})

    def effective_count(self, temperature: float = 298.15, energy: str = "auto") -> float:
        """Kish effective number of conformers, 1/Σp² (1 when one conformer dominates)."""
        pops = self.populations([temperature], energy=energy)
        return float(thermo.effective_conformer_count(pops.iloc[:, 0].to_numpy()))

    def species(self, temperatures=298.15, energy: str = "auto", within: bool = False) -> pd.DataFrame:
        """Shares of the species (conformer sets separated by slow bond rotations), or with
        ``within`` the conformer populations normalized within each species; see
        :mod:`confpop.species`."""
        from .species import species_populations, within_species_populations
        if within:
            return within_species_populations(self, temperatures, energy=energy)
        return species_populations(self, temperatures, energy=energy)

    # ----------------------------------------------------------------- derived ensembles
    def with_column(self, name: str, values, step: dict | None = None) -> "Ensemble":
        """A new ensemble with one more (or a replaced) column, given per conformer id."""
        table = self._table.copy()
        series = pd.Series(values) if isinstance(values, dict) else values
        if isinstance(series, pd.Series):
            table[name] = series.reindex(table.index)
        else:
            table[name] = list(values)
        return self._replace(table=table, step=step)

    def with_level(self, level: str) -> "Ensemble":
        """The same ensemble ranked by another level (an ``energy_<level>`` column)."""
        return self._replace(level=level)

    def select(self, conf_ids: Iterable[int], step: dict | None = None) -> "Ensemble":
        """A new ensemble holding only ``conf_ids`` (rows and conformers)."""
        keep = [int(i) for i in conf_ids]
        missing = set(keep) - set(self.ids(active=False))
        if missing:
            raise InputError(f"conformer ids {sorted(missing)} are not in this ensemble")
        mol = Chem.Mol(self._mol)
        mol.RemoveAllConformers()
        for cid in keep:
            mol.AddConformer(Chem.Conformer(self._mol.GetConformer(cid)), assignId=False)
        return self._replace(mol=mol, table=self._table.loc[keep], step=step)

    # ----------------------------------------------------------------- methods from other modules
    def add_free_energies(self, *args, **kwargs) -> "Ensemble":
        """Per-conformer G(T) from harmonic frequencies; see :func:`confpop.freeenergy.add_free_energies`."""
        from .freeenergy import add_free_energies
        return add_free_energies(self, *args, **kwargs)

    def rescore(self, *args, **kwargs) -> "Ensemble":
        """Single points at another level; see :func:`confpop.freeenergy.rescore`."""
        from .freeenergy import rescore
        return rescore(self, *args, **kwargs)

    def interconversion(self, i: int, j: int, **kwargs):
        """Scan the torsion that turns conformer i into j; see :func:`confpop.torsion.interconversion`."""
        from .torsion import interconversion
        return interconversion(self, i, j, **kwargs)

    def to_sdf(self, path) -> None:
        """Write one SD record per conformer; see :func:`confpop.io.write_sdf`."""
        from .writing import write_sdf
        write_sdf(self, path)

    def to_csv(self, path, temperatures=(298.15,)) -> None:
        """Write the table with populations; see :func:`confpop.io.write_csv`."""
        from .writing import write_csv
        write_csv(self, path, temperatures)

    def to_json(self, path=None, temperatures=(298.15,)):
        """The ensemble as JSON (returned as a string when ``path`` is None)."""
        from .writing import ensemble_json
        import json
        text = json.dumps(ensemble_json(self, temperatures), indent=2)
        if path is None:
            return text
        with open(path, "w") as fh:
            fh.write(text + "\n")

    # ----------------------------------------------------------------- display
    def _summary_frame(self, temperature: float = 298.15) -> pd.DataFrame:
        t = self.table()
        if len(self):
            pops = self.populations([temperature])[temperature]
            t["population"] = pops.reindex(t.index)
        cols = ["relative_energy", "degeneracy", "population", "status", "reason"]
        return t[[c for c in cols if c in t.columns]]

    def __repr__(self) -> str:
        smiles = Chem.MolToSmiles(Chem.RemoveHs(self._mol)) if self._mol.GetNumAtoms() else ""
        n_fail = len(self._table) - len(self)
        head = (f"<Ensemble {self.name or smiles}: {len(self)} conformers"
                f"{f' (+{n_fail} failed)' if n_fail else ''}, level {self.level}"
                f"{', ' + self.solvent if self.solvent else ''}>")
        if not len(self):
            return head
        return head + "\n" + self._summary_frame().head(10).to_string(float_format=lambda x: f"{x:.3f}")

    def _repr_html_(self) -> str:
        from .views import ensemble_html  # kcal/mol, populations at 298.15 K, torsions
        return ensemble_html(self)


def _rebuild(binary, table, level, charge, multiplicity, solvent, provenance, name) -> Ensemble:
    return Ensemble(Chem.Mol(binary), table, level=level, charge=charge, multiplicity=multiplicity,
                    solvent=solvent, provenance=provenance, name=name)


def thermo_rt(temperature: float, unit: str = "kcal/mol") -> float:
    """RT in ``unit``."""
    from .units import gas_constant
    return gas_constant(unit) * float(temperature)


