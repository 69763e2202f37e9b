"""``starlines history``: the epochs of one star across nights and its velocity variability."""

from __future__ import annotations

import argparse
import re

HELP = "show the epochs of one star in the archive and test its velocity for variability"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options of ``starlines history``."""
    parser.add_argument("star", metavar="STAR",
                        help="star name (any usual spelling, e.g. 'HD 12345' or 'hd12345') "
                        "or '#ID' for an archive star id")
    parser.add_argument("--archive", metavar="PATH", required=True,
                        help="SQLite archive written by 'starlines triage --archive'")
    parser.add_argument("--out", metavar="DIR",
                        help="also write DIR/<star>_epochs.ecsv and DIR/<star>_rv.png")


#: Display formats of the printed table (the ECSV keeps full precision).
_FORMATS = {"mjd_mid": ".5f", "rv": ".2f", "rv_err": ".2f", "rv2": ".2f", "snr": ".0f"}


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9+.-]+", "_", name).strip("_") or "star"


def _print_result(tab, res) -> None:
    ra, dec = tab.meta.get("ra"), tab.meta.get("dec")
    where = f" at RA {ra:.5f}, Dec {dec:+.5f} deg" if ra is not None and dec is not None else ""
    n = len(tab)
    print(f"{tab.meta['star']} (star #{tab.meta['star_id']}){where}: {n} "
          f"{'spectrum' if n == 1 else 'spectra'}, {res.n_used} with a comparable velocity")
    show = tab["night", "mjd_mid", "file", "label", "status", "rv", "rv_err", "rv_frame",
               "rv2", "sptype", "snr", "flags", "note"].copy()
    for col, fmt in _FORMATS.items():
        show[col].info.format = fmt
    show.pprint(max_lines=-1, max_width=-1)
    print(res.reason)
    for why in res.skipped:
        print(f"  skipped {why}")


def run(args: argparse.Namespace) -> int:
    """Print the epochs table and the variability verdict; write files with ``--out``."""
    import os

    from starlines.archive import Archive
    from starlines.errors import ConfigError

    with Archive(args.archive, create=False) as arch:
        tab = arch.epochs(args.star)
        res = arch.variability(tab.meta["star_id"])
    _print_result(tab, res)
    if args.out:
        from starlines.plots_history import save_velocity_history
        from starlines.tableio import write_table

        try:
            os.makedirs(args.out, exist_ok=True)
        except OSError as exc:
            raise ConfigError(f"cannot create the output folder ({exc.strerror})",
                              path=args.out) from exc
        stem = os.path.join(args.out, _safe(str(tab.meta["star"])))
        tab.meta.update(variable=res.variable, verdict=res.reason)
        write_table(tab, stem + "_epochs.ecsv")
        save_velocity_history(tab, stem + "_rv.png", result=res)
        print(f"wrote {stem}_epochs.ecsv and {stem}_rv.png")
    return 0
