"""Population-averaged proton-proton distances for NOE comparison, and averaged dipole moments.

Distances are averaged the way the NOE sees them, not arithmetically:

- ``averaging="r-6"`` (default): conformers exchanging more slowly than the molecule tumbles
  each contribute their own cross-relaxation, r_eff = (sum_i p_i r_i^-6)^(-1/6).
- ``averaging="r-3"``: internal motion faster than tumbling, r_eff = (sum_i p_i r_i^-3)^(-1/3).

Equivalent protons (a methyl group, the two ortho protons of a freely rotating phenyl) give
one signal whose NOE is the sum of the contributions of its protons. For proton groups A and
B the per-conformer group quantity is the **sum** over all proton pairs,
s_i = sum_{a in A, b in B} r_ab,i^-6 (no division by the number of pairs), so a methyl
appears closer than any one of its protons; the group's effective distance in a conformer is
s_i^(-1/6). With r^-6 averaging r_eff = (sum_i p_i s_i)^(-1/6); with r^-3 averaging the group
distance s_i^(-1/6) of each conformer enters as (sum_i p_i s_i^(1/2))^(-1/3).

References
----------
J. Tropp, J. Chem. Phys. 1980, 72, 6035, doi:10.1063/1.439059 [from memory: r^-6 / r^-3
averaging and methyl-group treatment].
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import InputError
from .couplings import _mol_and_ids, _positions, proton_groups

__all__ = ["noe_distances", "group_distance_matrix", "average_dipole"]

_AVERAGING = ("r-6", "r-3")


def _group_pairs(mol, groups, pairs):
    """Pairs of group indices: all distinct groups (pairs None) or those holding the atoms."""
    gidx = {h: k for k, g in enumerate(groups) for h in g.atoms}
    if pairs is None:
        n = len(groups)
        return [(i, j) for i in range(n) for j in range(i + 1, n)]
    out = []
    for pair in pairs:
        try:
            a, b = (int(v) for v in pair)
        except (TypeError, ValueError):
            raise InputError(f"pairs must be (atom_a, atom_b) index pairs, got {pair!r}") from None
        for atom in (a, b):
            if atom not in gidx:
                raise InputError(f"atom {atom} is not a hydrogen of this molecule "
                                 f"(pairs take 0-based hydrogen indices)")
        ga, gb = sorted((gidx[a], gidx[b]))
        if ga == gb:
            raise InputError(f"atoms {a} and {b} are equivalent protons ({groups[ga].label}); "
                             "they give no NOE between distinct signals")
        if (ga, gb) not in out:
            out.append((ga, gb))
    return out


def group_distance_matrix(positions: np.ndarray, group_a, group_b) -> np.ndarray:
    """Per-conformer group sum s = sum_{a,b} r_ab^-6 (angstrom^-6) for two proton groups.

    Parameters
    ----------
    positions : (n_conformers, n_atoms, 3) array, angstrom
    group_a, group_b : sequence of int

    Returns
    -------
    (n_conformers,) array
    """
    pa = positions[:, list(group_a)][:, :, None, :]
    pb = positions[:, list(group_b)][:, None, :, :]
    r = np.linalg.norm(pa - pb, axis=-1)
    if np.any(r < 1e-6):
        raise InputError("two protons sit on the same position in a conformer")
    return np.sum(r ** -6.0, axis=(1, 2))


def _effective(s: np.ndarray, weights: np.ndarray, averaging: str) -> np.ndarray:
    """s: (n_pairs, n_conf) r^-6 sums; weights (n_conf, n_T) -> (n_pairs, n_T) angstrom."""
    if averaging == "r-6":
        return (s @ weights) ** (-1.0 / 6.0)
    return (np.sqrt(s) @ weights) ** (-1.0 / 3.0)


def noe_distances(ens, temperatures, pairs=None, cutoff: float = 5.0, averaging: str = "r-6",
                  energy: str = "auto", populations=None, species: bool = True) -> pd.DataFrame:
    """Population-averaged effective H-H distances for NOE comparison.

    Parameters
    ----------
    ens : Ensemble or rdkit.Chem.Mol
        A molecule with conformers needs ``populations``.
    temperatures : float or sequence of float, K
    pairs : sequence of (atom_a, atom_b), optional
        0-based hydrogen indices; each atom stands for its group of equivalent protons.
        None: every pair of distinct proton groups whose r_eff at the first temperature is
        below ``cutoff``.
    cutoff : float, angstrom
        Only used when ``pairs`` is None.
    averaging : {"r-6", "r-3"}
    energy : str
        Passed to ``ens.populations``.
    populations : pandas.DataFrame, optional
        Conformer id x temperature weights to use instead of ``ens.populations`` (used as
        given: no species split).
    species : bool
        True (default): average within each species (conformers across a slow amide or
        biaryl rotation, see :mod:`confpop.species`); one block of rows per species.

    Returns
    -------
    pandas.DataFrame
        One row per pair of proton groups (and species): ``atom_a``, ``atom_b`` (lowest index
        of each group), ``group_a``, ``group_b`` (labels), ``n_a``, ``n_b`` (protons per
        group), ``species`` (0 when there is one), then one float-keyed column per
        temperature with r_eff in angstrom. Sorted by species, then r_eff.

    Notes
    -----
    See the module docstring for the equations and the group (sum) convention.

    Examples
    --------
    Two conformers with one proton pair at 2.5 and 4.0 angstrom, equal populations:
    r_eff = (0.5 * 2.5^-6 + 0.5 * 4.0^-6)^(-1/6) = 2.779 angstrom (the short distance
    dominates).

    >>> s = np.array([[2.5 ** -6, 4.0 ** -6]])
    >>> round(float(_effective(s, np.array([[0.5], [0.5]]), "r-6")[0, 0]), 3)
    2.779
    """
    if averaging not in _AVERAGING:
        raise InputError(f"averaging must be one of {_AVERAGING}, got {averaging!r}")
    cutoff = float(cutoff)
    if not cutoff > 0:
        raise InputError(f"cutoff must be > 0 angstrom, got {cutoff}")
    mol, ids = _mol_and_ids(ens)
    own_weights = populations is None
    if populations is None:
        if not hasattr(ens, "populations"):
            raise InputError("a bare molecule needs populations= (conformer id x temperature)")
        populations = ens.populations(temperatures, energy=energy)
    weights_df = pd.DataFrame(populations)
    missing = set(int(i) for i in weights_df.index) - set(int(i) for i in ids)
    if missing:
        raise InputError(f"populations name conformers {sorted(missing)} that are not active")
    conf_ids = [int(i) for i in weights_df.index]
    weights = weights_df.to_numpy(dtype=float)
    pos = _positions(mol, conf_ids)
    groups = proton_groups(mol, conf_id=conf_ids[0])
    gpairs = _group_pairs(mol, groups, pairs)
    if not gpairs:
        raise InputError("the molecule has fewer than two groups of inequivalent protons")
    s = np.array([group_distance_matrix(pos, groups[i].atoms, groups[j].atoms) for i, j in gpairs])
    temps = [float(t) for t in weights_df.columns]
    split = None
    if species and own_weights:
        from .couplings import _species
        split = _species(ens, conf_ids)
    members = {0: np.ones(len(conf_ids), bool)} if split is None else \
        {int(v): (split.to_numpy() == v) for v in sorted(split.unique())}
    blocks = []
    for number, mask in members.items():
        w = weights * mask[:, None]
        w = w / w.sum(axis=0, keepdims=True)
        reff = _effective(s, w, averaging)
        out = pd.DataFrame({
            "atom_a": [groups[i].atoms[0] for i, _ in gpairs],
            "atom_b": [groups[j].atoms[0] for _, j in gpairs],
            "group_a": [groups[i].label for i, _ in gpairs],
            "group_b": [groups[j].label for _, j in gpairs],
            "n_a": [len(groups[i].atoms) for i, _ in gpairs],
            "n_b": [len(groups[j].atoms) for _, j in gpairs],
            "species": number,
        })
        for k, t in enumerate(temps):
            out[t] = reff[:, k]
        if pairs is None:
            out = out[out[temps[0]] < cutoff]
        blocks.append(out.sort_values(temps[0], kind="stable"))
    return pd.concat(blocks, ignore_index=True)


def average_dipole(ens, temperatures, energy: str = "auto") -> pd.DataFrame:
    """Population-averaged dipole moment from a per-conformer ``dipole_debye`` column.

    Parameters
    ----------
    ens : Ensemble
        With a ``dipole_debye`` table column (the magnitude |mu| of each conformer, debye).
    temperatures : float or sequence of float, K
    energy : str

    Returns
    -------
    pandas.DataFrame
        Index: temperature (K). Columns ``mean_dipole`` = sum_i p_i |mu_i| and
        ``rms_dipole`` = (sum_i p_i |mu_i|^2)^(1/2), both in debye. The rms value is what a
        dielectric (Debye/Guggenheim) measurement of a conformer mixture yields.

    Raises
    ------
    InputError
        If the ensemble has no ``dipole_debye`` column, or an active conformer has none.
    """
    columns = list(ens.raw_table.columns) if hasattr(ens, "raw_table") else []
    if "dipole_debye" in columns and not np.isfinite(
            ens.column("dipole_debye").to_numpy(dtype=float)).any():
        columns.remove("dipole_debye")  # present but empty: the method computed no dipoles
    if "dipole_debye" not in columns:
        raise InputError("the ensemble has no 'dipole_debye' column: dipole moments are "
                         "recorded by engines that compute them (e.g. GFN2-xTB); rescore with "
                         f"one of those first (columns present: {columns})")
    pops = ens.populations(temperatures, energy=energy)
    mu = ens.column("dipole_debye").reindex(pops.index).to_numpy(dtype=float)
    if np.any(~np.isfinite(mu)):
        bad = [int(i) for i, v in zip(pops.index, mu) if not np.isfinite(v)]
        raise InputError(f"conformers {bad} have no dipole_debye value (computed at a level "
                         "without dipole moments?)")
    w = pops.to_numpy(dtype=float)
    return pd.DataFrame({"mean_dipole": mu @ w, "rms_dipole": np.sqrt((mu ** 2) @ w)},
                        index=pd.Index([float(t) for t in pops.columns], name="temperature"))
