"""Tables for people: column headings in words with units, and numbers at a precision that reads.

The report shows the same tables the layers hold; this module only renames their columns and picks a format per
column. Shares (0..1) are shown in percent, response and travel times in minutes, demand as whole numbers, speed
factors to two decimals, every number with the same thousands separator (a comma).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable

import numpy as np
import pandas as pd

#: Separator of thousands in every number the report and the command line print.
THOUSANDS = ","

#: Headings for columns whose words do not follow from the rules of :func:`heading`.
HEADINGS: dict[str, str] = {
    "id": "id",
    "base_id": "base",
    "band_min": "band (min)",
    "road_km": "road reached (km)",
    "area_km2": "area (km²)",
    "demand_total": "total demand",
    "covered_once": "covered by one base",
    "covered_twice_or_more": "covered by two or more",
    "meets_standard": "meets the standard",
    "off_network": "off the network",
    "first_due_demand": "first-due demand",
    "first_due_covered": "first-due demand covered",
    "reaches_in_standard": "demand reached in the standard",
    "sole_cover": "covered by this base alone",
    "gap_id": "gap",
    "uncovered_people": "people not covered",
    "uncovered_calls": "calls not covered",
    "uncovered_demand": "demand not covered",
    "added_demand": "demand added",
    "added_weight": "demand added",
    "only_this_site": "demand only this site covers",
    "added_second_weight": "demand it covers a second time",
    "new_sites": "new sites",
    "site_ids": "sites",
    "share_with_site": "covered with it (%)",
    "workload": "workload (% of time busy)",
    "calls_per_h": "calls per hour",
    "factor": "speed factor",
    "multiplier": "fitted multiplier",
    "mae_s": "mean absolute error (s)",
    "bias_s": "bias (s)",
    "n_routes": "routes",
    "n": "routes",
    "first_due_share": "first-due share (%)",
    "lost_weight": "demand losing coverage",
    "gained_weight": "demand gaining coverage",
    "lost_points": "points losing coverage",
    "gained_points": "points gaining coverage",
    "weight": "demand",
    "change": "change",
    "status": "status",
    "expected_covered": "expected covered (with spread)",
    "expected_covered_share": "expected covered with spread (%)",
    "p_in_standard": "chance within the standard",
    "personnel_in_time": "people on scene in time",
    "staff": "staff required",
    "zone": "zone",
    "people": "people",
    "type": "unit type",
    "unit_id": "unit",
    "site_kind": "existing base or candidate",
    "staffing": "people on the unit",
}

#: Columns (besides ``*_share``) holding a share 0..1, shown in percent.
PERCENT = {"workload", "share_with_site", "mean_workload", "capped_share", "drive_time_coverage",
           "availability_coverage", "all_busy_probability"}  # fmt: skip
#: Columns in seconds that read better in minutes.
MINUTES = {"fractile_response_s", "expected_travel_s", "drive_time_fractile_s", "fractile_response_before_s",
           "fractile_response_after_s", "travel_s", "response_s"}  # fmt: skip
#: Columns holding counts or demand (people, calls): whole numbers.
WHOLE = {"demand_total", "covered", "uncovered", "covered_once", "covered_twice_or_more", "off_network",
         "first_due_demand", "first_due_covered", "reaches_in_standard", "sole_cover", "uncovered_people",
         "uncovered_calls", "uncovered_demand",
         "added_demand", "added_weight", "added_second_weight", "only_this_site", "lost_weight", "gained_weight",
         "demand", "weight", "points", "n", "n_routes", "new_sites", "calls", "expected_covered", "people",
         "personnel_in_time"}  # fmt: skip
#: Speed factors and multipliers: two decimals (1.05 and 1.15 must not both read 1.1).
FACTORS = {"factor", "multiplier", "factor_before", "factor_after", "f0", "f1"}

_SUFFIXES = (("_before", " before"), ("_after", " after"), ("_change", " change"))
_UNITS = (("_km2", " (km²)"), ("_kph", " (km/h)"), ("_min", " (min)"), ("_km", " (km)"), ("_m", " (m)"),
          ("_s", " (s)"), ("_per_h", " per hour"))  # fmt: skip


def plural(n: float, word: str, many: str | None = None) -> str:
    """``n`` and the word, singular for exactly one (``"1 call"``, ``"2 calls"``, ``"1,250 people"``)."""
    text = f"{float(n):,.0f}"
    if text in ("1", "-1"):  # as printed: 0.6 people reads "1 person"
        return f"{text} {word}"
    return f"{text} {many or word + 's'}"


def _split(column: str) -> tuple[str, str]:
    for suffix, words in _SUFFIXES:
        if column.endswith(suffix) and len(column) > len(suffix):
            return column[: -len(suffix)], words
    return column, ""


def kind_of(column: str) -> str:
    """How a column is shown: ``percent``, ``minutes``, ``whole``, ``factor``, ``seconds``, ``km2``, ``km``,
    ``plain`` (as given, e.g. band edges) or ``auto`` (decimals from the column's size)."""
    base, _ = _split(column)
    if column in PERCENT or base in PERCENT or base.endswith("_share") or base == "share":
        return "percent"
    if column in MINUTES or base in MINUTES:
        return "minutes"
    if column in FACTORS or base in FACTORS:
        return "factor"
    if column in WHOLE or base in WHOLE or base.endswith("_points"):
        return "whole"
    if base.endswith("_km2"):
        return "km2"
    if base.endswith("_km"):
        return "km"
    if base.endswith("_min") or base in ("band", "hour"):
        return "plain"
    if base.endswith("_s"):
        return "seconds"
    return "auto"


def heading(column: str, *, point_word: str = "points") -> str:
    """Words for a column name, with its unit (``covered_share`` -> ``covered (%)``).

    ``point_word`` names the demand's units (``"cells"`` for a population raster, ``"points"`` otherwise).
    """
    base, after = _split(column)
    kind = kind_of(column)
    if column in HEADINGS:
        text = HEADINGS[column]
    elif base in HEADINGS:
        text = HEADINGS[base] + after
    elif kind == "percent":
        text = f"{base.removesuffix('_share').replace('_', ' ')}{after} (%)"
    elif kind == "minutes":
        text = f"{base.removesuffix('_s').replace('_', ' ')}{after} (min)"
    else:
        text = base.replace("_", " ") + after
        for suffix, unit in _UNITS:
            if base.endswith(suffix) and len(base) > len(suffix):
                text = f"{base[: -len(suffix)].replace('_', ' ')}{after}{unit}"
                break
    return re.sub(r"\bpoints\b", point_word, text)


def _decimals_for(values: np.ndarray) -> int:
    """Decimals that keep a column's values apart: fewer for large numbers, more for small ones."""
    v = np.abs(values[np.isfinite(values)])
    v = v[v > 0]
    if not v.size:
        return 0
    typical = float(np.median(v))
    if typical >= 100:
        return 0
    if typical >= 10:
        return 1
    if typical >= 1:
        return 2
    return 3


def formatter(kind: str, values: np.ndarray | None = None) -> Callable[[float], str]:
    """The format of one column's numbers (after the conversion :func:`present` applies); a value that rounds to
    zero prints without a minus sign."""
    fmt = _formatter(kind, values)

    def show(v: float) -> str:
        text = fmt(v)
        return text[1:] if text.startswith("-") and not any(ch in "123456789" for ch in text) else text

    return show


def _formatter(kind: str, values: np.ndarray | None = None) -> Callable[[float], str]:
    if kind == "whole" or kind == "seconds":
        return lambda v: f"{v:,.0f}"
    if kind in ("percent", "minutes"):
        return lambda v: f"{v:,.1f}"
    if kind == "factor":
        return lambda v: f"{v:,.2f}"
    if kind == "km2":
        return lambda v: f"{v:,.2f}"
    if kind == "km":
        return lambda v: f"{v:,.1f}"
    if kind == "plain":  # values given by the user (band edges): as few digits as they need
        return lambda v: f"{v:,.6g}"
    d = _decimals_for(np.asarray(values, dtype=float)) if values is not None else 1
    return lambda v: f"{v:,.{d}f}"


def format_value(value: float, column: str) -> str:
    """One number as the report shows it in ``column`` (shares in percent, times in minutes)."""
    v = float(value)
    if math.isnan(v):
        return "–"
    kind = kind_of(column)
    v = _convert(np.array([v]), kind)[0]
    return formatter(kind, np.array([v]))(v)


def _convert(values: np.ndarray, kind: str) -> np.ndarray:
    if kind == "percent":
        return values * 100.0
    if kind == "minutes":
        return values / 60.0
    return values


def present(df: pd.DataFrame, *, point_word: str = "points") -> tuple[pd.DataFrame, dict[str, Callable]]:
    """A table for the report: shares in percent, times in minutes, headings in words, a format per column.

    Returns
    -------
    table, formats
        The converted table (geometry dropped, columns renamed) and ``{heading: number formatter}``, for
        :meth:`coverkit.report.html.HtmlReport.add_table`.
    """
    frame = pd.DataFrame(df.drop(columns="geometry", errors="ignore")).copy()
    formats: dict[str, Callable] = {}
    names: dict[str, str] = {}
    for column in frame.columns:
        name = heading(str(column), point_word=point_word)
        names[column] = name
        series = frame[column]
        if pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series):
            kind = kind_of(str(column))
            values = _convert(series.to_numpy(dtype=float), kind)
            if kind != "auto" or not pd.api.types.is_integer_dtype(series):
                frame[column] = values
            formats[name] = formatter(kind, values)
    return frame.rename(columns=names), formats
