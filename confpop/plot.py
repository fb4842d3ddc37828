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
        atomic_write(path, lambda temporary: fig.savefig(temporary, dpi=150))


def coupling_parity_plot(fit, path=None, ax=None, show_boltzmann: bool = True):
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
    _save(fig, path)
    return fig


def coupling_temperature_plot(averages: pd.DataFrame, path=None, ax=None, label_column=None):
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
    for _, row in averages.iterrows():
        ax.plot(temps, [row[t] for t in temps], "o-", ms=3,
                label=str(row[label_column]) if label_column in averages.columns else None)
    ax.set_xlabel("temperature / K")
    ax.set_ylabel(r"$\langle ^3J \rangle$ / Hz")
    if len(averages) <= 12:
        ax.legend(fontsize=6, loc="best")
    _save(fig, path)
    return fig


__all__ += ["plot_torsion_profile"]


def plot_torsion_profile(profile, path=None, ax=None, show_walks: bool = True,
                         annotate: bool = True):
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
        Label each barrier (forward value, in the profile's unit) at its maximum.

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
    fig, ax = _figure(ax, size=(6.0, 4.5))
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
        for angle, _ in profile.hysteresis:
            ax.axvline(angle, color="C3", lw=0.5, alpha=0.5)
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
        for _, row in profile.barriers().iterrows():
            x = float(row["via_max"])
            ax.annotate("", xy=(x, row["max_energy"]), xytext=(x, row["from_energy"]),
                        arrowprops={"arrowstyle": "<->", "color": "0.4", "lw": 0.8})
            ax.annotate(f"{row['barrier_forward']:.2f}", (x, row["max_energy"]),
                        xytext=(0, 5), textcoords="offset points", ha="center", fontsize=7)
    if profile.periodic:
        ax.set_xlim(grid[0], grid[-1])
        ax.set_xticks(np.arange(grid[0], grid[-1] + 1e-9, 60.0))
    kind = "relaxed" if profile.relaxed else "rigid"
    title = f"{profile.label or tuple(profile.atoms)}  ({kind}, {profile.method or 'unstated method'})"
    ax.set_title(title, fontsize=9)
    ax.set_xlabel("dihedral angle / degree")
    ax.set_ylabel(f"relative energy / {unit}")
    ax.legend(fontsize=7, loc="best")
    _save(fig, path)
    return fig
