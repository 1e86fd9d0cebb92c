"""Replications: each one's calls and draws from its own seed, run through one or more fleets, in parallel.

Replication ``r`` of seed ``s`` draws from ``SeedSequence(s, spawn_key=(r, k))`` (the streams
``SeedSequence(s).spawn`` would hand out; NumPy's recommended way to seed parallel streams), so its numbers do not
depend on which process runs it or on how many there are. Several fleets (a system and its scenario) in one
replication share its calls and draws: common random numbers, so their difference has a narrow interval.
"""

from __future__ import annotations

import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass

import numpy as np

from coverkit.progress import note
from coverkit.simulate.calls import CallSource, draw_calls, hour_of_day
from coverkit.simulate.kernel import NO_RULES, run_calls
from coverkit.simulate.metrics import CallResults, RepResult, rep_result
from coverkit.simulate.system import Fleet, cover_rules
from coverkit.simulate.variates import call_draws


@dataclass(frozen=True)
class SimInputs:
    """Everything a replication needs (sent to each worker process once)."""

    source: CallSource
    fleets: tuple[Fleet, ...]
    cfg: object  # coverkit.settings.SimulationSettings
    standards: tuple
    turnout_s: float
    zones: tuple[np.ndarray, tuple[str, ...]] | None = None

    @property
    def served(self) -> np.ndarray:
        """Points every fleet can serve."""
        ok = self.fleets[0].served
        for f in self.fleets[1:]:
            ok = ok & f.served
        return ok


def replicate(rep: int, inputs: SimInputs, engine=run_calls) -> list[RepResult]:
    """Replication ``rep`` through every fleet of ``inputs`` (same calls and draws for each)."""
    seed = int(inputs.cfg.seed)
    rng_calls = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(rep, 0)))
    t, point, prio = draw_calls(inputs.source, rng_calls)
    keep = inputs.served[point]
    t, point, prio = t[keep], point[keep], prio[keep]
    n = t.size
    service, turnout, mult = call_draws(
        np.random.SeedSequence(seed, spawn_key=(rep, 1)),
        n,
        point,
        inputs.cfg,
        inputs.turnout_s,
        inputs.source.service_s,
    )
    max_wait = inputs.cfg.max_wait_s
    n_prio = max(len(inputs.source.priority_labels), int(prio.max()) + 1 if n else 1)
    out = []
    for fleet in inputs.fleets:
        rules = cover_rules(inputs.cfg.cover, fleet.base_id) if inputs.cfg.cover else NO_RULES
        unit, wait, travel, qlen, busy, n_calls, all_busy, moves = engine(
            t, point, prio, service, turnout, mult, fleet.unit_station, fleet.out_s, fleet.back_s, max_wait, n_prio,
            fleet.move_s, rules,
        )  # fmt: skip
        response = np.where(unit >= 0, wait + turnout + travel, np.inf)
        waited = (wait > 0) | ((unit < 0) & (max_wait > 0))
        first_due = turnout + fleet.out_s.min(axis=0)[point] * mult  # the closest unit, were it always free
        calls = CallResults(
            t, point, prio, hour_of_day(inputs.source, t), unit, wait, response, qlen, waited, first_due,
            priority_labels=inputs.source.priority_labels,
        )  # fmt: skip
        # the observed period runs until the last unit clears: utilisation and the all-busy share stay <= 1 when an
        # overloaded system is still working off its queue after the last call
        served = unit >= 0
        end = float((t + wait + turnout + travel + service)[served].max()) if served.any() else 0.0
        span = max(inputs.source.span_s, end, 1.0)
        out.append(rep_result(calls, fleet, list(inputs.standards), span, busy, n_calls, all_busy, inputs.zones))
        out[-1].summary["cover_moves"] = int(moves.sum())
    out_summary_extra = {"unserved_calls": int((~keep).sum())}
    for r in out:
        r.summary |= out_summary_extra
    return out


_WORKER: dict = {}


def _init(inputs: SimInputs) -> None:
    _WORKER["inputs"] = inputs


def _in_worker(rep: int) -> list[RepResult]:
    return replicate(rep, _WORKER["inputs"])


def replicate_block(rep: int, *, inputs: SimInputs) -> list[RepResult]:
    """One replication as a block of :func:`coverkit.compute.map_blocks` (a Dask worker runs it by name)."""
    return replicate(rep, inputs)


def default_processes() -> int:
    """Worker processes: the CPUs this process may use."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def run_replications(inputs: SimInputs, replications: int, processes: int | None = None) -> list[list[RepResult]]:
    """Every replication, in replication order (the same figures for any number of processes).

    On a cluster runner (a front end's ``use_runner``, e.g. a Dask scheduler) the replications are its blocks;
    otherwise they run in ``processes`` local worker processes (default: the CPUs available).
    """
    from coverkit.compute import InProcess, current_runner, map_blocks

    if not isinstance(current_runner(), InProcess):
        note(f"simulate: {replications} replications on {current_runner()!r}")
        return map_blocks(replicate_block, list(range(replications)), shared={"inputs": inputs})
    processes = min(default_processes() if processes is None else processes, replications)
    if processes <= 1:
        results = []
        for r in range(replications):
            results.append(replicate(r, inputs))
            note(f"simulate: replication {r + 1} of {replications}")
        return results
    ctx = multiprocessing.get_context("fork") if "fork" in multiprocessing.get_all_start_methods() else None
    with ProcessPoolExecutor(processes, mp_context=ctx, initializer=_init, initargs=(inputs,)) as pool:
        results = []
        for r, res in enumerate(pool.map(_in_worker, range(replications))):
            results.append(res)
            note(f"simulate: replication {r + 1} of {replications} ({processes} processes)")
    return results
