"""The Python API a notebook user finds (issue 10 item 20): entry points in ``coverkit``'s namespace, loaded on
first use; the README's notebook example runs as printed; a network prints as one line.

Checks against the project's own README (the example is executed as written) and against Python's import
system (PEP 562 module ``__getattr__``: nothing heavy is imported by ``import coverkit``).
"""

from __future__ import annotations

import contextlib
import io
import os
import re
import subprocess
import sys

import coverkit

from .conftest import REPO


def test_import_is_light_and_every_entry_point_resolves():
    code = "import sys, coverkit; print('coverkit.coverage' in sys.modules, 'geopandas' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, check=True)
    assert out.stdout.split() == ["False", "False"]
    for name in ("RoadNetwork", "build_network", "snap_points", "read_points", "load_demand", "Standard",
                 "evaluate_coverage", "drive_time_polygons", "run_study", "compare_study", "area_layers"):  # fmt: skip
        assert name in coverkit.__all__ and name in dir(coverkit)
    for name in coverkit.__all__:
        assert getattr(coverkit, name) is not None, name
    from coverkit.coverage import evaluate_coverage

    assert coverkit.evaluate_coverage is evaluate_coverage


def test_readme_notebook_example_runs_and_the_network_prints_on_one_line():
    text = (REPO / "README.md").read_text()
    block = re.search(r"### Python\n.*?```python\n(.*?)```", text, flags=re.S).group(1)
    assert len([ln for ln in block.splitlines() if ln.strip()]) <= 6  # a short notebook cell
    buf, namespace = io.StringIO(), {}
    cwd = os.getcwd()
    os.chdir(REPO)
    try:
        with contextlib.redirect_stdout(buf):
            exec(compile(block, "README.md", "exec"), namespace)
    finally:
        os.chdir(cwd)
    printed = buf.getvalue().strip()
    assert printed.startswith("RoadNetwork(") and len(printed.splitlines()) == 1
    share = float(printed.rsplit(" ", 1)[1])
    assert 0.0 < share <= 1.0
    assert share == namespace["result"].summary()["covered_share"]
    net_repr = repr(namespace["net"])
    assert "\n" not in net_repr and len(net_repr) < 160 and f"{namespace['net'].n_edges:,} directed edges" in net_repr
