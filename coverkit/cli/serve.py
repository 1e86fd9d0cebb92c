"""``coverkit serve``: a study's base state behind a local web page and JSON API."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION
from coverkit.cli.options import common

NAME = "serve"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``serve`` sub-command's arguments."""
    p = sub.add_parser(
        "serve",
        help="plan in the browser: a local page and JSON API on a study's base state",
        description="Compute a study's base state once, then serve a local web page and JSON API where stations "
        "and closures are tried and coverage changes at once. Prints one line 'ready URL' on stdout. " + CAUTION,
    )
    p.add_argument("study", type=Path, help="study TOML file")
    p.add_argument("--port", type=int, default=8750, help="port (8750; 0 picks a free one)")
    p.add_argument("--host", default="127.0.0.1", help="address to bind (127.0.0.1; others print a warning)")
    p.add_argument("--no-browser", action="store_true", help="do not open the browser")
    common(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit serve`` on the parsed ``args`` until Ctrl-C; the exit status (0)."""
    from coverkit.serve import serve

    return serve(args.study, host=args.host, port=args.port, open_browser=not args.no_browser)
