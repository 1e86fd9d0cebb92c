"""The simulation in words, tables and charts: the command's lines, ``simulate-report.html`` and the study
report's section.

Every number comes from the :class:`coverkit.simulate.run.SimulationRun`; nothing is computed here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from coverkit import CAUTION
from coverkit.layer_names import output_file, slug
from coverkit.report.html import HtmlReport

#: Cautions the simulation adds to the project's own (CLI output and every report).
SIM_CAUTION = (
    "Simulated figures are planning estimates from a model of the response system, not for live dispatch. "
    "Validate them locally against the response record; local standards and medical direction decide."
)


def _pct(x: float) -> str:
    return "-" if not np.isfinite(x) else f"{x * 100:.1f} %"


def _min(x: float) -> str:
    return "not reached" if not np.isfinite(x) else f"{x / 60:.1f} min"


def _figure(sim, name: str) -> tuple[float, float, float]:
    row = sim.intervals.set_index("figure").loc[name]
    return float(row["mean"]), float(row["low_95"]), float(row["high_95"])


def _with_interval(sim, name: str, fmt) -> str:
    m, lo, hi = _figure(sim, name)
    # every figure here is a share, a time or a count: an interval reaching below zero is cut at zero
    return fmt(m) if not np.isfinite(lo) else f"{fmt(m)} ({fmt(max(lo, 0.0))} to {fmt(hi)})"


def source_words(sim) -> str:
    """How the calls were made, in one sentence."""
    src, cfg = sim.source, sim.cfg
    calls = {
        "replay": "the incidents replayed at their recorded times and places",
        "rate": f"Poisson calls at {src.calls_per_h[0]:g} per hour over the demand points by weight",
        "weekly": "Poisson calls at the record's own rate for each hour of the week (fitted: calls in that "
        "hour over the weeks spanned), each at the place and priority of an incident drawn at random",
    }[src.mode]
    service = (
        f"busy time per call from field '{cfg.service_field}'"
        if cfg.service_field
        else f"busy time {cfg.service_dist}, mean {cfg.service_min:g} min"
        + (f", sd/mean {cfg.service_cv:g}" if cfg.service_dist == "lognormal" else "")
    )
    travel = (
        "network times as they are"
        if cfg.travel_cv == 0
        else f"travel times times a lognormal multiplier, mean 1, sd {cfg.travel_cv:.3f} ({cfg.travel_cv_source})"
    )
    queue = (
        "zero queue: a call finding every unit busy goes to mutual aid at once"
        if cfg.max_wait_s == 0
        else "calls wait first come first served within priority"
        + ("" if not np.isfinite(cfg.max_wait_s) else f", to mutual aid after {cfg.max_wait_s:g} s")
    )
    return (f"{cfg.replications} replications (seed {cfg.seed}) of {calls}; {service}; {travel}; {queue}.")  # fmt: skip


def summary_lines(sim) -> list[str]:
    """The command's summary: calls, waits, losses, all-busy share and compliance per standard, with intervals."""
    lines = [source_words(sim), ""]
    lines.append(f"calls per replication      {_figure(sim, 'calls')[0]:,.0f}")
    lines.append(f"calls that waited          {_with_interval(sim, 'waited_share', _pct)}")
    lines.append(f"mean wait (answered calls) {_with_interval(sim, 'mean_wait_s', lambda s: f'{s:.0f} s')}")
    lines.append(f"went to mutual aid         {_with_interval(sim, 'lost_share', _pct)}")
    lines.append(f"every unit busy            {_with_interval(sim, 'all_busy_share', _pct)} of the time")
    lines.append(f"answered outside first-due {_with_interval(sim, 'outside_first_due_share', _pct)}")
    for std in sim.standards:
        s = slug(std.name)
        lines.append(
            f"{std.name}: {_with_interval(sim, f'covered_share_{s}', _pct)} within {std.response_s / 60:g} min "
            f"(closest unit always free: {_pct(_figure(sim, f'drive_time_share_{s}')[0])}); "
            f"{std.fractile * 100:g} % fractile {_min(_figure(sim, f'fractile_s_{s}')[0])}"
        )
    if sim.cfg.cover:
        lines.append(f"cover rules {', '.join(sim.cfg.cover)} (EMPTY:FROM:MINUTES): "
                     f"{_with_interval(sim, 'cover_moves', lambda x: f'{x:,.1f}')} moves per replication")  # fmt: skip
    if _figure(sim, "max_queue")[0] > 0 and _unstable(sim):
        lines.append("the queue grows over the run: calls arrive faster than the fleet serves them (see the chart)")
    if sim.difference is not None:
        lines += ["", "scenario minus system (paired 95 % interval):"]
        for r in sim.difference.itertuples(index=False):
            if r.figure.startswith(("covered_share", "waited_share", "lost_share", "all_busy_share")):
                lines.append(f"  {r.figure:<36}{r.difference * 100:+7.2f} points ({r.low_95 * 100:+.2f} to "
                             f"{r.high_95 * 100:+.2f})")  # fmt: skip
    lines += ["", SIM_CAUTION]
    return lines


def _unstable(sim) -> bool:
    """The queue found by arrivals in the last tenth of replication 1 is far above the first tenth's."""
    q = sim.trace[:, 1] if len(sim.trace) else np.zeros(0)
    k = max(len(q) // 10, 1)
    return bool(len(q) >= 10 and q[-k:].mean() > 10 + 2 * q[:k].mean())


def add_simulation(rep: HtmlReport, sim, charts: dict[str, Path], beside: pd.DataFrame | None = None) -> None:
    """The simulation's section: the model, the headline figures, the charts and the tables."""
    from coverkit.simulate.run import MODEL_NOTES

    rep.add_caution(SIM_CAUTION)
    rep.add_heading("Simulated response system")
    rep.add_paragraph(source_words(sim))
    rep.add_list(MODEL_NOTES)
    rep.add_key_figures({
        "calls that waited": _with_interval(sim, "waited_share", _pct),
        "went to mutual aid": _with_interval(sim, "lost_share", _pct),
        "every unit busy": _with_interval(sim, "all_busy_share", _pct),
        "answered from outside the first-due area": _with_interval(sim, "outside_first_due_share", _pct),
    })  # fmt: skip
    rows = []
    for std in sim.standards:
        s = slug(std.name)
        free = _pct(_figure(sim, f"drive_time_share_{s}")[0])
        rows.append({"standard": std.describe(), "closest unit always free": free,
                     "simulated (95 % interval)": _with_interval(sim, f"covered_share_{s}", _pct),
                     "simulated fractile": _min(_figure(sim, f"fractile_s_{s}")[0])})  # fmt: skip
    rep.add_table(pd.DataFrame(rows), caption="Share of calls answered within each standard")
    if beside is not None:
        rep.add_table(beside, caption="The simulation beside the drive-time and hypercube figures")
    for key, caption in (
        ("chart_simulate_response", "Share of calls answered within each time"),
        ("chart_simulate_units", "Utilisation per unit"),
        ("chart_simulate_queue", "Calls waiting over time (a rising line: an unstable system)"),
    ):
        if key in charts:
            rep.add_image(charts[key], caption)  # fmt: skip
    for by, word in (("priority", "priority"), ("zone", "zone")):
        g = sim.groups[sim.groups["by"] == by]
        if len(g):
            g = g.assign(
                within=[
                    f"{_pct(m)} ({_pct(max(lo, 0.0))} to {_pct(hi)})" if np.isfinite(lo) else _pct(m)
                    for m, lo, hi in zip(g["covered_share"], g["covered_low_95"], g["covered_high_95"], strict=True)
                ],
                fractile=[_min(x) for x in g["fractile_s"]],
            )
            rep.add_table(g[["group", "standard", "calls", "within", "fractile"]].rename(columns={"group": word}),
                          caption=f"Share of calls answered within each standard, by {word} (95 % interval)",
                          formats={"calls": lambda x: f"{x:,.1f}"})  # fmt: skip
    units = sim.units[sim.units["replication"] == "all"].drop(columns="replication")
    rep.add_table(units, caption="Units: share of time committed and calls per replication (mean)",
                  formats={"utilisation": _pct, "calls": lambda x: f"{x:,.1f}"})  # fmt: skip
    rep.add_table(sim.dispatch, caption="Who answers each first-due area (all replications)",
                  formats={"share": _pct, "calls": lambda x: f"{x:,.1f}"})  # fmt: skip
    if sim.difference is not None:
        rep.add_table(sim.difference, caption="Scenario minus system, paired 95 % interval (same calls and draws)",
                      float_format="{:,.4f}")  # fmt: skip


def write_simulate_report(sim, folder: str | Path, charts: dict[str, Path]) -> Path:
    """``simulate-report.html`` in ``folder``."""
    rep = HtmlReport("Simulation of the response system")
    rep.add_caution(CAUTION)
    add_simulation(rep, sim, charts)
    return rep.write(output_file(folder, "simulate_report"))


def beside_table(run) -> pd.DataFrame:
    """Per standard of a study run: the drive-time share (coverage stage), the hypercube's availability-adjusted
    share (when ``[availability]`` uses that standard) and the simulated share of the same calls."""
    sim = run.simulation
    av = run.availability
    rows = []
    for std in sim.standards:
        cov = run.summary[(run.summary["standard"] == std.name) & (run.summary["demand"] == sim.cfg.demand)]
        hyper = (
            av.summary["availability_coverage"] if av is not None and av.summary["standard"] == std.describe() else None
        )
        rows.append({
            "standard": std.name,
            "drive time (closest unit always free)": _pct(float(cov["covered_share"].iloc[0])) if len(cov) else "-",
            "hypercube (availability-adjusted)": _pct(hyper) if hyper is not None else "-",
            "simulated (95 % interval)": _with_interval(sim, f"covered_share_{slug(std.name)}", _pct),
        })  # fmt: skip
    if av is not None:
        rows.append({
            "standard": "every unit busy (share of time)", "drive time (closest unit always free)": "-",
            "hypercube (availability-adjusted)": _pct(av.summary["all_busy_probability"]),
            "simulated (95 % interval)": _with_interval(sim, "all_busy_share", _pct),
        })  # fmt: skip
    return pd.DataFrame(rows)
