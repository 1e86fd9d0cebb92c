"""Charts of a simulation (matplotlib, written as PNG): response times, unit utilisation, the queue over time.

Figures come from the run's tables; nothing is computed here beyond putting them on axes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from coverkit.atomic import atomic_path
from coverkit.layer_names import map_file
from coverkit.simulate.aggregate import interval
from coverkit.simulate.metrics import HIST_EDGES_S


def _save(fig, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    import matplotlib.pyplot as plt

    plt.close(fig)
    return path


def response_chart(run, path: Path) -> Path:
    """Share of calls answered within each time (mean of the replications, 95 % band), the standards marked."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    calls = run.summary[run.summary["replication"] != "all"]["calls"].to_numpy(float)
    share = np.cumsum(run.hist, axis=1) / np.maximum(calls[:, None], 1)
    bands = np.array([interval(share[:, j]) for j in range(share.shape[1])])
    x = HIST_EDGES_S[1:] / 60.0
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.plot(x, bands[:, 0] * 100, color="#24527a", label="mean of the replications")
    if np.isfinite(bands[:, 1]).any():
        ax.fill_between(x, bands[:, 1] * 100, bands[:, 2] * 100, color="#24527a", alpha=0.25, label="95 % interval")
    for std in run.standards:
        ax.axvline(std.response_s / 60.0, color="#a65e00", lw=0.8, ls="--")
        ax.text(std.response_s / 60.0, 3, f" {std.name}", rotation=90, fontsize=7, color="#a65e00", va="bottom")
    ax.set_xlabel("response time: wait + turnout + travel (min)")
    ax.set_ylabel("calls answered within (%)")
    ax.set_ylim(0, 100)
    ax.legend(loc="lower right", fontsize=8)
    ax.set_title("Simulated response times (planning estimate)", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def units_chart(run, path: Path) -> Path:
    """Utilisation of each unit: mean of the replications with its 95 % interval."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    reps = run.units[run.units["replication"] != "all"]
    ids = list(dict.fromkeys(reps["unit_id"]))
    stats = np.array([interval(reps.loc[reps["unit_id"] == u, "utilisation"]) for u in ids])
    err = np.nan_to_num(np.abs(stats[:, 1:].T - stats[:, 0]))
    fig, ax = plt.subplots(figsize=(max(5, 0.45 * len(ids) + 2), 3.6))
    ax.bar(range(len(ids)), stats[:, 0] * 100, yerr=err * 100, color="#4f7f52", capsize=3)
    ax.set_xticks(range(len(ids)), ids, rotation=90 if len(ids) > 12 else 0, fontsize=7)
    ax.set_ylabel("share of time committed (%)")
    ax.set_title("Unit utilisation, 95 % interval", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def queue_chart(run, path: Path) -> Path:
    """Calls waiting as found by arriving calls, over the first replication (a growing line: an unstable system)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7, 3))
    if len(run.trace):
        ax.step(run.trace[:, 0] / 3600.0, run.trace[:, 1], where="post", color="#7a2448", lw=0.8)
    ax.set_xlabel("simulated time (h)")
    ax.set_ylabel("calls waiting")
    ax.set_title("Queue found by arriving calls (replication 1)", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def write_charts(run, folder: Path) -> dict[str, Path]:
    """Every chart into ``folder/maps``."""
    return {
        "simulate_response": response_chart(run, map_file(folder, "simulate_response")),
        "simulate_units": units_chart(run, map_file(folder, "simulate_units")),
        "simulate_queue": queue_chart(run, map_file(folder, "simulate_queue")),
    }
