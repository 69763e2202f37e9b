"""Result rows: the columns of ``results.ecsv`` and building rows from stage outputs.

A result row is a plain dict with every column of :data:`RESULT_COLUMNS` (DEVELOPERS.md
"Result rows", then extensions), so it pickles cheaply and becomes a table row as it is.
Used by :mod:`starlines.pipeline` (which re-exports these names) and the night driver.
"""

from __future__ import annotations

import math
import os

import numpy as np

from starlines.errors import StarlinesError

__all__ = ["RESULT_COLUMNS", "RESULT_UNITS", "empty_row", "failed_row", "one_line",
           "update_row", "meta_values", "table_rows"]

#: Columns of a result row, in table order (DEVELOPERS.md "Result rows", then extensions).
RESULT_COLUMNS: tuple[str, ...] = (
    "file", "label", "object", "status", "error", "mjd_mid", "ra", "dec", "snr", "medium",
    "medium_assumed", "sptype", "subtype", "subtype_err", "lumclass", "teff", "teff_err",
    "logg", "logg_err", "he_abundance", "vsini", "vsini_err", "rv", "rv_err", "rv_n_lines",
    "rv_ccf", "rv_ccf_err", "rv_frame", "barycentric_correction", "rv2", "flags",
    "followup_score", "followup_rank",
    # extensions
    "he_abundance_err", "helium_sigma", "rules_subtype", "model_subtype", "probability",
    "followup_reason",
    "catalogue_type", "catalogue_subtype", "catalogue_rv", "class_notes", "notes", "figure",
    "vsini_limit", "vsini_floor", "continuum_scatter", "snr_continuum", "snr_typing_region",
    "n_orders",
    "resolution_fwhm", "resolution_source", "pixel_step",
)

#: Units of the result columns that have one.
RESULT_UNITS: dict[str, str] = {
    "mjd_mid": "d", "ra": "deg", "dec": "deg", "teff": "K", "teff_err": "K",
    "logg": "dex", "logg_err": "dex", "vsini": "km / s", "vsini_err": "km / s",
    "rv": "km / s", "rv_err": "km / s", "rv_ccf": "km / s", "rv_ccf_err": "km / s",
    "barycentric_correction": "km / s", "rv2": "km / s", "catalogue_rv": "km / s",
    "vsini_floor": "km / s", "resolution_fwhm": "Angstrom", "pixel_step": "Angstrom",
}

_FLOAT_COLUMNS = {
    "mjd_mid", "ra", "dec", "snr", "subtype", "subtype_err", "teff", "teff_err", "logg",
    "logg_err", "he_abundance", "he_abundance_err", "helium_sigma", "vsini", "vsini_err",
    "rv", "rv_err",
    "rv_ccf", "rv_ccf_err", "barycentric_correction", "rv2", "followup_score",
    "rules_subtype", "model_subtype", "probability", "catalogue_subtype", "catalogue_rv",
    "vsini_floor", "continuum_scatter", "snr_continuum", "snr_typing_region",
    "resolution_fwhm", "pixel_step",
}
_INT_COLUMNS = {"rv_n_lines", "followup_rank", "n_orders"}
_BOOL_COLUMNS = {"medium_assumed", "vsini_limit"}


def empty_row(path: str, label: str = "") -> dict:
    """A result row with every column present: NaN, empty strings, zeros."""
    row: dict = {}
    for col in RESULT_COLUMNS:
        if col in _FLOAT_COLUMNS:
            row[col] = math.nan
        elif col in _INT_COLUMNS:
            row[col] = 0
        elif col in _BOOL_COLUMNS:
            row[col] = False
        else:
            row[col] = ""
    row.update(file=os.fspath(path), label=label, status="ok")
    return row


def one_line(exc: BaseException) -> str:
    """The first line of an exception message, with its class when it is not ours."""
    text = str(getattr(exc, "reason", None) or exc).strip().splitlines()
    text = text[0] if text else ""
    if isinstance(exc, StarlinesError):
        return text or type(exc).__name__
    return f"{type(exc).__name__}: {text}".rstrip(": ")


def failed_row(path: str, label: str, exc: BaseException | str, partial: dict | None = None):
    """A failed result row carrying the one-line cause (and any partial values)."""
    row = empty_row(path, label)
    if partial:
        row.update({k: v for k, v in partial.items() if k in row})
    row.update(status="failed", error=exc if isinstance(exc, str) else one_line(exc),
               flags="failed")
    return row


def _clean(value):
    """Plain Python scalar for a table cell (Quantities lose their unit, None -> NaN)."""
    if value is None:
        return math.nan
    value = getattr(value, "value", value)
    if isinstance(value, np.generic):
        return value.item()
    return value


def update_row(row: dict, values: dict) -> None:
    """Copy stage values into a row: plain scalars, typed by column; ``flags`` and
    array values (e.g. ``rv_components``) are skipped."""
    for key, value in values.items():
        if key == "flags":
            continue
        value = _clean(value)
        if key in _FLOAT_COLUMNS:
            try:
                value = float(value)
            except (TypeError, ValueError):
                value = math.nan
        elif key in _INT_COLUMNS:
            try:
                value = int(value)
            except (TypeError, ValueError):
                value = 0
        elif isinstance(value, (list, tuple, np.ndarray)):
            continue  # e.g. rv_components: not a table cell
        row[key] = value


def meta_values(spec) -> dict:
    """The observation metadata columns of a :class:`~starlines.spectrum.Spectrum`."""
    meta = spec.meta
    return {
        "object": meta.object or "", "mjd_mid": meta.mjd_mid, "ra": meta.ra_deg,
        "dec": meta.dec_deg, "medium": spec.medium, "medium_assumed": bool(spec.medium_assumed),
    }


def table_rows(table, file: str, label: str) -> tuple[list[dict], dict]:
    """Per-line rows of a line table: plain values, plus the units of its columns."""
    units, cols = {}, {}
    for name in table.colnames:
        col = table[name]
        unit = getattr(col, "unit", None)
        if unit is not None and str(unit):
            units[name] = str(unit)
        data = getattr(col, "value", col)
        cols[name] = np.asarray(data).tolist()
    n = len(table)
    rows = [{"file": file, "label": label} for _ in range(n)]
    for name, values in cols.items():
        for row, v in zip(rows, values):
            row[name] = v
    return rows, units
