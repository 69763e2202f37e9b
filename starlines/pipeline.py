"""One file through every stage: read -> measure -> classify -> velocity -> flags.

:func:`analyse_file` is the unit of work the night driver (:mod:`starlines.triage`) hands to
the execution engines. It never raises for bad input: every failure becomes a result row
with ``status="failed"`` and a one-line ``error``, so one bad file never stops a night.
Its result, :class:`FileResult`, holds only plain Python values (dicts of floats, strings,
bools) and pickles cheaply between processes.

A failure to *classify* (for example a spectrum without helium lines) or to measure a
*velocity* is not a failed spectrum: the row stays ``"ok"``, the missing values are NaN,
the cause goes to ``notes`` and the flags say what it means (``not-hot-star``).
"""

from __future__ import annotations

import math
import os
import re
import time
from dataclasses import dataclass, field

import numpy as np

from starlines.errors import StarlinesError
from starlines.flags import join_flags, spectrum_flags

__all__ = [
    "AnalysisOptions",
    "FileResult",
    "analyse_file",
    "file_key",
    "failed_row",
    "RESULT_COLUMNS",
    "RESULT_UNITS",
    "figure_name",
]

#: Columns of a result row, in table order (DEVELOPERS.md "Result rows", then extensions).
RESULT_COLUMNS: tuple[str, ...] = (
    "file", "label", "object", "status", "error", "mjd_mid", "ra", "dec", "snr", "medium",
    "medium_assumed", "sptype", "subtype", "subtype_err", "lumclass", "teff", "teff_err",
    "logg", "logg_err", "he_abundance", "vsini", "vsini_err", "rv", "rv_err", "rv_n_lines",
    "rv_ccf", "rv_ccf_err", "rv_frame", "barycentric_correction", "rv2", "flags",
    "followup_score", "followup_rank",
    # extensions
    "he_abundance_err", "rules_subtype", "model_subtype", "probability", "followup_reason",
    "catalogue_type", "catalogue_subtype", "catalogue_rv", "class_notes", "notes", "figure",
)

#: Units of the result columns that have one.
RESULT_UNITS: dict[str, str] = {
    "mjd_mid": "d", "ra": "deg", "dec": "deg", "teff": "K", "teff_err": "K",
    "logg": "dex", "logg_err": "dex", "vsini": "km / s", "vsini_err": "km / s",
    "rv": "km / s", "rv_err": "km / s", "rv_ccf": "km / s", "rv_ccf_err": "km / s",
    "barycentric_correction": "km / s", "rv2": "km / s", "catalogue_rv": "km / s",
}

_FLOAT_COLUMNS = {
    "mjd_mid", "ra", "dec", "snr", "subtype", "subtype_err", "teff", "teff_err", "logg",
    "logg_err", "he_abundance", "he_abundance_err", "vsini", "vsini_err", "rv", "rv_err",
    "rv_ccf", "rv_ccf_err", "barycentric_correction", "rv2", "followup_score",
    "rules_subtype", "model_subtype", "probability", "catalogue_subtype", "catalogue_rv",
}
_INT_COLUMNS = {"rv_n_lines", "followup_rank"}
_BOOL_COLUMNS = {"medium_assumed"}


@dataclass(frozen=True)
class AnalysisOptions:
    """Options of :func:`analyse_file` (picklable; one instance per night).

    Attributes
    ----------
    figure_dir : str or None
        Folder for one PNG per spectrum; None makes no figures.
    medium : {"air", "vacuum"} or None
        Force the wavelength medium instead of reading it from the file.
    default_medium : {"air", "vacuum"}
        Medium assumed when a file does not state it.
    site : str or None
        Observatory of every spectrum for the barycentric correction (overrides headers).
    site_config : str or None
        User TOML file of extra sites (:mod:`starlines.sites`).
    """

    figure_dir: str | None = None
    medium: str | None = None
    default_medium: str = "air"
    site: str | None = None
    site_config: str | None = None


@dataclass
class FileResult:
    """Everything :func:`analyse_file` learnt from one file.

    Attributes
    ----------
    path : str
        The file.
    key : dict
        ``{"path", "size", "mtime_ns"}``: identifies this version of the file for resume.
    rows : list of dict
        One result row per spectrum in the file (at least one, failed or not).
    lines : list of dict
        Per-line rows of every spectrum, keyed by ``file`` and ``label``.
    line_units : dict
        Units of the per-line columns that have one.
    seconds : float
        Wall time spent on the file.
    checksum : str
        SHA-256 of the file's bytes (the archive's identity of a spectrum file; same digest
        as :func:`starlines.archive.file_checksum`), empty when unreadable.
    """

    path: str
    key: dict
    rows: list[dict] = field(default_factory=list)
    lines: list[dict] = field(default_factory=list)
    line_units: dict = field(default_factory=dict)
    seconds: float = 0.0
    checksum: str = ""


def file_checksum(path: str) -> str:
    """SHA-256 hex digest of a file's bytes, empty when the file cannot be read."""
    import hashlib

    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            while block := fh.read(1 << 20):
                h.update(block)
    except OSError:
        return ""
    return h.hexdigest()


def file_key(path: str | os.PathLike) -> dict:
    """Identity of a file version: absolute path, size and modification time (ns)."""
    path = os.path.abspath(os.fspath(path))
    try:
        st = os.stat(path)
    except OSError:
        return {"path": path, "size": -1, "mtime_ns": -1}
    return {"path": path, "size": int(st.st_size), "mtime_ns": int(st.st_mtime_ns)}


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


def _update(row: dict, values: dict) -> None:
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


def _meta_values(spec) -> dict:
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


def _analyse_spectrum(path: str, spec, options: AnalysisOptions, result: FileResult) -> None:
    """Run measure -> classify -> velocity -> flags on one spectrum; append its rows."""
    from starlines.classify import classify
    from starlines.measure import measure_spectrum
    from starlines.velocity import measure_velocity

    row = empty_row(path, spec.label)
    row.update(_meta_values(spec))
    try:
        measurement = measure_spectrum(spec)
    except Exception as exc:  # noqa: BLE001 - any failure of a stage is recorded, not raised
        result.rows.append(failed_row(path, spec.label, exc, row))
        return
    table = measurement.table
    meta = table.meta
    _update(row, {k: meta.get(k) for k in ("snr", "vsini", "vsini_err") if k in meta})
    snr = getattr(getattr(measurement, "continuum", None), "snr", None)
    if not _finite(row["snr"]) and snr is not None:
        row["snr"] = float(snr)
    lines, units = table_rows(table, row["file"], row["label"])
    result.lines.extend(lines)
    result.line_units.update(units)
    notes, stage_flags = [], []
    classification = None
    try:
        classification = classify(measurement)
        _update(row, classification.as_row())
        stage_flags += list(getattr(classification, "flags", []) or [])
    except Exception as exc:  # noqa: BLE001
        notes.append(f"classification: {one_line(exc)}")
    try:
        velocity = measure_velocity(spec, table, classification=classification,
                                    continuum=getattr(measurement, "continuum", None),
                                    site=options.site, site_config=options.site_config)
        _update(row, velocity.as_row())
        stage_flags += list(getattr(velocity, "flags", []) or [])
    except Exception as exc:  # noqa: BLE001
        notes.append(f"velocity: {one_line(exc)}")
    if notes:
        row["notes"] = "; ".join(notes)
    row["flags"] = join_flags(spectrum_flags(row, lines, stage_flags))
    if options.figure_dir:
        row["figure"] = _figure(measurement, row, lines, options.figure_dir, notes)
    result.rows.append(row)


def _finite(x) -> bool:
    try:
        return math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def figure_name(row: dict) -> str:
    """PNG file name of a spectrum's figure: object (or file stem) and label, made safe."""
    stem = os.path.splitext(os.path.basename(row["file"]))[0]
    base = f"{row.get('object') or stem}_{stem}" if row.get("object") else stem
    if row.get("label"):
        base += f"_{row['label']}"
    return re.sub(r"[^A-Za-z0-9_.+-]+", "_", base).strip("_") + ".png"


def _figure(measurement, row, lines, figure_dir, notes) -> str:
    """Draw and save the star's figure; a plotting error becomes a note, not a failure."""
    from starlines.plots import save_star_figure

    name = figure_name(row)
    try:
        save_star_figure(measurement, row, lines, os.path.join(figure_dir, name))
    except Exception as exc:  # noqa: BLE001
        notes.append(f"figure: {one_line(exc)}")
        row["notes"] = "; ".join(notes)
        return ""
    return name


def analyse_file(path: str | os.PathLike, options: AnalysisOptions | None = None) -> FileResult:
    """Analyse every spectrum of one file; never raise for bad input.

    Parameters
    ----------
    path : str or path-like
        A spectrum file in any format :func:`starlines.readers.read_spectra` reads.
    options : AnalysisOptions, optional
        Figures and medium; defaults to no figures.

    Returns
    -------
    FileResult
        One row per spectrum (per order / fiber when the file holds several); a file that
        cannot be read gives one failed row with an empty label.
    """
    from starlines.readers import read_spectra

    start = time.perf_counter()
    options = options or AnalysisOptions()
    path = os.fspath(path)
    result = FileResult(path=path, key=file_key(path), checksum=file_checksum(path))
    try:
        kwargs = {"default_medium": options.default_medium}
        if options.medium:
            kwargs["medium"] = options.medium
        spectra = read_spectra(path, **kwargs)
        if not spectra:
            raise StarlinesError("the file holds no spectrum", path=path)
    except Exception as exc:  # noqa: BLE001 - every failure becomes a row
        result.rows.append(failed_row(path, "", exc))
        result.seconds = time.perf_counter() - start
        return result
    for spec in spectra:
        try:
            _analyse_spectrum(path, spec, options, result)
        except Exception as exc:  # noqa: BLE001
            result.rows.append(failed_row(path, spec.label, exc))
    result.seconds = time.perf_counter() - start
    return result
