"""A whole night: find the files, analyse them in parallel, resume, flag, rank, write.

:func:`triage_night` is what ``starlines triage`` runs. Its output folder holds

- ``results.ecsv`` (one row per spectrum, units in the header), ``lines.ecsv`` (one row per
  line per spectrum), ``followup.ecsv`` (the ranked follow-up list), and the same tables as
  CSV and/or FITS when asked;
- ``figures/`` with one PNG per spectrum (unless figures are switched off);
- ``report.html``, a self-contained page (see :mod:`starlines.report`);
- ``.journal/files.jsonl``, the resume journal.

**Resume.** Each finished file's result (rows, line rows, the file's size and modification
time, the fingerprint of the analysis options) is appended to the journal as one JSON line,
flushed and fsynced before the next file is recorded, so a run killed midway loses no
finished file. A re-run into the same folder reuses every journal entry whose file still
has the same path, size and modification time *and* was analysed with the same options
(:meth:`starlines.pipeline.AnalysisOptions.fingerprint`: medium, default medium, site, site
file and its content, package version), and whose figures exist when figures are wanted;
any other file is analysed again. Engine failures (a crashed worker) are never reused.
``redo=True`` starts a fresh journal. The tables are always rewritten from the journal at
the end.
"""

from __future__ import annotations

import functools
import logging
import math
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

from starlines.errors import ConfigError
from starlines.journal import Journal, reusable
from starlines.pipeline import (
    RESULT_COLUMNS,
    RESULT_UNITS,
    AnalysisOptions,
    FileResult,
    analyse_file,
    failed_row,
    file_key,
)

__all__ = ["triage_night", "TriageResult", "find_spectra", "Journal", "SPECTRUM_SUFFIXES",
           "TABLE_FORMATS"]

log = logging.getLogger("starlines.triage")

#: File name endings taken as spectra; other files are listed as ignored in the report.
SPECTRUM_SUFFIXES = (".fits", ".fit", ".fts", ".fits.gz", ".fit.gz", ".fts.gz", ".txt",
                     ".dat", ".csv", ".tsv", ".ascii", ".spec", ".ecsv")
#: Table formats of ``formats=`` and their file extensions.
TABLE_FORMATS = {"ecsv": ".ecsv", "csv": ".csv", "fits": ".fits"}


@dataclass
class TriageResult:
    """What a night produced.

    Attributes
    ----------
    out_dir : str
        Output folder.
    rows : list of dict
        Final result rows (flags, follow-up rank), in file order.
    lines : list of dict
        Per-line rows.
    followup : list of dict
        Rows on the follow-up list, best first.
    ignored : list of str
        Files of the night folder that are not spectra by name.
    analysed, reused : int
        Files analysed in this run, and taken from the journal.
    outputs : dict
        Written files by role (``"results.ecsv"``, ``"report"``...).
    """

    out_dir: str
    rows: list[dict]
    lines: list[dict]
    followup: list[dict]
    ignored: list[str] = field(default_factory=list)
    analysed: int = 0
    reused: int = 0
    outputs: dict = field(default_factory=dict)

    @property
    def n_failed(self) -> int:
        """Number of failed spectra."""
        return sum(r["status"] == "failed" for r in self.rows)


def find_spectra(night_dir: str, *, exclude: Iterable[str] = ()) -> tuple[list[str], list[str]]:
    """Spectrum files (by name ending) and other files of a night folder, recursively.

    Hidden files and folders and the folders in ``exclude`` (the output folder) are skipped.

    Returns
    -------
    spectra, ignored : list of str
        Sorted absolute paths.
    """
    night_dir = os.path.abspath(night_dir)
    if not os.path.isdir(night_dir):
        raise ConfigError("is not a folder", path=night_dir)
    skip = {os.path.abspath(e) for e in exclude}
    spectra, ignored = [], []
    for root, dirs, files in os.walk(night_dir):
        dirs[:] = sorted(d for d in dirs if not d.startswith(".")
                         and os.path.join(root, d) not in skip)
        for name in sorted(files):
            if name.startswith("."):
                continue
            path = os.path.join(root, name)
            (spectra if name.lower().endswith(SPECTRUM_SUFFIXES) else ignored).append(path)
    return sorted(spectra), sorted(ignored)


def _engine_failure(path: str, failure) -> FileResult:
    msg = getattr(failure, "message", str(failure))
    return FileResult(path=path, key=file_key(path), rows=[failed_row(path, "", msg)])


def _analyse_all(paths, options, *, workers, scheduler, scheduler_file, progress, journal):
    """Run the engine over ``paths``; journal each finished file; return its records."""
    from starlines.engines import map_files

    func = functools.partial(analyse_file, options=options)
    records = {}
    for path, result in map_files(func, paths, workers=workers, scheduler=scheduler,
                                  scheduler_file=scheduler_file, progress=progress):
        if not isinstance(result, FileResult):
            result = _engine_failure(path, result)
        records[os.path.abspath(path)] = journal.append(result)
        status = ", ".join(f"{r['label'] or 'spectrum'} {r['status']}" for r in result.rows)
        log.debug("%s: %s (%.2f s)", path, status, result.seconds)
    return records


def _apply_targets(rows: list[dict], targets_path: str | None) -> list[dict | None]:
    if not targets_path:
        return [None] * len(rows)
    from starlines.targets import match_targets, read_targets

    matched = match_targets(rows, read_targets(targets_path))
    for row, tgt in zip(rows, matched):
        if tgt is not None:
            row.update(catalogue_type=tgt.sptype, catalogue_subtype=tgt.subtype,
                       catalogue_rv=tgt.rv)
    return [t.as_expected() if t is not None else None for t in matched]


def _archive_variables(archive: str | None, rows: list[dict], lines: list[dict],
                       checksums: dict[str, str], night: str) -> set[str]:
    """Store the night's good spectra in the archive; return the velocity-variable names."""
    if not archive:
        return set()
    from starlines.archive import Archive

    by_spec: dict[tuple, list] = {}
    for ln in lines:
        by_spec.setdefault((ln["file"], ln["label"]), []).append(ln)
    arch = Archive(archive)
    try:
        names = []
        for row in rows:
            if row["status"] == "ok":
                stored = dict(row, checksum=checksums.get(os.path.abspath(row["file"]), ""),
                              night=night)
                arch.store_spectrum(stored, by_spec.get((row["file"], row["label"]), []))
                if row.get("object"):
                    names.append(row["object"])
        found = arch.flag_variables(sorted(set(names)))
    finally:
        close = getattr(arch, "close", None)
        if close:
            close()
    return {name for name, res in found.items() if getattr(res, "variable", False)}


def _table(rows: Sequence[dict], columns: Sequence[str], units: dict):
    from astropy.table import Table

    table = Table()
    for col in columns:
        values = [r.get(col) for r in rows]
        if any(isinstance(v, float) for v in values):
            values = [math.nan if v is None else v for v in values]
        elif any(isinstance(v, str) for v in values) or not rows:
            values = ["" if v is None else str(v) for v in values]
        table[col] = values
        if col in units:
            table[col].unit = units[col]
    return table


def _write_tables(out_dir, rows, lines, line_units, followup, formats) -> dict:
    from starlines.tableio import write_table

    line_cols: list[str] = []
    for ln in lines:
        line_cols.extend(c for c in ln if c not in line_cols)
    tables = {
        "results": _table(rows, RESULT_COLUMNS, RESULT_UNITS),
        "lines": _table(lines, line_cols or ["file", "label"], line_units),
        "followup": _table(followup, ("followup_rank", "object", "file", "label", "sptype",
                                      "rv", "flags", "followup_score", "followup_reason"),
                           RESULT_UNITS),
    }
    tables["results"].meta["comments"] = [
        "starlines night triage; automated types are provisional"]
    written = {}
    for fmt in formats:
        for name, table in tables.items():
            path = os.path.join(out_dir, name + TABLE_FORMATS[fmt])
            write_table(table, path)
            written[os.path.basename(path)] = path
    return written


def _check_media(medium, default_medium) -> None:
    from starlines.readers_common import MEDIA

    if medium is not None and medium not in MEDIA:
        raise ConfigError(f"medium must be one of {', '.join(MEDIA)}, got {medium!r}")
    if default_medium not in MEDIA:
        raise ConfigError(f"default medium must be one of {', '.join(MEDIA)}, "
                          f"got {default_medium!r}")


def _check_formats(formats: Sequence[str]) -> list[str]:
    formats = [f.strip().lower() for f in formats if f.strip()]
    bad = [f for f in formats if f not in TABLE_FORMATS]
    if bad or not formats:
        raise ConfigError(f"unknown table format(s) {bad or formats}; "
                          f"choose from {', '.join(TABLE_FORMATS)}")
    return formats


def triage_night(
    night_dir: str | os.PathLike,
    out_dir: str | os.PathLike | None = None,
    *,
    targets: str | os.PathLike | None = None,
    workers: int | None = None,
    figures: bool = True,
    archive: str | os.PathLike | None = None,
    redo: bool = False,
    scheduler: str | None = None,
    scheduler_file: str | os.PathLike | None = None,
    formats: Sequence[str] = ("ecsv",),
    progress: bool = True,
    report: bool = True,
    site: str | None = None,
    site_config: str | os.PathLike | None = None,
    medium: str | None = None,
    default_medium: str = "air",
) -> TriageResult:
    """Triage a night folder; see the module docstring for outputs and resume.

    Parameters
    ----------
    night_dir : str or path-like
        Folder with the night's spectra (searched recursively).
    out_dir : str or path-like, optional
        Output folder; default ``NIGHT_DIR/triage`` (never scanned for spectra).
    targets : str or path-like, optional
        Target list (:mod:`starlines.targets`).
    workers : int, optional
        Local processes; default all usable cores; 1 runs in this process.
    figures : bool
        Draw one PNG per spectrum.
    archive : str or path-like, optional
        SQLite archive to store the night in and to ask for velocity variables.
    redo : bool
        Analyse every file again, ignoring the journal.
    scheduler, scheduler_file : str, optional
        Run on a Dask cluster instead of local processes.
    formats : sequence of {"ecsv", "csv", "fits"}
        Table formats to write.
    progress : bool
        Progress bar on a terminal.
    report : bool
        Write ``report.html``.
    site : str, optional
        Observatory of every spectrum for the barycentric correction (overrides headers).
    site_config : str or path-like, optional
        User TOML file with extra ``[sites.<name>]`` entries.
    medium : {"air", "vacuum"}, optional
        Force the wavelength medium of every file (overrides the headers).
    default_medium : {"air", "vacuum"}
        Medium assumed for files that do not state it.

    Returns
    -------
    TriageResult
    """
    from starlines.flags import join_flags, night_flags, night_notes, split_flags
    from starlines.followup import rank_rows

    formats = _check_formats(formats)
    _check_media(medium, default_medium)
    site_config = os.fspath(site_config) if site_config else None
    if site:
        from starlines.sites import find_site

        find_site(site, config=site_config)  # an unknown site fails before any work
    night_dir = os.path.abspath(os.fspath(night_dir))
    out_dir = os.path.abspath(os.fspath(out_dir) if out_dir else os.path.join(night_dir,
                                                                               "triage"))
    paths, ignored = find_spectra(night_dir, exclude=[out_dir])
    os.makedirs(out_dir, exist_ok=True)
    figure_dir = os.path.join(out_dir, "figures") if figures else None
    if figure_dir:
        os.makedirs(figure_dir, exist_ok=True)
    journal = Journal(out_dir)
    if redo:
        journal.reset()
    old = journal.load()
    options = AnalysisOptions(figure_dir=figure_dir, site=site, site_config=site_config,
                              medium=medium, default_medium=default_medium)
    fingerprint = options.fingerprint()
    records, todo = {}, []
    for path in paths:
        key = dict(file_key(path), options=fingerprint)
        if reusable(old.get(key["path"]), key, figure_dir):
            records[key["path"]] = old[key["path"]]
        else:
            todo.append(path)
    log.info("%d spectrum files (%d done before, %d to analyse), %d other files ignored",
             len(paths), len(records), len(todo), len(ignored))
    if todo:
        records.update(_analyse_all(
            todo, options, workers=workers,
            scheduler=scheduler, scheduler_file=scheduler_file, progress=progress,
            journal=journal))
    rows, lines, line_units = [], [], {}
    for path in paths:
        rec = records[os.path.abspath(path)]
        rows.extend(rec["rows"])
        lines.extend(rec["lines"])
        line_units.update(rec["line_units"])
    expected = _apply_targets(rows, os.fspath(targets) if targets else None)
    checksums = {p: rec.get("checksum", "") for p, rec in records.items()}
    variable = _archive_variables(os.fspath(archive) if archive else None, rows, lines,
                                  checksums, os.path.basename(night_dir))
    for row, extra in zip(rows, night_flags(rows, expected=expected, variable=variable)):
        row["flags"] = join_flags(split_flags(row["flags"]) + extra)
    for row, note in zip(rows, night_notes(rows, expected=expected)):
        if note:
            row["notes"] = "; ".join(n for n in (row.get("notes"), note) if n)
    followup = rank_rows(rows)
    result = TriageResult(out_dir=out_dir, rows=rows, lines=lines, followup=followup,
                          ignored=ignored, analysed=len(todo),
                          reused=len(paths) - len(todo))
    result.outputs = _write_tables(out_dir, rows, lines, line_units, followup, formats)
    if report:
        from starlines.report import write_report

        result.outputs["report"] = write_report(result, os.path.join(out_dir, "report.html"),
                                                night_dir=night_dir, figure_dir=figure_dir)
    log.info("%d spectra, %d failed, %d on the follow-up list; outputs in %s",
             len(rows), result.n_failed, len(followup), out_dir)
    return result
