"""The ``massfit`` command: builds the parser from one module per command and dispatches.

Each command's module (``massfit.cli.fit``, ``demo``, ``batch``, ``plan``, ``redraw``,
``compare``) has
``add_parser(subparsers)`` and ``run(args) -> exit status``; a new command is a new module
and one entry in ``COMMANDS``. Exit statuses: ``massfit.cli.status``.
"""

from __future__ import annotations

import argparse
import sys

from massfit.cli import batch, compare, demo, fit, plan, redraw
from massfit.cli.status import (EXIT_INTERRUPTED, EXIT_NOT_CONVERGED, EXIT_OK,
                                EXIT_POOR_FIT, EXIT_USER_ERROR, EXIT_WRITE_FAILED,
                                FIT_EXIT_STATUS)
from massfit.errors import MassfitError, WriteError

__all__ = ["main", "build_parser", "COMMANDS", "EXIT_OK", "EXIT_WRITE_FAILED",
           "EXIT_USER_ERROR", "EXIT_NOT_CONVERGED", "EXIT_POOR_FIT", "EXIT_INTERRUPTED"]

#: Each command's name and its module, in the order of ``massfit --help``.
COMMANDS = {"fit": fit, "demo": demo, "batch": batch, "plan": plan, "redraw": redraw,
            "compare": compare}


def build_parser() -> argparse.ArgumentParser:
    """The whole command line: the program's options and one subparser per command."""
    from massfit.version import __version__

    parser = argparse.ArgumentParser(
        prog="massfit",
        description="Measure the mass of a central body from the orbits of its "
                    "companions (relative astrometry and radial velocities), sampled "
                    "with emcee.",
        epilog="massfit fit: " + FIT_EXIT_STATUS)
    parser.add_argument("--version", action="version", version=f"massfit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in COMMANDS.values():
        module.add_parser(sub)
    return parser


def main(argv=None) -> int:
    """Entry point of the ``massfit`` command; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_USER_ERROR
    try:
        return COMMANDS[args.command].run(args)
    except WriteError as exc:
        print(f"massfit: error: {exc}", file=sys.stderr)
        return EXIT_WRITE_FAILED
    except MassfitError as exc:
        print(f"massfit: error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("massfit: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
