"""Figures (matplotlib, imported inside each function; no pyplot state, safe without a display).

Every function returns a ``matplotlib.figure.Figure`` and, when ``path`` is given, also
writes it there (format from the file extension). Pass ``ax=`` to draw into an existing
axes instead of a new figure. Functions are independent of each other.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = ["coupling_parity_plot", "coupling_temperature_plot"]


def _figure(ax, size=(5.0, 4.5)):
    if ax is not None:
        return ax.figure, ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    FigureCanvasAgg(fig)
    return fig, fig.add_subplot(1, 1, 1)


def _save(fig, path):
    # under a temporary name, renamed when complete: a full disk leaves no partial figure
    if path is not None:
        from .outdir import atomic_write
        atomic_write(path, lambda temporary: fig.savefig(temporary, dpi=150,
                                                         metadata=_mark(temporary)))


def _mark(path) -> dict | None:
    """Figure metadata that tells a later run this file is confpop's (outdir.WRITTEN_MARK);
    only for the formats whose metadata matplotlib writes as plain text."""
    from pathlib import Path

    from .outdir import WRITTEN_MARK
    suffix = Path(path).suffix.lower()
    if suffix == ".png":
        return {"Software": WRITTEN_MARK}
    if suffix in (".pdf", ".svg", ".ps", ".eps"):
        return {"Creator": WRITTEN_MARK}
    return None


def coupling_parity_plot(fit, path=None, ax=None, show_boltzmann: bool = True,
                         title: str | None = None):
    """Predicted versus observed couplings of a population fit.

    Parameters
    ----------
    fit : PopulationFit or pandas.DataFrame
        A :func:`confpop.fit_populations` result, or a table with columns ``observed``,
        ``predicted`` (and optionally ``boltzmann``, ``sigma``, ``group``, ``kind``).
    path : str or path-like, optional
        Write the figure here.
    ax : matplotlib Axes, optional
    show_boltzmann : bool
        Also plot the predictions at the computed Boltzmann populations.
    title : str, optional
        E.g. the molecule, method and solvent model.

    Returns
    -------
    matplotlib.figure.Figure
    """
    table = fit.residuals if hasattr(fit, "residuals") else fit
    if not isinstance(table, pd.DataFrame) or not {"observed", "predicted"} <= set(table.columns):
        raise InputError("coupling_parity_plot needs a PopulationFit or a table with 'observed' "
                         "and 'predicted' columns")
    if "kind" in table.columns:
        table = table[table["kind"] == "J"]
    if table.empty:
        raise InputError("no coupling observations to plot")
    fig, ax = _figure(ax)
    obs = table["observed"].to_numpy(float)
    sig = table["sigma"].to_numpy(float) if "sigma" in table.columns else None
    ax.errorbar(obs, table["predicted"].to_numpy(float), xerr=sig, fmt="o", color="C0",
                capsize=3, label="fitted populations")
    if show_boltzmann and "boltzmann" in table.columns:
        ax.plot(obs, table["boltzmann"].to_numpy(float), "s", mfc="none", color="C1",
                label="Boltzmann populations")
    values = [obs, table["predicted"].to_numpy(float)]
    if show_boltzmann and "boltzmann" in table.columns:
        values.append(table["boltzmann"].to_numpy(float))
    values = np.concatenate(values)
    lo, hi = float(np.nanmin(values)) - 1.0, float(np.nanmax(values)) + 1.0
    ax.plot([lo, hi], [lo, hi], "k--", lw=0.8)
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    if "group" in table.columns:
        for x, y, text in zip(obs, table["predicted"], table["group"]):
            ax.annotate(str(text), (x, y), fontsize=6, xytext=(3, 3), textcoords="offset points")
    ax.set_xlabel("observed $^3J$ / Hz")
    ax.set_ylabel("predicted $^3J$ / Hz")
    ax.set_aspect("equal")
    ax.legend(fontsize=8)
    if title:
        ax.set_title(title, fontsize=8)
    _save(fig, path)
    return fig


def coupling_temperature_plot(averages: pd.DataFrame, path=None, ax=None, label_column=None,
                              title: str | None = None, spread: pd.DataFrame | None = None):
    """Averaged couplings against temperature, one line per pair (or group).

    Parameters
    ----------
    averages : pandas.DataFrame
        From :func:`confpop.average_couplings` (``by="pair"`` or ``"group"``): float columns
        are temperatures in K.
    path : str or path-like, optional
    ax : matplotlib Axes, optional
    label_column : str, optional
        Column naming each line; default "label" if present, else "group".
    title : str, optional
        E.g. the molecule, method and solvent model.
    spread : pandas.DataFrame, optional
        From :func:`confpop.coupling_spread` (same ``by``): the 5-95 % band of each line is
        shaded (the uncertainty from the energy error).

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not isinstance(averages, pd.DataFrame):
        raise InputError(f"averages must be a DataFrame from average_couplings, got "
                         f"{type(averages).__name__}")
    temps = sorted(c for c in averages.columns if isinstance(c, float))
    if not temps:
        raise InputError("averages has no temperature (float) columns; use average_couplings")
    if label_column is None:
        label_column = "label" if "label" in averages.columns else "group"
    fig, ax = _figure(ax, size=(6.0, 4.5))
    for k, (_, row) in enumerate(averages.iterrows()):
        color = f"C{k % 10}"
        ax.plot(temps, [row[t] for t in temps], "o-", ms=3, color=color,
                label=str(row[label_column]) if label_column in averages.columns else None)
        if spread is not None and label_column in spread.columns:
            band = spread[(spread[label_column] == row[label_column])
                          & (spread.get("species", row.get("species")) == row.get("species"))]
            band = band.sort_values("temperature")
            if len(band):
                ax.fill_between(band["temperature"].to_numpy(float), band["p05"].to_numpy(float),
                                band["p95"].to_numpy(float), color=color, alpha=0.2, lw=0)
    if spread is not None:
        ax.fill_between([], [], [], color="0.6", alpha=0.3, label="5-95 % from the energy error")
    if title:
        ax.set_title(title, fontsize=8)
    ax.set_xlabel("temperature / K")
    ax.set_ylabel(r"$\langle ^3J \rangle$ / Hz")
    if len(averages) <= 12:
        ax.legend(fontsize=6, loc="best")
    _save(fig, path)
    return fig


__all__ += ["plot_torsion_profile"]


def plot_torsion_profile(profile, path=None, ax=None, show_walks: bool = True,
                         annotate: bool = True, title: str | None = None):
    """A torsion profile: scan points, the periodic fit, minima, maxima and barriers.

    Parameters
    ----------
    profile : confpop.torsion.TorsionProfile
        From :func:`confpop.scan_torsion` or :meth:`TorsionProfile.from_energies`.
    path : str or path-like, optional
        Write the figure here.
    ax : matplotlib Axes, optional
    show_walks : bool
        Also draw the up and down walks where they differ (hysteresis).
    annotate : bool
        Label each maximum with its energy above the lowest minimum (so symmetric maxima get
        the same number) and draw the forward barrier from the preceding minimum as an arrow.
    title : str, optional
        Default: the profile's label, scan kind and method.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Filled circles are converged scan points, open red circles points that did not converge,
    diamonds points added at fitted extrema; the line is the Fourier fit. Downward triangles
    mark minima, upward triangles maxima; a vertical arrow at each maximum spans the forward
    barrier from the preceding minimum.
    """
    if not all(hasattr(profile, a) for a in ("angles", "energies", "energy_at", "barriers")):
        raise InputError(f"plot_torsion_profile needs a TorsionProfile, got "
                         f"{type(profile).__name__}")
    fig, ax = _figure(ax, size=(6.5, 5.2))
    unit = profile.unit
    phi = np.asarray(profile.angles, float)
    e = np.asarray(profile.energies, float)
    if profile.periodic:
        lo = float(profile.start)
        grid = np.linspace(lo, lo + 360.0, 721)
    else:
        grid = np.linspace(float(np.nanmin(phi)), float(np.nanmax(phi)), 361)
    ax.plot(grid, profile.energy_at(grid), "-", color="C0", lw=1.2, label="fit")
    conv = np.asarray(profile.converged, bool)
    refined = np.asarray(getattr(profile, "refined", np.zeros_like(conv)), bool)
    grid_pts = conv & ~refined
    ax.plot(phi[grid_pts], e[grid_pts], "o", color="C0", ms=4, label="scan points")
    if refined.any():
        ax.plot(phi[refined & conv], e[refined & conv], "D", color="C2", ms=4,
                label="added at extrema")
    if (~conv).any():
        ax.plot(phi[~conv], e[~conv], "o", mfc="none", color="C3", ms=6, label="not converged")
    if show_walks and profile.hysteresis:
        up = np.asarray(profile.energies_up, float)
        down = np.asarray(profile.energies_down, float)
        ax.plot(phi[~refined], up[~refined], ":", color="C1", lw=0.8, label="walk up")
        ax.plot(phi[~refined], down[~refined], "--", color="C4", lw=0.8, label="walk down")
        for k, (angle, _) in enumerate(profile.hysteresis):
            ax.axvline(angle, color="C3", lw=0.5, alpha=0.5,
                       label="walks differ (hysteresis)" if k == 0 else None)
    minima, maxima = profile.minima(), profile.maxima()
    if profile.periodic:  # an extremum at the left edge is also at the right edge
        minima = pd.concat([minima, minima[minima["angle"] < grid[0] + 1e-6].assign(
            angle=lambda d: d["angle"] + 360.0)])
        maxima = pd.concat([maxima, maxima[maxima["angle"] < grid[0] + 1e-6].assign(
            angle=lambda d: d["angle"] + 360.0)])
    if len(minima):
        ax.plot(minima["angle"], minima["energy"], "v", color="k", ms=7, label="minima")
    if len(maxima):
        ax.plot(maxima["angle"], maxima["energy"], "^", color="k", ms=7, label="maxima")
    if annotate:
        lowest = float(np.nanmin(minima["energy"])) if len(minima) else 0.0
        for k, (_, row) in enumerate(profile.barriers().iterrows()):
            x = float(row["via_max"])
            ax.annotate("", xy=(x, row["max_energy"]), xytext=(x, row["from_energy"]),
                        arrowprops={"arrowstyle": "<->", "color": "0.4", "lw": 0.8})
            ax.annotate(f"{row['max_energy'] - lowest:.2f}", (x, row["max_energy"]),
                        xytext=(0, 5), textcoords="offset points", ha="center", fontsize=7)
        ax.plot([], [], color="0.4", lw=0.8, label="barrier from the preceding minimum")
        ax.plot([], [], " ", label=f"numbers: maxima above the lowest minimum ({unit})")
    if profile.periodic:
        ax.set_xlim(grid[0], grid[-1])
        ax.set_xticks(np.arange(grid[0], grid[-1] + 1e-9, 60.0))
    kind = "relaxed" if profile.relaxed else "rigid"
    if title is None:
        title = f"{profile.label or tuple(profile.atoms)}  ({kind}, {profile.method or 'unstated method'})"
    ax.set_title(title, fontsize=9)
    ax.set_xlabel("dihedral angle / degree")
    ax.set_ylabel(f"relative energy / {unit}")
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, frameon=False)
    _save(fig, path)
    return fig


__all__ += ["ensemble_plot", "draw_conformers"]


def _ensemble_title(ens) -> str:
    from .schema import solvent_model

    first = next((p for p in ens.provenance if p.get("step") == "input"), {})
    model = solvent_model(first.get("method", ens.level), ens.solvent)
    return f"{ens.name or 'ensemble'}  ({ens.level}, {model or 'gas phase'})"


def ensemble_plot(ens, temperatures=(298.15,), path=None, top: int = 6):
    """Populations against temperature and the energy ladder of an ensemble.

    Parameters
    ----------
    ens : Ensemble
    temperatures : sequence of float, K
        Marked on the population curves; the curves span them (at least 250-350 K).
    path : str or path-like, optional
    top : int
        Conformers drawn (the most populated at the first temperature); the rest are summed.

    Returns
    -------
    matplotlib.figure.Figure
        Left: population of each of the top conformers from the ranking energy (lines) and at
        the asked temperatures (points). Right: relative energies (kcal/mol) as a ladder, each
        rung labelled with the conformer id and its population at the first temperature;
        with free energies at that temperature, a second ladder of ΔG.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    if not len(ens):
        raise InputError("ensemble has no active conformers to plot")
    temps = [float(t) for t in np.atleast_1d(temperatures)]
    lo, hi = min(min(temps), 250.0), max(max(temps), 350.0)
    grid = np.linspace(lo, hi, 60)
    curves = ens.populations(list(grid))
    at = ens.populations(temps)
    order = at[temps[0]].sort_values(ascending=False).index[:top]
    fig = Figure(figsize=(9.0, 4.2), layout="constrained")
    FigureCanvasAgg(fig)
    ax1, ax2 = fig.subplots(1, 2, width_ratios=[1.4, 1.0])
    for k, cid in enumerate(order):
        ax1.plot(grid, curves.loc[cid].to_numpy(float), "-", color=f"C{k}", label=f"conf {cid}")
        ax1.plot(temps, at.loc[cid, temps].to_numpy(float), "o", color=f"C{k}")
    rest = [c for c in curves.index if c not in set(order)]
    if rest:
        ax1.plot(grid, curves.loc[rest].sum().to_numpy(float), ":", color="0.5",
                 label=f"{len(rest)} others")
    ax1.set_xlabel("temperature / K")
    ax1.set_ylabel("population (fraction)")
    ax1.set_ylim(0, 1.02)
    ax1.legend(fontsize=7, loc="best")
    ax1.set_title("populations from the ranking energy", fontsize=9)
    ladders = {"ΔE": ens.energies("kcal/mol")}
    gcol = f"gcorr_{temps[0]:.2f}"
    if gcol in ens.raw_table.columns:
        ladders[f"ΔG({temps[0]:g} K)"] = ens.energies("kcal/mol", energy="free", temperature=temps[0])
    for x, (name, values) in enumerate(ladders.items()):
        for cid in order:
            k = list(order).index(cid)
            ax2.hlines(values[cid], x - 0.3, x + 0.3, color=f"C{k}", lw=2)
            ax2.annotate(f"{cid}: {at.loc[cid, temps[0]]:.2f}" if x == 0 else f"{cid}",
                         (x + 0.32, values[cid]), fontsize=7, va="center")
        for cid in rest:
            ax2.hlines(values[cid], x - 0.2, x + 0.2, color="0.7", lw=1)
    ax2.set_xticks(range(len(ladders)), list(ladders))
    ax2.set_xlim(-0.6, len(ladders) - 0.1 + 0.4)
    ax2.set_ylabel("relative energy / kcal/mol")
    ax2.set_title(f"energy ladder (labels: conformer: population at {temps[0]:g} K)", fontsize=8)
    fig.suptitle(_ensemble_title(ens), fontsize=10)
    _save(fig, path)
    return fig


_ELEMENT_COLORS = {"C": "0.25", "O": "red", "N": "blue", "S": "goldenrod", "F": "green",
                   "Cl": "green", "Br": "brown", "P": "orange", "H": "0.6"}


def draw_conformers(ens, top: int = 4, path=None, temperature: float = 298.15):
    """The most populated conformers as 3D projections, distinguishing torsions marked.

    Each conformer is superimposed on the first (heavy atoms) and projected onto the first
    conformer's two principal axes, so the panels share one view. Heavy atoms and polar
    hydrogens are drawn, atoms numbered from 1; the bonds of the distinguishing torsions
    (:func:`confpop.describe.distinguishing_torsions`) are drawn thick and coloured, and
    their values listed below each panel, with the hydrogen bonds dotted.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import LineCollection
    from matplotlib.colors import to_rgba_array
    from matplotlib.figure import Figure
    from rdkit import Chem
    from rdkit.Chem import rdMolAlign

    from .describe import atom_label, describe_conformers

    if not len(ens):
        raise InputError("ensemble has no active conformers to draw")
    pops = ens.populations([temperature])[float(temperature)]
    order = list(pops.sort_values(ascending=False).index[:top])
    desc = describe_conformers(ens)
    mol = Chem.Mol(ens.mol)
    heavy = [a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() > 1]
    shown = set(heavy) | {a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() == 1 and
                          a.GetNeighbors()[0].GetAtomicNum() in (7, 8, 16)}
    ref = order[0]
    xyz0 = mol.GetConformer(ref).GetPositions()
    center = xyz0[heavy].mean(axis=0)
    _, _, vt = np.linalg.svd(xyz0[heavy] - center)
    axes = vt[:2].T
    fig = Figure(figsize=(3.2 * len(order), 3.9), layout="constrained")
    FigureCanvasAgg(fig)
    panels = np.atleast_1d(fig.subplots(1, len(order)))
    bond_color = {t.bond: f"C{k}" for k, t in enumerate(desc.torsions[:4])}
    for ax, cid in zip(panels, order):
        if cid != ref:
            rdMolAlign.AlignMol(mol, mol, prbCid=int(cid), refCid=int(ref),
                                atomMap=[(a, a) for a in heavy])
        xyz = mol.GetConformer(int(cid)).GetPositions()
        p = (xyz - center) @ axes
        # one collection of bonds and one of atoms per panel (an artist per bond and per
        # atom made this picture 0.5 s of the README example's 3.8 s)
        segments, colors, widths = [], [], []
        for bond in mol.GetBonds():
            a, b = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
            if a not in shown or b not in shown:
                continue
            color = bond_color.get((a, b)) or bond_color.get((b, a))
            segments.append(p[[a, b]])
            colors.append(color or "0.35")
            widths.append(4 if color else 1.4)
        ax.add_collection(LineCollection(segments, colors=colors, linewidths=widths, zorder=1))
        hb = desc.hbonds[desc.hbonds["conformer"] == cid]
        for r in hb.itertuples():
            ax.plot(p[[r.hydrogen, r.acceptor], 0], p[[r.hydrogen, r.acceptor], 1], ":",
                    color="magenta", lw=1.5, zorder=1)
        atoms = sorted(shown)
        symbols = [mol.GetAtomWithIdx(a).GetSymbol() for a in atoms]
        # color=, not c=: grey levels given as strings ("0.25") must not be colour-mapped
        ax.scatter(p[atoms, 0], p[atoms, 1], s=[30 if sym != "H" else 12 for sym in symbols],
                   color=to_rgba_array([_ELEMENT_COLORS.get(sym, "purple") for sym in symbols]),
                   zorder=2)
        ax.autoscale_view()
        for a, sym in zip(atoms, symbols):
            if sym != "C" or len(heavy) <= 12:
                ax.annotate(atom_label(mol, a), (p[a, 0], p[a, 1]), fontsize=6,
                            xytext=(2, 2), textcoords="offset points")
        ax.set_aspect("equal")
        ax.set_xticks([])
        ax.set_yticks([])
        text = [f"{t.label} {t.values[cid]:.0f}°" for t in desc.torsions[:4]]
        text += [f"{r.label}" for r in hb.itertuples()]
        ax.set_title(f"conformer {cid}: p = {pops[cid]:.2f} at {temperature:g} K", fontsize=8)
        ax.set_xlabel("\n".join(text) or "no distinguishing torsion", fontsize=7)
    fig.suptitle(_ensemble_title(ens) + " - coloured bonds: distinguishing torsions; "
                 "dotted: H-bonds", fontsize=8)
    _save(fig, path)
    return fig
