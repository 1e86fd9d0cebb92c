"""`POST /api/rank` against one what-if per candidate, side by side on the demo county.

Run: ``python benchmarks/bench_rank.py [--repeat 9]``.

The base state is examples/demo-study.toml (12 candidates, data/demo/candidates.csv). Each case (the base state,
station S3 removed, the Ambrel Bridge closed) is ranked three ways in the same process: by ``POST /api/rank``
through Starlette's TestClient (body parsing, ranking, JSON), by :func:`coverkit.serve.rank.rank_answer` alone (one
search from all candidates at once) and by the baseline, one ``WhatIf.run`` per candidate adding it as a station
(what the test compares against). Prints the median of ``--repeat`` runs in seconds and the ratio to the baseline.
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

from starlette.testclient import TestClient

from coverkit import CAUTION
from coverkit.progress import set_quiet
from coverkit.scenario import scenario_from_table
from coverkit.serve.app import create_app
from coverkit.serve.rank import rank_answer, study_candidates
from coverkit.serve.state import BaseState

REPO = Path(__file__).resolve().parents[1]
CASES = {
    "base state": {},
    "remove S3": {"base_change": [{"remove": "S3"}]},
    "close Ambrel Bridge": {"closure": [{"road_name": "Ambrel Bridge"}]},
}


def _median(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=9)
    args = parser.parse_args()
    set_quiet(True)
    state = BaseState(REPO / "examples" / "demo-study.toml")
    client = TestClient(create_app(state, token="t", hosts={"testserver"}))
    cands = study_candidates(state)
    std = state.study.standards[0].name
    print(f"{'case':<22} {'http s':>8} {'rank s':>8} {'baseline s':>11} {'baseline/http':>14}")
    for label, changes in CASES.items():
        body = {"scenario": {"name": label}, **changes}
        scen = scenario_from_table(body, where="bench", allow_empty=True)

        def baseline(changes=changes, label=label) -> None:
            for c in cands.to_crs("EPSG:4326").itertuples():
                add = {"add": {"id": str(c.id), "lon": c.geometry.x, "lat": c.geometry.y, "units": 1}}
                tables = {"scenario": {"name": label}, **changes}
                tables["base_change"] = [*changes.get("base_change", []), add]
                state.whatif.run(scenario_from_table(tables, where="bench"))

        http = _median(lambda body=body: client.post(f"/api/rank?token=t&standard={std}", json=body), args.repeat)
        engine = _median(lambda scen=scen: rank_answer(state, cands, scen, std, "residents"), args.repeat)
        base = _median(baseline, max(1, args.repeat // 3))
        print(f"{label:<22} {http:>8.3f} {engine:>8.3f} {base:>11.3f} {base / http:>14.1f}")
    print(CAUTION)


if __name__ == "__main__":
    main()
