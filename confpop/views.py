"""Notebook views (``_repr_html_``) of confpop's results and the conformer table they share
with the HTML report.

A low-level module: it imports only :mod:`confpop.describe` and :mod:`confpop.schema`, so the
result classes (Ensemble, TorsionProfile, PopulationFit, BatchResult) can use it without an
import cycle. Atoms are numbered from 1, energies carry their unit, populations their
temperature.
"""

from __future__ import annotations

import html

import pandas as pd

from .describe import ID_CONVENTION, describe_conformers, one_based_labels
from .errors import InputError

__all__ = ["conformer_table", "ensemble_html", "profile_html", "fit_html", "batch_html"]


def conformer_table(ens, temps, free: bool) -> tuple[pd.DataFrame, list]:
    """The conformer table of the report and the notebook view: ΔE (ΔG), degeneracy,
    populations, distinguishing torsions (whole degrees), ring puckers, H-bonds, species;
    returns it with the names of its text columns."""
    desc = describe_conformers(ens)
    out = pd.DataFrame(index=pd.Index(ens.ids(), name="conformer"))
    out["ΔE kcal/mol"] = ens.energies("kcal/mol")
    if free:
        for t in temps:
            if f"gcorr_{t:.2f}" in ens.raw_table.columns:
                out[f"ΔG({t:g} K) kcal/mol"] = ens.energies("kcal/mol", energy="free", temperature=t)
    out["degeneracy"] = ens.degeneracy
    pops = ens.populations(temps)
    for t in temps:
        out[f"p({t:g} K)"] = pops[t]
    if free:
        try:
            gp = ens.populations(temps, energy="free")
            for t in temps:
                out[f"p_G({t:g} K)"] = gp[t]
        except InputError:
            pass
    text = []
    for t in desc.torsions:
        out[t.label + " °"] = pd.Series(t.values).round(0).astype("Int64")
    for c in desc.table.columns:
        if c.startswith("ring_"):
            out["ring " + c[5:]] = desc.table[c]
            text.append("ring " + c[5:])
    out["H-bonds"] = desc.table["hydrogen_bonds"].replace("", "-")
    text.append("H-bonds")
    shown = ens.table()
    if "species" in shown.columns and shown["species"].nunique() > 1:
        out["species"] = shown["species"]
    return out, text


def _frame_html(frame: pd.DataFrame, caption: str, digits: int = 3) -> str:
    body = frame.to_html(float_format=lambda x: f"{x:.{digits}f}", na_rep="", escape=True)
    return f"<div><p><b>{html.escape(caption)}</b></p>{body}</div>"


def ensemble_html(ens, temperature: float = 298.15, rows: int = 12) -> str:
    """Jupyter view of an Ensemble: ΔE in kcal/mol, populations at ``temperature`` (K),
    degeneracy, the distinguishing torsions (degrees, atoms numbered from 1), H-bonds."""
    from .schema import solvent_model

    first = next((p for p in ens.provenance if p.get("step") == "input"), {})
    model = solvent_model(first.get("method", ens.level), ens.solvent) or "gas phase"
    n_fail = len(ens.raw_table) - len(ens)
    caption = (f"Ensemble {ens.name}: {len(ens)} conformers"
               + (f" (+{n_fail} failed)" if n_fail else "")
               + f", level {ens.level}, {model}; populations at {float(temperature):g} K; "
               + ID_CONVENTION)
    if not len(ens):
        return f"<p><b>{html.escape(caption)}</b></p>"
    table, _ = conformer_table(ens, [float(temperature)], free=False)
    more = len(table) - rows
    out = _frame_html(table.head(rows), caption)
    if more > 0:
        out += f"<p>... {more} more conformers (ens.table())</p>"
    return out


def profile_html(profile) -> str:
    """Jupyter view of a TorsionProfile: minima, maxima and barriers in its unit."""
    kind = "relaxed" if profile.relaxed else "rigid"
    shown = (one_based_labels(profile.label) if profile.label
             else "atoms " + ", ".join(str(int(a) + 1) for a in profile.atoms))
    caption = (f"Torsion profile {shown}"
               f" (atoms numbered from 1; {kind}, {profile.method}); energies in {profile.unit}, "
               f"angles in degrees")
    parts = [_frame_html(profile.minima(), caption + " - minima", 2),
             _frame_html(profile.maxima(), "maxima", 2),
             _frame_html(profile.barriers(), f"barriers between neighbouring minima, {profile.unit}", 2)]
    return "".join(parts)


def fit_html(fit) -> str:
    """Jupyter view of a PopulationFit: fitted and Boltzmann populations, chi2."""
    caption = (f"Population fit at {fit.temperature:g} K to {fit.n_observations} observations: "
               f"chi2 {fit.chi2:.2f} (Boltzmann {fit.chi2_boltzmann:.2f}); implied ΔG in "
               f"{fit.unit}")
    out = _frame_html(fit.to_frame(), caption)
    if fit.warning:
        out += f"<p class='caution'>{html.escape(fit.warning)}</p>"
    return out


def batch_html(result) -> str:
    """Jupyter view of a BatchResult: one row per molecule."""
    caption = (f"Batch: {result.n_ok} ok, {result.n_failed} failed; temperatures "
               f"{', '.join(f'{t:g} K' for t in result.temperatures)}")
    return _frame_html(result.summary, caption)
