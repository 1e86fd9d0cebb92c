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

from coverkit import settings, siting, siting_models
from coverkit.coverage import Standard, TravelTable, travel_table, weighted_fractile
from coverkit.errors import PARAM, CoverkitError, ModelError
from coverkit.network import road_classes
from coverkit.network.model import RoadNetwork
from coverkit.progress import note

#: The covering model names (held in :mod:`coverkit.siting_models`).
MODELS = siting_models.NAMES

#: Road classes from the highest; "a class or better" means this class or any before it (held in
#: :mod:`coverkit.network.road_classes`).
CLASS_ORDER = road_classes.CLASS_ORDER


def generate_candidates(
    net: RoadNetwork, min_class: str = settings.CANDIDATE_CLASS, spacing_m: float = settings.SPACING_M
) -> gpd.GeoDataFrame:
    """Candidate sites at network nodes on roads of ``min_class`` or better, thinned to ``spacing_m``.

    Junction nodes (degree >= 3 in the undirected road graph) are preferred, then any node; a greedy pass over a
    fixed order (class rank, then node index) keeps a node only if no kept node lies within ``spacing_m``.
    Nodes on classes that are no station site (motorway carriageways and ramps,
    :data:`coverkit.network.road_classes.NO_STATION_CLASSES`) are left out.
    """
    if min_class not in CLASS_ORDER:
        raise CoverkitError(f"candidate road class '{min_class}' is unknown; use one of {', '.join(CLASS_ORDER)}.")
    if not spacing_m > 0:
        raise CoverkitError(f"candidate spacing {spacing_m} m must be positive.")
    no_site = list(road_classes.NO_STATION_CLASSES)
    allowed = [c for c in CLASS_ORDER[: CLASS_ORDER.index(min_class) + 1] if c not in no_site]
    e = net.edges
    on_class = e["road_class"].isin(allowed).to_numpy()
    rank_of = {c: i for i, c in enumerate(CLASS_ORDER)}
    edge_rank = e["road_class"].map(rank_of).fillna(len(CLASS_ORDER)).to_numpy(dtype=int)
    node_rank = np.full(net.n_nodes, len(CLASS_ORDER), dtype=int)
    np.minimum.at(node_rank, net.u[on_class], edge_rank[on_class])
    np.minimum.at(node_rank, net.v[on_class], edge_rank[on_class])
    bad = e["road_class"].isin(no_site).to_numpy()
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
    def existing_units(self) -> np.ndarray:
        """Units already at each site (the bases' ``units``, default one; none at candidates or free sites)."""
        return np.where(self.fixed, self.sites["units"].to_numpy(dtype=np.int64), 0)

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
    max_snap_m: float = settings.SNAP_M,
    base_snap_m: float = settings.SNAP_M,
) -> SitingProblem:
    """Snap and time every site to every demand point; existing bases are fixed unless ``relocate``."""
    dup = sorted(set(bases["id"].astype(str)) & set(candidates["id"].astype(str)))
    if dup:
        raise CoverkitError(f"candidate id '{dup[0]}' is also a base id; give candidates ids of their own.")
    sites = pd.concat(
        [
            bases[["id", "geometry"]].assign(
                kind="existing",
                name=bases.get("name", bases["id"]),
                units=pd.to_numeric(bases["units"]).astype(int) if "units" in bases else 1,
            ),
            candidates[["id", "geometry"]].assign(
                kind="candidate", name=candidates.get("name", candidates["id"]), units=0
            ),
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


#: What each model's objective counts, in words (held in :mod:`coverkit.siting_models`).
OBJECTIVE_NAMES = siting_models.OBJECTIVE_NAMES


def solve(
    problem: SitingProblem,
    model: str = siting_models.DEFAULT_MODEL,
    add: int | None = None,
    target: float | None = None,
    q: float | None = None,
    method: str = settings.SITING_METHOD,
    time_limit_s: float = settings.SITING_TIME_LIMIT_S,
    curve_to: int | None = None,
    incidents: gpd.GeoDataFrame | None = None,
) -> SitePlan:
    """Run one covering model on the problem and assemble the chosen sites, the ranking and the model's curve.

    The answer for ``add`` is the point ``p = add`` of the model's own curve (``p = 0 .. max(add, curve_to)``,
    each ``p`` warm-started from ``p - 1``), so the curve and the answer agree and the curve never falls. LSCP
    answers with the fewest sites; its curve is the MCLP curve up to that count (the smallest ``p`` whose MCLP
    cover reaches the target is the LSCP count).

    Parameters
    ----------
    model
        ``mclp`` (``add`` sites), ``lscp`` (fewest sites for ``target`` share, default all coverable demand),
        ``backup`` (``add`` sites, most demand covered twice keeping single coverage), ``mexclp`` (``add`` units,
        busy fraction ``q``), ``p-median`` (``add`` sites, least weighted mean travel time).
    add
        Number of new sites (relocation: the total number of sites to open).
    time_limit_s
        Seconds for all the solving (the answer and the whole curve together).
    curve_to
        Curve up to this many new sites (default ``add``, at least 3).
    """
    spec = siting_models.model_named(model)
    covers, w, fixed = problem.covers, problem.weights, problem.fixed
    n_free = int((~fixed).sum())
    if "add" in spec.needs:
        if add is None:
            raise ModelError(f"model {model} needs {PARAM}, the number of new sites.", param="add")
        if add > n_free and not spec.places_units:
            raise ModelError(
                f"{PARAM} {add} is more than the {n_free} candidate sites; give at most {n_free} or add candidates.",
                param="add",
            )
    if "busy_fraction" in spec.needs and q is None:
        raise ModelError(f"model {model} needs {PARAM} (the share of time a unit is busy, 0..1).", param="q")
    kw = {"method": method}
    note(f"siting: solving {model}")
    if spec.curve_model:  # a model answered on its own, its curve drawn by another (LSCP: the MCLP curve)
        res = spec.function(covers, w, fixed, target_share=target, time_limit_s=time_limit_s / 2, **kw)
        n_curve = min(max(curve_to if curve_to is not None else res.p, res.p, 3), n_free)
        curve_res = siting.siting_curve(
            spec.curve_model, covers, w, n_curve, fixed, time_limit_s=time_limit_s / 2, **kw
        )
    else:
        n_curve = max(curve_to if curve_to is not None else add, add, 3)
        if not spec.places_units:
            n_curve = min(n_curve, n_free)
        data = problem.travel_matrix() if spec.data == "travel" else covers
        extra = {"q": q, "existing_units": problem.existing_units} if model == "mexclp" else {}
        if model == "p-median":
            extra = {"unreached_penalty_s": problem.table.horizon_s}
        curve_res = siting.siting_curve(model, data, w, n_curve, fixed, time_limit_s=time_limit_s, **extra, **kw)
        res = curve_res[add]
    ranking = ranking_table(problem, incidents)
    chosen = chosen_table(problem, res, incidents, q=q)
    curve = curve_table(problem, curve_res)
    open_resp = problem.response_for(res.open_sites)
    existing = np.flatnonzero((problem.sites["kind"] == "existing").to_numpy())
    before_resp = (
        problem.response_for(existing) if existing.size else np.full(len(w), np.inf)
    )  # the existing layout, also when it is free to move (relocation)
    summary = {
        "model": res.model,
        "objective_name": OBJECTIVE_NAMES[res.model],
        "objective": res.objective,
        "bound": res.bound,
        "bound_source": res.bound_source,
        "within_share": res.mip_gap,
        "mip_gap": res.mip_gap,
        "answer_from": res.method,
        "method": res.method,
        "status": res.status,
        "solve_s": res.solve_s,
        "new_sites": len(res.sites),
        "covered_share_before": covered_share(problem, existing),
        "covered_share_after": covered_share(problem, res.open_sites),
        "second_share_after": covered_share(problem, res.open_sites, depth=2),
        "fractile_response_before_s": weighted_fractile(before_resp, w, problem.standard.fractile),
        "fractile_response_after_s": weighted_fractile(open_resp, w, problem.standard.fractile),
        "standard": problem.standard.describe(),
        "total_weight": float(w.sum()),
    }
    if res.model == "p-median":
        summary["mean_travel_before_s"] = mean_travel_s(problem, existing)
    return SitePlan(res, chosen, ranking, curve, summary)


def covered_share(problem: SitingProblem, open_sites: np.ndarray, depth: int = 1) -> float:
    """Share of all demand weight that at least ``depth`` of the open sites reach within the travel standard."""
    w = problem.weights
    cols = np.asarray(open_sites, dtype=int)
    if cols.size == 0 or w.sum() <= 0:
        return 0.0
    k = np.asarray(problem.covers[:, cols].sum(axis=1)).ravel()
    return float(w[k >= depth].sum() / w.sum())


def mean_travel_s(problem: SitingProblem, open_sites: np.ndarray) -> float:
    """Weighted mean travel time (s) to the nearest open site, unreached points at the search horizon."""
    resp = problem.response_for(np.asarray(open_sites, dtype=int)) - problem.standard.turnout_s
    w = problem.weights
    return float(w @ np.minimum(resp, problem.table.horizon_s) / w.sum())


def ranking_table(problem: SitingProblem, incidents: gpd.GeoDataFrame | None = None) -> pd.DataFrame:
    """Every candidate alone added to the fixed sites: demand it adds within the standard."""
    fixed = problem.fixed
    table = siting.rank_candidates(problem.covers, problem.weights, fixed)
    sites = problem.sites
    table.insert(0, "id", sites["id"].to_numpy()[table["site"].to_numpy(dtype=int)])
    table.insert(1, "name", sites["name"].astype(str).to_numpy()[table["site"].to_numpy(dtype=int)])
    return table.drop(columns=["site"]).reset_index(drop=True)


def chosen_table(
    problem: SitingProblem,
    res: siting.SitingResult,
    incidents: gpd.GeoDataFrame | None = None,
    q: float | None = None,
) -> gpd.GeoDataFrame:
    """The chosen new sites: the demand each adds beyond the fixed sites, the demand only it covers, and what the
    model's own objective loses without it (``objective_loss``; for the p-median the rise of the mean travel time,
    s). For LSCP, ``forced`` marks a site that is the only one reaching some demand (it must be chosen)."""
    covers = problem.covers.tocsc()
    w = problem.weights
    counts = covers.astype(np.int64)
    fixed_cov = np.asarray(counts[:, np.flatnonzero(problem.fixed)].sum(axis=1)).ravel() > 0
    units_all = np.zeros(covers.shape[1])
    units_all[np.asarray(res.open_sites, dtype=int)] = 1.0
    if res.units is not None:
        units_all = problem.existing_units.astype(float) + res.units
    k = counts @ units_all
    everyone = np.asarray(counts.sum(axis=1)).ravel()
    rows = []
    for j in res.sites:
        idx = covers[:, [j]].indices
        uj = units_all[j]
        kj, wj = k[idx], w[idx]
        if res.model == "backup":
            loss = float(wj[(kj >= 2) & (kj - uj < 2)].sum())
        elif res.model == "mexclp":
            qq = 0.0 if q is None else float(q)
            loss = float((wj * (qq ** (kj - uj) - qq**kj)).sum())
        elif res.model == "p-median":
            rest = np.setdiff1d(np.asarray(res.open_sites, dtype=int), [j])
            loss = mean_travel_s(problem, rest) - mean_travel_s(problem, res.open_sites)
        else:
            loss = float(wj[kj - uj < 1].sum())
        rows.append(
            {
                "id": str(problem.sites["id"].iloc[j]),
                "name": str(problem.sites["name"].iloc[j]),
                "kind": str(problem.sites["kind"].iloc[j]),
                "added_demand": float(wj[~fixed_cov[idx]].sum()),
                "only_this_site": float(wj[kj == uj].sum()),
                "objective_loss": loss,
                "forced": bool(res.model == "lscp" and ((everyone[idx] == 1) & (wj > 0) & ~fixed_cov[idx]).any()),
                "units": int(res.units[j]) if res.units is not None else 1,
            }
        )
    geom = problem.sites.geometry.to_numpy()[res.sites] if len(res.sites) else []
    columns = ["id", "name", "kind", "added_demand", "only_this_site", "objective_loss", "forced", "units"]
    return gpd.GeoDataFrame(pd.DataFrame(rows, columns=columns), geometry=list(geom), crs=problem.sites.crs)


def curve_table(problem: SitingProblem, results: list[siting.SitingResult]) -> pd.DataFrame:
    """The model's curve (one row per number of new sites) with the share covered within the standard, the
    fractile response and the site ids of each answer."""
    curve = siting.curve_frame(results)
    w = problem.weights
    shares, seconds, frac, ids = [], [], [], []
    for r in results:
        shares.append(covered_share(problem, r.open_sites))
        seconds.append(covered_share(problem, r.open_sites, depth=2))
        open_sites = np.asarray(r.open_sites, dtype=int)
        resp = problem.response_for(open_sites) if len(open_sites) else np.full(len(w), np.inf)
        frac.append(weighted_fractile(resp, w, problem.standard.fractile))
        ids.append(" ".join(str(problem.sites["id"].iloc[j]) for j in r.sites))
    curve["covered_share"] = shares  # within the standard, whatever the model (the p-median's is reached at all)
    curve["gain_share"] = curve["covered_share"].diff().fillna(0.0)
    curve["second_share"] = seconds
    curve["fractile_response_s"] = frac
    curve["site_ids"] = ids
    return curve.drop(columns=["sites", "covered_weight", "second_weight"])
