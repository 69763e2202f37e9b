"""``starlines classify``: MK types for spectrum files, one row per spectrum."""

from __future__ import annotations

import argparse

HELP = "MK-classify spectra (line-ratio rules + nearest-neighbour model), one row per file"

#: Output columns, in order.
COLUMNS = ("file", "object", "status", "error", "snr", "sptype", "subtype", "subtype_err",
           "lumclass", "teff", "teff_err", "logg", "logg_err", "he_abundance", "vsini",
           "flags")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines classify``."""
    parser.add_argument("files", nargs="+", metavar="FILE", help="spectrum files")
    parser.add_argument(
        "--out", metavar="TABLE",
        help="write the rows to TABLE (ECSV; .csv, .fits, .vot by extension)",
    )


def classify_file(path: str) -> dict:
    """Read, measure and classify one file; a failure gives a row with status "failed"."""
    import logging
    import math
    import warnings

    from starlines.classify import classify
    from starlines.errors import StarlinesError
    from starlines.measure import measure_spectrum
    from starlines.readers import read_spectrum

    row = {c: "" for c in COLUMNS}
    row.update({c: math.nan for c in ("snr", "subtype", "subtype_err", "teff", "teff_err",
                                      "logg", "logg_err", "he_abundance", "vsini")})
    row.update(file=str(path), status="ok")
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            spec = read_spectrum(path)
            row["object"] = spec.meta.object or ""
            measurement = measure_spectrum(spec)
            meta = measurement.table.meta
            row["snr"] = float(meta.get("snr", math.nan))
            row["vsini"] = float(meta.get("vsini", math.nan) or math.nan)
            c = classify(measurement)
        for w in caught:  # assumptions made on the way are logged, not fatal
            logging.getLogger("starlines").warning(str(w.message).splitlines()[0])
    except StarlinesError as exc:
        row.update(status="failed", error=str(exc).splitlines()[0])
        return row
    except Exception as exc:  # noqa: BLE001 - one bad file never stops the rest
        row.update(status="failed", error=f"{path}: {type(exc).__name__}: {exc}".splitlines()[0])
        return row
    values = c.as_row()
    row.update({k: values[k] for k in COLUMNS if k in values})
    return row


def rows_table(rows):
    """Rows as an astropy Table with units on the physical columns."""
    import astropy.units as u
    from astropy.table import Table

    tab = Table(rows=[[r[c] for c in COLUMNS] for r in rows], names=COLUMNS) if rows \
        else Table(names=COLUMNS)
    for col, unit in (("teff", u.K), ("teff_err", u.K), ("vsini", u.km / u.s)):
        tab[col].unit = unit
    for col in ("snr", "subtype", "subtype_err", "logg", "logg_err", "he_abundance"):
        tab[col].info.format = ".2f"
    for col in ("teff", "teff_err", "vsini"):
        tab[col].info.format = ".0f"
    return tab


def run(args: argparse.Namespace) -> int:
    """Classify every file; print the table or write it; exit 1 if any file failed."""
    import logging

    from starlines.tableio import write_table

    log = logging.getLogger("starlines")
    rows = []
    for path in args.files:
        row = classify_file(path)
        if row["status"] == "failed":
            log.error(row["error"])
        rows.append(row)
    tab = rows_table(rows)
    if args.out:
        write_table(tab, args.out)
        print(f"wrote {len(tab)} rows to {args.out}")
    else:
        tab.pprint(max_lines=-1, max_width=-1)
    return 1 if any(r["status"] == "failed" for r in rows) else 0
