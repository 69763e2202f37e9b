"""Figures: one per star, and the night-level plots of the report.

Every plotting function takes plain arrays (or rows of plain values), draws on ``ax`` when
given or on a new :class:`matplotlib.figure.Figure` otherwise, and returns the
:class:`~matplotlib.axes.Axes`. No pyplot: figures are rendered with the Agg canvas, so the
module works in worker processes and without a display.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np

from starlines.numeric import is_finite as _finite

__all__ = [
    "plot_normalized",
    "plot_continuum",
    "plot_type_distribution",
    "plot_velocity_vs_subtype",
    "plot_snr",
    "star_figure",
    "save_star_figure",
    "figure_png",
    "BLUE_RANGE",
    "HALPHA_RANGE",
]

#: Wavelength range (A) of the main classification panel.
BLUE_RANGE = (3900.0, 5000.0)
#: Wavelength range (A) of the H-alpha panel, drawn when the spectrum covers H-alpha.
HALPHA_RANGE = (6520.0, 6610.0)

_FLAG_COLOR = "#c0392b"
_OK_COLOR = "#1f4e79"


def _new_axes(ax, figsize=(7.0, 3.5)):
    if ax is not None:
        return ax
    from matplotlib.figure import Figure

    return Figure(figsize=figsize, layout="constrained").add_subplot()


def _gaussian_model(wave: np.ndarray, lines: Sequence[Mapping]) -> np.ndarray:
    """Normalized model: 1 minus a Gaussian of the measured EW/FWHM at each centroid."""
    model = np.ones_like(wave)
    for ln in lines:
        c, fwhm, ew = ln.get("centroid"), ln.get("fwhm"), ln.get("ew")
        if not all(_finite(v) for v in (c, fwhm, ew)) or fwhm <= 0:
            continue
        sigma = fwhm / 2.3548200450309493
        near = np.abs(wave - c) < 5 * sigma
        model[near] -= ew / (sigma * math.sqrt(2 * math.pi)) * np.exp(
            -0.5 * ((wave[near] - c) / sigma) ** 2
        )
    return model



def _measured(lines: Sequence[Mapping]) -> list[Mapping]:
    return [ln for ln in lines if ln.get("status") == "measured"]


def plot_normalized(
    wavelength,
    normalized,
    *,
    lines: Sequence[Mapping] = (),
    wrange: tuple[float, float] | None = BLUE_RANGE,
    label_lines: bool = True,
    ax=None,
):
    """Normalized spectrum with the fitted line profiles and labels of the measured lines.

    Parameters
    ----------
    wavelength, normalized : array-like
        Wavelength (A) and continuum-normalized flux.
    lines : sequence of mapping
        Per-line rows (``line, status, centroid, fwhm, ew, emission``); measured lines are
        drawn as Gaussians of their EW and FWHM and labelled.
    wrange : (float, float) or None
        Wavelength range shown; None shows everything.
    label_lines : bool
        Write the line ids above the spectrum.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    ax = _new_axes(ax)
    w = np.asarray(wavelength, dtype=float)
    f = np.asarray(normalized, dtype=float)
    sel = np.ones(w.size, bool) if wrange is None else (w >= wrange[0]) & (w <= wrange[1])
    ax.plot(w[sel], f[sel], color="0.2", lw=0.6, label="normalized spectrum")
    ax.axhline(1.0, color="0.6", lw=0.6, ls=":")
    shown = [ln for ln in _measured(lines) if _finite(ln.get("centroid"))
             and (wrange is None or wrange[0] <= ln["centroid"] <= wrange[1])]
    if shown and np.any(sel):
        ax.plot(w[sel], _gaussian_model(w[sel], shown), color="#d35400", lw=0.8,
                label="fitted lines")
    if np.any(sel):
        finite = f[sel][np.isfinite(f[sel])]
        lo = float(np.nanpercentile(finite, 0.5)) if finite.size else 0.5
        hi = float(np.nanpercentile(finite, 99.5)) if finite.size else 1.5
        top = max(hi, 1.05) + 0.12
        ax.set_ylim(min(lo, 0.95) - 0.03, top + 0.1)
        if label_lines:
            for ln in shown:
                color = _FLAG_COLOR if ln.get("emission") else _OK_COLOR
                ax.text(ln["centroid"], top, str(ln.get("line", "")), rotation=90,
                        fontsize=5.5, ha="center", va="bottom", color=color, clip_on=True)
        ax.set_xlim(w[sel][0], w[sel][-1])
    ax.set_xlabel("wavelength [Angstrom]")
    ax.set_ylabel("normalized flux")
    return ax


def plot_continuum(wavelength, flux, continuum, *, ax=None):
    """Observed flux with the fitted continuum.

    Returns
    -------
    matplotlib.axes.Axes
    """
    ax = _new_axes(ax)
    ax.plot(wavelength, flux, color="0.3", lw=0.5, label="flux")
    if continuum is not None:
        ax.plot(wavelength, continuum, color="#2e86c1", lw=1.0, label="continuum")
    ax.set_ylabel("flux")
    ax.legend(fontsize=6, loc="best", frameon=False)
    return ax


def star_figure(wavelength, flux, continuum, normalized, lines, title: str):
    """The per-star figure: continuum panel, 3900-5000 A panel, H-alpha panel if covered.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    w = np.asarray(wavelength, float)
    has_ha = w.size > 0 and w[0] < HALPHA_RANGE[0] + 20 and w[-1] > HALPHA_RANGE[1] - 20
    fig = Figure(figsize=(10.0, 5.2))  # fixed margins: constrained layout doubles the time
    grid = fig.add_gridspec(2, 4 if has_ha else 3, height_ratios=(1, 2.3), left=0.07,
                            right=0.985, bottom=0.09, top=0.88, hspace=0.28, wspace=0.3)
    plot_continuum(w, flux, continuum, ax=fig.add_subplot(grid[0, :]))
    main = fig.add_subplot(grid[1, :3])
    plot_normalized(w, normalized, lines=lines, ax=main)
    if has_ha:
        ha = fig.add_subplot(grid[1, 3])
        plot_normalized(w, normalized, lines=lines, wrange=HALPHA_RANGE, ax=ha)
        ha.set_ylabel("")
        ha.set_title("H-alpha", fontsize=8, loc="left")
    fig.suptitle(title, fontsize=9)
    return fig


def _title(row: Mapping) -> str:
    name = row.get("object") or row.get("file", "")
    sptype = row.get("sptype") or "no type"
    rv = row.get("rv")
    rv_txt = (f"rv {rv:+.1f} +- {row.get('rv_err', math.nan):.1f} km/s"
              if _finite(rv) else "rv n/a")
    vsini = row.get("vsini")
    if _finite(vsini):
        rv_txt += f", v sin i {'< ' if row.get('vsini_limit') else ''}{vsini:.0f} km/s"
    flags = row.get("flags") or "no flags"
    label = f" [{row['label']}]" if row.get("label") else ""
    return f"{name}{label}: {sptype} (provisional), {rv_txt}, S/N {row.get('snr', 0):.0f}\n" \
           f"flags: {flags}"


def save_star_figure(measurement, row: Mapping, lines: Sequence[Mapping], path: str) -> None:
    """Draw the figure of one analysed spectrum and write it as PNG.

    Parameters
    ----------
    measurement : starlines.measure.Measurement
        Gives the spectrum, its continuum fit and normalized flux.
    row : mapping
        Result row (type, velocity, flags for the title).
    lines : sequence of mapping
        Per-line rows.
    path : str
        Output PNG.
    """
    spec = measurement.spectrum
    cont = measurement.continuum
    normalized = getattr(cont, "normalized", None)
    continuum = getattr(cont, "continuum", None)
    if normalized is None:
        normalized = spec.flux / continuum if continuum is not None else spec.flux
    flux = np.where(spec.mask, np.nan, spec.flux)
    fig = star_figure(spec.wavelength, flux, continuum, normalized, lines, _title(row))
    fig.savefig(path, dpi=80)


def plot_type_distribution(subtypes: Sequence[float], *, ax=None):
    """Histogram of subtype numbers (O3 = 3 ... B0 = 10 ... B3 = 13), one bin per subtype.

    Returns
    -------
    matplotlib.axes.Axes
    """
    from starlines.sptype import subtype_label

    ax = _new_axes(ax, figsize=(5.0, 3.0))
    vals = np.asarray([s for s in subtypes if _finite(s)], float)
    bins = np.arange(2.5, 15.0, 1.0)
    ax.hist(vals, bins=bins, color="#5d6d7e", edgecolor="white")
    ticks = np.arange(3.0, 15.0, 1.0)
    ax.set_xticks(ticks, [subtype_label(t) for t in ticks], fontsize=7)
    ax.set_xlabel("spectral type (provisional)")
    ax.set_ylabel("spectra")
    ax.set_title(f"{vals.size} typed spectra", fontsize=9)
    return ax


def plot_velocity_vs_subtype(subtypes, rv, rv_err=None, *, flagged=None, ax=None):
    """Radial velocity against subtype; velocity outliers (``flagged``) in red.

    Returns
    -------
    matplotlib.axes.Axes
    """
    from starlines.sptype import subtype_label

    ax = _new_axes(ax, figsize=(5.0, 3.0))
    x = np.asarray(subtypes, float)
    y = np.asarray(rv, float)
    err = np.zeros_like(y) if rv_err is None else np.nan_to_num(np.asarray(rv_err, float))
    bad = np.zeros(y.size, bool) if flagged is None else np.asarray(flagged, bool)
    for sel, color, lab in ((~bad, _OK_COLOR, "spectra"), (bad, _FLAG_COLOR, "outliers")):
        if np.any(sel):
            ax.errorbar(x[sel], y[sel], yerr=err[sel], fmt="o", ms=3.5, color=color,
                        lw=0.8, label=lab)
    ok = np.isfinite(y)
    if np.any(ok):
        ax.axhline(float(np.median(y[ok])), color="0.5", lw=0.7, ls="--", label="median")
    ticks = np.arange(3.0, 15.0, 2.0)
    ax.set_xticks(ticks, [subtype_label(t) for t in ticks], fontsize=7)
    ax.set_xlim(2.5, 14.5)
    ax.set_xlabel("spectral type (provisional)")
    ax.set_ylabel("radial velocity [km/s]")
    ax.legend(fontsize=6, frameon=False)
    return ax


def plot_snr(names: Sequence[str], snr: Sequence[float], *, threshold: float | None = None,
             ax=None):
    """S/N per spectrum as horizontal bars; bars below ``threshold`` in red.

    Returns
    -------
    matplotlib.axes.Axes
    """
    n = len(names)
    ax = _new_axes(ax, figsize=(5.0, max(2.5, 0.16 * n + 0.8)))
    vals = np.nan_to_num(np.asarray(snr, float))
    colors = [_FLAG_COLOR if threshold is not None and v < threshold else _OK_COLOR
              for v in vals]
    ax.barh(np.arange(n), vals, color=colors)
    ax.set_yticks(np.arange(n), list(names), fontsize=5.5)
    ax.invert_yaxis()
    if threshold is not None:
        ax.axvline(threshold, color=_FLAG_COLOR, lw=0.8, ls="--")
    ax.set_xlabel("S/N per pixel")
    return ax


def figure_png(fig, *, dpi: int = 80) -> bytes:
    """Render a Figure (or the figure of an Axes) to PNG bytes."""
    import io

    fig = getattr(fig, "figure", fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()
