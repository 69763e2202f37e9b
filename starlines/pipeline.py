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

from starlines.errors import StarlinesError
from starlines.flags import MIN_SIGNIFICANCE, join_flags, spectrum_flags
from starlines.numeric import is_finite as _finite
from starlines.quality import continuum_snr, noise_note, suspect_reasons
from starlines.resultrows import (
    RESULT_COLUMNS,
    RESULT_UNITS,
    empty_row,
    failed_row,
    meta_values,
    one_line,
    table_rows,
    update_row,
)

__all__ = [
    "AnalysisOptions",
    "FileResult",
    "analyse_file",
    "file_key",
    "failed_row",
    "RESULT_COLUMNS",
    "RESULT_UNITS",
    "figure_name",
    "analysis_units",
    "empty_row",
    "one_line",
    "table_rows",
]



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

    def fingerprint(self) -> str:
        """Short hash of everything that changes the results (not ``figure_dir``).

        The medium options, the site, the site file's path *and content*, and the package
        version: the resume journal reuses a file's rows only under the same fingerprint.
        """
        import hashlib
        import json

        from starlines import __version__

        site_file = ""
        if self.site_config:
            site_file = file_checksum(self.site_config) or "unreadable"
        text = json.dumps({"medium": self.medium, "default_medium": self.default_medium,
                           "site": self.site, "site_config": self.site_config,
                           "site_config_sha256": site_file, "version": __version__},
                          sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass
class FileResult:
    """Everything :func:`analyse_file` learnt from one file.

    Attributes
    ----------
    path : str
        The file.
    key : dict
        ``{"path", "size", "mtime_ns", "options"}``: identifies this version of the file
        and the analysis options (:meth:`AnalysisOptions.fingerprint`) for resume.
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


def _analyse_spectrum(path: str, spec, options: AnalysisOptions, result: FileResult) -> None:
    """Run measure -> classify -> velocity -> flags on one spectrum; append its rows."""
    from starlines.classify import classify
    from starlines.measure import measure_spectrum
    from starlines.velocity import measure_velocity

    row = empty_row(path, spec.label)
    row.update(meta_values(spec))
    try:
        measurement = measure_spectrum(spec)
    except Exception as exc:  # noqa: BLE001 - any failure of a stage is recorded, not raised
        result.rows.append(failed_row(path, spec.label, exc, row))
        return
    table = measurement.table
    meta = table.meta
    update_row(row, {k: meta.get(k) for k in ("snr", "vsini", "vsini_err", "vsini_floor",
                                               "continuum_scatter", "resolution_fwhm",
                                               "resolution_source", "snr_typing_region")
                     if k in meta})
    row["pixel_step"] = float(meta.get("pixel_step", math.nan))
    row["vsini_limit"] = bool(meta.get("vsini_upper_limit", False))
    snr = getattr(getattr(measurement, "continuum", None), "snr", None)
    if not _finite(row["snr"]) and snr is not None:
        row["snr"] = float(snr)
    row["snr_continuum"] = continuum_snr(row)
    lines, units = table_rows(table, row["file"], row["label"])
    result.lines.extend(lines)
    result.line_units.update(units)
    notes, stage_flags = [], []
    classification = None
    try:
        classification = classify(measurement)
        update_row(row, classification.as_row())
        stage_flags += list(getattr(classification, "flags", []) or [])
    except Exception as exc:  # noqa: BLE001
        notes.append(f"classification: {one_line(exc)}")
    try:
        velocity = measure_velocity(spec, table, classification=classification,
                                    continuum=getattr(measurement, "continuum", None),
                                    site=options.site, site_config=options.site_config)
        update_row(row, velocity.as_row())
        stage_flags += list(getattr(velocity, "flags", []) or [])
    except Exception as exc:  # noqa: BLE001
        notes.append(f"velocity: {one_line(exc)}")
    row["flags"] = join_flags(spectrum_flags(row, lines, stage_flags))
    notes += _quality_notes(row, lines)
    if notes:
        row["notes"] = "; ".join(notes)
    if options.figure_dir:
        row["figure"] = _figure(measurement, row, lines, options.figure_dir, notes)
    result.rows.append(row)


def _quality_notes(row: dict, lines: list[dict]) -> list[str]:
    """Notes of the data-quality checks (:mod:`starlines.quality`)."""
    out = []
    reasons = suspect_reasons(row, lines, MIN_SIGNIFICANCE)
    if reasons:
        out.append("suspect data: " + ", ".join(reasons))
    note = noise_note(row)
    if note:
        out.append(note)
    return out



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


def analysis_units(spectra: list) -> list:
    """The spectra of one file to analyse, one result row each.

    A single spectrum is analysed as it is. Several spectra that do not overlap by more
    than half their range are echelle orders (IRAF multispec apertures, table rows of
    orders): they are merged without resampling (:func:`starlines.readers.merge_orders`)
    and analysed as one spectrum labelled ``merged N orders``, because single orders rarely
    hold both lines of a classification ratio and orders without any line would only give
    failed rows. Spectra that do overlap (fibers of a multi-object file, repeated
    exposures; the same test :func:`~starlines.readers.merge_orders` makes) are analysed
    one row each.
    """
    from starlines.readers import merge_orders

    if len(spectra) < 2:
        return list(spectra)
    merged = merge_orders(spectra)
    if any(merged is s for s in spectra):  # overlapping: fibers or repeats, not orders
        return list(spectra)
    return [merged.validate()]


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
        One row per spectrum of :func:`analysis_units`: echelle orders merged into one
        row, fibers one row each; a file that cannot be read gives one failed row with
        an empty label.
    """
    from starlines.readers import read_spectra

    start = time.perf_counter()
    options = options or AnalysisOptions()
    path = os.fspath(path)
    key = dict(file_key(path), options=options.fingerprint())
    result = FileResult(path=path, key=key, checksum=file_checksum(path))
    try:
        kwargs = {"default_medium": options.default_medium}
        if options.medium:
            kwargs["medium"] = options.medium
        spectra = read_spectra(path, **kwargs)
        if not spectra:
            raise StarlinesError("the file holds no spectrum", path=path)
        units = analysis_units(spectra)
    except Exception as exc:  # noqa: BLE001 - every failure becomes a row
        result.rows.append(failed_row(path, "", exc))
        result.seconds = time.perf_counter() - start
        return result
    for spec in units:
        n_rows = len(result.rows)
        try:
            _analyse_spectrum(path, spec, options, result)
        except Exception as exc:  # noqa: BLE001
            result.rows.append(failed_row(path, spec.label, exc))
        n_orders = len(spectra) if len(units) == 1 and len(spectra) > 1 else 1
        for row in result.rows[n_rows:]:
            row["n_orders"] = n_orders
    result.seconds = time.perf_counter() - start
    return result
