"""Conformer populations fitted to measured couplings and NOE distances.

The populations p (one per active conformer, p >= 0, sum p = 1) are chosen to minimise

    chi2(p) = sum_k ((sum_i A_ki p_i - y_k) / sigma_k)^2 + w * sum_i (p_i - q_i)^2

where row k of A holds the per-conformer prediction of observable k: the Karplus coupling
(averaged over the vicinal pairs between the two groups of equivalent protons the
observation names) or, for an NOE distance r, the group r^-6 sum so that the model stays
linear (y = r^-6, sigma propagated as 6 r^-7 sigma_r; with r^-3 averaging y = r^-3). The
optional prior q (the Boltzmann populations or any given ones) with weight w pulls an
ill-determined fit towards it. The problem is solved as non-negative least squares on a
system augmented with a heavily weighted sum-to-one row.

Bootstrap: parametric. The fitted predictions plus Gaussian noise of the stated sigmas are
refitted ``n_bootstrap`` times; the standard deviation of each population over those fits
is its uncertainty.

Underdetermined fits: when the number of conformers with distinct predictions exceeds the
number of independent observables (the rank of A with the sum rule), the populations are
not unique; the result then carries a ``warning`` and ``minimal_subset``, the smallest set
of conformers whose fit explains the data within the noise (chi2 <= the 95 % point of the
chi2 distribution with n_observations degrees of freedom), found by trying subsets of
increasing size (bounded by ``max_subset_evaluations`` fits). That subset is one of many
answers; what the data can determine is reported in ``families``: populations of rotamer
families (each rotatable torsion's staggered classes g+, g-, t, e.g. the gg / gt / tg
rotamers of a hydroxymethyl group), fitted directly with each family predicting the
Boltzmann-weighted mean of its conformers (the spread of predictions within a family is
added to sigma), with bootstrap uncertainties and a flag: determined when the smallest
singular value of the sigma-weighted family design, taken over the directions that keep the
populations summing to 1, is at least 2 (half a unit of population moved between families
in any way moves the predictions by at least one sigma) and the family model's chi2 is
within the 95 % point.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import InputError
from ..units import gas_constant, normalize_unit
from .couplings import (_coupling_matrix, _group_index, _mol_and_ids, _positions)
from .noe import group_distance_matrix

__all__ = ["Observation", "PopulationFit", "read_observations", "fit_populations"]

#: default measurement uncertainties: J in Hz (common practice: Karplus predictions are good
#: to about 0.5-1 Hz), NOE distances as a fraction of the distance (common practice ~10 %)
DEFAULT_J_SIGMA = 0.5
DEFAULT_NOE_FRACTION = 0.10

_KINDS = {"j": "J", "3j": "J", "coupling": "J", "noe": "noe", "distance": "noe"}


@dataclass(frozen=True)
class Observation:
    """One measured quantity.

    Attributes
    ----------
    kind : {"J", "noe"}
    atom_a, atom_b : int
        0-based hydrogen indices (any member of a group of equivalent protons).
    value : float
        Hz for "J", angstrom for "noe".
    sigma : float or None
        Uncertainty in the same unit; None takes the default.
    """

    kind: str
    atom_a: int
    atom_b: int
    value: float
    sigma: float | None = None


def _kind(value) -> str:
    key = str(value).strip().lower()
    if key not in _KINDS:
        raise InputError(f"observation kind must be 'J' or 'noe', got {value!r}")
    return _KINDS[key]


def _finite(value, what) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise InputError(f"{what} must be finite, got {value!r}")
    return v


def read_observations(observed) -> list[Observation]:
    """Normalise measured data into a list of :class:`Observation`.

    Parameters
    ----------
    observed : dict, pandas.DataFrame or sequence of Observation
        - dict: ``{(a, b): J_hz}``, ``{("J", a, b): J_hz}``, ``{("noe", a, b): r_angstrom}``;
          a value may be ``(value, sigma)``.
        - DataFrame (e.g. read from CSV): columns ``atom_a``, ``atom_b`` and either
          ``J_hz`` / ``distance_A`` or ``value`` with ``kind`` ("J"/"noe"); optional
          ``sigma`` / ``sigma_hz`` / ``sigma_A``.

    Raises
    ------
    InputError
        With the offending entry named.

    Examples
    --------
    >>> obs = read_observations({(3, 7): 6.9, ("noe", 3, 9): (2.6, 0.2)})
    >>> [(o.kind, o.atom_a, o.atom_b, o.value, o.sigma) for o in obs]
    [('J', 3, 7, 6.9, None), ('noe', 3, 9, 2.6, 0.2)]
    """
    out: list[Observation] = []
    if isinstance(observed, pd.DataFrame):
        cols = {c.lower(): c for c in observed.columns}
        for need in ("atom_a", "atom_b"):
            if need not in cols:
                raise InputError(f"observed table needs columns atom_a, atom_b and J_hz (or "
                                 f"kind + value); got {list(observed.columns)}")
        for k, row in observed.iterrows():
            def get(name):
                c = cols.get(name)
                return None if c is None or pd.isna(row[c]) else row[c]
            if get("kind") is not None:
                kind = _kind(get("kind"))
                value = get("value")
                if value is None:
                    value = get("j_hz") if kind == "J" else get("distance_a")
            elif get("j_hz") is not None:
                kind, value = "J", get("j_hz")
            elif get("distance_a") is not None:
                kind, value = "noe", get("distance_a")
            elif get("value") is not None:
                kind, value = "J", get("value")
            else:
                raise InputError(f"observed row {k} has no value (columns J_hz, distance_A "
                                 "or value)")
            sigma = get("sigma")
            if sigma is None:
                sigma = get("sigma_hz") if kind == "J" else get("sigma_a")
            out.append(_observation(kind, get("atom_a"), get("atom_b"), value, sigma, f"row {k}"))
        return out
    if isinstance(observed, dict):
        for key, val in observed.items():
            if isinstance(key, tuple) and len(key) == 3:
                kind, a, b = _kind(key[0]), key[1], key[2]
            elif isinstance(key, tuple) and len(key) == 2:
                kind, (a, b) = "J", key
            else:
                raise InputError(f"observed keys must be (atom_a, atom_b) or (kind, atom_a, "
                                 f"atom_b), got {key!r}")
            if isinstance(val, (tuple, list)):
                if len(val) != 2:
                    raise InputError(f"observed value for {key!r} must be a number or "
                                     f"(value, sigma), got {val!r}")
                value, sigma = val
            else:
                value, sigma = val, None
            out.append(_observation(kind, a, b, value, sigma, repr(key)))
        return out
    if isinstance(observed, (list, tuple)) and all(isinstance(o, Observation) for o in observed):
        return [_observation(o.kind, o.atom_a, o.atom_b, o.value, o.sigma, repr(o)) for o in observed]
    raise InputError(f"observed must be a dict, a DataFrame or a list of Observation, got "
                     f"{type(observed).__name__}")


def _observation(kind, a, b, value, sigma, where) -> Observation:
    try:
        ia, ib = int(a), int(b)
        # int() would truncate 1.5 to 1; a whole number written as 3.0 (a CSV column) is fine
        if isinstance(a, (bool, np.bool_)) or isinstance(b, (bool, np.bool_)) \
                or float(a) != ia or float(b) != ib:
            raise ValueError
    except (TypeError, ValueError):
        raise InputError(f"observation {where}: atom_a/atom_b must be whole-number atom "
                         f"indices, got {a!r}, {b!r}") from None
    v = _finite(value, f"observation {where} value")
    if kind == "noe" and v <= 0:
        raise InputError(f"observation {where}: an NOE distance must be > 0 angstrom, got {v}")
    s = None
    if sigma is not None:
        s = _finite(sigma, f"observation {where} sigma")
        if s <= 0:
            raise InputError(f"observation {where}: sigma must be > 0, got {s}")
    return Observation(kind, min(ia, ib), max(ia, ib), v, s)


@dataclass(frozen=True)
class PopulationFit:
    """The result of :func:`fit_populations`.

    Attributes
    ----------
    populations : pandas.Series
        Fitted population per conformer id (sums to 1).
    population_std : pandas.Series
        Bootstrap standard deviation of each population.
    boltzmann : pandas.Series
        The computed Boltzmann populations at ``temperature``, for comparison.
    free_energies : pandas.Series
        Implied relative free energy of each conformer (one structure, degeneracy removed),
        G_i - G_min = -RT ln[(p_i/g_i) / max_j(p_j/g_j)], in ``unit``; ``inf`` where the
        fitted population is zero.
    unit : str
        Unit of ``free_energies``.
    temperature : float, K
    chi2 : float
        sum_k ((predicted_k - observed_k) / sigma_k)^2 at the fitted populations (distances
        compared in angstrom), without the prior term.
    chi2_boltzmann : float
        The same at the Boltzmann populations.
    n_observations : int
    rms_deviation : float, Hz
        RMS of predicted - observed couplings (NaN when no coupling was observed).
    rms_distance : float, angstrom
        RMS of predicted - observed NOE distances (NaN when none).
    residuals : pandas.DataFrame
        One row per observation: ``kind``, ``atom_a``, ``atom_b``, ``group``, ``observed``,
        ``predicted``, ``boltzmann`` (prediction at the Boltzmann populations),
        ``residual`` (predicted - observed), ``sigma``, ``unit``.
    warning : str
        Empty when the data determine the populations; otherwise says why not.
    minimal_subset : tuple of int or None
        Smallest conformer subset explaining the data within the noise (None if none was
        found within the search bound).
    minimal_subset_chi2 : float
    bootstrap : (n_bootstrap, n_conformers) array
        The refitted populations (read-only).
    families : pandas.DataFrame
        Populations of rotamer families fitted directly: for each rotatable torsion (as
        listed by :func:`confpop.torsion.rotatable_torsions`) its staggered classes g+ (0 to
        120 degrees), g- (-120 to 0) and t (beyond +-120), each family predicting the
        Boltzmann-weighted mean of its conformers' observables. Columns ``torsion``,
        ``family``, ``n_conformers``, ``population`` (fitted), ``population_std``
        (parametric bootstrap, sigma widened by the spread of predictions within each
        family), ``boltzmann``, ``conformer_fit`` (the sum of the conformer-level fit),
        ``determined`` (the data fix every family population of this torsion and the family
        model explains them within the noise) and ``chi2``. When the conformer populations
        are not unique, the determined rows are the numbers to report.
    """

    populations: pd.Series
    population_std: pd.Series
    boltzmann: pd.Series
    free_energies: pd.Series
    unit: str
    temperature: float
    chi2: float
    chi2_boltzmann: float
    n_observations: int
    rms_deviation: float
    rms_distance: float
    residuals: pd.DataFrame
    warning: str
    minimal_subset: tuple | None
    minimal_subset_chi2: float
    bootstrap: np.ndarray = field(repr=False)
    families: pd.DataFrame | None = field(default=None, repr=False)

    def _repr_html_(self) -> str:
        from ..views import fit_html
        return fit_html(self)

    def to_frame(self) -> pd.DataFrame:
        """Per-conformer table: population, population_std, boltzmann, free_energy."""
        return pd.DataFrame({"population": self.populations, "population_std": self.population_std,
                             "boltzmann": self.boltzmann, "free_energy": self.free_energies})


# --------------------------------------------------------------------------- the linear model
def _design(ens, observations, parameters, averaging):
    """Rows of the model: A (n_obs, n_conf), y, sigma (linear space), metadata."""
    mol, ids = _mol_and_ids(ens)
    pairs, jmat, groups, gidx = _coupling_matrix(mol, ids, parameters)
    pos = None
    by_groups: dict[tuple, list[int]] = {}
    for k, p in enumerate(pairs):
        key = tuple(sorted((gidx[p.h_a], gidx[p.h_b])))
        by_groups.setdefault(key, []).append(k)
    rows, ys, sig, meta = [], [], [], []
    for o in observations:
        for atom in (o.atom_a, o.atom_b):
            if atom not in gidx:
                raise InputError(f"observation {o.kind} {o.atom_a}-{o.atom_b}: atom {atom} is "
                                 "not a hydrogen of this molecule (0-based indices)")
        ga, gb = sorted((gidx[o.atom_a], gidx[o.atom_b]))
        label = f"{groups[ga].label}–{groups[gb].label}"
        if ga == gb:
            raise InputError(f"observation {o.kind} {o.atom_a}-{o.atom_b}: the two protons are "
                             f"equivalent ({groups[ga].label}); nothing to compare")
        if o.kind == "J":
            members = by_groups.get((ga, gb))
            if not members:
                raise InputError(f"observed coupling {o.atom_a}-{o.atom_b} ({label}) is not a "
                                 "vicinal H-X-Y-H pair with a Karplus set; see "
                                 "confpop.nmr.vicinal_pairs(mol)")
            rows.append(jmat[members].mean(axis=0))
            ys.append(o.value)
            sig.append(o.sigma if o.sigma is not None else DEFAULT_J_SIGMA)
            meta.append((o, label, "Hz"))
        else:
            if pos is None:
                pos = _positions(mol, ids)
            s = group_distance_matrix(pos, groups[ga].atoms, groups[gb].atoms)
            sigma_r = o.sigma if o.sigma is not None else DEFAULT_NOE_FRACTION * o.value
            power = 6.0 if averaging == "r-6" else 3.0
            rows.append(s if averaging == "r-6" else np.sqrt(s))
            ys.append(o.value ** -power)
            sig.append(power * o.value ** (-power - 1.0) * sigma_r)
            meta.append((Observation(o.kind, o.atom_a, o.atom_b, o.value, sigma_r), label, "angstrom"))
    return ids, np.array(rows), np.array(ys), np.array(sig), meta


def _predict(a_row_space, p, meta, averaging):
    """Predictions in the observation's own unit (Hz, angstrom)."""
    lin = a_row_space @ p
    power = 6.0 if averaging == "r-6" else 3.0
    out = lin.copy()
    for k, (_, _, unit) in enumerate(meta):
        if unit == "angstrom":
            out[k] = lin[k] ** (-1.0 / power) if lin[k] > 0 else np.inf
    return out


def _chi2(pred, meta) -> float:
    obs = np.array([m[0].value for m in meta])
    sig = np.array([m[0].sigma if m[0].sigma is not None else DEFAULT_J_SIGMA for m in meta])
    return float(np.sum(((pred - obs) / sig) ** 2))


def _solve(aw, yw, prior=None, prior_weight=0.0, columns=None):
    """Non-negative least squares with sum(p) = 1 enforced by a heavy row; p over all columns."""
    n = aw.shape[1]
    cols = np.arange(n) if columns is None else np.asarray(columns)
    a = aw[:, cols]
    y = yw
    if prior is not None and prior_weight > 0:
        root = math.sqrt(prior_weight)
        a = np.vstack([a, root * np.eye(len(cols))])
        y = np.concatenate([y, root * prior[cols]])
    big = 1e3 * (1.0 + float(np.max(np.abs(a))) if a.size else 1.0)
    a = np.vstack([a, big * np.ones((1, len(cols)))])
    y = np.concatenate([y, [big]])
    from scipy import optimize  # lazily: scipy.optimize/stats cost ~0.3 s at import

    sol, _ = optimize.nnls(a, y, maxiter=50 * max(n, 10))
    total = sol.sum()
    if total <= 0:
        sol = np.full(len(cols), 1.0 / len(cols))
    else:
        sol = sol / total
    p = np.zeros(n)
    p[cols] = sol
    return p


def _distinct_columns(aw, tol=0.1):
    """Representative column indices (columns closer than tol sigma in every row merge)."""
    reps: list[int] = []
    members: dict[int, list[int]] = {}
    for i in range(aw.shape[1]):
        for r in reps:
            if np.max(np.abs(aw[:, i] - aw[:, r])) < tol:
                members[r].append(i)
                break
        else:
            reps.append(i)
            members[i] = [i]
    return reps, members


def fit_populations(ens, observed, temperature: float = 298.15, sigma=None, prior=None,
                    prior_weight: float = 1.0, n_bootstrap: int = 200, seed: int = 0,
                    parameters="auto", energy: str = "auto", averaging: str = "r-6",
                    unit: str = "kcal/mol", max_subset_evaluations: int = 20000,
                    species: int | None = None) -> PopulationFit:
    """Fit conformer populations to measured couplings (and NOE distances).

    Parameters
    ----------
    ens : Ensemble
    observed : dict, DataFrame or list of Observation
        See :func:`read_observations`. A coupling observed between members of two groups
        of equivalent protons is compared with the group average.
    temperature : float, K
        For the Boltzmann comparison, the prior and the implied free energies.
    sigma : float, optional
        Uncertainty (Hz) of every coupling without its own sigma; default 0.5 Hz. NOE
        distances without a sigma get 10 % of the distance.
    prior : None, "boltzmann" or pandas.Series
        Populations to regularise towards (by conformer id).
    prior_weight : float
        w in the objective (a full unit of population away from the prior costs w in chi2).
    n_bootstrap : int
        Parametric bootstrap refits (0 skips them; the std is then NaN).
    seed : int
        Seeds a private ``numpy.random.Generator``.
    parameters : see :func:`confpop.nmr.couplings`
    energy : str
        For the Boltzmann populations.
    averaging : {"r-6", "r-3"}
        NOE averaging.
    unit : str
        Unit of the implied free energies.
    max_subset_evaluations : int
        Bound on the number of subset fits when looking for ``minimal_subset``.
    species : int, optional
        Fit only the conformers of this species (see :mod:`confpop.species`): measured
        couplings belong to one signal set, and conformers across a slow bond rotation give
        another. None fits every conformer and, when the ensemble holds several species,
        says so in ``warning``.

    Returns
    -------
    PopulationFit

    Raises
    ------
    InputError
        For observations that name no vicinal pair / no hydrogen, or bad settings.
    """
    temperature = _finite(temperature, "temperature")
    if temperature <= 0:
        raise InputError(f"temperature must be > 0 K, got {temperature}")
    if averaging not in ("r-6", "r-3"):
        raise InputError(f"averaging must be 'r-6' or 'r-3', got {averaging!r}")
    unit = normalize_unit(unit)
    if int(n_bootstrap) < 0:
        raise InputError(f"n_bootstrap must be >= 0, got {n_bootstrap}")
    prior_weight = _finite(prior_weight, "prior_weight")
    if prior_weight < 0:
        raise InputError(f"prior_weight must be >= 0, got {prior_weight}")
    from ..species import species_table
    n_species = 1
    if hasattr(ens, "ids") and hasattr(ens, "select"):
        table = species_table(ens, ids=ens.ids())
        n_species = int(table["species"].nunique())
        if species is not None:
            keep = [int(i) for i in table.index[table["species"] == int(species)]]
            if not keep:
                raise InputError(f"species must be one of {sorted(table['species'].unique())}, "
                                 f"got {species!r}")
            ens = ens.select(keep)
    elif species is not None:
        raise InputError("species= needs a confpop Ensemble")
    observations = read_observations(observed)
    if not observations:
        raise InputError("observed is empty: give at least one measured coupling or distance")
    if sigma is not None:
        s = _finite(sigma, "sigma")
        if s <= 0:
            raise InputError(f"sigma must be > 0 Hz, got {s}")
        observations = [Observation(o.kind, o.atom_a, o.atom_b, o.value,
                                    o.sigma if o.sigma is not None or o.kind != "J" else s)
                        for o in observations]
    ids, a, y, sig, meta = _design(ens, observations, parameters, averaging)
    meta = [(Observation(o.kind, o.atom_a, o.atom_b, o.value,
                         o.sigma if o.sigma is not None else DEFAULT_J_SIGMA), lab, u)
            for o, lab, u in meta]
    aw = a / sig[:, None]
    yw = y / sig

    boltz = ens.populations([temperature], energy=energy).iloc[:, 0].reindex(ids).to_numpy(float)
    if prior is None:
        q = None
    elif isinstance(prior, str) and prior.lower() == "boltzmann":
        q = boltz
    else:
        q = pd.Series(prior, dtype=float).reindex(ids).to_numpy(float)
        if np.any(~np.isfinite(q)):
            raise InputError(f"prior must give a population for every active conformer {ids}")
    w = prior_weight if q is not None else 0.0

    p = _solve(aw, yw, q, w)
    pred = _predict(a, p, meta, averaging)
    pred_b = _predict(a, boltz, meta, averaging)
    chi2 = _chi2(pred, meta)

    # bootstrap (parametric, in the linear model space)
    rng = np.random.default_rng(seed)
    nb = int(n_bootstrap)
    boot = np.empty((nb, len(ids)))
    base = a @ p
    for k in range(nb):
        y_star = base + rng.normal(0.0, sig)
        boot[k] = _solve(aw, y_star / sig, q, w)
    boot.setflags(write=False)
    std = boot.std(axis=0, ddof=1) if nb > 1 else np.full(len(ids), np.nan)

    # identifiability
    reps, members = _distinct_columns(aw)
    aug = np.vstack([aw[:, reps], np.ones((1, len(reps)))])
    rank = int(np.linalg.matrix_rank(aug, tol=1e-6 * max(1.0, float(np.max(np.abs(aug))))))
    notes = []
    from .cautions import method_cautions, warn_cautions
    cautions = method_cautions(ens)
    warn_cautions(cautions)
    notes.extend("method caution: " + c.message for c in cautions)
    if species is None and n_species > 1:
        notes.append(f"the ensemble holds {n_species} species that exchange slowly on the NMR "
                     "time scale (separate signal sets); this fit pools them: pass species= "
                     "to fit the signal set the data belong to")
    if rank < len(reps):
        notes.append(f"underdetermined: {len(reps)} conformers predict distinct observables but "
                     f"the {len(observations)} observations and the sum rule give only {rank} "
                     f"independent constraints; the populations are not unique "
                     f"(see minimal_subset)")
    merged = [sorted(ids[i] for i in m) for m in members.values() if len(m) > 1]
    if merged:
        notes.append("conformers " + "; ".join(str(m) for m in merged) + " predict the same "
                     "observables within 0.1 sigma: only their summed population is determined")

    families = _families(ens, ids, a, y, sig, p, boltz, nb, seed)
    if rank < len(reps) and len(families):
        fixed = families[families["determined"]]
        if len(fixed):
            listing = ", ".join(
                f"{r.torsion} {r.family} {r.population:.2f}"
                + (f" ± {r.population_std:.2f}" if np.isfinite(r.population_std) else "")
                for r in fixed.itertuples())
            notes.append("the data do determine these rotamer-family populations: " + listing)
        else:
            notes.append("no rotamer-family population is determined by these data either")

    subset, subset_chi2 = _minimal_subset(aw, yw, a, meta, averaging, reps, ids,
                                          len(observations), max_subset_evaluations)
    if subset is None:
        notes.append("no conformer subset explains the data within the noise "
                     f"(best chi2 {chi2:.2f} for {len(observations)} observations)")

    # implied free energies (per structure)
    g = ens.degeneracy.reindex(ids).to_numpy(float)
    rt = gas_constant(unit) * temperature
    with np.errstate(divide="ignore"):
        per = np.log(p / g)
    ref = np.max(per)
    dg = np.where(p > 0, rt * (ref - per), np.inf) + 0.0  # + 0.0 turns -0.0 into 0.0

    obs_vals = np.array([m[0].value for m in meta])
    is_j = np.array([m[2] == "Hz" for m in meta])
    res = pred - obs_vals
    rms_j = float(np.sqrt(np.mean(res[is_j] ** 2))) if is_j.any() else float("nan")
    rms_r = float(np.sqrt(np.mean(res[~is_j] ** 2))) if (~is_j).any() else float("nan")
    residuals = pd.DataFrame({
        "kind": [m[0].kind for m in meta],
        "atom_a": [m[0].atom_a for m in meta],
        "atom_b": [m[0].atom_b for m in meta],
        "group": [m[1] for m in meta],
        "observed": obs_vals,
        "predicted": pred,
        "boltzmann": pred_b,
        "residual": res,
        "sigma": [m[0].sigma for m in meta],
        "unit": [m[2] for m in meta],
    })
    index = pd.Index(ids, name="conformer")
    return PopulationFit(
        populations=pd.Series(p, index=index, name="population"),
        population_std=pd.Series(std, index=index, name="population_std"),
        boltzmann=pd.Series(boltz, index=index, name="boltzmann"),
        free_energies=pd.Series(dg, index=index, name="free_energy"),
        unit=unit, temperature=temperature, chi2=chi2,
        chi2_boltzmann=_chi2(pred_b, meta), n_observations=len(observations),
        rms_deviation=rms_j, rms_distance=rms_r, residuals=residuals,
        warning="; ".join(notes), minimal_subset=subset,
        minimal_subset_chi2=subset_chi2, bootstrap=boot, families=families)


#: a rotamer-family fit is "determined" when every direction of the family populations moves
#: the predictions by at least one sigma per this much population (smallest singular value of
#: the sigma-weighted family design at least 1/UNDETERMINED_STD). A choice, not a law;
#: measured on the glucoside test (two J5,6 values, sigma 0.3 Hz): the hydroxymethyl families
#: give 16.8 (determined), the methyl-ether torsion, which those couplings do not see, 1.5
UNDETERMINED_STD = 0.5


def _family_fit(a, y, sig, members, q, nb, rng):
    """Fit family populations; a (n_obs, n_conf) linear design, members: list of boolean
    masks, q: within-family weights. Returns (pops, std, smallest singular value, chi2,
    n_obs)."""
    cols, spread = [], np.zeros(len(y))
    for m in members:
        w = q * m
        w = w / w.sum() if w.sum() > 0 else m / m.sum()
        col = a @ w
        cols.append(col)
        # within-family spread of each prediction, a model error added to sigma
        spread = np.maximum(spread, np.sqrt(np.maximum(((a - col[:, None]) ** 2) @ w, 0.0)))
    af = np.array(cols).T
    sig_eff = np.sqrt(sig ** 2 + spread ** 2)
    aw, yw = af / sig_eff[:, None], y / sig_eff
    pops = _solve(aw, yw)
    # directions that keep the sum at 1: an orthonormal basis of the complement of (1, ..., 1)
    basis = np.linalg.svd(np.ones((1, aw.shape[1])))[2][1:].T
    sing = np.linalg.svd(aw @ basis, compute_uv=False)
    chi2 = float(np.sum(((af @ pops - y) / sig_eff) ** 2))
    boot = np.array([_solve(aw, (af @ pops + rng.normal(0.0, sig_eff)) / sig_eff)
                     for _ in range(nb)])
    std = boot.std(axis=0, ddof=1) if nb > 1 else np.full(len(members), np.nan)
    return pops, std, float(sing.min()) if len(sing) >= len(members) - 1 else 0.0, chi2


def _families(ens, ids, a, y, sig, p, boltz, nb, seed) -> pd.DataFrame:
    """Rotamer-family populations fitted directly (one torsion at a time)."""
    from ..torsion import dihedral_angle, rotatable_torsions
    cols = ["torsion", "family", "n_conformers", "population", "population_std", "boltzmann",
            "conformer_fit", "determined", "chi2"]
    if not hasattr(ens, "positions"):
        return pd.DataFrame(columns=cols)
    rng = np.random.default_rng(seed)
    positions = {cid: ens.positions(cid) for cid in ids}
    from scipy import stats  # lazily (import time)

    limit = float(stats.chi2.ppf(0.95, max(len(y), 1)))
    rows = []
    for t in rotatable_torsions(ens.mol):
        angles = np.array([dihedral_angle(positions[cid], t.atoms) for cid in ids])
        classes = np.where(np.abs(angles) >= 120.0, "t", np.where(angles >= 0.0, "g+", "g-"))
        names = [f for f in ("g-", "g+", "t") if (classes == f).any()]
        members = [classes == f for f in names]
        if len(names) == 1:
            pops, std, smallest, chi2 = np.ones(1), np.zeros(1), np.inf, float("nan")
        else:
            pops, std, smallest, chi2 = _family_fit(a, y, sig, members, boltz, nb, rng)
        ok = bool(smallest >= 1.0 / UNDETERMINED_STD and not (chi2 > limit))
        for f, m, value, sd in zip(names, members, pops, std):
            rows.append({"torsion": t.label, "family": f, "n_conformers": int(m.sum()),
                         "population": float(value), "population_std": float(sd),
                         "boltzmann": float(boltz[m].sum()), "conformer_fit": float(p[m].sum()),
                         "determined": ok, "chi2": chi2})
    return pd.DataFrame(rows, columns=cols)


def _minimal_subset(aw, yw, a, meta, averaging, reps, ids, n_obs, budget):
    """Smallest subset of representative conformers with chi2 <= chi2_95(n_obs)."""
    from scipy import stats  # lazily (import time)

    limit = float(stats.chi2.ppf(0.95, n_obs))
    evaluations = 0
    for size in range(1, len(reps) + 1):
        best = None
        for combo in itertools.combinations(reps, size):
            evaluations += 1
            if evaluations > budget:
                return None, float("nan")
            p = _solve(aw, yw, columns=list(combo))
            c2 = _chi2(_predict(a, p, meta, averaging), meta)
            if c2 <= limit and (best is None or c2 < best[1]):
                best = (combo, c2)
        if best is not None:
            return tuple(int(ids[i]) for i in best[0]), float(best[1])
    return None, float("nan")
