"""``starlines lines``: print or write the line catalogue."""

from __future__ import annotations

import argparse

HELP = "print the line catalogue (hydrogenic lines computed, He I and metals from NIST)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines lines``."""
    parser.add_argument(
        "--medium", choices=("air", "vacuum"), default="air",
        help="medium of the 'wavelength' column (default: air)",
    )
    parser.add_argument(
        "--out", metavar="FILE",
        help="write the catalogue to FILE (ECSV; .csv, .fits and .vot by extension)",
    )


def run(args: argparse.Namespace) -> int:
    """Print the catalogue, or write it when ``--out`` is given."""
    from starlines.lines import catalogue
    from starlines.tableio import write_table

    tab = catalogue(args.medium)
    if args.out:
        write_table(tab, args.out)
        print(f"wrote {len(tab)} lines to {args.out}")
    else:
        show = tab["id", "ion", "name", "wavelength", "wavelength_vacuum", "wavelength_air",
                   "origin", "blends"]
        show.pprint(max_lines=-1, max_width=-1)
    return 0
