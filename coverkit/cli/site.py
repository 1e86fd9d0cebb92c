"""``coverkit site``: covering models on candidate sites."""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from coverkit import CAUTION, settings, siting_models
from coverkit.cli.options import (
    common,
    coverage_inputs,
    minutes_text,
    network_and_bases,
    points_options,
    positive_float,
    rejected_layer,
    time_of_day,
)
from coverkit.cli.options import compute as compute_options
from coverkit.layer_names import demand_name_of, layer_name, map_file, single_standard_name, table_file

NAME = "site"


def add_parser(sub: argparse._SubParsersAction) -> None:
    """The ``site`` sub-command's arguments."""
    p = sub.add_parser(
        "site",
        help="where new stations should go: covering models on candidate sites",
        description="Rank candidate sites and choose new ones with a published covering model (MCLP, LSCP, backup "
        "coverage, MEXCLP, p-median), solved exactly with HiGHS or by a greedy-plus-interchange heuristic.",
    )
    coverage_inputs(p, bases_help="existing bases: CSV with id, lon, lat or a point layer")
    p.add_argument("--candidates", type=Path, help="candidate sites: CSV with id, lon, lat or a point layer")
    p.add_argument(
        "--generate-candidates",
        metavar="CLASS",
        help=f"generate candidates at nodes on roads of CLASS or better (e.g. {settings.CANDIDATE_CLASS})",
    )
    p.add_argument(
        "--spacing-m",
        type=positive_float,
        default=settings.SPACING_M,
        help=f"generated candidate spacing, m ({settings.SPACING_M:g})",
    )
    p.add_argument("--model", choices=siting_models.NAMES, default=siting_models.DEFAULT_MODEL)
    p.add_argument("--add", type=int, help="number of new sites (mclp, backup, p-median) or units (mexclp)")
    p.add_argument("--target", type=float, help="lscp: share of demand to cover, 0..1 (default all coverable)")
    p.add_argument("--busy-fraction", type=float, help="mexclp: share of time a unit is busy, 0..1")
    p.add_argument("--relocate", action="store_true", help="existing bases are free to move (not fixed)")
    p.add_argument("--rank", action="store_true", help="only rank every candidate alone (what each adds)")
    p.add_argument("--curve", type=int, help="coverage curve up to this many new sites (default --add, at least 3)")
    p.add_argument(
        "--method", choices=settings.SITING_METHODS, default=settings.SITING_METHOD, help="solver (%(default)s)"
    )
    p.add_argument(
        "--time-limit-s",
        type=positive_float,
        default=settings.SITING_TIME_LIMIT_S,
        help=f"time for all solving, curve included, s ({settings.SITING_TIME_LIMIT_S:g})",
    )
    p.add_argument(
        "--out",
        "-o",
        type=Path,
        required=True,
        help="GeoPackage to write (layers site_chosen, site_ranking, site_curve, ...)",
    )
    g = p.add_argument_group("the next unit of a type (optional)")
    g.add_argument("--units", type=Path, help="units table: CSV or layer with unit_id, base_id, type, staffing")
    g.add_argument("--unit-type", help="place --add units of this type (default 1) at bases or candidate sites")
    g.add_argument("--staffing", type=int, help="people on each added unit (default: the type's median crew)")
    judged = g.add_mutually_exclusive_group()
    judged.add_argument("--personnel", type=int, help="judge a force of this many people (default: first unit)")
    judged.add_argument("--assignment", help="judge a whole assignment, e.g. engine=2,ladder=1")
    points_options(p)
    time_of_day(p)
    common(p)
    compute_options(p)


def _run_units(args: argparse.Namespace, net, bases, demand) -> int:
    """``--unit-type``: the next units of a type (:func:`coverkit.site_units.place_units`)."""
    import pandas as pd

    from coverkit.atomic import write_gpkg_layers
    from coverkit.cli.options import read_fleet
    from coverkit.coverage import Standard
    from coverkit.errors import FieldError
    from coverkit.site_plan import generate_candidates
    from coverkit.site_units import place_units
    from coverkit.travel import read_points
    from coverkit.units import parse_assignment

    if args.units is None:
        raise FieldError("--unit-type needs --units, the units table (unit_id, base_id, type, staffing).")
    fleet = read_fleet(args, bases)
    if args.candidates is not None:
        candidates = read_points(str(args.candidates), net.crs, what="candidates")
    else:
        candidates = generate_candidates(net, args.generate_candidates, args.spacing_m)
    judged = {"personnel": args.personnel} if args.personnel else {}
    if args.assignment:
        judged = {"assignment": parse_assignment(args.assignment)}
    std = Standard("", args.minutes * 60.0, **judged)
    name = single_standard_name(args.minutes, std.judged().removesuffix(" in ") or f"first {args.unit_type}")
    std = Standard(name, args.minutes * 60.0, args.turnout_s, args.fractile, **judged)
    plan = place_units(
        net, bases, candidates, demand, std, fleet, args.unit_type, args.add or 1, staffing=args.staffing,
        base_snap_m=args.snap_m,
    )  # fmt: skip
    s = plan.summary
    write_gpkg_layers(
        args.out,
        {layer_name("site_unit_chosen"): plan.chosen, layer_name("site_unit_summary"): pd.DataFrame([s])},
    )
    print(f"{s['units_added']} {s['unit_type']} unit(s) of {s['staffing']}: {s['method']}; best possible: "
          f"{s['best_possible']}")  # fmt: skip
    print(s["standard"])
    print(f"covered: before {s['covered_share_before'] * 100:.1f} %, after {s['covered_share_after'] * 100:.1f} %")
    for r in plan.chosen.itertuples(index=False):
        print(f"  {r.step}. {r.site_id:<10} ({r.site_kind}) adds {r.added_demand:,.0f}")
    print(f"\nwrote {args.out}")
    print(CAUTION)
    return 0


def _site_headline(s: dict) -> str:
    """Who the answer is from, how sure it is, in words."""
    who = "the exact solver (HiGHS)" if s["answer_from"] == "milp" else "greedy plus interchange"
    gap = s["within_share"]
    sure = (
        f"within {gap * 100:.3f} % of the best possible ({s['bound_source']})"
        if math.isfinite(gap)
        else "no bound on the best possible"
    )
    return f"{s['model']}: answer from {who}; {s['status']}; {sure}; {s['solve_s']:.1f} s"


def run(args: argparse.Namespace) -> int:
    """Run ``coverkit site`` on the parsed ``args``; the exit status (0)."""
    import pandas as pd

    from coverkit.atomic import write_csv_atomic, write_gpkg_layers
    from coverkit.coverage import Standard
    from coverkit.demand import load_demand
    from coverkit.errors import FieldError
    from coverkit.report.study_report import site_curve_chart, site_curve_values
    from coverkit.settings import SitingSettings
    from coverkit.site_plan import ranking_table
    from coverkit.stages import siting_problem, siting_stage

    if (args.candidates is None) == (args.generate_candidates is None):
        raise FieldError("give either --candidates FILE or --generate-candidates CLASS (not both, not neither).")
    net, bases = network_and_bases(args)
    demand = load_demand(
        args.demand,
        net,
        where=args.where,
        population_field=args.population_field,
        max_rejected_share=args.max_rejected,
    )
    if args.unit_type:
        return _run_units(args, net, bases, demand)
    std = Standard(single_standard_name(args.minutes), args.minutes * 60.0, args.turnout_s, args.fractile)
    cfg = SitingSettings(
        candidates=args.candidates,
        generate=args.generate_candidates,
        spacing_m=args.spacing_m,
        model=args.model,
        add=args.add,
        target=args.target,
        busy_fraction=args.busy_fraction,
        relocate=args.relocate,
        method=args.method,
        time_limit_s=args.time_limit_s,
        curve=args.curve,
    )
    problem = siting_problem(net, bases, demand, std, cfg, base_snap_m=args.snap_m)
    folder = args.out.parent
    if args.rank:
        ranking = ranking_table(problem)
        write_gpkg_layers(args.out, {layer_name("site_ranking"): ranking, layer_name("site_candidates"): problem.sites})
        write_csv_atomic(table_file(folder, "site_ranking"), ranking)
        print(f"{'candidate':<12}{'adds':>12}{'adds %':>8}  name")
        for r in ranking.itertuples(index=False):
            print(f"{r.id:<12}{r.added_weight:>12,.0f}{r.added_share * 100:>8.2f}  {r.name}")
        print(f"\n{std.describe()}; wrote {args.out}")
        print(CAUTION)
        return 0
    stage = siting_stage(problem, cfg, demand_name_of(args.demand))
    plan = stage.plan
    s = plan.summary
    chart = site_curve_chart(plan, map_file(folder, "site_curve"), std.describe(with_source=False))
    layers = stage.layers()
    rejected = rejected_layer(demand, layers, demand_name_of(args.demand))
    write_gpkg_layers(args.out, layers)
    if rejected:
        print(f"rejected: {rejected}")
    chosen_table = pd.DataFrame(plan.chosen.drop(columns="geometry"))
    write_csv_atomic(table_file(folder, "site_chosen"), chosen_table)
    write_csv_atomic(table_file(folder, "site_curve"), plan.curve)
    write_csv_atomic(table_file(folder, "site_ranking"), plan.ranking)
    print(_site_headline(s))
    print(std.describe())
    print(
        f"{s['objective_name']}: {siting_models.BY_NAME[s['model']].objective_text(s['objective'], s['total_weight'])}"
    )
    print(
        f"covered within the standard: before {s['covered_share_before'] * 100:.1f} % (existing bases), "
        f"after {s['covered_share_after'] * 100:.1f} %; {std.fractile * 100:g}th percentile response "
        f"{minutes_text(s['fractile_response_before_s'])} -> {minutes_text(s['fractile_response_after_s'])}"
    )
    print("\nchosen sites (adds: beyond the existing bases; loss: what the objective loses without it)")
    for r in plan.chosen.itertuples(index=False):
        forced = "  forced: the only site reaching some demand" if r.forced else ""
        print(
            f"  {r.id:<10} adds {r.added_demand:>10,.0f}  only this site {r.only_this_site:>10,.0f}  "
            f"loss {r.objective_loss:>10,.1f}  {r.name}{forced}"
        )
    obj_col, obj_label = site_curve_values(s["model"], plan.curve)
    print(f"\n{s['model']} curve (new sites: {obj_label}; * proven optimal)")
    print(
        "  "
        + ", ".join(
            f"{int(n)}: {v:,.1f}{'*' if str(st).startswith('proven') else ''}"
            for n, v, st in zip(plan.curve["new_sites"], obj_col, plan.curve["status"], strict=True)
        )
    )
    worst = float(plan.curve["gap"].max())
    if math.isfinite(worst):
        print(f"  every point within {worst * 100:.3f} % of the best possible")
    print(f"\nwrote {args.out}, {chart}")
    print(CAUTION)
    return 0
