"""``coverkit run``: a whole study from its TOML file."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION
from coverkit.cli.options import common
from coverkit.cli.options import compute as compute_options

NAME = "run"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``run`` sub-command's arguments."""
    p = sub.add_parser(
        "run",
        help="run a whole study from a TOML file",
        description="Run a study file (see examples/demo-study.toml): network (cached), drive-time polygons, "
        "surface, coverage for every standard and demand layer, maps and the HTML report.",
    )
    p.add_argument("study", type=Path, help="study TOML file")
    p.add_argument("--out", "-o", type=Path, help="output folder (default: outputs.folder in the study)")
    common(p)
    compute_options(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit run`` on the parsed ``args``; the exit status (0)."""
    from coverkit.report.study_report import report_study
    from coverkit.study import headline_lines, run_study

    run = run_study(args.study, args.out)
    report_study(run)
    print("\n".join(headline_lines(run)))
    print(f"\nwrote {len(run.outputs)} outputs to {run.outputs['layers'].parent}")
    if "report" in run.outputs:
        print(f"report: {run.outputs['report']}")
    print(CAUTION)
    return 0
