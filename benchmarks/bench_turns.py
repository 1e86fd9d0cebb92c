"""Benchmark: drive-time polygons and coverage with turn restrictions and turn costs on, against the same without.

Network: the >= 90,000-node synthetic grid of ``bench_isochrones.py``, once as it is and once with a profile that
sets turn costs (straight 0 s, right 5 s, left 10 s, U-turn 30 s) and obeys bans on 5 % of its left turns (drawn at
random, seeded). Both run side by side in this process, alternating, median of ``REPEATS``; the turn-aware graph is
built once (cached on the network, as every command's network keeps it) and that build is timed on its own.

Run: ``python benchmarks/bench_turns.py``.
"""

from __future__ import annotations

import dataclasses
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_isochrones import county_inputs, synthetic_network

from coverkit.coverage import Standard, evaluate_coverage
from coverkit.isochrones import drive_time_polygons
from coverkit.network.model import RoadNetwork
from coverkit.network.turn_rules import TurnRules
from coverkit.progress import set_quiet
from coverkit.travel import snap_points, turns

MINUTES = [4, 8, 12, 16]
REPEATS = 3
N_DEMAND = 100_000


def with_turns(net: RoadNetwork, seed: int = 3) -> RoadNetwork:
    """The same network with turn costs and bans on 5 % of its left turns."""
    rules = TurnRules(restrictions="obey", straight_s=0.0, right_s=5.0, left_s=10.0, uturn_s=30.0)
    prof = dataclasses.replace(net.profile, turns=rules, source_text="")
    frm, to = turns._all_turns(net.u, net.v, net.n_nodes)
    probe = RoadNetwork(net.nodes, net.edges, net.crs, prof, net.info)
    left = turns.turn_costs_s(probe, frm, to) == rules.left_s
    pick = np.random.default_rng(seed).random(len(frm)) < 0.05
    sel = left & pick
    bans = pd.DataFrame(
        {
            "relation_id": np.arange(int(sel.sum()), dtype=np.int64),
            "restriction": "no_left_turn",
            "from_edge": frm[sel],
            "via_edge": -1,
            "to_edge": to[sel],
        }
    )
    return RoadNetwork(net.nodes, net.edges, net.crs, prof, net.info, turn_bans=bans)


def timed(fn, *args, **kwargs):
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - t0


def main() -> int:
    set_quiet(True)
    plain = synthetic_network()
    turned = with_turns(plain)
    bases, demand = county_inputs(plain, n_points=N_DEMAND)
    std = Standard("8 min", 480.0)
    tg, t_build = timed(turns.turn_structure, turned)
    print(
        f"synthetic network: {plain.n_nodes:,} nodes, {plain.n_edges:,} directed edges; turn-aware graph "
        f"{tg.out.shape[0]:,} vertices, {tg.out.nnz:,} arcs ({len(turned.turn_bans):,} banned left turns), "
        f"built in {t_build:.2f} s (once per network)"
    )
    snapped = {name: snap_points(net, bases, what="bases") for name, net in (("plain", plain), ("turns", turned))}
    for name, net in (("plain", plain), ("turns", turned)):  # warm: compiled kernels, road pieces, CSR
        drive_time_polygons(net, snapped[name].subset([0]), [1], any_base=False)
    times: dict[str, list[float]] = {k: [] for k in ("poly_plain", "poly_turns", "cov_plain", "cov_turns")}
    first_due: dict[str, np.ndarray] = {}
    for _ in range(REPEATS):
        for name, net in (("plain", plain), ("turns", turned)):
            _, t = timed(drive_time_polygons, net, snapped[name], MINUTES, any_base=False)
            times[f"poly_{name}"].append(t)
            res, t = timed(evaluate_coverage, net, bases, demand, std, horizon_s=1800.0)
            times[f"cov_{name}"].append(t)
            first_due[name] = res.demand["travel_s"].to_numpy()
    med = {k: float(np.median(v)) for k, v in times.items()}
    print(f"drive-time polygons, 30 bases, bands {MINUTES} min (median of {REPEATS}):")
    print(f"  without turns  {med['poly_plain']:7.2f} s")
    print(f"  with turns     {med['poly_turns']:7.2f} s   ratio {med['poly_turns'] / med['poly_plain']:.2f}x")
    print(f"coverage, {N_DEMAND:,} demand points, 30 bases, 8 min, horizon 1800 s (median of {REPEATS}):")
    print(f"  without turns  {med['cov_plain']:7.2f} s")
    print(f"  with turns     {med['cov_turns']:7.2f} s   ratio {med['cov_turns'] / med['cov_plain']:.2f}x")
    both = np.isfinite(first_due["plain"]) & np.isfinite(first_due["turns"])
    later = first_due["turns"][both] - first_due["plain"][both]
    print(
        f"  (turns change the answers: first-due time later by > 1 s for {np.mean(later > 1.0):.0%} of reached points, "
        f"mean {later.mean():.1f} s; never earlier: {bool((later >= -1e-6).all())})"
    )
    print("target: each ratio within 3x (issue 16)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
