"""The ``coverkit`` command line: parse arguments, call the library, print, set the exit code.

One module per sub-command (``add_parser`` declares its arguments, ``run`` does the work), the shared options in
:mod:`coverkit.cli.options`. No algorithm lives here. Bad input raises :class:`~coverkit.errors.CoverkitError`; the
message is printed as one line, with the flag in place of the library parameter it names, and the exit status is 2.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Sequence

from coverkit import CAUTION, __version__
from coverkit.cli.startup import collections_paused, freeze

with collections_paused():  # the sub-commands' modules bring numpy, scipy, pandas and geopandas
    from coverkit.cli import (
        availability,
        calibrate,
        compare,
        cover,
        demo,
        isochrones,
        network,
        run,
        serve,
        simulate,
        site,
    )
    from coverkit.cli.options import Parser, flag_for
    from coverkit.compute import runner_for
    from coverkit.errors import CoverkitError
    from coverkit.progress import set_quiet

#: the sub-command modules, in the order ``coverkit --help`` lists them
MODULES = (network, isochrones, cover, site, availability, calibrate, compare, run, demo, serve, simulate)
COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {m.NAME: m.run for m in MODULES}

__all__ = ["COMMANDS", "build_parser", "main"]


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command."""
    parser = Parser(
        prog="coverkit",
        description="Drive-time polygons and coverage for fire and EMS planning. " + CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"coverkit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    parser.set_defaults(_commands=sub.choices)
    for module in MODULES:
        module.add_parser(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``coverkit`` command: the exit status of the sub-command (``argv``: the arguments, default
    the command line's)."""
    program = argv is None  # both entry points pass no arguments; callers in Python pass them
    status = _run(argv, program)
    if program:
        freeze()  # the process ends next: its final collections skip the frozen objects (coverkit.cli.startup)
    return status


def _run(argv: Sequence[str] | None, program: bool) -> int:
    """Parse ``argv`` and run the sub-command; its exit status (2 for bad input, with a one-line message). For a
    ``program`` run, the objects of the libraries loaded so far are frozen first (see :mod:`coverkit.cli.startup`)."""
    parser = build_parser()
    args, extra = parser.parse_known_args(argv)
    if extra:
        # name the sub-command whose options were mistyped (argparse would blame the top-level command)
        (args._commands.get(args.command) or parser).error(f"unrecognized arguments: {' '.join(extra)}")
    if not args.command:
        parser.print_help()
        return 2
    set_quiet(getattr(args, "quiet", False))
    try:
        if getattr(args, "workers", None) is not None and args.workers < 1:
            raise CoverkitError("must be >= 1 (local Dask worker processes).", param="workers")
        if program:
            freeze()
        with runner_for(scheduler=getattr(args, "scheduler", None), workers=getattr(args, "workers", None)):
            return COMMANDS[args.command](args)
    except CoverkitError as exc:
        # the library names its parameter; on the command line that is the flag the user typed
        text = exc.worded(flag_for(args._commands[args.command], exc.param)) if exc.param else str(exc)
        print(f"coverkit {args.command}: error: {text}", file=sys.stderr)
        return exc.exit_code
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stdout = open(os.devnull, "w")
        return 0
    except KeyboardInterrupt:
        print("coverkit: interrupted; no output was written", file=sys.stderr)
        return 130
