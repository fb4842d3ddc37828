"""Which candidate stereoisomer fits the measured shifts: DP4 probabilities.

The DP4 method (Smith & Goodman, J. Am. Chem. Soc. 2010, 132, 12946,
doi:10.1021/ja105035r) treats the error of each scaled computed shift as drawn from a
Student t distribution fitted to a large set of assigned structures, and gives candidate i
the probability

    P(i) = Π_k S(|e_ik| / σ_n) / Σ_j Π_k S(|e_jk| / σ_n),

where e_ik is the error of signal k for candidate i, n its nucleus and S the survival
function of the t distribution with ν_n degrees of freedom (the chance of an error at least
this large). Parameters (scaled shifts, from the paper's main text as quoted in a public
reimplementation, and as we remember them): 13C σ = 2.306 ppm, ν = 11.38; 1H σ = 0.185 ppm,
ν = 14.18. They were fitted to B3LYP/6-31G(d,p) GIAO shifts on MMFF geometries (from
memory); our level differs, so the probabilities are indicative: they rank candidates and
say how decisive the data are, and the README gives the measured errors to weigh them
against.

Scaling of each candidate's shifts (``scaling``):

``"candidate"``
    As in the paper: regress the candidate's computed shifts on the measured ones,
    δ_calc = a + b·δ_measured, and use δ_scaled = (δ_calc − a)/b. Removes a systematic
    error common to all signals; needs several distinct signals.
``"fixed"``
    Our linear scaling fitted to rigid molecules (:data:`confpop.nmr.shifts.SCALING`), no
    further fit. With two or three signals a per-candidate regression fits the data almost
    exactly and throws the information away.
``"auto"`` (default)
    "candidate" for a nucleus with at least 5 distinct measured signals, else "fixed"
    (common practice: a line through fewer points is too flexible).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import InputError

__all__ = ["DP4_PARAMETERS", "assignment_probabilities", "pairing_probabilities"]

#: Student t parameters of scaled-shift errors: nucleus -> (σ ppm, ν); Smith & Goodman 2010
DP4_PARAMETERS = {"13C": (2.306, 11.38), "1H": (0.185, 14.18)}

_MIN_SIGNALS_FOR_REGRESSION = 5


def _scale(pred: np.ndarray, meas: np.ndarray) -> np.ndarray:
    b, a = np.polyfit(meas, pred, 1)  # δ_calc = a + b δ_meas
    if not np.isfinite(b) or abs(b) < 1e-6:
        return pred
    return (pred - a) / b


def _log_likelihood(comparison, scaling, nuclei) -> float:
    total = 0.0
    for nucleus in nuclei:
        mask = (comparison["nucleus"] == nucleus).to_numpy()
        if not mask.any():
            continue
        meas = comparison.loc[mask, "measured_ppm"].to_numpy(float)
        pred = comparison.loc[mask, "predicted_ppm"].to_numpy(float)
        mode = scaling
        if mode == "auto":
            mode = "candidate" if len(np.unique(np.round(meas, 2))) >= \
                _MIN_SIGNALS_FOR_REGRESSION else "fixed"
        scaled = _scale(pred, meas) if mode == "candidate" else pred
        sigma, nu = DP4_PARAMETERS[nucleus]
        total += float(stats.t.logsf(np.abs(scaled - meas) / sigma, nu).sum())
    return total


def pairing_probabilities(comparisons: dict, *, scaling: str = "auto",
                          nuclei=("13C", "1H")) -> pd.DataFrame:
    """Which measured spectrum belongs to which candidate, when each was measured.

    When every candidate stereoisomer was made and measured, the question is the pairing:
    the DP4 likelihood of a pairing is the product of the likelihoods of its
    (candidate, spectrum) comparisons, and the pairings are normalized against each other
    (all one-to-one pairings, equal prior). A systematic error shared by the candidates (a
    computed methyl shift 3 ppm high in all of them) then cancels to first order, which it
    does not when one spectrum is compared with every candidate.

    Parameters
    ----------
    comparisons : dict
        (candidate name, spectrum name) -> DataFrame from
        :func:`confpop.nmr.shifts.compare_shifts`, for every candidate and spectrum.
    scaling, nuclei
        As for :func:`assignment_probabilities`.

    Returns
    -------
    pandas.DataFrame
        One row per pairing, most probable first: ``pairing`` (a tuple of "candidate =
        spectrum" strings) and ``probability`` (sums to 1).

    Examples
    --------
    >>> import pandas as pd
    >>> def comp(meas, pred):
    ...     return pd.DataFrame({"nucleus": ["13C"] * 2, "atom": [1, 2], "label": ["a", "b"],
    ...                          "measured_ppm": meas, "predicted_ppm": pred})
    >>> e, z = [17.6, 126.0], [12.1, 124.6]           # measured spectra
    >>> pe, pz = [21.0, 127.6], [14.9, 125.5]         # predictions, methyls 3 ppm high
    >>> table = pairing_probabilities({("E", "s1"): comp(e, pe), ("Z", "s1"): comp(e, pz),
    ...                                ("E", "s2"): comp(z, pe), ("Z", "s2"): comp(z, pz)})
    >>> table.iloc[0]["pairing"], round(float(table.iloc[0]["probability"]), 3)
    (('E = s1', 'Z = s2'), 0.992)
    """
    from itertools import permutations

    if scaling not in ("auto", "candidate", "fixed"):
        raise InputError(f"scaling must be 'auto', 'candidate' or 'fixed', got {scaling!r}")
    candidates = list(dict.fromkeys(c for c, _ in comparisons))
    spectra = list(dict.fromkeys(s for _, s in comparisons))
    if len(candidates) < 2 or len(candidates) != len(spectra):
        raise InputError(f"pairing needs as many spectra as candidates (at least two), got "
                         f"{len(candidates)} candidate(s) and {len(spectra)} spectrum/spectra")
    missing = [(c, s) for c in candidates for s in spectra if (c, s) not in comparisons]
    if missing:
        raise InputError(f"pairing needs every candidate compared with every spectrum; missing "
                         f"{missing[:3]}")
    nuclei = [n for n in nuclei if n in DP4_PARAMETERS]
    logs = {key: _log_likelihood(comp, scaling, nuclei) for key, comp in comparisons.items()}
    rows = []
    for perm in permutations(spectra):
        rows.append({"pairing": tuple(f"{c} = {s}" for c, s in zip(candidates, perm)),
                     "log": sum(logs[(c, s)] for c, s in zip(candidates, perm))})
    table = pd.DataFrame(rows)
    weights = np.exp(table["log"] - table["log"].max())
    table["probability"] = weights / weights.sum()
    table = table.drop(columns="log").sort_values("probability", ascending=False)
    return table.reset_index(drop=True)


def assignment_probabilities(comparisons: dict, *, scaling: str = "auto",
                             nuclei=("13C", "1H")) -> tuple[pd.DataFrame, pd.DataFrame]:
    """DP4 probability of each candidate from its predicted-vs-measured comparison.

    Parameters
    ----------
    comparisons : dict
        Candidate name -> DataFrame from :func:`confpop.nmr.shifts.compare_shifts`, all
        against the same measured signals (same rows in the same order).
    scaling : {"auto", "candidate", "fixed"}
        See the module notes.
    nuclei : sequence of {"13C", "1H"}
        Which nuclei enter the combined probability.

    Returns
    -------
    probabilities : pandas.DataFrame
        Index: candidate; columns ``P_13C``, ``P_1H`` (from one nucleus alone; NaN when it
        has no signals) and ``P_all`` (the product over the nuclei), each summing to 1, and
        ``mae_13C``/``mae_1H`` of the scaled shifts (ppm).
    contributions : pandas.DataFrame
        One row per candidate and signal: ``candidate``, ``nucleus``, ``atom``, ``label``,
        ``measured_ppm``, ``scaled_ppm``, ``error_ppm`` and ``log_term`` (ln S(|e|/σ): the
        signal's contribution to ln P before normalization; the most negative terms are
        the signals that speak against the candidate).

    Examples
    --------
    >>> import pandas as pd
    >>> meas = [10.0, 50.0, 90.0, 130.0, 170.0]
    >>> good = pd.DataFrame({"nucleus": ["13C"] * 5, "atom": [1, 2, 3, 4, 5], "label": list("abcde"),
    ...                      "measured_ppm": meas, "predicted_ppm": [11.0, 49.0, 91.0, 129.5, 170.2]})
    >>> bad = good.assign(predicted_ppm=[16.0, 46.0, 91.0, 126.0, 172.0])
    >>> p, _ = assignment_probabilities({"A": good, "B": bad})
    >>> round(float(p.loc["A", "P_all"]), 4)
    0.9997
    """
    if not isinstance(comparisons, dict) or len(comparisons) < 2:
        raise InputError("assignment needs at least two candidates (a dict name -> comparison)")
    if scaling not in ("auto", "candidate", "fixed"):
        raise InputError(f"scaling must be 'auto', 'candidate' or 'fixed', got {scaling!r}")
    nuclei = [n for n in nuclei if n in DP4_PARAMETERS]
    names = list(comparisons)
    first = comparisons[names[0]]
    for name in names[1:]:
        other = comparisons[name]
        if len(other) != len(first) or \
                list(other["atom"]) != list(first["atom"]) or \
                not np.allclose(other["measured_ppm"], first["measured_ppm"]):
            raise InputError(f"candidate {name!r} was compared with other measured shifts than "
                             f"{names[0]!r}; compare every candidate with the same file")
    logs = {name: {} for name in names}
    maes = {name: {} for name in names}
    rows = []
    for nucleus in ("13C", "1H"):
        mask = (first["nucleus"] == nucleus).to_numpy()
        if not mask.any():
            continue
        meas = first.loc[mask, "measured_ppm"].to_numpy(float)
        mode = scaling
        if mode == "auto":
            mode = "candidate" if len(np.unique(np.round(meas, 2))) >= \
                _MIN_SIGNALS_FOR_REGRESSION else "fixed"
        sigma, nu = DP4_PARAMETERS[nucleus]
        for name in names:
            comp = comparisons[name]
            pred = comp.loc[mask, "predicted_ppm"].to_numpy(float)
            scaled = _scale(pred, meas) if mode == "candidate" else pred
            err = scaled - meas
            terms = stats.t.logsf(np.abs(err) / sigma, nu)
            logs[name][nucleus] = float(terms.sum())
            maes[name][nucleus] = float(np.mean(np.abs(err)))
            for k, (lab, atom) in enumerate(zip(comp.loc[mask, "label"], comp.loc[mask, "atom"])):
                rows.append({"candidate": name, "nucleus": nucleus, "atom": int(atom),
                             "label": lab, "measured_ppm": float(meas[k]),
                             "scaled_ppm": float(scaled[k]), "error_ppm": float(err[k]),
                             "log_term": float(terms[k]), "scaling": mode})

    def normalize(values):
        v = np.asarray(values, float)
        v = np.exp(v - np.max(v))
        return v / v.sum()

    table = pd.DataFrame(index=pd.Index(names, name="candidate"))
    for nucleus in ("13C", "1H"):
        if all(nucleus in logs[n] for n in names):
            table[f"P_{nucleus}"] = normalize([logs[n][nucleus] for n in names])
        else:
            table[f"P_{nucleus}"] = np.nan
    used = [n for n in nuclei if all(n in logs[c] for c in names)]
    if not used:
        raise InputError(f"no measured shifts of the nuclei {list(nuclei)} to assign with")
    table["P_all"] = normalize([sum(logs[c][n] for n in used) for c in names])
    for nucleus in ("13C", "1H"):
        table[f"mae_{nucleus}"] = [maes[c].get(nucleus, np.nan) for c in names]
    table.attrs["nuclei_used"] = used
    return table, pd.DataFrame(rows)
