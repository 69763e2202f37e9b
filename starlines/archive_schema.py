"""Schema of the starlines archive, its migrations, and the checks on an archive file.

:func:`inspect_archive` looks at a file read-only and refuses anything that is not a
starlines archive; :func:`create_archive_file` builds a new archive beside the target and
moves it into place, so a half-created archive never appears. :func:`to_float` and
:func:`to_text` turn result-row values (Quantities, masked, NaN) into column values.

The archive is an SQLite file marked with our own ``PRAGMA application_id``
(:data:`APPLICATION_ID`) and versioned with ``PRAGMA user_version`` (:data:`SCHEMA_VERSION`).
A new archive is created at the current version by :func:`create_schema`. An older one is
brought up to date by :func:`migrate`, which applies :data:`MIGRATIONS` in order: migration
``k`` turns version ``k + 1`` into ``k + 2``, inside the caller's transaction.

Version history
---------------
1. ``stars``, ``spectra`` (unique on ``checksum, label``), ``line_measurements``
   (``ON DELETE CASCADE`` from ``spectra``).
2. ``star_names`` (aliases, normalised keys), ``nights``; ``spectra.extra`` (JSON of the
   remaining result-row fields) and ``spectra.stored_at``; indexes on star and night.
3. Index on ``stars.dec`` (the sky match reads only a declination band).

To change the schema: write ``_v3_to_v4(conn)``, append it to :data:`MIGRATIONS`, let
:data:`SCHEMA_VERSION` follow, and extend the migration test (it builds a v1 file and migrates it).
"""

from __future__ import annotations

import math
import os
import sqlite3
from collections.abc import Callable
from pathlib import Path

import numpy as np

from starlines.errors import ArchiveError

__all__ = [
    "APPLICATION_ID",
    "SCHEMA_VERSION",
    "MIGRATIONS",
    "SPECTRUM_COLUMNS",
    "LINE_COLUMNS",
    "create_schema",
    "create_v1",
    "migrate",
    "UNITS",
    "to_float",
    "to_text",
    "jsonable",
    "inspect_archive",
    "create_archive_file",
]

#: ``PRAGMA application_id`` of a starlines archive: the ASCII bytes "StLn" as an integer.
APPLICATION_ID = int.from_bytes(b"StLn", "big")

#: Result-row fields kept as columns of ``spectra`` (name -> SQL type). Everything else in a
#: row goes to the JSON column ``extra``.
SPECTRUM_COLUMNS = {
    "file": "TEXT", "label": "TEXT", "object": "TEXT", "status": "TEXT", "error": "TEXT",
    "mjd_mid": "REAL", "ra": "REAL", "dec": "REAL", "snr": "REAL",
    "sptype": "TEXT", "subtype": "REAL", "lumclass": "TEXT", "teff": "REAL", "logg": "REAL",
    "rv": "REAL", "rv_err": "REAL", "rv_frame": "TEXT", "rv_ccf": "REAL", "rv_ccf_err": "REAL",
    "rv2": "REAL", "barycentric_correction": "REAL", "flags": "TEXT",
}

#: Units in which Quantity values are stored.
UNITS = {"rv": "km/s", "rv_err": "km/s", "rv_ccf": "km/s", "rv_ccf_err": "km/s",
          "rv2": "km/s", "barycentric_correction": "km/s", "teff": "K", "ra": "deg",
          "dec": "deg", "ew": "Angstrom", "ew_err": "Angstrom", "centroid": "Angstrom",
          "fwhm": "Angstrom"}


#: Per-line fields kept as columns of ``line_measurements``.
LINE_COLUMNS = {
    "line": "TEXT", "ew": "REAL", "ew_err": "REAL", "centroid": "REAL", "rv": "REAL",
    "rv_err": "REAL", "fwhm": "REAL", "status": "TEXT",
}

_V1 = f"""
CREATE TABLE stars (
    id INTEGER PRIMARY KEY,
    name TEXT NOT NULL,
    name_key TEXT,
    ra REAL,
    dec REAL
);
CREATE TABLE spectra (
    id INTEGER PRIMARY KEY,
    star_id INTEGER REFERENCES stars(id) ON DELETE SET NULL,
    checksum TEXT NOT NULL,
    night TEXT,
    {", ".join(f'"{k}" {t}' for k, t in SPECTRUM_COLUMNS.items() if k != "label")},
    label TEXT NOT NULL DEFAULT '',
    UNIQUE (checksum, label)
);
CREATE TABLE line_measurements (
    id INTEGER PRIMARY KEY,
    spectrum_id INTEGER NOT NULL REFERENCES spectra(id) ON DELETE CASCADE,
    {", ".join(f'"{k}" {t}' for k, t in LINE_COLUMNS.items())},
    UNIQUE (spectrum_id, line)
);
CREATE INDEX idx_lines_spectrum ON line_measurements(spectrum_id);
"""


def create_v1(conn: sqlite3.Connection) -> None:
    """Create the version-1 schema (kept for migration tests and for :func:`create_schema`)."""
    for statement in _V1.split(";"):
        if statement.strip():
            conn.execute(statement)
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 1")


def _v1_to_v2(conn: sqlite3.Connection) -> None:
    """Version 1 -> 2: star aliases, nights, spectra.extra/stored_at, indexes."""
    conn.execute(
        "CREATE TABLE star_names (name_key TEXT NOT NULL, "
        "star_id INTEGER NOT NULL REFERENCES stars(id) ON DELETE CASCADE, "
        "PRIMARY KEY (name_key, star_id))"
    )
    conn.execute(
        "INSERT OR IGNORE INTO star_names (name_key, star_id) "
        "SELECT name_key, id FROM stars WHERE name_key IS NOT NULL"
    )
    conn.execute(
        "CREATE TABLE nights (label TEXT PRIMARY KEY, first_stored TEXT, last_stored TEXT)"
    )
    conn.execute(
        "INSERT OR IGNORE INTO nights (label) SELECT DISTINCT night FROM spectra "
        "WHERE night IS NOT NULL"
    )
    conn.execute("ALTER TABLE spectra ADD COLUMN extra TEXT")
    conn.execute("ALTER TABLE spectra ADD COLUMN stored_at TEXT")
    conn.execute("CREATE INDEX idx_spectra_star ON spectra(star_id)")
    conn.execute("CREATE INDEX idx_spectra_night ON spectra(night)")
    conn.execute("CREATE INDEX idx_star_names_star ON star_names(star_id)")


def _v2_to_v3(conn: sqlite3.Connection) -> None:
    """Version 2 -> 3: index on star declination (sky match reads a declination band)."""
    conn.execute("CREATE INDEX idx_stars_dec ON stars(dec)")


#: Migration functions; ``MIGRATIONS[k]`` upgrades version ``k + 1`` to ``k + 2``.
MIGRATIONS: list[Callable[[sqlite3.Connection], None]] = [_v1_to_v2, _v2_to_v3]

_SQLITE_MAGIC = b"SQLite format 3\x00"

#: Current schema version.
SCHEMA_VERSION = len(MIGRATIONS) + 1


def user_version(conn: sqlite3.Connection) -> int:
    """Return ``PRAGMA user_version``."""
    return int(conn.execute("PRAGMA user_version").fetchone()[0])


def migrate(conn: sqlite3.Connection) -> int:
    """Apply the missing migrations in order; the caller owns the transaction.

    Parameters
    ----------
    conn : sqlite3.Connection
        Connection inside an open write transaction.

    Returns
    -------
    int
        Number of migrations applied.
    """
    start = user_version(conn)
    for version in range(start, SCHEMA_VERSION):
        MIGRATIONS[version - 1](conn)
        conn.execute(f"PRAGMA user_version = {version + 1}")
    return SCHEMA_VERSION - start


def create_schema(conn: sqlite3.Connection) -> None:
    """Create the current schema in an empty database: version 1 plus every migration."""
    create_v1(conn)
    migrate(conn)


# --------------------------------------------------------------- values and files
def _missing(x) -> bool:
    return x is None or x is np.ma.masked


def to_float(x, unit: str | None = None) -> float | None:
    """Plain float or None (None, masked, NaN, non-numeric)."""
    if _missing(x):
        return None
    if hasattr(x, "to_value") and unit:
        x = x.to_value(unit)
    elif hasattr(x, "mjd"):
        x = x.mjd
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def to_text(x) -> str | None:
    if _missing(x):
        return None
    if isinstance(x, (list, tuple)):
        return ",".join(str(v) for v in x)
    s = str(x)
    return s if s.strip() else None


def jsonable(x):
    """A JSON-safe copy of a row value for the ``extra`` column."""
    if x is None or isinstance(x, (bool, int, str)):
        return x
    if isinstance(x, (float, np.floating, np.integer, np.bool_)):
        return x.item() if isinstance(x, np.generic) and not math.isnan(float(x)) else to_float(x)
    return to_text(x)


def inspect_archive(path: str | os.PathLike) -> int | None:
    """Look at a file read-only and say whether it is a starlines archive.

    Parameters
    ----------
    path : str or path-like
        Candidate archive.

    Returns
    -------
    int or None
        Its schema version, or None when there is nothing yet (missing or empty file).

    Raises
    ------
    ArchiveError
        Not SQLite, another application's database, corrupt, or a newer schema.
    """
    p = Path(path)
    if not p.exists() or (p.is_file() and p.stat().st_size == 0):
        return None
    if not p.is_file():
        raise ArchiveError("is not a file", path=str(p))
    with open(p, "rb") as fh:
        head = fh.read(len(_SQLITE_MAGIC))
    if head != _SQLITE_MAGIC:
        raise ArchiveError("not an SQLite database (wrong header); left untouched",
                           path=str(p))
    try:
        conn = sqlite3.connect(p.resolve().as_uri() + "?mode=ro", uri=True)
        try:
            app_id = int(conn.execute("PRAGMA application_id").fetchone()[0])
            version = user_version(conn)
            check = [line for (r,) in conn.execute("PRAGMA quick_check").fetchall()
                     for line in str(r).splitlines() if line.strip() and "***" not in line]
        finally:
            conn.close()
    except sqlite3.DatabaseError as exc:
        raise ArchiveError(f"corrupt or unreadable SQLite file ({exc}); left untouched",
                           path=str(p)) from exc
    if app_id != APPLICATION_ID:
        raise ArchiveError(f"an SQLite database of another application (application_id "
                           f"{app_id}), not a starlines archive; left untouched", path=str(p))
    if version > SCHEMA_VERSION:
        raise ArchiveError(f"archive schema v{version} is newer than this starlines "
                           f"(v{SCHEMA_VERSION}); upgrade starlines", path=str(p))
    if version < 1:
        raise ArchiveError("starlines application id but no schema; left untouched",
                           path=str(p))
    if check != ["ok"]:
        more = f" and {len(check) - 1} more problem(s)" if len(check) > 1 else ""
        raise ArchiveError(f"corrupt archive (quick_check: {check[0]}{more}); left untouched",
                           path=str(p))
    return version


def create_archive_file(path: Path) -> None:
    """Build a fresh archive beside ``path`` and move it into place atomically."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    conn = sqlite3.connect(tmp, isolation_level=None)
    try:
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("BEGIN")
        create_schema(conn)
        conn.execute("COMMIT")
    finally:
        conn.close()
    try:
        if path.exists() and path.stat().st_size == 0:
            os.replace(tmp, path)
        else:
            os.link(tmp, path)  # fails if another process created it meanwhile: use theirs
    except FileExistsError:
        pass
    finally:
        tmp.unlink(missing_ok=True)


