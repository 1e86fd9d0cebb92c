"""``coverkit compare``: a study before and after a scenario."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION
from coverkit.cli.options import common, time_of_day
from coverkit.cli.options import compute as compute_options

NAME = "compare"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``compare`` sub-command's arguments."""
    p = sub.add_parser(
        "compare",
        help="before/after coverage for a scenario: closures, slowdowns, station changes",
        description="Run a study's coverage before and after a scenario file ([[closure]], [[slowdown]], "
        "[[base_change]]) and report who loses or gains coverage, per-base changes, and a difference map.",
    )
    p.add_argument("study", type=Path, help="study TOML file")
    p.add_argument("scenario", type=Path, help="scenario TOML file (see examples/scenarios/)")
    p.add_argument("--out", "-o", type=Path, required=True, help="output folder")
    time_of_day(p)
    common(p)
    compute_options(p)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit compare`` on the parsed ``args``; the exit status (0)."""
    from coverkit.compare_run import compare_study
    from coverkit.report.compare_report import write_compare_report

    run = compare_study(args.study, args.scenario, args.out, at=args.at)
    run.outputs.update(write_compare_report(run, args.out))
    if args.at:
        timed = [c for c in run.network_before.info.get("changes", []) if c.startswith("timed for hour band")]
        print(f"at {args.at}: " + (timed[-1] if timed else "outside every hour band: the profile's own times"))
    print("\n".join(line for line in run.lines() if line != CAUTION))
    print(f"\nwrote {run.outputs['layers']}, {run.outputs['table']} and {run.outputs['report']}")
    print(CAUTION)
    return 0
