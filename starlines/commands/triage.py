"""``starlines triage``: a whole night of spectra -> tables, figures, follow-up list, report."""

from __future__ import annotations

import argparse

HELP = "triage a night: measure, classify, velocities, flags, follow-up list and HTML report"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines triage``."""
    parser.add_argument("night_dir", metavar="NIGHT_DIR",
                        help="folder with the night's spectra (searched recursively)")
    parser.add_argument("--out", metavar="DIR",
                        help="output folder (default: NIGHT_DIR/triage)")
    parser.add_argument("--targets", metavar="FILE",
                        help="target list (CSV/ECSV: name or ra/dec, sptype, rv) to compare "
                             "types and velocities with")
    parser.add_argument("--workers", type=int, metavar="N",
                        help="local worker processes (default: all cores; 1 = serial)")
    parser.add_argument("--no-figures", action="store_true",
                        help="do not draw one figure per spectrum (faster)")
    parser.add_argument("--archive", metavar="PATH",
                        help="SQLite archive: store the night, flag velocity variables")
    parser.add_argument("--redo", action="store_true",
                        help="analyse every file again instead of resuming")
    dask = parser.add_mutually_exclusive_group()
    dask.add_argument("--scheduler", metavar="ADDRESS",
                      help="run on a Dask cluster at this scheduler address")
    dask.add_argument("--scheduler-file", metavar="FILE",
                      help="run on the Dask cluster described by this scheduler file")
    parser.add_argument("--site", metavar="NAME",
                        help="observatory of all spectra for the barycentric correction "
                             "(overrides the file headers)")
    parser.add_argument("--site-config", metavar="FILE",
                        help="TOML file with extra [sites.<name>] entries")
    parser.add_argument("--medium", choices=("air", "vacuum"),
                        help="wavelength medium of every file (overrides the headers)")
    parser.add_argument("--default-medium", choices=("air", "vacuum"), default="air",
                        help="medium assumed when a file does not state it (default: air)")
    parser.add_argument("--format", default="ecsv", metavar="LIST",
                        help="table formats, comma-separated: ecsv, csv, fits "
                             "(default: ecsv)")


def run(args: argparse.Namespace) -> int:
    """Run the triage; exit status 1 when some spectra failed, else 0."""
    import logging

    from starlines.triage import triage_night

    quiet = logging.getLogger("starlines").level > logging.INFO
    result = triage_night(
        args.night_dir, args.out, targets=args.targets, workers=args.workers,
        figures=not args.no_figures, archive=args.archive, redo=args.redo,
        scheduler=args.scheduler, scheduler_file=args.scheduler_file,
        formats=args.format.split(","), progress=not quiet, site=args.site,
        site_config=args.site_config, medium=args.medium, default_medium=args.default_medium,
    )
    print(f"{len(result.rows)} spectra ({result.analysed} files analysed, {result.reused} "
          f"reused), {result.n_failed} failed, {len(result.followup)} for follow-up")
    for row in result.followup[:10]:
        name = row.get("object") or row["file"]
        print(f"  {row['followup_rank']:>3}  {name:<20} {row.get('sptype') or '-':<12} "
              f"{row['followup_reason']}")
    print(f"report: {result.outputs.get('report', '(not written)')}")
    return 1 if result.n_failed else 0
