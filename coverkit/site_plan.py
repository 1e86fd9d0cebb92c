"""Where should a station go: candidates, coverage matrices from the travel engine, and the covering models.

Glue between the network/travel/coverage layers and :mod:`coverkit.siting` (which holds the models and reads no
files). Sites are existing bases (fixed, or free to move in a relocation study) followed by candidate sites; the
coverage matrix comes from the same travel engine as every coverage figure.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import scipy.sparse as sp
import shapely

from coverkit import siting
from coverkit.coverage import Standard, TravelTable, travel_table, weighted_fractile
from coverkit.errors import CoverkitError, ModelError
from coverkit.network.model import RoadNetwork
from coverkit.progress import note

MODELS = ("mclp", "lscp", "backup", "mexclp", "p-median")

#: Road classes from the highest; "a class or better" means this class or any before it.
CLASS_ORDER = (
    "motorway",
    "trunk",
    "primary",
    "secondary",
    "tertiary",
    "unclassified",
    "residential",
    "living_street",
    "service",
)


def generate_candidates(net: RoadNetwork, min_class: str = "tertiary", spacing_m: float = 1500.0) -> gpd.GeoDataFrame:
    """Candidate sites at network nodes on roads of ``min_class`` or better, thinned to ``spacing_m``.

    Junction nodes (degree >= 3 in the undirected road graph) are preferred, then any node; a greedy pass over a
    fixed order (class rank, then node index) keeps a node only if no kept node lies within ``spacing_m``.
    Motorway and link nodes are left out: a station is not sited on a carriageway.
    """
    if min_class not in CLASS_ORDER:
        raise CoverkitError(f"candidate road class '{min_class}' is unknown; use one of {', '.join(CLASS_ORDER)}.")
    if not spacing_m > 0:
        raise CoverkitError(f"candidate spacing {spacing_m} m must be positive.")
    allowed = [c for c in CLASS_ORDER[: CLASS_ORDER.index(min_class) + 1] if c != "motorway"]
    e = net.edges
    on_class = e["road_class"].isin(allowed).to_numpy()
    rank_of = {c: i for i, c in enumerate(CLASS_ORDER)}
    edge_rank = e["road_class"].map(rank_of).fillna(len(CLASS_ORDER)).to_numpy(dtype=int)
    node_rank = np.full(net.n_nodes, len(CLASS_ORDER), dtype=int)
    np.minimum.at(node_rank, net.u[on_class], edge_rank[on_class])
    np.minimum.at(node_rank, net.v[on_class], edge_rank[on_class])
    bad = e["road_class"].str.startswith("motorway").to_numpy()
    on_motorway = np.zeros(net.n_nodes, dtype=bool)
    on_motorway[net.u[bad]] = True
    on_motorway[net.v[bad]] = True
    lo = np.minimum(net.u, net.v)
    hi = np.maximum(net.u, net.v)
    pairs = np.unique(np.column_stack([lo, hi]), axis=0)
    degree = np.bincount(pairs.ravel(), minlength=net.n_nodes)
    nodes = np.flatnonzero((node_rank < len(CLASS_ORDER)) & ~on_motorway)
    if len(nodes) == 0:
        raise CoverkitError(f"no road of class '{min_class}' or better in the network; choose a lower class.")
    order = nodes[np.lexsort((nodes, -(degree[nodes] >= 3).astype(int), node_rank[nodes]))]
    xy = net.xy
    kept: list[int] = []
    tree_pts = np.empty((0, 2))
    for n in order:  # greedy thinning over candidate nodes only (hundreds to a few thousand), not every edge
        if len(tree_pts) and np.min(np.hypot(*(tree_pts - xy[n]).T)) < spacing_m:
            continue
        kept.append(int(n))
        tree_pts = np.vstack([tree_pts, xy[n]])
    kept_arr = np.array(sorted(kept))
    return gpd.GeoDataFrame(
        {
            "id": [f"N{net.nodes['node_id'].iloc[k]}" for k in kept_arr],
            "name": [f"generated at node {net.nodes['node_id'].iloc[k]}" for k in kept_arr],
            "road_class": [CLASS_ORDER[node_rank[k]] for k in kept_arr],
        },
        geometry=shapely.points(xy[kept_arr]),
        crs=net.crs,
    )


@dataclass
class SitingProblem:
    """Sites (existing bases first, then candidates), demand and the coverage matrix between them."""

    sites: gpd.GeoDataFrame  # id, kind ("existing" | "candidate"), geometry
    fixed: np.ndarray  # bool per site
    demand: gpd.GeoDataFrame
    standard: Standard
    table: TravelTable  # rows: sites, columns: demand points

    @property
    def covers(self) -> sp.csr_array:
        """(n_demand, n_sites) boolean: site reaches demand within the travel standard."""
        t = self.table.times.tocoo()
        ok = t.data <= self.standard.travel_s
        return sp.csr_array(
            (np.ones(int(ok.sum()), dtype=bool), (t.col[ok], t.row[ok])), shape=(t.shape[1], t.shape[0])
        )

    @property
    def weights(self) -> np.ndarray:
        """Demand weights; off-network demand keeps its weight (it counts as not coverable)."""
        return self.demand["weight"].to_numpy(dtype=float)

    def travel_matrix(self) -> sp.csr_array:
        """(n_demand, n_sites) travel seconds within the horizon (absent = not reached)."""
        t = self.table.times.tocoo()
        return sp.csr_array((t.data, (t.col, t.row)), shape=(t.shape[1], t.shape[0]))

    def response_for(self, open_sites: np.ndarray) -> np.ndarray:
        """Response time (s, turnout included) of each demand point from its nearest open site."""
        rows = self.table.times.tocsr()[np.asarray(open_sites, dtype=int)]
        best = np.full(rows.shape[1], np.inf)
        coo = rows.tocoo()
        np.minimum.at(best, coo.col, coo.data)
        return best + self.standard.turnout_s


def build_problem(
    net: RoadNetwork,
    bases: gpd.GeoDataFrame,
    candidates: gpd.GeoDataFrame,
    demand: gpd.GeoDataFrame,
    standard: Standard,
    relocate: bool = False,
    max_snap_m: float = 500.0,
    base_snap_m: float = 500.0,
) -> SitingProblem:
    """Snap and time every site to every demand point; existing bases are fixed unless ``relocate``."""
    dup = sorted(set(bases["id"].astype(str)) & set(candidates["id"].astype(str)))
    if dup:
        raise CoverkitError(f"candidate id '{dup[0]}' is also a base id; give candidates ids of their own.")
    sites = pd.concat(
        [
            bases[["id", "geometry"]].assign(kind="existing", name=bases.get("name", bases["id"])),
            candidates[["id", "geometry"]].assign(kind="candidate", name=candidates.get("name", candidates["id"])),
        ],
        ignore_index=True,
    )
    sites = gpd.GeoDataFrame(sites, geometry="geometry", crs=net.crs)
    fixed = (sites["kind"] == "existing").to_numpy() & (not relocate)
    horizon = max(1800.0, 3 * standard.travel_s)
    note(f"siting: timing {len(sites)} sites ({len(bases)} existing, {len(candidates)} candidates)")
    table = travel_table(net, sites, demand, horizon, max_snap_m, base_snap_m, what="demand points")
    return SitingProblem(sites, fixed, demand, standard, table)


@dataclass
class SitePlan:
    """The chosen sites and the tables around them."""

    result: siting.SitingResult
    chosen: gpd.GeoDataFrame
    ranking: pd.DataFrame
    curve: pd.DataFrame
    summary: dict = field(default_factory=dict)


def solve(
    problem: SitingProblem,
    model: str = "mclp",
    add: int | None = None,
    target: float | None = None,
    q: float | None = None,
    method: str = "auto",
    time_limit_s: float = 60.0,
    curve_to: int | None = None,
    incidents: gpd.GeoDataFrame | None = None,
) -> SitePlan:
    """Run one covering model on the problem and assemble the chosen sites, the ranking and the coverage curve.

    Parameters
    ----------
    model
        ``mclp`` (``add`` sites), ``lscp`` (fewest sites for ``target`` share, default all coverable demand),
        ``backup`` (``add`` sites, most demand covered twice keeping single coverage), ``mexclp`` (``add`` units,
        busy fraction ``q``), ``p-median`` (``add`` sites, least weighted mean travel time).
    add
        Number of new sites (relocation: the total number of sites to open).
    curve_to
        Solve MCLP for 0..curve_to new sites for the coverage curve (default ``add``, at least 3).
    """
    if model not in MODELS:
        raise ModelError(f"model '{model}' is unknown; use one of {', '.join(MODELS)}.")
    covers, w, fixed = problem.covers, problem.weights, problem.fixed
    n_free = int((~fixed).sum())
    if model != "lscp":
        if add is None:
            raise ModelError(f"model {model} needs --add N, the number of new sites.")
        if add > n_free:
            raise ModelError(
                f"--add {add} is more than the {n_free} candidate sites; give at most {n_free} or add candidates."
            )
    kw = {"method": method, "time_limit_s": time_limit_s}
    note(f"siting: solving {model}")
    if model == "mclp":
        res = siting.mclp(covers, w, add, fixed, **kw)
    elif model == "lscp":
        res = siting.lscp(covers, w, fixed, target_share=target, **kw)
    elif model == "backup":
        res = siting.backup_coverage(covers, w, add, fixed, **kw)
    elif model == "mexclp":
        if q is None:
            raise ModelError("model mexclp needs --busy-fraction q (the share of time a unit is busy, 0..1).")
        res = siting.mexclp(covers, w, add, q, fixed, **kw)
    else:
        res = siting.p_median(problem.travel_matrix(), w, add, fixed, unreached_penalty_s=problem.table.horizon_s, **kw)
    ranking = ranking_table(problem, incidents)
    chosen = chosen_table(problem, res, incidents)
    n_curve = max(curve_to if curve_to is not None else (add or res.p or 0), 3)
    curve = curve_table(problem, min(n_curve, n_free), method=method, time_limit_s=time_limit_s)
    open_resp = problem.response_for(res.open_sites)
    summary = {
        "model": res.model,
        "method": res.method,
        "status": res.status,
        "mip_gap": res.mip_gap,
        "bound": res.bound,
        "bound_source": res.bound_source,
        "solve_s": res.solve_s,
        "new_sites": len(res.sites),
        "objective": res.objective,
        "covered_share_before": float(curve["covered_share"].iloc[0]),
        "covered_share_after": res.covered_share,
        "fractile_response_before_s": float(curve["fractile_response_s"].iloc[0]),
        "fractile_response_after_s": weighted_fractile(open_resp, w, problem.standard.fractile),
        "standard": problem.standard.describe(),
    }
    return SitePlan(res, chosen, ranking, curve, summary)


def ranking_table(problem: SitingProblem, incidents: gpd.GeoDataFrame | None = None) -> pd.DataFrame:
    """Every candidate alone added to the fixed sites: demand it adds within the standard."""
    fixed = problem.fixed
    table = siting.rank_candidates(problem.covers, problem.weights, fixed)
    sites = problem.sites
    table.insert(0, "id", sites["id"].to_numpy()[table["site"].to_numpy(dtype=int)])
    table.insert(1, "name", sites["name"].astype(str).to_numpy()[table["site"].to_numpy(dtype=int)])
    return table.drop(columns=["site"]).reset_index(drop=True)


def chosen_table(
    problem: SitingProblem, res: siting.SitingResult, incidents: gpd.GeoDataFrame | None = None
) -> gpd.GeoDataFrame:
    """The chosen new sites with the demand each adds beyond the fixed sites and the demand only it covers."""
    covers = problem.covers.tocsc()
    w = problem.weights
    counts = covers.astype(np.int64)
    fixed_cov = np.asarray(counts[:, np.flatnonzero(problem.fixed)].sum(axis=1)).ravel() > 0
    open_count = np.asarray(counts[:, np.asarray(res.open_sites, dtype=int)].sum(axis=1)).ravel()
    rows = []
    for j in res.sites:
        idx = covers[:, [j]].indices
        rows.append(
            {
                "id": str(problem.sites["id"].iloc[j]),
                "name": str(problem.sites["name"].iloc[j]),
                "kind": str(problem.sites["kind"].iloc[j]),
                "added_demand": float(w[idx][~fixed_cov[idx]].sum()),
                "only_this_site": float(w[idx][open_count[idx] == 1].sum()),
                "units": int(res.units[j]) if res.units is not None else 1,
            }
        )
    geom = problem.sites.geometry.to_numpy()[res.sites] if len(res.sites) else []
    return gpd.GeoDataFrame(
        pd.DataFrame(rows, columns=["id", "name", "kind", "added_demand", "only_this_site", "units"]),
        geometry=list(geom),
        crs=problem.sites.crs,
    )


def curve_table(problem: SitingProblem, max_new: int, method: str = "auto", time_limit_s: float = 60.0) -> pd.DataFrame:
    """Coverage curve p = 0..max_new (MCLP optima) with the fractile response of each solution."""
    curve = siting.coverage_curve(
        problem.covers, problem.weights, max_new, problem.fixed, method=method, time_limit_s=time_limit_s
    )
    fixed_idx = np.flatnonzero(problem.fixed)
    frac = []
    ids = []
    for text in curve["sites"].astype(str):
        new = np.array([int(s) for s in text.split()], dtype=int) if text.strip() else np.zeros(0, dtype=int)
        open_sites = np.concatenate([fixed_idx, new]).astype(int)
        resp = problem.response_for(open_sites) if len(open_sites) else np.full(len(problem.weights), np.inf)
        frac.append(weighted_fractile(resp, problem.weights, problem.standard.fractile))
        ids.append(" ".join(str(problem.sites["id"].iloc[j]) for j in new))
    curve["fractile_response_s"] = frac
    curve["site_ids"] = ids
    return curve.drop(columns=["sites"])
