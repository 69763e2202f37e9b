"""``starlines grid``: rebuild or describe the synthetic equivalent-width grid."""

from __future__ import annotations

import argparse

HELP = "build or show the grid of synthetic equivalent widths used by the classifier"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the ``build`` and ``show`` actions."""
    sub = parser.add_subparsers(dest="grid_action", metavar="ACTION", required=True)
    build = sub.add_parser("build", help="recompute the grid (about a minute or two)")
    build.add_argument("--out", metavar="FILE",
                       help="write to FILE (.ecsv) instead of the shipped grid file")
    build.add_argument("--no-progress", action="store_true", help="no progress bar")
    show = sub.add_parser("show", help="print the grid's model, calibration and axes")
    show.add_argument("--file", metavar="FILE", help="grid file (default: the shipped grid)")
    show.add_argument("--teff", type=float, help="also print the EWs of the nearest model")
    show.add_argument("--logg", type=float, default=4.0, help="log g for --teff (default 4.0)")
    show.add_argument("--he", type=float, default=0.1, help="He/H for --teff (default 0.1)")


def run(args: argparse.Namespace) -> int:
    """Build or show the grid."""
    from starlines.grid import build_grid, grid_output_path, load_grid, nearest_model, write_grid

    if args.grid_action == "build":
        grid_output_path(args.out)  # fail before a minute of work, not after
        tab = build_grid(progress=not args.no_progress)
        path = write_grid(tab, args.out)
        print(f"wrote {len(tab)} models x {len(tab.colnames) - 4} lines to {path}")
        return 0
    tab = load_grid(args.file)
    meta = tab.meta
    print(f"model version : {meta.get('model_version')}")
    print(f"models        : {len(tab)}")
    for axis in ("teff", "logg", "he"):
        values = sorted(set(float(v) for v in tab[axis]))
        print(f"{axis:<14}: {values[0]:g} .. {values[-1]:g} ({len(values)} values)")
    lines = [c[3:] for c in tab.colnames if c.startswith("ew_")]
    print(f"lines         : {len(lines)} ({', '.join(lines)})")
    print(f"calibration   : {meta.get('calibration')}")
    if args.teff is not None:
        row = tab[nearest_model(tab, args.teff, args.logg, args.he)]
        print(f"nearest model : Teff {row['teff']:.0f} K, log g {row['logg']:.2f}, "
              f"He/H {row['he']:.2f}")
        for name in lines:
            print(f"  {name:<10} {row['ew_' + name]:8.3f} A")
    return 0
