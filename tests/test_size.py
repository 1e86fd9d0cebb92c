"""Independent checks at the size of real work (``pytest -m size``).

The 90,000-node synthetic county of ``benchmarks/bench_isochrones.py`` (perturbed grid, diagonals, curved and one-way
streets, signals), 30 bases and 50,000 demand points, 5,000 of them placed exactly on junctions. Every reference here
is built in ``tests/reference_search.py`` from the network *as exported* (the saved GeoPackage read back with
pyogrio): shapely STRtree snapping and a plain ``heapq`` Dijkstra (Dijkstra 1959), no scipy.sparse.csgraph, no
``to_networkx()``, no coverkit search or snapping. The network, the searches and the coverage run are built once per
module.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import scipy.sparse as sp
import shapely

from tests import reference_search as ref

pytestmark = pytest.mark.size

N_BASES = 30
N_FREE = 45_000
N_JUNCTION = 5_000
HORIZON_S = 3600.0
STANDARD_S = 480.0
TOL_S = 1e-6


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    """The synthetic network, its export read back, the reference roads and graph, bases and demand points."""
    net = ref.synthetic_network()
    gpkg = net.save(tmp_path_factory.mktemp("size") / "synthetic.gpkg")
    ex = ref.read_exported(gpkg)
    roads = ref.roads_of(ex)
    graph = ref.HeapGraph(ex)
    rng = np.random.default_rng(2027)
    lo, hi = ex.xy.min(axis=0), ex.xy.max(axis=0)
    base_xy = rng.uniform(lo + 0.1 * (hi - lo), hi - 0.1 * (hi - lo), (N_BASES, 2))
    # free points: a random place on a random road, moved up to 40 m off it in a random direction
    r = rng.integers(0, len(roads.a), N_FREE)
    on = shapely.line_interpolate_point(roads.geometry[r], rng.uniform(0, 1, N_FREE), normalized=True)
    ang = rng.uniform(0, 2 * np.pi, N_FREE)
    off = rng.uniform(0, 40.0, N_FREE)[:, None] * np.column_stack([np.cos(ang), np.sin(ang)])
    free_xy = shapely.get_coordinates(on) + off
    # junction points: exactly on nodes that some road touches
    touched = np.unique(np.concatenate([roads.a, roads.b]))
    junction = np.sort(rng.choice(touched, N_JUNCTION, replace=False))
    dem_xy = np.vstack([free_xy, ex.xy[junction]])
    return {
        "net": net,
        "ex": ex,
        "roads": roads,
        "graph": graph,
        "base_xy": base_xy,
        "dem_xy": dem_xy,
        "junction_node": junction,
    }


@pytest.fixture(scope="module")
def reference(world):
    """Reference times: node times from every base (heap Dijkstra) and base x demand times (partial edges)."""
    ex, roads, graph = world["ex"], world["roads"], world["graph"]
    bsn = ref.snap(roads, world["base_xy"])
    dsn = ref.snap(roads, world["dem_xy"])
    dist = np.vstack([graph.search(ref.base_seeds(ex, roads, bsn, i)) for i in range(N_BASES)])
    times = np.vstack([ref.target_times(ex, roads, dist[i], dsn, bsn, i) for i in range(N_BASES)])
    # a junction point is the junction: it is reached when the junction is (node label), or - where the junction
    # has a signal - possibly when a road arrives at it before its delay is paid
    jn = world["junction_node"]
    ok = np.isfinite(ex.travel_s)
    arrive = np.full((N_BASES, len(ex.xy)), np.inf)
    for i in range(N_BASES):
        np.minimum.at(arrive[i], ex.v[ok], dist[i][ex.u[ok]] + ex.run_s[ok])
    arrive = np.minimum(arrive, dist)
    return {
        "bsn": bsn,
        "dsn": dsn,
        "dist": dist,
        "times": times,
        "j_label": dist[:, jn],
        "j_arrive": arrive[:, jn],
    }


@pytest.fixture(scope="module")
def coverage(world):
    """coverkit's coverage run on the same bases and demand (8 min travel standard)."""
    from coverkit.coverage import Standard, evaluate_coverage

    net = world["net"]
    bases = gpd.GeoDataFrame(
        {"id": [f"B{i:02d}" for i in range(N_BASES)]}, geometry=shapely.points(world["base_xy"]), crs=net.crs
    )
    n = len(world["dem_xy"])
    demand = gpd.GeoDataFrame(
        {"id": np.arange(n), "weight": np.ones(n)}, geometry=shapely.points(world["dem_xy"]), crs=net.crs
    )
    std = Standard("travel 8 min", travel_s=STANDARD_S)
    return evaluate_coverage(net, bases, demand, std, horizon_s=HORIZON_S)


@pytest.fixture(scope="module")
def horizon_times(world, coverage):
    """The engine's base x demand times within the horizon (the coverage result stores those within the standard
    only; first and second due beyond it come from multi-source searches, tests/test_reach.py)."""
    from coverkit.travel.search import point_times

    snaps = coverage.extra
    return point_times(world["net"], snaps["base_snap"], snaps["demand_snap"], HORIZON_S)


def _same_snap(world, reference, coverage):
    """Free points that both snaps put on the same spot (ties between equidistant roads excepted)."""
    dsn = coverage.extra["demand_snap"]
    mine = shapely.get_coordinates(
        shapely.line_interpolate_point(
            world["roads"].geometry[reference["dsn"].road], reference["dsn"].s, normalized=True
        )
    )
    same = np.hypot(dsn.x - mine[:, 0], dsn.y - mine[:, 1]) < 1e-6
    return same


def test_snap_distances_match_shapely(world, reference, coverage):
    """Snap distance equals shapely's exact point-line distance to the nearest road (STRtree); positions agree
    except for points equidistant from two roads (source: shapely/GEOS)."""
    dsn = coverage.extra["demand_snap"]
    np.testing.assert_allclose(dsn.dist_m, reference["dsn"].dist_m, atol=1e-6)
    same = _same_snap(world, reference, coverage)
    # ties are junction corners; their time is the junction's either way
    assert same[:N_FREE].mean() > 0.99


def test_point_times_match_heap_dijkstra(world, reference, coverage, horizon_times):
    """Base-to-demand travel times, partial edges at both ends included, equal an independent heap Dijkstra over
    the exported edges to 1e-6 s on 30 bases x 45,000 off-junction points (source: Dijkstra 1959)."""
    same = _same_snap(world, reference, coverage)
    dsn = reference["dsn"]
    interior = (dsn.s > 1e-9) & (dsn.s < 1 - 1e-9)
    cols = np.flatnonzero(same & interior)
    cols = cols[cols < N_FREE]
    assert len(cols) > 40_000
    want = reference["times"][:, cols]
    got = horizon_times.toarray()[:, cols]
    got_mask = np.zeros_like(want, dtype=bool)
    coo = sp.csr_matrix(horizon_times)[:, cols].tocoo()
    got_mask[coo.row, coo.col] = True
    within = want <= HORIZON_S - TOL_S
    beyond = want > HORIZON_S + TOL_S
    assert got_mask[within].all(), "pairs within the horizon must be stored"
    assert not got_mask[beyond].any(), "pairs beyond the horizon must not be stored"
    np.testing.assert_allclose(got[within], want[within], rtol=0, atol=TOL_S)


def _junction_ok(reference, horizon_times):
    jcols = np.arange(N_FREE, N_FREE + N_JUNCTION)
    got = np.full((N_BASES, N_JUNCTION), np.inf)
    coo = sp.csr_matrix(horizon_times)[:, jcols].tocoo()
    got[coo.row, coo.col] = coo.data
    lo, hi = reference["j_arrive"], reference["j_label"]
    keep = hi <= HORIZON_S - TOL_S
    return got, lo, hi, keep


def test_junction_points_get_the_junction_time(world, reference, horizon_times):
    """A point placed exactly on a junction gets the junction's time (design invariant; reference: heap Dijkstra
    over the exported edges). At a junction without a signal that is the node's label exactly; at a signal it lies
    between arriving there (delay unpaid) and the label."""
    got, lo, hi, keep = _junction_ok(reference, horizon_times)
    signal = world["ex"].signal[world["junction_node"]]
    plain = keep & ~signal[None, :]
    np.testing.assert_allclose(got[plain], hi[plain], rtol=0, atol=TOL_S)
    sig = keep & signal[None, :]
    assert (got[sig] >= lo[sig] - TOL_S).all() and (got[sig] <= hi[sig] + TOL_S).all()


def test_junction_points_never_early(world, reference, horizon_times):
    """No junction-placed point is reached before any road arrives at its junction (reference: heap Dijkstra)."""
    got, lo, _, keep = _junction_ok(reference, horizon_times)
    assert (got[keep] >= lo[keep] - TOL_S).all()


def test_first_second_due_and_depth(world, reference, coverage):
    """First- and second-due base, their times, depth within 8 min and the covered flag equal those computed from
    the reference time matrix (source: heap Dijkstra; the definitions of first-due and depth are common practice)."""
    same = _same_snap(world, reference, coverage)
    dsn = reference["dsn"]
    interior = (dsn.s > 1e-9) & (dsn.s < 1 - 1e-9)
    cols = np.flatnonzero(same & interior)
    cols = cols[cols < N_FREE]
    t = np.where(reference["times"] <= HORIZON_S, reference["times"], np.inf)[:, cols]
    order = np.argsort(t, axis=0, kind="stable")
    t_sorted = np.take_along_axis(t, order, axis=0)
    # leave out the rare near-ties, where either order is right
    with np.errstate(invalid="ignore"):
        clear = (np.abs(t_sorted[1] - t_sorted[0]) > 1e-6) & (np.abs(t_sorted[2] - t_sorted[1]) > 1e-6)
    near = np.abs(t - STANDARD_S) < 1e-6
    clear &= ~near.any(axis=0)
    assert clear.mean() > 0.99
    d = coverage.demand.iloc[cols]
    ids = np.array([f"B{i:02d}" for i in range(N_BASES)], dtype=object)
    first = np.where(np.isfinite(t_sorted[0]), ids[order[0]], "")
    second = np.where(np.isfinite(t_sorted[1]), ids[order[1]], "")
    assert (d["first_base"].to_numpy()[clear] == first[clear]).all()
    assert (d["second_base"].to_numpy()[clear] == second[clear]).all()
    np.testing.assert_allclose(d["travel_s"].to_numpy()[clear], t_sorted[0][clear], atol=TOL_S)
    np.testing.assert_allclose(d["second_travel_s"].to_numpy()[clear], t_sorted[1][clear], atol=TOL_S)
    depth = (t <= STANDARD_S).sum(axis=0)
    assert (d["depth"].to_numpy()[clear] == depth[clear]).all()
    assert (d["covered"].to_numpy()[clear] == (t_sorted[0] <= STANDARD_S)[clear]).all()
    # the figures are not trivial: some demand is uncovered, some covered twice or more
    assert 0.05 < (depth[clear] == 0).mean() < 0.95 and (depth[clear] >= 2).any()


def test_inbound_point_times_match_a_reversed_heap_dijkstra(world, reference, coverage):
    """Demand-to-base times (``direction="in"``) for 30 bases x 45,000 off-junction points equal a heap Dijkstra
    on the reversed exported edges, partial edges and end-node delays included, to 1e-6 s (Dijkstra 1959;
    tests/reference_search.py); on the one-way streets they differ from the outbound times."""
    from coverkit.travel.search import point_times

    ex, roads = world["ex"], world["roads"]
    graph = ref.HeapGraph(ref.reversed_edges(ex))
    bsn, dsn = reference["bsn"], reference["dsn"]
    want = np.vstack(
        [
            ref.inbound_times(ex, roads, graph.search(ref.inbound_seeds(ex, roads, bsn, i)), dsn, bsn, i)
            for i in range(N_BASES)
        ]
    )
    same = _same_snap(world, reference, coverage)
    cols = np.flatnonzero(same & (dsn.s > 1e-9) & (dsn.s < 1 - 1e-9))
    cols = cols[cols < N_FREE]
    snaps = coverage.extra
    t_in = point_times(world["net"], snaps["base_snap"], snaps["demand_snap"], HORIZON_S, direction="in")
    got = np.full(want.shape, np.inf)
    coo = sp.csr_matrix(t_in).tocoo()
    got[coo.row, coo.col] = coo.data
    w, g = want[:, cols], got[:, cols]
    within = w <= HORIZON_S - TOL_S
    assert np.isfinite(g[within]).all() and not np.isfinite(g[w > HORIZON_S + TOL_S]).any()
    np.testing.assert_allclose(g[within], w[within], rtol=0, atol=TOL_S)
    out = reference["times"][:, cols]
    assert (np.abs(out[within] - w[within]) > 1.0).mean() > 0.01


@pytest.fixture(scope="module")
def polygons(world, reference):
    """coverkit's fast drive-time polygons for 4 bases and their union, bands 4 and 8 min."""
    from coverkit.isochrones import drive_time_polygons

    net = world["net"]
    pick = [0, 7, 14, 21]
    bases = gpd.GeoDataFrame(
        {"id": [f"B{i:02d}" for i in pick]}, geometry=shapely.points(world["base_xy"][pick]), crs=net.crs
    )
    return pick, drive_time_polygons(net, bases, [4, 8], any_base=True)


def test_polygons_match_buffered_reference(world, reference, polygons):
    """Fast polygons against a reference built from the heap Dijkstra's reached roads and partial roads buffered by
    the 150 m reach with shapely (holes under 1 ha filled): IoU >= 0.99 for these bands of a few minutes, as the
    README and ``coverkit.isochrones`` promise, the reached road length to 0.1 %, and the any-base polygon against
    the union of the reference polygons (source: shapely/GEOS buffers; the polygon definition in the README)."""
    ex, roads = world["ex"], world["roads"]
    from coverkit.isochrones import ANY_BASE_ID

    pick, got = polygons
    union = {4: [], 8: []}
    for i in pick:
        for band in (4, 8):
            lines = ref.reached_lines(ex, roads, reference["dist"][i], band * 60.0, reference["bsn"], i)
            want = ref.fill_small_holes(shapely.union_all(shapely.buffer(lines, 150.0, quad_segs=16)), 0.01e6)
            row = got[(got["base_id"] == f"B{i:02d}") & (got["band_min"] == band)].iloc[0]
            assert ref.iou(row.geometry, want) >= 0.99, (i, band)
            road_m = ref.reached_length_m(ex, roads, reference["dist"][i], band * 60.0, reference["bsn"], i)
            assert row["road_km"] == pytest.approx(road_m / 1000.0, rel=1e-3), (i, band)
            assert row["area_km2"] == pytest.approx(want.area / 1e6, rel=0.02)
            union[band].append(want)
    # the any-base polygon is the union of the bases' polygons
    for band, parts in union.items():
        row = got[(got["base_id"] == ANY_BASE_ID) & (got["band_min"] == band)].iloc[0]
        assert ref.iou(row.geometry, shapely.union_all(parts)) >= 0.99, band


def _greedy(covers: sp.csc_matrix, w: np.ndarray, p: int) -> tuple[list[int], float]:
    """Plain greedy MCLP: add the site covering the most uncovered weight, p times (written here, no coverkit)."""
    left = w.astype(float).copy()
    chosen: list[int] = []
    for _ in range(p):
        gain = covers.T @ left
        gain[chosen] = -1
        j = int(np.argmax(gain))
        chosen.append(j)
        rows = covers[:, j].indices
        left[rows] = 0.0
    return chosen, float(w.sum() - left.sum())


@pytest.fixture(scope="module")
def siting_case(world):
    """500 candidate sites x 50,000 demand points, coverage within 8 min from bounded heap Dijkstra searches."""
    ex, roads, graph = world["ex"], world["roads"], world["graph"]
    rng = np.random.default_rng(11)
    lo, hi = ex.xy.min(axis=0), ex.xy.max(axis=0)
    cand_xy = rng.uniform(lo, hi, (500, 2))
    csn = ref.snap(roads, cand_xy)
    dsn = ref.snap(roads, world["dem_xy"])
    limit = 480.0
    rows, cols = [], []
    for j in range(len(cand_xy)):
        d = graph.search(ref.base_seeds(ex, roads, csn, j), limit_s=limit)
        t = ref.target_times(ex, roads, d, dsn, csn, j)
        hit = np.flatnonzero(t <= limit)
        rows.append(hit)
        cols.append(np.full(len(hit), j))
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    covers = sp.csc_matrix((np.ones(len(rows), bool), (rows, cols)), shape=(len(dsn.road), len(cand_xy)))
    w = rng.integers(1, 20, len(dsn.road)).astype(float)
    return covers, w


def test_mclp_at_its_time_limit_is_no_worse_than_greedy(siting_case):
    """MCLP on 50,000 demand points x 500 candidates, p = 30, with a 2 s limit: the exact solver (HiGHS) stops at its
    limit, and the reported solution covers at least what a plain greedy written here covers, and the reported
    covered weight is what its sites really cover (design invariant; Church & ReVelle 1974 for the model)."""
    from coverkit.siting import mclp

    covers, w = siting_case
    p, limit_s = 30, 2.0
    res = mclp(covers.tocsr(), w, p, method="milp", time_limit_s=limit_s)
    # whatever the solver reached in its time, the answer says who found it
    assert res.method in ("milp", "heuristic") and res.status
    _, greedy_w = _greedy(covers, w, p)
    covered = np.asarray(covers[:, res.sites].sum(axis=1)).ravel() > 0
    assert len(res.sites) == p
    assert res.covered_weight == pytest.approx(float(w[covered].sum()), rel=1e-9)
    assert res.covered_weight >= greedy_w - 1e-6
    assert res.bound >= res.covered_weight - 1e-6


def test_mclp_auto_heuristic_is_no_worse_than_greedy(siting_case):
    """The heuristic (greedy plus interchange) the large-instance switch uses covers at least the plain greedy and
    at most the LP bound it reports (design invariant)."""
    from coverkit.siting import mclp

    covers, w = siting_case
    p = 30
    res = mclp(covers.tocsr(), w, p, method="heuristic", time_limit_s=5.0)
    _, greedy_w = _greedy(covers, w, p)
    assert res.covered_weight >= greedy_w - 1e-6
    assert res.bound >= res.covered_weight - 1e-6


@pytest.mark.filterwarnings("ignore:Constructing LpVariable:DeprecationWarning")
def test_mclp_optimum_equals_cbc_at_size(siting_case):
    """MCLP on 50,000 demand points x 200 candidates, p = 8: the exact solver's covered weight equals the optimum
    of PuLP's bundled CBC on the Church & ReVelle (1974) formulation written here (identical coverage rows merged
    with their weights added, which leaves the optimum unchanged), and its sites cover that weight."""
    import pulp

    from coverkit.siting import mclp

    covers, w = siting_case
    c = covers[:, :200].tocsr()
    c.sort_indices()
    p = 8
    res = mclp(c, w, p, method="milp", time_limit_s=60.0)
    assert res.status.startswith("proven optimal")
    merged: dict[tuple, float] = {}
    for i in range(c.shape[0]):
        key = tuple(c.indices[c.indptr[i] : c.indptr[i + 1]].tolist())
        if key:
            merged[key] = merged.get(key, 0.0) + float(w[i])
    prob = pulp.LpProblem("mclp", pulp.LpMaximize)
    x = [pulp.LpVariable(f"x{j}", cat="Binary") for j in range(c.shape[1])]
    terms = []
    for n, (key, weight) in enumerate(merged.items()):
        y = pulp.LpVariable(f"y{n}", 0, 1)
        prob += y <= pulp.lpSum(x[j] for j in key)
        terms.append(weight * y)
    prob += pulp.lpSum(terms)
    prob += pulp.lpSum(x) == p
    prob.solve(pulp.PULP_CBC_CMD(msg=False, timeLimit=300))
    assert pulp.LpStatus[prob.status] == "Optimal"
    assert res.covered_weight == pytest.approx(pulp.value(prob.objective), rel=1e-9)
    covered = np.asarray(c[:, res.sites].sum(axis=1)).ravel() > 0
    assert res.covered_weight == pytest.approx(float(w[covered].sum()), rel=1e-9)


def test_mclp_auto_switches_to_the_heuristic_above_the_milp_size_limit():
    """``method="auto"`` on a model above ``MILP_NNZ_LIMIT`` nonzeros (26,000 distinct demand rows x 120 sites,
    2.2 million covering pairs) uses the heuristic, says so, covers at least a plain greedy written here, and
    reports a bound no lower than its answer (design invariant; Church & ReVelle 1974)."""
    from coverkit.siting import MILP_NNZ_LIMIT, mclp

    rng = np.random.default_rng(4)
    covers = sp.csc_matrix(rng.random((26_000, 120)) < 0.7)
    assert covers.nnz > MILP_NNZ_LIMIT
    w = rng.integers(1, 10, covers.shape[0]).astype(float)
    res = mclp(sp.csr_array(covers), w, 5, method="auto", time_limit_s=20.0)
    assert res.method == "heuristic"
    _, greedy_w = _greedy(covers, w, 5)
    assert res.covered_weight >= greedy_w - 1e-6
    assert res.bound >= res.covered_weight - 1e-6


# -- hypercube at 16 and 18 units ------------------------------------------------------------------------------


def _hypercube_instance(n_units: int, n_atoms: int, rho: float, seed: int):
    """Units and atoms uniform in a 20 km square, Manhattan travel, nearest-first preference (seeded)."""
    rng = np.random.default_rng(seed)
    units = rng.random((n_units, 2)) * 20_000
    atoms = rng.random((n_atoms, 2)) * 20_000
    travel = np.abs(atoms[:, None, :] - units[None, :, :]).sum(axis=2)
    pref = np.argsort(travel, axis=1, kind="stable")
    rates = rng.random(n_atoms) + 0.2
    service_min = 30.0
    rates *= rho * n_units * 60.0 / service_min / rates.sum()
    return rates, pref, service_min


def _reference_zero_queue_hypercube(rates_h: np.ndarray, pref: np.ndarray, service_min: float) -> np.ndarray:
    """Workloads of the exact zero-queue hypercube, built here from its definition (Larson 1974): states are bit
    sets of busy units, a call from atom a goes to the first free unit on its list, each busy unit frees at rate mu.
    Stationary distribution by uniformised power iteration (no coverkit code)."""
    n = pref.shape[1]
    m = 1 << n
    states = np.arange(m, dtype=np.int64)
    mu = 60.0 / service_min
    src, dst, val = [], [], []
    for a in range(len(rates_h)):
        assigned = np.zeros(m, dtype=bool)
        for k in range(n):
            unit = pref[a, k]
            free = ((states >> unit) & 1) == 0
            go = free & ~assigned
            assigned |= go
            src.append(states[go])
            dst.append(states[go] | (1 << unit))
            val.append(np.full(go.sum(), rates_h[a]))
    for unit in range(n):
        busy = ((states >> unit) & 1) == 1
        src.append(states[busy])
        dst.append(states[busy] & ~(1 << unit))
        val.append(np.full(busy.sum(), mu))
    src, dst, val = np.concatenate(src), np.concatenate(dst), np.concatenate(val)
    q = sp.csr_matrix((val, (src, dst)), shape=(m, m))
    out = np.asarray(q.sum(axis=1)).ravel()
    lam = out.max() * 1.0001
    p_t = (sp.identity(m, format="csr") + (q - sp.diags(out)) / lam).T.tocsr()
    # start from the birth-death busy-count distribution spread evenly within each count
    count = np.array([bin(s).count("1") for s in range(m)])
    e = rates_h.sum() / mu
    level = np.array([e**k / np.prod(np.arange(1, k + 1)) for k in range(n + 1)])
    level /= level.sum()
    per = np.bincount(count)
    pi = level[count] / per[count]
    for _ in range(20_000):
        new = p_t @ pi
        if np.abs(new - pi).sum() < 1e-13:
            pi = new
            break
        pi = new
    pi /= pi.sum()
    return np.array([pi[((states >> u) & 1) == 1].sum() for u in range(n)]), pi, count


@pytest.mark.parametrize("n_units", [16, 18])
def test_hypercube_approximation_against_exact(n_units):
    """Larson's approximation against the exact hypercube at 16 and 18 units (2^16 and 2^18 states), infinite queue
    as in Larson (1975): Larson & Odoni (1981), §5.5.3 report workloads "within about 1-2 %"; asserted here as a mean
    error of at most 1.5 percentage points and no unit off by more than 3. The bounds were set after measuring (mean
    1.0, largest 2.5 points = 5.5 % relative, at 16 units, rho = 0.5): they catch a broken approximation only. With
    zero queue capacity the exact model's busy-count distribution equals the M/M/N/N birth-death one, its loss
    probability Erlang B (Larson 1974; Erlang 1917, both written here), and its workloads sum to the carried load."""
    from coverkit.queueing.hypercube import hypercube_approx, hypercube_exact

    rates, pref, service = _hypercube_instance(n_units, 60, 0.5, seed=n_units)
    exact = hypercube_exact(rates, pref, service, queue="infinite")
    approx = hypercube_approx(rates, pref, service, queue="infinite")
    err = np.abs(approx.workload - exact.workload)
    assert err.mean() <= 0.015
    assert err.max() <= 0.03
    zero = hypercube_exact(rates, pref, service, queue="zero")
    e = rates.sum() * service / 60.0
    b = 1.0
    for k in range(1, n_units + 1):
        b = e * b / (k + e * b)
    level = np.array([e**k / np.prod(np.arange(1, k + 1, dtype=float)) for k in range(n_units + 1)])
    level /= level.sum()
    np.testing.assert_allclose(zero.busy_count_probability, level, atol=1e-9)
    assert zero.loss_probability[0] == pytest.approx(b, rel=1e-6)
    assert zero.workload.sum() == pytest.approx(e * (1 - b), rel=1e-6)


def test_exact_hypercube_matches_chain_built_here():
    """coverkit's exact zero-queue hypercube at 16 units (65,536 states) equals a chain built here from the model's
    definition and solved by power iteration: every unit's workload to 1e-6 (Larson 1974)."""
    from coverkit.queueing.hypercube import hypercube_exact

    rates, pref, service = _hypercube_instance(16, 40, 0.4, seed=3)
    want, _, _ = _reference_zero_queue_hypercube(rates, pref, service)
    got = hypercube_exact(rates, pref, service, queue="zero")
    np.testing.assert_allclose(got.workload, want, atol=1e-6)
