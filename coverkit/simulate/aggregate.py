"""Across replications: means with 95 % intervals, and the tables the outputs are written from.

The interval is the t-interval of the replication means: ``mean +- t(0.975, R - 1) s / sqrt(R)`` with ``s`` the
sample standard deviation of the ``R`` replication figures (independent replications; A. M. Law, *Simulation
Modeling and Analysis*, 5th ed., 2015, §9.4). A scenario's difference is the paired interval of the per-replication
differences (same calls and draws in both runs; Law §10.2).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from coverkit.layer_names import slug

#: Columns of summary.csv before the per-standard ones (the interface issue 15 fixes).
SUMMARY_COLUMNS = ("replication", "calls", "waited_share", "mean_wait_s", "lost_share", "all_busy_share")
#: Confidence of the intervals.
CONFIDENCE = 0.95


def interval(values, confidence: float = CONFIDENCE) -> tuple[float, float, float]:
    """Mean and t-interval (low, high; 95 % by default) of replication figures; NaN for one replication.

    >>> m, lo, hi = interval([1.0, 2.0, 3.0])  # s = 1, t(0.975, 2) = 4.303 (t tables)
    >>> round(m, 3), round(float(hi - m), 3)
    (2.0, 2.484)
    """
    x = np.asarray(values, dtype=float)
    m = float(x.mean())
    if x.size < 2 or not np.isfinite(x).all():
        return m, float("nan"), float("nan")
    half = stats.t.ppf(0.5 + confidence / 2, x.size - 1) * x.std(ddof=1) / np.sqrt(x.size)
    return m, float(m - half), float(m + half)


def _column(key: str) -> str:
    """``covered_share|ALS 8 min`` -> ``covered_share_als_8_min``."""
    stat, _, std = key.partition("|")
    return f"{stat}_{slug(std)}" if std else stat


def summary_table(reps) -> pd.DataFrame:
    """One row per replication and an ``all`` row of means (``reps``: each replication's RepResult)."""
    rows = [{"replication": str(i + 1), **{_column(k): v for k, v in r.summary.items()}} for i, r in enumerate(reps)]
    df = pd.DataFrame(rows)
    mean = {c: df[c].astype(float).mean() for c in df.columns if c != "replication"}
    df = pd.concat([df, pd.DataFrame([{"replication": "all", **mean}])], ignore_index=True)
    front = [c for c in SUMMARY_COLUMNS if c in df.columns]
    return df[front + [c for c in df.columns if c not in front]]


def interval_table(summary: pd.DataFrame) -> pd.DataFrame:
    """Every figure of the summary with its mean and 95 % interval across replications."""
    reps = summary[summary["replication"] != "all"]
    rows = []
    for c in summary.columns[1:]:
        m, lo, hi = interval(reps[c].astype(float))
        rows.append({"figure": c, "mean": m, "low_95": lo, "high_95": hi, "replications": len(reps)})
    return pd.DataFrame(rows)


def difference_table(before: pd.DataFrame, after: pd.DataFrame) -> pd.DataFrame:
    """Scenario minus system, per figure: the paired mean difference and its 95 % interval."""
    b = before[before["replication"] != "all"]
    a = after[after["replication"] != "all"]
    rows = []
    for c in before.columns[1:]:
        vb, va = b[c].astype(float).to_numpy(), a[c].astype(float).to_numpy()
        m, lo, hi = interval(va - vb)
        rows.append(
            {"figure": c, "before": vb.mean(), "after": va.mean(), "difference": m, "low_95": lo, "high_95": hi}
        )
    return pd.DataFrame(rows)


def units_table(reps) -> pd.DataFrame:
    """``replication, unit_id, base_id, utilisation, calls`` per replication, and ``all`` rows of means."""
    df = pd.concat([r.units.assign(replication=str(i + 1)) for i, r in enumerate(reps)], ignore_index=True)
    mean = df.groupby(["unit_id", "base_id"], sort=False, as_index=False)[["utilisation", "calls"]].mean()
    df = pd.concat([df, mean.assign(replication="all")], ignore_index=True)
    return df[["replication", "unit_id", "base_id", "utilisation", "calls"]]


def groups_table(reps) -> pd.DataFrame:
    """Covered share and fractile per priority, hour of day and zone: mean and 95 % interval."""
    df = pd.concat([r.groups.assign(replication=i) for i, r in enumerate(reps)], ignore_index=True)
    rows = []
    for (by, group, std), g in df.groupby(["by", "group", "standard"], sort=False):
        m, lo, hi = interval(g["covered_share"])
        rows.append(
            {
                "by": by,
                "group": group,
                "standard": std,
                "calls": g["calls"].mean(),
                "covered_share": m,
                "covered_low_95": lo,
                "covered_high_95": hi,
                "fractile_s": g["fractile_s"].mean(),
            }
        )
    return pd.DataFrame(rows)


def dispatch_table(reps, base_ids) -> pd.DataFrame:
    """Share of the calls of each base's first-due area answered by each base (or mutual aid), all replications."""
    total = sum(r.dispatch for r in reps)
    answer = [*base_ids, "mutual aid"]
    rows = []
    for i, b in enumerate(base_ids):
        n = total[i].sum()
        for j in np.flatnonzero(total[i]):
            rows.append(
                {
                    "first_due_base": b,
                    "answered_by": answer[j],
                    "calls": total[i, j] / len(reps),
                    "share": total[i, j] / n,
                }
            )
    return pd.DataFrame(rows, columns=["first_due_base", "answered_by", "calls", "share"])
