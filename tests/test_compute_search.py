"""The per-base search blocks on a Dask cluster give the single-process results (issue 13, point 5).

References: networkx Dijkstra on the hand-built split graph of ``tests/test_travel_search.py`` (an outside library,
to 1e-6 s) for the times themselves; the same command run in this process for the cluster run (the outputs must be
equal, value for value: every block is the same function on the same inputs, so nothing may differ).
"""

from __future__ import annotations

import geopandas as gpd
import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp

from coverkit.compute import DaskRunner, InProcess, current_runner, use_runner
from coverkit.coverage import Standard
from coverkit.demand import load_demand
from coverkit.network import RoadNetwork
from coverkit.network.build import read_boundary
from coverkit.settings import SitingSettings
from coverkit.stages import coverage_stage, siting_problem, siting_stage
from coverkit.travel import read_points, search
from coverkit.travel.search import node_times, point_times
from coverkit.travel.snap import snap_points

from .conftest import DEMO, same_table
from .test_travel_search import TOL_S, irregular_network, reference_graph


@pytest.fixture(scope="module")
def cluster():
    """A local cluster of two worker processes (so blocks and shared inputs really travel by pickle)."""
    with DaskRunner(workers=2) as runner:
        yield runner


def _graphs_sent(runner: DaskRunner) -> list[sp.csr_matrix]:
    """The sparse graphs the runner holds on its workers (each sent once: they are kept by object)."""
    return [hold() for hold, _ in runner._sent.values() if sp.issparse(hold())]


@pytest.mark.parametrize("direction", ["out", "in"])
def test_point_times_on_the_cluster_match_networkx_and_the_single_process_run(cluster, direction):
    """Source: networkx single_source_dijkstra_path_length on the split graph (to 1e-6 s); chunks of 2 sources so
    the rows come back from several blocks on both workers and are put back in source order."""
    net = irregular_network()
    rng = np.random.default_rng(5)
    lo, hi = net.xy.min(axis=0), net.xy.max(axis=0)
    bases_xy, targets_xy = rng.uniform(lo, hi, (7, 2)), rng.uniform(lo, hi, (30, 2))
    bases, targets = snap_points(net, bases_xy), snap_points(net, targets_xy)
    limit = 600.0
    here = point_times(net, bases, targets, limit, direction=direction)
    graphs_before = _graphs_sent(cluster)
    with use_runner(cluster):
        there = point_times(net, bases, targets, limit, direction=direction, chunk_size=2)
        nodes_there = node_times(net, bases, limit, direction=direction, chunk_size=3)
        # a second search on the same network: its graph is not sent again
        point_times(net, bases, targets, limit / 2, direction=direction, chunk_size=2)
        graphs = [g for g in _graphs_sent(cluster) if all(g is not b for b in graphs_before)]
    assert isinstance(current_runner(), InProcess)
    assert len(graphs) == 1 and graphs[0] is search.graph(net, direction)
    # a search's own inputs (its sources' entries, the targets' ends) leave the workers with the search
    held = [type(hold()).__name__ for hold, _ in cluster._sent.values()]
    assert "_PointEnds" not in held and "_Entries" not in held
    assert same_table(there, here)
    assert same_table(nodes_there, node_times(net, bases, limit, direction=direction))
    ref_g = reference_graph(net, np.vstack([bases_xy, targets_xy]))
    if direction == "in":
        ref_g = ref_g.reverse(copy=True)
    got, n_b = there.toarray(), len(bases_xy)
    for i in range(n_b):
        ref = nx.single_source_dijkstra_path_length(ref_g, ("p", i), cutoff=limit, weight="weight")
        reached = set(there.indices[there.indptr[i] : there.indptr[i + 1]].tolist())
        expect = {j for j in range(len(targets_xy)) if ("p", n_b + j) in ref}
        assert reached == expect
        for j in expect:
            assert abs(got[i, j] - ref[("p", n_b + j)]) < TOL_S


#: Columns that hold a run's wall time, not a result (they differ between any two runs).
WALL_TIME_COLUMNS = {"solve_s"}


def _assert_same_layers(la: dict, lb: dict) -> None:
    assert sorted(la) == sorted(lb) and la
    for name, frame in la.items():
        other = lb[name]
        assert list(frame.columns) == list(other.columns), name
        for col in set(frame.columns) - WALL_TIME_COLUMNS:
            if isinstance(frame, gpd.GeoDataFrame) and col == frame.geometry.name:
                assert frame.geometry.geom_equals_exact(other.geometry, 0.0).all(), name
            else:
                assert frame[col].equals(other[col]), f"{name}.{col}"


def test_cover_and_site_on_the_cluster_give_the_single_process_layers(cluster, demo_net_path, monkeypatch):
    """The demo county's coverage and siting stages (what `cover` and `site` write) run on the cluster: every layer
    equal to the run in this process (an area grid of 250 m cells keeps the test short). The cluster run cuts its
    chunks to one source each, so the demand and grid times and siting's coverage matrix come from several blocks."""
    net = RoadNetwork.load(demo_net_path)
    bases = read_points(DEMO / "stations.csv", net.crs, what="bases")
    demand = load_demand(DEMO / "population.tif", net)
    area = read_boundary(DEMO / "boundary.geojson").to_crs(net.crs).union_all()
    std = Standard("8 min", 480.0, 60.0, 0.9)
    cfg = SitingSettings(candidates=DEMO / "candidates.csv", add=2)

    def stages() -> tuple[dict, dict]:
        cover = coverage_stage(net, bases, {"residents": demand}, std, area=area, cell_m=250.0)
        site = siting_stage(siting_problem(net, bases, demand, std, cfg), cfg, "residents")
        return cover.layers(), site.layers()

    cover_here, site_here = stages()
    monkeypatch.setattr(search, "CHUNK_CELLS", 1)
    mapped = []
    client_map = cluster.client.map
    monkeypatch.setattr(
        cluster.client, "map", lambda fn, blocks, **kw: mapped.append(fn.__name__) or client_map(fn, blocks, **kw)
    )
    with use_runner(cluster):
        cover_there, site_there = stages()
    assert mapped.count("_point_rows") >= 3  # the blocks did go to the cluster: demand, area cells, siting matrix
    _assert_same_layers(cover_here, cover_there)
    _assert_same_layers(site_here, site_there)
