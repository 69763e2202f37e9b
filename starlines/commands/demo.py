"""``starlines demo``: write the invented demo night and triage it."""

from __future__ import annotations

import argparse

HELP = "write an invented demo night (synthetic spectra, target list) and triage it"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines demo``."""
    parser.add_argument("--out", default="demo-night", metavar="DIR",
                        help="folder to write into (default: demo-night)")
    parser.add_argument("--no-triage", action="store_true",
                        help="only write the spectra and the target list")
    parser.add_argument("--workers", type=int, metavar="N",
                        help="worker processes for the triage (default: all cores)")
    parser.add_argument("--no-figures", action="store_true",
                        help="triage without per-star figures")


def run(args: argparse.Namespace) -> int:
    """Write the demo night; triage it unless ``--no-triage``. Exit status 0."""
    import os

    from starlines.demo import write_demo_night

    made = write_demo_night(args.out)
    print(f"wrote {len(made['files'])} spectra to {made['night']} and the target list "
          f"{made['targets']} (invented data, for demonstrations only)")
    if args.no_triage:
        return 0
    from starlines.triage import triage_night

    result = triage_night(made["night"], os.path.join(args.out, "triage"),
                          targets=made["targets"], workers=args.workers,
                          figures=not args.no_figures)
    print(f"{len(result.rows)} spectra, {result.n_failed} failed (one file is corrupt on "
          f"purpose), {len(result.followup)} for follow-up")
    print(f"report: {result.outputs['report']}")
    return 0
