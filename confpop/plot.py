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
    if path is not None:
        fig.savefig(path, dpi=150)


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
