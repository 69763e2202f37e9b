"""The archive across nights: every triage result in one SQLite file.

Interface (binding for ``starlines triage NIGHT --archive PATH``)
-----------------------------------------------------------------
``with Archive(path) as archive:`` (or ``Archive.open(path)``) opens the archive, creating it
when the path does not exist. A file that is not SQLite, an SQLite database of another
application (no starlines ``application_id``), a corrupt file or an archive of a newer
schema raises :class:`~starlines.errors.ArchiveError` with a one-line message and the file
is left untouched (it is inspected read-only first; tables are never created in a foreign
database). An older schema is migrated in one transaction.

``archive.store_spectrum(row, lines) -> int`` stores one spectrum atomically (its row and all
its line rows, or nothing) and returns its spectrum id. ``row`` is a result row (DEVELOPERS.md
"Result rows") plus ``checksum`` (:func:`file_checksum` of the file) and ``night`` (a
label). ``lines`` are dicts with ``line, ew, ew_err, centroid, rv, rv_err, fwhm, status``.
Quantities are converted (km/s, K, deg, Angstrom); missing, masked and NaN values are NULL.
Storing the same ``(checksum, label)`` again replaces that spectrum and its lines: rerunning
a night never duplicates rows.

``archive.star_of(spectrum_id)`` gives the star a spectrum was attached to;
``archive.variability(star_id_or_name) -> VariabilityResult``;
``archive.flag_variables(names) -> dict[name, VariabilityResult]`` (never raises for an
unknown or ambiguous name: the result says why); ``archive.epochs(star) -> Table``.

Robustness: WAL journal, ``busy_timeout`` and retries when another process holds the lock;
every write in one ``BEGIN IMMEDIATE`` transaction, so a killed run leaves whole spectra only
and two writers serialise. One :class:`Archive` per process (do not share across a fork).
"""

from __future__ import annotations

import hashlib
import json
import logging
import math
import numbers
import os
import sqlite3
import time
from collections.abc import Callable, Iterable
from datetime import datetime, timezone
from pathlib import Path

from starlines.archive_schema import (
    LINE_COLUMNS,
    SCHEMA_VERSION,
    SPECTRUM_COLUMNS,
    UNITS,
    create_archive_file,
    inspect_archive,
    jsonable,
    migrate,
    to_float,
    to_text,
)
from starlines.errors import ArchiveError
from starlines.identity import DEFAULT_RADIUS_ARCSEC, StarRecord, normalise_name, resolve
from starlines.variability import VariabilityResult, velocity_variability

__all__ = ["Archive", "file_checksum", "inspect_archive"]

log = logging.getLogger("starlines.archive")

def file_checksum(path: str | os.PathLike, *, chunk: int = 1 << 20) -> str:
    """Return the SHA-256 hex digest of a file's bytes (the archive's spectrum identity)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            h.update(block)
    return h.hexdigest()


def _is_locked(exc: Exception) -> bool:
    msg = str(exc).lower()
    return "locked" in msg or "busy" in msg


class Archive:
    """An SQLite archive of spectra, line measurements and stars across nights.

    Parameters
    ----------
    path : str or path-like
        Archive file.
    create : bool
        Create the archive when the file does not exist (else :class:`ArchiveError`).
    radius_arcsec : float
        Sky cross-match radius of star identity (:mod:`starlines.identity`).
    timeout : float
        Seconds to wait for another process's lock before each retry.
    retries : int
        Retries of a write transaction that found the database locked.
    """

    def __init__(self, path: str | os.PathLike, *, create: bool = True,
                 radius_arcsec: float = DEFAULT_RADIUS_ARCSEC, timeout: float = 10.0,
                 retries: int = 10):
        self.path = Path(path)
        self.radius_arcsec = float(radius_arcsec)
        self.retries = int(retries)
        version = inspect_archive(self.path)
        if version is None:
            if not create:
                raise ArchiveError("no archive at this path", path=str(self.path))
            try:
                create_archive_file(self.path)
            except (OSError, sqlite3.Error) as exc:
                raise ArchiveError(f"cannot create the archive ({exc})",
                                   path=str(self.path)) from exc
            version = inspect_archive(self.path)
        try:
            self._conn = sqlite3.connect(self.path, timeout=timeout, isolation_level=None)
            self._conn.execute(f"PRAGMA busy_timeout = {int(timeout * 1000)}")
            self._conn.execute("PRAGMA foreign_keys = ON")
            self._conn.execute("PRAGMA journal_mode = WAL")
            self._conn.execute("PRAGMA synchronous = NORMAL")
        except sqlite3.Error as exc:
            raise ArchiveError(f"cannot open the archive ({exc})", path=str(self.path)) from exc
        if version < SCHEMA_VERSION:
            applied = self._write(migrate)
            log.info("%s: archive migrated from schema v%d (%d step(s))",
                     self.path, version, applied)

    @classmethod
    def open(cls, path: str | os.PathLike, **kwargs) -> Archive:
        """Open (or create) an archive; same arguments as the constructor."""
        return cls(path, **kwargs)

    def __enter__(self) -> Archive:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Close the connection (idempotent)."""
        if getattr(self, "_conn", None) is not None:
            self._conn.close()
            self._conn = None

    # ----------------------------------------------------------------- transactions
    def _write(self, fn: Callable, *args):
        """Run ``fn(conn, *args)`` in one write transaction, retrying while locked."""
        delay = 0.05
        for attempt in range(self.retries + 1):
            try:
                self._conn.execute("BEGIN IMMEDIATE")
                out = fn(self._conn, *args)
                self._conn.execute("COMMIT")
                return out
            except BaseException as exc:
                if self._conn.in_transaction:
                    self._conn.execute("ROLLBACK")
                if not isinstance(exc, sqlite3.Error):
                    raise
                if _is_locked(exc) and attempt < self.retries:
                    log.debug("%s: database locked, retrying in %.2f s", self.path, delay)
                    time.sleep(delay)
                    delay = min(2 * delay, 1.0)
                    continue
                why = ("the database stayed locked by another process"
                       if _is_locked(exc) else str(exc))
                raise ArchiveError(f"write failed and was rolled back ({why})",
                                   path=str(self.path)) from exc
        raise AssertionError("unreachable")  # pragma: no cover

    def _query(self, sql: str, params: Iterable = ()) -> list[sqlite3.Row]:
        cur = self._conn.cursor()
        cur.row_factory = sqlite3.Row
        return cur.execute(sql, tuple(params)).fetchall()

    # ----------------------------------------------------------------- storing
    def _spectrum_values(self, row: dict) -> dict:
        checksum = to_text(row.get("checksum"))
        if not checksum:
            raise ArchiveError(f"result row for {row.get('file')!r} has no checksum; "
                               "compute it with file_checksum(path)", path=str(self.path))
        values = {"checksum": checksum, "night": to_text(row.get("night")),
                  "label": to_text(row.get("label")) or ""}
        for col, sqltype in SPECTRUM_COLUMNS.items():
            if col != "label":
                raw = row.get(col)
                values[col] = to_float(raw, UNITS.get(col)) if sqltype == "REAL" else to_text(raw)
        rest = {k: jsonable(v) for k, v in row.items()
                if k not in values and k not in SPECTRUM_COLUMNS}
        values["extra"] = json.dumps(rest, sort_keys=True) if rest else None
        values["stored_at"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
        return values

    @staticmethod
    def _line_values(d: dict) -> tuple:
        if not to_text(d.get("line")):
            raise ArchiveError(f"line measurement without a line id: {d!r}")
        return tuple(to_float(d.get(c), UNITS.get(c)) if t == "REAL" else to_text(d.get(c))
                     for c, t in LINE_COLUMNS.items())

    def store_spectrum(self, row: dict, lines: Iterable[dict] = ()) -> int:
        """Store one spectrum and its line measurements in one transaction.

        Parameters
        ----------
        row : dict
            Result row plus ``checksum`` and ``night`` (see the module docstring).
        lines : iterable of dict
            Per-line measurements of this spectrum.

        Returns
        -------
        int
            Spectrum id (unchanged when the same checksum and label are stored again).

        Raises
        ------
        ArchiveError
            Missing checksum or line id, or a database error (nothing is stored then).
        """
        values = self._spectrum_values(row)
        line_values = [self._line_values(d) for d in lines]
        return self._write(self._store, values, line_values)

    def store_night(self, rows: Iterable[dict], lines: Iterable[dict] = ()) -> list[int]:
        """Store many spectra, one transaction each; ``lines`` are matched on file and label."""
        by_key: dict[tuple, list] = {}
        for d in lines:
            by_key.setdefault((to_text(d.get("file")), to_text(d.get("label")) or ""), []).append(d)
        return [self.store_spectrum(r, by_key.get((to_text(r.get("file")),
                                                   to_text(r.get("label")) or ""), []))
                for r in rows]

    def _load_stars(self, conn: sqlite3.Connection, key: str | None,
                    dec: float | None) -> list[StarRecord]:
        """Candidate stars: those known by ``key`` and those in a declination band."""
        band = self.radius_arcsec / 3600.0 + 1e-9
        lo, hi = (None, None) if dec is None else (dec - band, dec + band)
        rows = conn.execute(
            "SELECT s.id, s.name, s.ra, s.dec, (SELECT group_concat(name_key, char(31)) "
            "FROM star_names n WHERE n.star_id = s.id) FROM stars s "
            "WHERE s.id IN (SELECT star_id FROM star_names WHERE name_key = ?) "
            "OR s.dec BETWEEN ? AND ? ORDER BY s.id", (key, lo, hi)
        ).fetchall()
        return [StarRecord(i, name, ra, dec, frozenset(keys.split("\x1f") if keys else ()))
                for i, name, ra, dec, keys in rows]

    def _attach_star(self, conn: sqlite3.Connection, values: dict) -> int | None:
        name, ra, dec = values["object"], values["ra"], values["dec"]
        stars = self._load_stars(conn, normalise_name(name), dec)
        m = resolve(name, ra, dec, stars, radius_arcsec=self.radius_arcsec)
        if m.how == "none":
            log.warning("%s: no object name and no coordinates; stored without a star",
                        values["file"])
            return None
        if m.star_id is None:
            display = " ".join(name.split()) if m.key else f"J{ra:08.4f}{dec:+08.4f}"
            star_id = conn.execute("INSERT INTO stars (name, name_key, ra, dec) "
                                   "VALUES (?, ?, ?, ?)", (display, m.key, ra, dec)).lastrowid
        else:
            star_id = m.star_id
            if ra is not None and dec is not None:
                conn.execute("UPDATE stars SET ra = ?, dec = ? WHERE id = ? AND "
                             "(ra IS NULL OR dec IS NULL)", (ra, dec, star_id))
            if m.key:  # a star known only by position takes its first real name
                conn.execute("UPDATE stars SET name = ?, name_key = ? WHERE id = ? AND "
                             "name_key IS NULL", (" ".join(name.split()), m.key, star_id))
        if m.key:
            conn.execute("INSERT OR IGNORE INTO star_names (name_key, star_id) VALUES (?, ?)",
                         (m.key, star_id))
        return star_id

    def _store(self, conn: sqlite3.Connection, values: dict, lines: list[tuple]) -> int:
        values = dict(values, star_id=self._attach_star(conn, values))
        cols = list(values)
        found = conn.execute("SELECT id FROM spectra WHERE checksum = ? AND label = ?",
                             (values["checksum"], values["label"])).fetchone()
        if found:
            spec_id = found[0]
            conn.execute(f"UPDATE spectra SET {', '.join(f'{_q(c)} = ?' for c in cols)} "
                         "WHERE id = ?", [values[c] for c in cols] + [spec_id])
            conn.execute("DELETE FROM line_measurements WHERE spectrum_id = ?", (spec_id,))
        else:
            spec_id = conn.execute(
                f"INSERT INTO spectra ({', '.join(_q(c) for c in cols)}) "
                f"VALUES ({', '.join('?' * len(cols))})", [values[c] for c in cols]
            ).lastrowid
        lcols = ", ".join(_q(c) for c in LINE_COLUMNS)
        conn.executemany(
            f"INSERT INTO line_measurements (spectrum_id, {lcols}) "
            f"VALUES (?, {', '.join('?' * len(LINE_COLUMNS))})",
            [(spec_id, *lv) for lv in lines],
        )
        if values["night"]:
            now = values["stored_at"]
            conn.execute("INSERT INTO nights (label, first_stored, last_stored) VALUES (?, ?, ?) "
                         "ON CONFLICT(label) DO UPDATE SET last_stored = excluded.last_stored",
                         (values["night"], now, now))
        return spec_id

    # ----------------------------------------------------------------- reading
    def star_of(self, spectrum_id: int) -> int | None:
        """Star id of a stored spectrum (None when it has no star)."""
        row = self._query("SELECT star_id FROM spectra WHERE id = ?", (int(spectrum_id),))
        if not row:
            raise ArchiveError(f"no spectrum #{spectrum_id}", path=str(self.path))
        return row[0]["star_id"]

    def find_star(self, star: int | str) -> int:
        """Star id from an id or a name (normalised; ``"#12"`` also means id 12)."""
        if isinstance(star, str) and star.strip().startswith("#") and star.strip()[1:].isdigit():
            star = int(star.strip()[1:])
        if isinstance(star, numbers.Integral):
            star = int(star)
            if not self._query("SELECT id FROM stars WHERE id = ?", (star,)):
                raise ArchiveError(f"no star #{star} in the archive", path=str(self.path))
            return star
        key = normalise_name(star)
        rows = self._query("SELECT s.id, s.name, s.ra, s.dec FROM star_names n JOIN stars s "
                           "ON s.id = n.star_id WHERE n.name_key = ? ORDER BY s.id", (key,))
        if not rows:
            raise ArchiveError(f"no star named {star!r} in the archive", path=str(self.path))
        if len(rows) > 1:
            which = "; ".join(f"#{r['id']} at ({r['ra']}, {r['dec']})" for r in rows)
            raise ArchiveError(f"name {star!r} is shared by stars at different positions "
                               f"({which}); give the star as #id", path=str(self.path))
        return rows[0]["id"]

    def epochs(self, star: int | str):
        """All spectra of a star, oldest first, as an astropy Table with units.

        Columns: ``night, mjd_mid, file, label, status, object, rv, rv_err, rv_frame, rv_ccf,
        rv2, sptype, subtype, teff, snr, flags, used`` (bool: enters the variability test)
        and ``note`` (why not). Meta: ``star_id``, ``star`` (canonical name), ``ra``, ``dec``.
        """
        import astropy.units as u
        from astropy.table import Table

        from starlines.variability import usable_epoch

        star_id = self.find_star(star)
        info = self._query("SELECT name, ra, dec FROM stars WHERE id = ?", (star_id,))[0]
        cols = ["night", "mjd_mid", "file", "label", "status", "object", "rv", "rv_err",
                "rv_frame", "rv_ccf", "rv2", "sptype", "subtype", "teff", "snr", "flags"]
        rows = self._query(f"SELECT {', '.join(_q(c) for c in cols)} FROM spectra "
                           "WHERE star_id = ? ORDER BY mjd_mid IS NULL, mjd_mid, id",
                           (star_id,))
        real = {c: SPECTRUM_COLUMNS.get(c) == "REAL" for c in cols}
        data = {c: [(math.nan if real[c] else "") if r[c] is None else r[c] for r in rows]
                for c in cols}
        notes = [usable_epoch(r["rv"], r["rv_err"], r["rv_frame"]) or "" for r in rows]
        data["used"] = [not n for n in notes]
        data["note"] = notes
        tab = Table(data, names=cols + ["used", "note"],
                    dtype=[float if real[c] else str for c in cols]
                    + [bool, str])
        for c in ("rv", "rv_err", "rv_ccf", "rv2"):
            tab[c].unit = u.km / u.s
        tab["teff"].unit = u.K
        tab["mjd_mid"].unit = u.day
        tab.meta.update(star_id=star_id, star=info["name"], ra=info["ra"], dec=info["dec"])
        return tab

    def variability(self, star: int | str) -> VariabilityResult:
        """Velocity-variability test of one star over all its archived epochs."""
        tab = self.epochs(star)
        labels = [f"{n or '?'} {f}[{lab}]" if lab else f"{n or '?'} {f}"
                  for n, f, lab in zip(tab["night"], tab["file"], tab["label"])]
        return velocity_variability(list(tab["rv"]), list(tab["rv_err"]),
                                    [f or None for f in tab["rv_frame"]], labels=labels,
                                    star_id=tab.meta["star_id"], name=tab.meta["star"])

    def flag_variables(self, names: Iterable[int | str]) -> dict:
        """Variability of each named star; unknown or ambiguous names get ``variable=False``
        and the reason, never an exception."""
        out = {}
        for name in names:
            try:
                out[name] = self.variability(name)
            except ArchiveError as exc:
                out[name] = VariabilityResult(name=str(name), reason=exc.reason)
        return out

    def stars(self):
        """Table of stars: ``id, name, ra, dec, n_spectra, names`` (normalised aliases)."""
        from astropy.table import Table

        rows = self._query(
            "SELECT s.id, s.name, s.ra, s.dec, (SELECT count(*) FROM spectra p WHERE "
            "p.star_id = s.id) AS n, (SELECT group_concat(name_key, ' | ') FROM star_names n "
            "WHERE n.star_id = s.id) AS names FROM stars s ORDER BY s.id")
        return Table(rows=[(r[0], r[1], _nan(r[2]), _nan(r[3]), r[4], r[5] or "")
                           for r in rows] or None,
                     names=["id", "name", "ra", "dec", "n_spectra", "names"],
                     dtype=[int, str, float, float, int, str])

    def counts(self) -> dict[str, int]:
        """Row count of every table."""
        return {t: self._query(f"SELECT count(*) FROM {t}")[0][0]
                for t in ("stars", "star_names", "spectra", "line_measurements", "nights")}

    def integrity_check(self) -> str:
        """``PRAGMA integrity_check`` plus a foreign-key check; ``"ok"`` when all is well."""
        res = self._query("PRAGMA integrity_check")[0][0]
        bad_fk = self._query("PRAGMA foreign_key_check")
        return res if not bad_fk else f"{res}; {len(bad_fk)} foreign-key violation(s)"


def _q(col: str) -> str:
    return f'"{col}"'


def _nan(x):
    return math.nan if x is None else x
