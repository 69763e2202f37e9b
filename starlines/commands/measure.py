"""``starlines measure``: continuum, equivalent widths, velocities and v sin i of one file."""

from __future__ import annotations

import argparse

HELP = "measure equivalent widths, line velocities and v sin i in one spectrum file"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines measure``."""
    parser.add_argument("file", metavar="FILE", help="spectrum file (FITS or text)")
    parser.add_argument(
        "--out", metavar="FILE",
        help="write the line table to FILE (ECSV; .csv, .fits and .vot by extension) "
        "instead of printing it",
    )
    parser.add_argument(
        "--medium", choices=("air", "vacuum"), default=None,
        help="medium of the file's wavelengths (default: as stated by the file, else air)",
    )
    parser.add_argument(
        "--wavelength-unit", metavar="U", default=None,
        help="unit of the file's wavelengths, e.g. Angstrom or nm (default: from the file)",
    )


def _summary(table) -> str:
    m = table.meta
    if m["vsini_upper_limit"]:
        vs = f"v sin i < {m['vsini']:.0f} km/s ({m['vsini_line']}, resolution floor)"
    elif m["vsini"] == m["vsini"]:  # not NaN
        vs = f"v sin i = {m['vsini']:.0f} +- {m['vsini_err']:.0f} km/s ({m['vsini_line']})"
    else:
        vs = "v sin i: no line measured well enough (starlines.measure.VSINI_TIERS)"
    return (f"S/N {m['snr']:.0f} ({m['snr_source']}), {m['medium']}"
            f"{' (assumed)' if m['medium_assumed'] else ''}, resolution "
            f"{m['resolution_fwhm']:.2f} A ({m['resolution_source']}), continuum scatter "
            f"{m['continuum_scatter']:.4f}, {100 * m['continuum_fraction_kept']:.0f} % kept; {vs}")


def run(args: argparse.Namespace) -> int:
    """Measure the file; print the table or write it with ``--out``."""
    from starlines.measure import measure_spectrum
    from starlines.readers import describe, read_spectrum
    from starlines.tableio import write_table

    spec = read_spectrum(args.file, wavelength_unit=args.wavelength_unit, medium=args.medium)
    table = measure_spectrum(spec).table
    table.meta["file"] = str(args.file)
    print(describe(spec))
    print(_summary(table))
    if args.out:
        write_table(table, args.out)
        print(f"wrote {len(table)} lines to {args.out}")
        return 0
    show = table["line", "ew", "ew_err", "centroid", "rv", "rv_err", "fwhm", "depth",
                 "significance", "status", "emission", "blended_with"]
    show.pprint(max_lines=-1, max_width=-1)
    return 0
