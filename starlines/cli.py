"""The ``starlines`` command line: one parser, thin subcommands over library functions.

Each subcommand lives in :mod:`starlines.commands` as a light module exposing ``HELP``,
``add_arguments(parser)`` and ``run(args) -> int``; heavy imports happen inside ``run`` so
that start-up stays fast.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

from starlines import __version__
from starlines.errors import StarlinesError

__all__ = ["main", "build_parser"]

#: Subcommand name -> module in starlines.commands, in the order shown by --help.
COMMANDS = (
    "demo",
    "triage",
    "measure",
    "classify",
    "velocity",
    "history",
    "lines",
    "flags",
    "grid",
)

log = logging.getLogger("starlines")


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every available subcommand."""
    parser = argparse.ArgumentParser(
        prog="starlines",
        description="Triage a night of hot-star spectra: measure lines, classify, "
        "measure velocities, flag what needs follow-up.",
    )
    parser.add_argument("--version", action="version", version=f"starlines {__version__}")
    verbosity = parser.add_mutually_exclusive_group()
    verbosity.add_argument("-v", "--verbose", action="store_true", help="log debug messages")
    verbosity.add_argument("-q", "--quiet", action="store_true", help="log errors only")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        modname = f"starlines.commands.{name}"
        try:
            mod = importlib.import_module(modname)
        except ModuleNotFoundError as exc:  # a subcommand still under construction
            if exc.name != modname:
                raise
            continue
        p = sub.add_parser(name, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


def _setup_logging(verbose: bool, quiet: bool) -> None:
    level = logging.DEBUG if verbose else logging.ERROR if quiet else logging.INFO
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(levelname)s: %(message)s"))
    log.handlers[:] = [handler]
    log.setLevel(level)
    # propagation stays on: an application or test harness that listens at the root keeps
    # hearing starlines (the root has no handler of its own in a plain command-line run)


def main(argv: list[str] | None = None) -> int:
    """Run the command line.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name; ``sys.argv[1:]`` when None.

    Returns
    -------
    int
        Exit status: 0 success, 1 finished with failures, 2 usage or input error.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    _setup_logging(args.verbose, args.quiet)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    try:
        return int(args._run(args) or 0)
    except StarlinesError as exc:
        print(f"starlines {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into head and the like
        return 0
    except KeyboardInterrupt:
        print(f"starlines {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
