"""Writing result tables in open formats (ECSV by default; CSV, FITS, VOTable on request)."""

from __future__ import annotations

import os

from starlines.errors import ConfigError

__all__ = ["write_table", "FORMATS"]

#: File extension -> astropy format name.
FORMATS = {
    ".ecsv": "ascii.ecsv",
    ".csv": "ascii.csv",
    ".fits": "fits",
    ".vot": "votable",
    ".xml": "votable",
}


def write_table(table, path: str | os.PathLike, *, overwrite: bool = True) -> None:
    """Write an astropy table, choosing the format from the file extension.

    Parameters
    ----------
    table : astropy.table.Table or QTable
        Table to write; units are kept in ECSV, FITS and VOTable headers.
    path : str or path-like
        Output file; its extension selects the format (see :data:`FORMATS`).
    overwrite : bool
        Replace an existing file.

    Raises
    ------
    ConfigError
        If the extension is not one of :data:`FORMATS`.
    """
    ext = os.path.splitext(str(path))[1].lower()
    if ext not in FORMATS:
        raise ConfigError(
            f"cannot tell the table format from {ext!r}; use one of {sorted(FORMATS)}",
            path=str(path),
        )
    from astropy.table import Table

    fmt = FORMATS[ext]
    out = Table(table, copy=False)  # plain columns with units: a cleaner ECSV header
    if fmt in ("fits", "votable", "ascii.csv"):
        # FITS and VOTable cannot hold arbitrary Python objects in meta
        out.meta = {k: v for k, v in out.meta.items() if isinstance(v, (str, int, float, bool))}
    out.write(str(path), format=fmt, overwrite=overwrite)
