"""Report tables that read (issue 10 item 17): precision that keeps values apart, headings in words, units.

References: arithmetic (4.0 % is 0.040 of the time); the coverage module's own column names as the input.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from coverkit.report.html import HtmlReport
from coverkit.report.tables import format_value, heading, plural, present


def test_small_workloads_and_close_factors_stay_apart():
    """0.040 and 0.031 of the time are 4.0 % and 3.1 %; speed factors 1.05 and 1.15 keep two decimals."""
    assert format_value(0.040, "workload") == "4.0" and format_value(0.031, "workload") == "3.1"
    assert format_value(1.05, "factor") == "1.05" and format_value(1.15, "factor") == "1.15"
    assert format_value(1.05, "multiplier") != format_value(1.15, "multiplier")
    assert heading("workload").endswith("(% of time busy)")
    assert format_value(-0.4, "bias_s") == "0"  # no minus sign on a value that rounds to zero


def test_headings_in_words_with_units():
    cols = ["base_id", "first_due_demand", "first_due_share", "fractile_response_s", "covered_share_before",
            "fractile_response_s_after", "area_km2", "road_km", "mae_s", "calls_per_h", "meets_standard"]  # fmt: skip
    words = [heading(c) for c in cols]
    assert not [w for w in words if "_" in w]
    assert heading("covered_share") == "covered (%)"
    assert heading("fractile_response_s") == "fractile response (min)"
    assert heading("covered_share_before") == "covered before (%)"
    assert heading("area_km2") == "area (km²)"


def test_raster_demand_is_counted_in_cells():
    assert heading("points", point_word="cells") == "cells"
    assert heading("lost_points", point_word="cells") == "cells losing coverage"
    table, _ = present(pd.DataFrame({"points": [12, 3]}), point_word="cells")
    assert list(table.columns) == ["cells"]


def test_plural():
    assert plural(1, "call") == "1 call" and plural(2, "call") == "2 calls"
    assert plural(1250.4, "person", "people") == "1,250 people" and plural(0, "base") == "0 bases"


def test_present_converts_and_html_formats_every_column():
    """Shares shown x100, times /60, each column at its own precision, one thousands separator (a comma)."""
    df = pd.DataFrame(
        {
            "base_id": ["S1", "S2"],
            "first_due_demand": [36596.2, 1234.0],
            "first_due_share": [0.488, 0.0123],
            "fractile_response_s": [462.0, np.inf],
            "workload": [0.040, 0.031],
            "factor": [1.05, 1.15],
        }
    )
    table, formats = present(df)
    rep = HtmlReport("t")
    rep.add_table(table, formats=formats)
    html = rep.to_html()
    cells = re.findall(r'<td class="num">([^<]*)</td>', html)
    assert cells == ["36,596", "48.8", "7.7", "4.0", "1.05", "1,234", "1.2", "not reached", "3.1", "1.15"]
