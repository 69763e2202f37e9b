"""``starlines flags``: what every follow-up flag means and how it is decided."""

from __future__ import annotations

import argparse

HELP = "list the follow-up flags: name, meaning, rule and follow-up weight"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines flags``."""
    parser.add_argument("--out", metavar="FILE",
                        help="write the flag table to FILE (ECSV; .csv, .fits by extension)")


def run(args: argparse.Namespace) -> int:
    """Print the flags, or write them as a table with ``--out``."""
    from starlines.flags import FLAGS

    if args.out:
        from astropy.table import Table

        from starlines.tableio import write_table

        tab = Table({"name": [f.name for f in FLAGS],
                     "description": [f.description for f in FLAGS],
                     "rule": [f.rule for f in FLAGS],
                     "interest": [f.interest for f in FLAGS],
                     "scope": [f.scope for f in FLAGS]})
        write_table(tab, args.out)
        print(f"wrote {len(tab)} flags to {args.out}")
        return 0
    width = max(len(f.name) for f in FLAGS)
    for f in FLAGS:
        print(f"{f.name:<{width}}  {f.description}")
        print(f"{'':<{width}}    rule: {f.rule}")
        print(f"{'':<{width}}    follow-up weight {f.interest:g}, decided per {f.scope}")
    return 0
