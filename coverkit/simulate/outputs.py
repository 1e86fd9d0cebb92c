"""A simulation's files: ``summary.csv``, ``units.csv``, ``simulate.gpkg`` and the charts, written atomically.

With a scenario, ``summary.csv`` and ``units.csv`` hold both systems, told apart by a last column ``system``
(``before``, ``after``), and the GeoPackage adds the paired difference.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from coverkit.atomic import write_csv_atomic, write_gpkg_layers
from coverkit.layer_names import layer_name, output_file


def _both(run, attr: str) -> pd.DataFrame:
    if run.after is None:
        return getattr(run, attr)
    return pd.concat(
        [getattr(run, attr).assign(system="before"), getattr(run.after, attr).assign(system="after")],
        ignore_index=True,
    )


def simulation_layers(run) -> dict:
    """The GeoPackage's layers by name (spatial per point and per base, the rest attribute tables)."""
    layers = {
        layer_name("simulate_points"): run.points,
        layer_name("simulate_bases"): run.bases,
        layer_name("simulate_intervals"): _both(run, "intervals"),
        layer_name("simulate_groups"): _both(run, "groups"),
        layer_name("simulate_dispatch"): _both(run, "dispatch"),
    }
    if run.after is not None:
        layers[layer_name("simulate_difference")] = run.difference
    return layers


def write_simulation(run, folder: str | Path, *, charts: bool = True) -> dict[str, Path]:
    """Write the simulation's files into ``folder``; their paths by kind."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {
        "simulate_summary": write_csv_atomic(output_file(folder, "simulate_summary"), _both(run, "summary")),
        "simulate_units": write_csv_atomic(output_file(folder, "simulate_units"), _both(run, "units")),
        "simulate_layers": write_gpkg_layers(output_file(folder, "simulate_layers"), simulation_layers(run)),
    }
    if charts:
        from coverkit.simulate.charts import write_charts

        out |= {f"chart_{k}": v for k, v in write_charts(run, folder).items()}
    return out
