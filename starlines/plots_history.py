"""Velocity-versus-time figure of one star across nights (from :meth:`Archive.epochs`).

Like :mod:`starlines.plots`: draws on ``ax`` when given, else on a new
:class:`matplotlib.figure.Figure` (Agg canvas, no pyplot), and returns the Axes.
"""

from __future__ import annotations

import math
import os

import numpy as np

__all__ = ["plot_velocity_history", "save_velocity_history"]

_USED = "#1f4e79"
_SKIPPED = "#999999"
_SECOND = "#c0392b"


def _column(epochs, name: str) -> np.ndarray:
    col = epochs[name]
    values = getattr(col, "value", col)
    return np.array([math.nan if v is None else float(v) for v in np.ma.filled(
        np.ma.asarray(values, dtype=float), np.nan)])


def plot_velocity_history(epochs, *, result=None, ax=None):
    """Plot the radial velocity of each epoch against time.

    Parameters
    ----------
    epochs : astropy.table.Table
        Output of :meth:`starlines.archive.Archive.epochs` (columns ``mjd_mid, rv, rv_err,
        rv2, used``; meta ``star``).
    result : VariabilityResult, optional
        Adds the weighted mean velocity and the verdict to the plot.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new Figure is made when None.

    Returns
    -------
    matplotlib.axes.Axes
    """
    if ax is None:
        from matplotlib.figure import Figure

        ax = Figure(figsize=(7.0, 3.5), layout="constrained").add_subplot()
    t = _column(epochs, "mjd_mid")
    xlabel = "MJD (mid-exposure)"
    if not np.isfinite(t).any():
        t, xlabel = np.arange(1.0, len(epochs) + 1), "epoch"
    rv, err, rv2 = (_column(epochs, c) for c in ("rv", "rv_err", "rv2"))
    used = np.asarray(epochs["used"], dtype=bool)
    err = np.where(np.isfinite(err), err, 0.0)
    if used.any():
        ax.errorbar(t[used], rv[used], yerr=err[used], fmt="o", color=_USED, capsize=3,
                    label="barycentric")
    if (~used & np.isfinite(rv)).any():
        ax.errorbar(t[~used], rv[~used], yerr=err[~used], fmt="o", mfc="none",
                    color=_SKIPPED, capsize=3, label="not comparable (frame or error)")
    if np.isfinite(rv2).any():
        ax.plot(t, rv2, "s", mfc="none", color=_SECOND, label="second component")
    title = str(epochs.meta.get("star", ""))
    if result is not None and math.isfinite(result.mean_rv):
        ax.axhline(result.mean_rv, color=_USED, lw=0.8, ls="--", label="weighted mean")
        ax.axhspan(result.mean_rv - result.mean_rv_err, result.mean_rv + result.mean_rv_err,
                   color=_USED, alpha=0.12, lw=0)
        title += ": velocity variable" if result.variable else ": no significant variability"
    ax.set_xlabel(xlabel)
    ax.set_ylabel("radial velocity (km/s)")
    ax.set_title(title)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="best", fontsize="small")
    return ax


def save_velocity_history(epochs, path: str | os.PathLike, *, result=None,
                          dpi: int = 100) -> None:
    """Draw :func:`plot_velocity_history` on a new Figure and write it (PNG, PDF, SVG)."""
    ax = plot_velocity_history(epochs, result=result)
    ax.figure.savefig(os.fspath(path), dpi=dpi)
