"""One self-contained HTML report of an ensemble: the job, the cautions, the table, pictures,
and where computed free energies, couplings and rates.

The file needs no network and no other file: pictures are PNG embedded as base64 data URIs,
the style sheet is inline, there is no script. Atoms are numbered from 1 throughout.
"""

from __future__ import annotations

import base64
import html
import io

import numpy as np
import pandas as pd

from .describe import one_based_labels
from .errors import InputError
from .views import conformer_table

__all__ = ["report_html", "write_report", "one_based_labels"]

_STYLE = """
body{font-family:sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#222}
h1{font-size:1.4em}h2{font-size:1.15em;border-bottom:1px solid #ccc;margin-top:1.6em}
table{border-collapse:collapse;font-size:0.85em;margin:0.5em 0}
td,th{border:1px solid #ccc;padding:2px 6px;text-align:right}th{background:#f3f3f3}
td.t,th.t{text-align:left;white-space:nowrap}summary{cursor:pointer;margin:0.5em 0}.caution{background:#fff6e0;border-left:4px solid #e0a000;
padding:0.4em 0.8em;margin:0.4em 0}img{max-width:100%;height:auto;display:block;margin:0.5em 0}
dl{display:grid;grid-template-columns:max-content auto;gap:2px 12px}dt{font-weight:bold}
"""


def _png(fig) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _img(fig, alt: str) -> str:
    return f'<img src="{_png(fig)}" alt="{html.escape(alt)}">'


def _table(frame: pd.DataFrame, text_columns=()) -> str:
    head = "".join(f'<th class="{"t" if c in text_columns else ""}">{html.escape(str(c))}</th>'
                   for c in [frame.index.name or ""] + list(frame.columns))
    rows = []
    for idx, row in frame.iterrows():
        cells = [f"<td>{html.escape(str(idx))}</td>"]
        for c in frame.columns:
            v = row[c]
            if isinstance(v, (float, np.floating)):
                text = "" if pd.isna(v) else f"{v:.3f}" if abs(v) < 10 else f"{v:.1f}"
            else:
                text = str(v)
            cells.append(f'<td class="{"t" if c in text_columns else ""}">{html.escape(text)}</td>')
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


#: population share above which a conformer is in the report's main table (the rest are one
#: click away): 1 %, the level below which the method's 0.5-1.5 kcal/mol error makes a
#: population uncertain by a factor of several (the CLI caution)
_MAJOR = 0.01


def report_html(ens, *, temperatures=(298.15,), input_text: str | None = None,
                free_energy: bool = False, settings: dict | None = None, cautions=(),
                couplings: bool = True, profile=None, top: int = 4) -> str:
    """The report as one HTML string (see :func:`write_report`)."""
    from . import plot
    from .describe import DISTINGUISHING_DEGREES, ID_CONVENTION, LABEL_CONVENTION, STAR_NOTE
    from .writing import ensemble_json

    if not len(ens):
        raise InputError("the ensemble has no active conformers to report")
    temps = [float(t) for t in temperatures]
    payload = ensemble_json(ens, temps, input_text=input_text, settings=settings)
    title = html.escape(f"Conformer ensemble of {input_text or ens.name}")
    from .outdir import WRITTEN_MARK
    parts = [f"<!DOCTYPE html><!-- {WRITTEN_MARK} --><html lang='en'><head><meta charset='utf-8'>"
             f"<title>{title}</title><style>{_STYLE}</style></head><body><h1>{title}</h1>"]
    job = {"input": input_text or ens.name, "molecule (SMILES)": ens.name,
           "method": ens.level, "solvent": payload.get("solvent_model") or "gas phase",
           "temperatures": ", ".join(f"{t:g} K" for t in temps),
           "conformers": str(len(ens)),
           "effective number of conformers (Kish 1/Σp²)": "; ".join(
               f"{v:.2f} at {t} K" for t, v in payload["effective_conformers"].items()),
           "versions": ", ".join(f"{k} {v}" for k, v in payload["versions"].items() if v)}
    summary = next((p for p in ens.provenance if p.get("step") == "summary"), {})
    if "completeness" in summary:
        job["sampling completeness (Good-Turing)"] = f"{100 * summary['completeness']:.1f} %"
    if settings:
        job["settings"] = ", ".join(f"{k} {v}" for k, v in settings.items()
                                    if v not in (None, False))
    parts.append("<h2>Job</h2><dl>" + "".join(
        f"<dt>{html.escape(k)}</dt><dd>{html.escape(str(v))}</dd>" for k, v in job.items()) + "</dl>")
    parts.append("<h2>Cautions</h2>" + "".join(
        f"<p class='caution'>{html.escape(c)}</p>" for c in cautions))
    table, text_cols = conformer_table(ens, temps, free_energy)
    p0 = table[f"p({temps[0]:g} K)"]
    major = p0 >= _MAJOR
    parts.append(f"<h2>Which conformers matter</h2><p>{int(major.sum())} of {len(table)} "
                 f"conformers have a population of at least {100 * _MAJOR:g} % at "
                 f"{temps[0]:g} K and hold {100 * p0[major].sum():.0f} % of it; the effective "
                 f"number of conformers (Kish) is {payload['effective_conformers'][format(temps[0], 'g')]:.1f}."
                 "</p>" + _hbond_sentence(ens, p0) + _pucker_sentence(ens, p0))
    parts.append(_img(plot.ensemble_plot(ens, temps), "populations against temperature and energy ladder"))
    parts.append(_img(plot.draw_conformers(ens, top=top, temperature=temps[0]),
                      "the most populated conformers"))
    note = (f"<p>Energies relative to the lowest conformer; populations are fractions of 1 with "
            f"degeneracy included; dihedrals in degrees through the atoms named "
            f"({html.escape(LABEL_CONVENTION)}; {html.escape(ID_CONVENTION)}); only torsions that differ by more than "
            f"{DISTINGUISHING_DEGREES:g}° between conformers are listed"
            f"{'; ' + STAR_NOTE if any('*' in c for c in table.columns) else ''}.</p>")
    parts.append("<h2>Conformers</h2>" + note + _table(table[major], text_cols))
    if (~major).any():
        parts.append(f"<details><summary>the other {int((~major).sum())} conformers (below "
                     f"{100 * _MAJOR:g} % at {temps[0]:g} K, {100 * p0[~major].sum():.1f} % in "
                     f"all)</summary>{_table(table[~major], text_cols)}</details>")
    if couplings:
        parts.append(_couplings_section(ens, temps))
    if profile is not None:
        parts.append(_rates_section(profile, temps))
    parts.append(f"<p style='font-size:0.8em;color:#666'>Written by confpop "
                 f"{html.escape(str(payload['versions'].get('confpop')))}.</p></body></html>")
    return "\n".join(p for p in parts if p)


def _hbond_sentence(ens, populations) -> str:
    from .describe import describe_conformers

    shares = describe_conformers(ens).hydrogen_bond_shares(populations)
    if not shares:
        return "<p>No intramolecular hydrogen bond in any conformer.</p>"
    return ("<p>Intramolecular hydrogen bonds, with the share of the population in conformers "
            "that have them: " + html.escape("; ".join(f"{k} {100 * v:.0f} %" for k, v in shares.items()))
            + ".</p>")


def _pucker_sentence(ens, populations) -> str:
    from .describe import describe_conformers

    # a name may carry substituent positions after a comma ("chair, N3 ax"): names are
    # separated by "; " and rings by ". "
    parts = [f"ring {ring}: " + "; ".join(f"{name} {100 * share:.0f} %" for name, share in shares.items())
             for ring, shares in describe_conformers(ens).pucker_shares(populations).items()]
    if not parts:
        return ""
    from .describe import SIDE_CONVENTION

    sides = any(" toward " in part or " away from " in part for part in parts)
    return ("<p>Ring puckers (Cremer-Pople; ax/eq: axial or equatorial substituent, where it "
            "differs between conformers" + (f"; {SIDE_CONVENTION}" if sides else "")
            + "), with their share of the population: "
            + html.escape(". ".join(parts)) + ".</p>")


def _couplings_section(ens, temps) -> str:
    import warnings

    from . import nmr
    from .describe import LABEL_CONVENTION

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            table = nmr.average_couplings(ens, temps, by="group")
    except InputError:
        return ""
    if table.empty:
        return ""
    cols = [t for t in temps if t in table.columns]
    shown = pd.DataFrame({"pair": table["group"].map(one_based_labels).to_numpy(),
                          **{f"³J({t:g} K) / Hz": table[t].to_numpy(float) for t in cols},
                          "Karplus set": table["parameter_set"].to_numpy()})
    shown.index.name = "#"
    shown.index = shown.index + 1
    return ("<h2>Population-averaged vicinal couplings</h2><p>Karplus equations reproduce "
            f"measured couplings to about 0.5-1 Hz ({html.escape(LABEL_CONVENTION)}).</p>"
            + _table(shown, ("pair", "Karplus set")))


def _rates_section(profile, temps) -> str:
    from . import kinetics, plot

    rates = profile.rates(temps)
    frame = pd.DataFrame({"from/deg": rates["from_min"], "to/deg": rates["to_min"],
                          f"barrier/{profile.unit}": rates["barrier_forward"],
                          "T/K": rates["temperature"], "k/s⁻¹": rates["k_forward"],
                          "t½": [kinetics.format_duration(v) for v in rates["half_life_forward"]]})
    # the profile's own label numbers atoms from 0 (confpop.torsion); the report from 1
    shown = (one_based_labels(profile.label) if profile.label
             else "-".join(str(int(a) + 1) for a in profile.atoms))
    title = (f"{shown}  ({'relaxed' if profile.relaxed else 'rigid'}, "
             f"{profile.method or 'unstated method'}; atoms numbered from 1)")
    return (f"<h2>Torsion scan and rates: {html.escape(shown)}</h2>"
            + _img(plot.plot_torsion_profile(profile, title=title), "profile")
            + _table(frame, ("t½",)))


def write_report(ens, path, **kwargs) -> None:
    """Write :func:`report_html` to ``path`` (under a temporary name, then renamed)."""
    from .outdir import atomic_write

    text = report_html(ens, **kwargs)

    def write(temporary):
        with open(temporary, "w", encoding="utf-8") as fh:
            fh.write(text)
    atomic_write(path, write)
