"""``coverkit simulate``: the study's calls through its fleet, replicated (and a scenario beside it)."""

from __future__ import annotations

import argparse
from pathlib import Path

from coverkit import CAUTION, settings
from coverkit.cli.options import common, positive_float
from coverkit.cli.options import compute as compute_options

NAME = "simulate"


def _nonnegative(text: str) -> float:
    value = float(text)
    if not value >= 0:
        raise argparse.ArgumentTypeError(f"must be a number >= 0, got {text}")
    return value


def _whole(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 1, got {text}")
    return value


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``simulate`` sub-command's arguments (each defaults to the study's [simulation], then coverkit's)."""
    p = sub.add_parser(
        NAME,
        help="replay the call history: discrete-event simulation of the response system",
        description="Run the study's calls (replayed incidents or synthetic Poisson calls) through its units: "
        "closest free unit by network travel time, units returning to base and sent again on the way, calls "
        "waiting or going to mutual aid. Replications in parallel processes, 95 %% intervals; with --scenario the "
        "same calls through the changed system, and the difference.",
    )
    p.add_argument("study", type=Path, help="study TOML file")
    p.add_argument("--scenario", type=Path, help="scenario TOML file: same calls through the changed system")
    p.add_argument("--out", "-o", type=Path, required=True, help="output folder")
    p.add_argument("--replications", type=_whole, help=f"replications (default {settings.SIM_REPLICATIONS})")
    p.add_argument("--seed", type=int, help=f"seed of the replications' streams (default {settings.SIM_SEED})")
    p.add_argument("--processes", type=_whole, help="worker processes (default: the CPUs available)")
    g = p.add_argument_group("calls")
    g.add_argument("--calls", choices=settings.SIM_CALLS, help="replay the incidents (default when they have "
                   "times) or draw synthetic Poisson calls")  # fmt: skip
    g.add_argument("--hours", type=positive_float, help="simulated span of synthetic calls (h)")
    g.add_argument("--calls-per-h", type=positive_float, help="synthetic call rate, spread over the points by weight")
    g.add_argument("--demand", help="the [[demand]] layer whose calls are simulated (default: the incidents)")
    g = p.add_argument_group("service and turnout")
    g.add_argument("--service-min", type=positive_float, help="mean busy time per call (min)")
    g.add_argument("--service-dist", choices=settings.SIM_SERVICE_DISTS, help="busy-time distribution")
    g.add_argument("--service-spread", dest="service_cv", type=_nonnegative, help="lognormal busy time: sd / mean")
    g.add_argument("--service-field", help="incidents' field with each call's busy time (min)")
    g.add_argument("--turnout-s", type=_nonnegative, help="turnout (s; default: the first standard's)")
    g.add_argument("--turnout-spread", dest="turnout_cv", type=_nonnegative, help="lognormal turnout: sd / mean")
    g.add_argument("--travel-spread", dest="travel_cv", type=_nonnegative,
                   help="lognormal travel-time multiplier: sd (mean 1; 0 = the network's times)")  # fmt: skip
    g = p.add_argument_group("queue")
    g.add_argument("--queue", choices=settings.QUEUES, help="infinite: calls wait; zero: mutual aid at once")
    g.add_argument("--mutual-aid-after-s", type=_nonnegative, help="a waiting call goes to mutual aid after (s)")
    g.add_argument("--cover", action="append", metavar="EMPTY:FROM:MIN",
                   help="cover rule: when base EMPTY has had no free unit for MIN minutes, move the free unit of base "
                   "FROM there (repeatable)")  # fmt: skip
    common(p)
    compute_options(p)


#: argparse destinations passed to the library as settings overrides
_OVERRIDES = (
    *("replications", "seed", "calls", "hours", "calls_per_h", "demand", "service_min", "service_dist"),
    *("service_cv", "service_field", "turnout_s", "turnout_cv", "travel_cv", "queue", "mutual_aid_after_s"),
)


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit simulate`` on the parsed ``args``; the exit status (0)."""
    from coverkit.report.simulate_report import summary_lines, write_simulate_report
    from coverkit.simulate.study_run import simulate_study

    overrides = {k: getattr(args, k) for k in _OVERRIDES}
    overrides["cover"] = tuple(args.cover) if args.cover else None
    sim, outputs = simulate_study(args.study, args.out, scenario_path=args.scenario, processes=args.processes,
                                  **overrides)  # fmt: skip
    outputs["simulate_report"] = write_simulate_report(sim, args.out, outputs)
    print("\n".join(summary_lines(sim)))
    print(f"\nwrote {', '.join(str(outputs[k]) for k in ('simulate_summary', 'simulate_units', 'simulate_layers'))}")
    print(f"      {outputs['simulate_report']}")
    print(CAUTION)
    return 0
