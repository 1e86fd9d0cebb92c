"""``coverkit demo``: the whole study on the fictional demo county."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION
from coverkit.cli.options import common

NAME = "demo"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``demo`` sub-command's arguments."""
    p = sub.add_parser(
        "demo",
        help="run the whole study on the fictional demo county",
        description="Write the fictional Varrowby County data into OUT/data, then run the demo study into OUT.",
    )
    p.add_argument("--out", "-o", type=Path, default=Path("demo-results"), help="output folder (demo-results)")
    common(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit demo`` on the parsed ``args``; the exit status (0)."""
    from coverkit.demo import write_demo_study
    from coverkit.report.study_report import report_study
    from coverkit.study import headline_lines, run_study

    study_path = write_demo_study(args.out)
    run = run_study(study_path, args.out)
    report_study(run)
    print("\n".join(headline_lines(run)))
    print(f"\ndemo data (fictional) in {args.out / 'data'}; study file {study_path}")
    print(f"report: {run.outputs.get('report', '')}")
    print(CAUTION)
    return 0
