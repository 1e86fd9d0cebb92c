"""Quick what-if: a computed base study that answers closures, slowdowns and base changes incrementally.

:class:`WhatIf` keeps a computed base study and answers a closure or a base change by searching again only from the
bases whose shortest-path trees the change can alter; :class:`WhatIfOutcome` holds the answer. Scenario entries,
their edge selection and the change log come from :mod:`coverkit.scenario`; the result equals a full recomputation.
:func:`coverkit.compare_run.whatif_from_study` builds the base state from a study file. Edge times follow the
conventions stated in :mod:`coverkit.scenario`.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import scipy.sparse as sp
import shapely

from coverkit import settings
from coverkit.coverage import (
    CoverageResult,
    Standard,
    TravelTable,
    default_horizon_s,
    demand_exclude_classes,
    evaluate_coverage,
)
from coverkit.errors import CoverkitError
from coverkit.network.model import MIN_EDGE_S, RoadNetwork
from coverkit.progress import note
from coverkit.scenario import (
    BaseChange,
    ChangeLog,
    Closure,
    EdgeChanges,
    Scenario,
    apply_base_changes,
    change_log,
    closure_edges,
    edge_changes,
    slowed_travel_s,
)
from coverkit.travel import nearest_sources, node_times, snap_points, turns
from coverkit.travel.repair import can_repair, repaired_node_times
from coverkit.travel.search import CHUNK_CELLS, dense_to_csr, exits, same_edge_min
from coverkit.travel.snap import Snapped

#: Message of a what-if closure that no base's search reaches.
NO_REACH_NOTE = "no base's search reaches the closed roads; coverage unchanged"


def _dense_rows(m: sp.csr_matrix, rows: np.ndarray) -> np.ndarray:
    """Rows of a sparse time matrix as a dense array, inf where nothing is stored (stored zeros stay zeros)."""
    sub = m[rows].tocoo()
    out = np.full((len(rows), m.shape[1]), np.inf)
    out[sub.row, sub.col] = sub.data
    return out


def _row_masks(keys: np.ndarray, rows: np.ndarray, ids: list[str], n: int) -> dict[str, np.ndarray]:
    """Per row ``rows[i]`` (named by ``ids[rows[i]]``), a boolean per node: True at the flat keys ``keys``
    (``row x n + node``, increasing) of that row."""
    cuts = np.searchsorted(keys, np.r_[rows * np.int64(n), rows * np.int64(n) + n].reshape(2, -1))
    out = {}
    for r, lo, hi in zip(rows.tolist(), cuts[0], cuts[1], strict=True):
        mask = np.zeros(n, dtype=bool)
        mask[keys[lo:hi] - r * n] = True
        out[ids[r]] = mask
    return out


def times_from_nodes(
    net: RoadNetwork,
    node_t: sp.csr_matrix,
    base_snap: Snapped,
    rows: np.ndarray,
    targets: Snapped,
    cols: np.ndarray,
    limit_s: float,
    direction: str,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Point times of bases ``rows`` to targets ``cols`` from stored node times: the arithmetic of
    :func:`coverkit.travel.point_times` (partial edges at the target, same-edge trips) without a new search.

    Returns COO triplets (base row, target column, time s) within ``limit_s``.
    """
    rows = np.asarray(rows, dtype=np.int64)
    cols = np.asarray(cols, dtype=np.int64)
    empty = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))
    if len(rows) == 0 or len(cols) == 0:
        return empty
    sub = targets.subset(cols)
    t_pt, t_node, t_add = exits(net, sub, direction)
    starts = np.flatnonzero(np.r_[True, t_pt[1:] != t_pt[:-1]]) if len(t_pt) else np.zeros(0, dtype=np.int64)
    with_entries = t_pt[starts] if len(t_pt) else np.zeros(0, dtype=np.int64)
    chunk = max(1, CHUNK_CELLS // max(node_t.shape[1], len(t_pt), 1))
    out_r, out_c, out_t = [], [], []
    for start in range(0, len(rows), chunk):
        r = rows[start : start + chunk]
        dist = _dense_rows(node_t, r)
        block = np.full((len(r), len(cols)), np.inf)
        if len(t_pt):
            block[:, with_entries] = np.minimum.reduceat(dist[:, t_node] + t_add[None, :], starts, axis=1)
        same_edge_min(net, base_snap, sub, r, block, direction)
        m = dense_to_csr(block, limit_s).tocoo()
        out_r.append(r[m.row])
        out_c.append(cols[m.col])
        out_t.append(m.data)
    return np.concatenate(out_r), np.concatenate(out_c), np.concatenate(out_t)


@dataclass
class WhatIfOutcome:
    """The result of one what-if.

    Attributes
    ----------
    results
        ``{(standard name, demand name): CoverageResult}`` after the change.
    network, bases
        The changed network and bases.
    changes
        The :class:`ChangeLog` (its notes say when coverage is unchanged).
    recomputed_bases
        Ids of the bases searched again (changed, added or moved bases, and bases whose shortest-path trees the
        change can alter); the others kept their stored times exactly.
    node_t, base_snap
        Per base after the change, the node times of its bounded search (sparse, s) and the snapped bases: what
        :meth:`WhatIf.point_times` derives further point times from.
    moved_nodes
        Per base whose stored search was repaired: a boolean per node, True where its time may have changed.
    """

    results: dict
    network: RoadNetwork
    bases: gpd.GeoDataFrame
    changes: ChangeLog
    recomputed_bases: list[str]
    node_t: sp.csr_matrix | None = None
    base_snap: Snapped | None = None
    moved_nodes: dict[str, np.ndarray] | None = None

    @property
    def result(self) -> CoverageResult:
        """The first result (the only one for a what-if on one standard and one demand layer)."""
        return next(iter(self.results.values()))


class WhatIf:
    """A computed base study that answers closures, slowdowns and base changes incrementally.

    The base state keeps, per base, the node times of its bounded search (sparse, within the horizon), and per
    demand layer the snapped points and the base-to-point times. A change that only makes edges slower or closes
    them (or makes some faster) can alter base ``b``'s times only if some changed edge ``(x, y)`` is *tight* in
    ``b``'s search: ``d_b(x) + w(x, y) <= min(d_b(y), horizon)`` with ``w`` the smaller of the old and new weight.
    Every shortest path consists of tight edges only, so when no changed edge is tight the old distances remain
    shortest (slower edges lie on no shortest path; faster ones create none), and the base's stored row is exact.
    Such bases are not searched again; the rest are. Every point keeps its snap (a closure never moves a point onto
    another road, :mod:`coverkit.travel.snap`), and points on a changed edge get their partial-edge times (along
    the open stub of a road closed in part) from the stored node times. An added or moved base
    adds one search; a removed base drops a row. The outcome equals a full recomputation (tested to exact
    equality).

    Parameters
    ----------
    net, bases
        Network and bases of the base study.
    demand
        One demand GeoDataFrame or ``{name: GeoDataFrame}``.
    standards
        One :class:`Standard` or a list.
    horizon_s
        Search bound (s); default from the longest standard (:func:`coverkit.coverage.default_horizon_s`).
    direction
        ``"out"`` (base to demand) or ``"in"``.
    demand_snap_m
        Snap limit of demand points (m), one value or ``{name: value}``.
    base_snap_m
        Snap limit of bases (m).
    """

    def __init__(
        self,
        net: RoadNetwork,
        bases: gpd.GeoDataFrame,
        demand: gpd.GeoDataFrame | dict[str, gpd.GeoDataFrame],
        standards: Standard | list[Standard],
        horizon_s: float | None = None,
        direction: str = "out",
        demand_snap_m: float | dict[str, float] = settings.SNAP_M,
        base_snap_m: float = settings.SNAP_M,
    ) -> None:
        self.net = net
        self.bases = bases.reset_index(drop=True)
        self.demand = dict(demand) if isinstance(demand, dict) else {"demand": demand}
        self.standards = [standards] if isinstance(standards, Standard) else list(standards)
        self.horizon_s = float(horizon_s or max(default_horizon_s(s) for s in self.standards))
        self.direction = direction
        self.base_snap_m = float(base_snap_m)
        snaps = demand_snap_m if isinstance(demand_snap_m, dict) else dict.fromkeys(self.demand, demand_snap_m)
        self.demand_snap_m = {k: float(snaps.get(k, settings.SNAP_M)) for k in self.demand}
        self.base_snap = snap_points(net, self.bases, max_snap_m=self.base_snap_m, off_network="raise", what="bases")
        note(f"what-if: searching from {len(self.bases)} bases (horizon {self.horizon_s:g} s)")
        self.node_t = node_times(net, self.base_snap, self.horizon_s, direction)
        self.point_snap: dict[str, Snapped] = {}
        self.tables: dict[str, TravelTable] = {}
        all_rows = np.arange(len(self.bases))
        for name, dem in self.demand.items():
            snap = snap_points(
                net, dem, max_snap_m=self.demand_snap_m[name], off_network="mask", what="demand points",
                warn_islands=False, exclude_classes=demand_exclude_classes(dem),
            )  # fmt: skip
            r, c, t = times_from_nodes(
                net, self.node_t, self.base_snap, all_rows, snap, np.arange(len(dem)), self.horizon_s, direction
            )
            times = sp.csr_matrix((t, (r, c)), shape=(len(self.bases), len(dem)))
            self.point_snap[name] = snap
            self.tables[name] = TravelTable(self.base_snap, snap, times, self.horizon_s, direction)
        self.results = {
            (s.name, name): evaluate_coverage(net, self.bases, dem, s, table=self.tables[name])
            for s in self.standards
            for name, dem in self.demand.items()
        }

    # -- questions ----------------------------------------------------------------------------------------------------
    def close_edges(self, edge_ids: np.ndarray | list[int]) -> WhatIfOutcome:
        """Coverage with the directed edges ``edge_ids`` closed (a two-way street has two edges)."""
        ids = np.unique(np.asarray(edge_ids, dtype=np.int64))
        bad = ids[(ids < 0) | (ids >= self.net.n_edges)]
        if len(bad):
            raise CoverkitError(f"edge {int(bad[0])} is not in the network (edge ids run 0..{self.net.n_edges - 1}).")
        t = self.net.travel_s.copy()
        t[ids] = np.inf
        return self._evaluate(t, self.bases, change_log(self.net, ids))

    def close_ways(self, way_ids: list[int]) -> WhatIfOutcome:
        """Coverage with every edge of the OSM ways ``way_ids`` closed (both directions)."""
        closure = Closure(0, "way_ids", tuple(int(w) for w in way_ids))
        return self.close_edges(closure_edges(self.net, closure, "what-if"))

    def slow_edges(self, edge_ids: np.ndarray | list[int], factor: float) -> WhatIfOutcome:
        """Coverage with the running time of ``edge_ids`` multiplied by ``factor`` (> 0)."""
        if not (np.isfinite(factor) and factor > 0):
            raise CoverkitError(f"slowdown factor must be a number > 0 (1.5 = 50 % slower), got {factor}.")
        ids = np.unique(np.asarray(edge_ids, dtype=np.int64))
        ids = ids[np.isfinite(self.net.travel_s[ids])]
        t = slowed_travel_s(self.net, ids, factor)
        return self._evaluate(t, self.bases, change_log(self.net, [], ids, np.full(len(ids), factor)))

    def change_base(
        self,
        action: str,
        base_id: str,
        lon: float | None = None,
        lat: float | None = None,
        units: int | None = None,
        name: str | None = None,
    ) -> WhatIfOutcome:
        """Coverage after one base change: ``action`` is ``"add"`` / ``"move"`` (lon, lat in degrees), ``"remove"``
        or ``"units"``."""
        if action not in ("add", "remove", "move", "units"):
            raise CoverkitError(f"base change '{action}' is not one of add, remove, move, units.")
        if action in ("add", "move") and (lon is None or lat is None):
            raise CoverkitError(f"base change '{action}' of '{base_id}' needs lon and lat (degrees, EPSG:4326).")
        if action == "units" and (units is None or units < 0):
            raise CoverkitError(f"base change 'units' of '{base_id}' needs units >= 0.")
        change = BaseChange(0, action, str(base_id), lon, lat, units, name)
        bases, rows = apply_base_changes(self.bases, [change], "what-if")
        return self._evaluate(self.net.travel_s, bases, change_log(self.net, [], base_rows=rows))

    def run(self, scenario: Scenario) -> WhatIfOutcome:
        """Coverage after a whole scenario (closures, slowdowns and base changes together)."""
        ch = edge_changes(self.net, scenario)
        bases, rows = apply_base_changes(self.bases, scenario.base_changes, str(scenario.path))
        return self._evaluate(ch.travel_s, bases, ch.log(self.net, rows), ch)

    def point_times(self, points: Snapped, outcome: WhatIfOutcome | None = None) -> sp.csr_matrix:
        """Travel times (s, sparse (n_bases, n_points), within the horizon) from the bases to further snapped points
        (e.g. the cells of an area grid), before the change or after ``outcome``, from the stored node times: the
        arithmetic of :func:`coverkit.travel.point_times` without a new search. The points keep their snap (a
        closure never moves a point onto another road)."""
        if outcome is None:
            net, node_t, base_snap, n = self.net, self.node_t, self.base_snap, len(self.bases)
        else:
            net, node_t, base_snap, n = outcome.network, outcome.node_t, outcome.base_snap, len(outcome.bases)
        r, c, t = times_from_nodes(
            net, node_t, base_snap, np.arange(n), points, np.arange(len(points)), self.horizon_s, self.direction
        )
        return sp.csr_matrix((t, (r, c)), shape=(n, len(points)))

    def point_times_after(self, points: Snapped, stored: sp.csr_matrix, outcome: WhatIfOutcome) -> sp.csr_matrix:
        """:meth:`point_times` of ``points`` after ``outcome``, given their times before (``stored``, as
        :meth:`point_times` gives them without an outcome). Equal to ``point_times(points, outcome)``, deriving only
        what can differ: a base not searched again keeps its stored times on the points off the changed edges; a
        base searched again at the same snap keeps them too on the points whose road ends it reaches at the same
        time as before (a point's time is the arithmetic of its road ends' node times, the same either way); the
        rest (added and moved bases, points on changed edges or behind changed node times) is derived from the
        outcome's node times, as :meth:`run` does for the demand points."""
        new_ids = outcome.bases["id"].astype(str).tolist()
        return self._derived_times(
            points, stored, new_ids, set(outcome.recomputed_bases), outcome.network, outcome.node_t, outcome.base_snap,
            outcome.moved_nodes,
        )  # fmt: skip

    def _derived_times(
        self,
        points: Snapped,
        stored: sp.csr_matrix,
        new_ids: list[str],
        again: set[str],
        net2: RoadNetwork,
        node_t2: sp.csr_matrix,
        base_snap2: Snapped,
        known_moved: dict[str, np.ndarray] | None = None,
    ) -> sp.csr_matrix:
        """Times of ``points`` (stored before) from the bases ``new_ids`` after a change (``again``: the bases
        searched again; ``net2``, ``node_t2``, ``base_snap2``: network, node times and snapped bases after;
        ``known_moved``: per repaired base, the nodes whose time may have changed)."""
        where = {b: i for i, b in enumerate(self.bases["id"].astype(str).tolist())}
        n = len(points)
        stored = sp.csr_matrix(stored)
        is_changed = self.net.travel_s != net2.travel_s
        cols = np.unique(points.entry_point[is_changed[points.entry_edge]])
        e_point, e_node, _ = exits(self.net, points, self.direction)
        kept_parts, full_rows, redo_of = [], [], {}
        old_row = [where[b] if b not in again else self._same_snap(b, where, new_ids, base_snap2) for b in new_ids]
        moved_of = self._moved_nodes(new_ids, again, old_row, node_t2, known_moved or {})
        # row by row (one step per base): which points keep their stored value, which are derived again
        for j, base in enumerate(new_ids):
            i = old_row[j]
            if i is None:  # added, moved or re-snapped: every point again
                full_rows.append(j)
                kept_parts.append((np.zeros(0, dtype=np.int64), np.zeros(0)))
                continue
            mark = np.zeros(n, dtype=bool)
            mark[cols] = True
            if base in again:
                moved = moved_of[j]
                mark[e_point[moved[e_node]]] = True  # a mask, not a set union: no sort per base
            redo = np.flatnonzero(mark) if base in again else cols
            lo, hi = stored.indptr[i], stored.indptr[i + 1]
            keep = ~mark[stored.indices[lo:hi]]
            kept_parts.append((stored.indices[lo:hi][keep], stored.data[lo:hi][keep]))
            if len(redo):
                redo_of[j] = redo
        # the derived values in at most two passes: every point for the full rows, the union of the redo sets for
        # the others (each row then takes its own redo points only)
        fr, fc, ft = times_from_nodes(
            net2, node_t2, base_snap2, np.array(full_rows, dtype=np.int64), points, np.arange(n), self.horizon_s,
            self.direction,
        )  # fmt: skip
        if redo_of:
            rows = np.array(list(redo_of), dtype=np.int64)
            union = np.unique(np.concatenate(list(redo_of.values())))
            pr, pc, pt = times_from_nodes(
                net2, node_t2, base_snap2, rows, points, union, self.horizon_s, self.direction
            )
            wanted = np.concatenate([j * n + r for j, r in redo_of.items()])
            own = np.isin(pr * n + pc, wanted)
            fr, fc, ft = np.r_[fr, pr[own]], np.r_[fc, pc[own]], np.r_[ft, pt[own]]
        order = np.argsort(fr, kind="stable")
        fr, fc, ft = fr[order], fc[order], ft[order]
        cuts = np.searchsorted(fr, np.arange(len(new_ids) + 1))
        idx_parts, t_parts, counts = [], [], []
        for j, (row_c, row_t) in enumerate(kept_parts):  # a row's columns are disjoint: no sort needed
            c, t = fc[cuts[j] : cuts[j + 1]], ft[cuts[j] : cuts[j + 1]]
            idx_parts += [row_c, c]
            t_parts += [row_t, t]
            counts.append(len(row_c) + len(c))
        indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
        indices = np.concatenate(idx_parts).astype(np.int64) if idx_parts else np.zeros(0, dtype=np.int64)
        data = np.concatenate(t_parts) if t_parts else np.zeros(0)
        return sp.csr_matrix((data, indices, indptr), shape=(len(new_ids), n))

    def _moved_nodes(
        self,
        new_ids: list[str],
        again: set[str],
        old_row: list[int | None],
        node_t2: sp.csr_matrix,
        known: dict[str, np.ndarray],
    ) -> dict[int, np.ndarray]:
        """Per row searched again at the same snap: a boolean per node, True where its time changed (``known``: the
        rows already known by base id)."""
        out = {j: known[b] for j, b in enumerate(new_ids) if b in known}
        pairs = [
            (j, i)
            for j, (b, i) in enumerate(zip(new_ids, old_row, strict=True))
            if b in again and i is not None and j not in out
        ]
        chunk = max(1, CHUNK_CELLS // max(self.net.n_nodes, 1))
        for start in range(0, len(pairs), chunk):
            js, iss = (np.array(x, dtype=np.int64) for x in zip(*pairs[start : start + chunk], strict=True))
            moved = _dense_rows(self.node_t, iss) != _dense_rows(node_t2, js)
            out.update(zip(js.tolist(), moved, strict=True))
        return out

    def _same_snap(self, base_id: str, where: dict[str, int], new_ids: list[str], base_snap2: Snapped) -> int | None:
        """The base's row before when it stands where it stood, with the same snap entries after the change."""
        i = where.get(base_id)
        if i is None:
            return None
        j = new_ids.index(base_id)
        a, b = self.base_snap, base_snap2
        ea, eb = a.entry_point == i, b.entry_point == j
        same = np.array_equal(a.entry_edge[ea], b.entry_edge[eb]) and np.array_equal(a.entry_frac[ea], b.entry_frac[eb])
        return i if same else None

    # -- the incremental recomputation ---------------------------------------------------------------------------------
    def _repairable_rows(
        self,
        rows: np.ndarray,
        new_ids: list[str],
        keep_src: np.ndarray,
        base_snap2: Snapped,
        changed: np.ndarray,
        net2: RoadNetwork,
    ) -> np.ndarray:
        """The rows (of ``new_ids``) among ``rows`` whose stored searches can be repaired: the base stands where it
        stood with the same snap (its stored row ``keep_src``), off every changed edge, and no edge time fell."""
        if not len(rows) or not len(changed) or not can_repair(self.net, net2, self.direction):
            return np.zeros(0, dtype=np.int64)
        where = {b: i for i, b in enumerate(self.bases["id"].astype(str).tolist())}
        seated = np.zeros(len(new_ids), dtype=bool)
        seated[base_snap2.entry_point[np.isin(base_snap2.entry_edge, changed)]] = True
        same = [self._same_snap(new_ids[j], where, new_ids, base_snap2) for j in rows]
        ok = [j for j, i in zip(rows, same, strict=True) if not seated[j] and i is not None and keep_src[j] == i]
        return np.asarray(ok, dtype=np.int64)

    def affected_bases(self, travel_s: np.ndarray) -> np.ndarray:
        """Boolean per base: can the edge times ``travel_s`` change this base's searches? (see the class notes)"""
        old = self.net.travel_s
        new = np.asarray(travel_s, dtype=float)
        changed = np.flatnonzero(old != new)
        hit = np.zeros(len(self.bases), dtype=bool)
        if len(changed) == 0:
            return hit
        u, v = self.net.u[changed], self.net.v[changed]
        tail, head = (u, v) if self.direction == "out" else (v, u)
        w = np.maximum(np.minimum(old[changed], new[changed]), MIN_EDGE_S)
        if turns.active(self.net):
            # with turns modelled the searches run on the turn-aware graph: test its arcs that carry these edges
            arcs = turns.changed_arcs(self.net, changed, w, self.direction)
            if arcs is None:
                return np.ones(len(self.bases), dtype=bool)
            tail, head, w = arcs
        # a base seated on a changed edge starts differently
        hit[np.unique(self.base_snap.entry_point[np.isin(self.base_snap.entry_edge, changed)])] = True
        chunk = max(1, CHUNK_CELLS // max(self.node_t.shape[1], 1))
        tol_s = 1e-7  # conservative: a near-tie counts as tight, so a base is searched again rather than skipped
        for start in range(0, len(self.bases), chunk):
            r = np.arange(start, min(start + chunk, len(self.bases)))
            d = _dense_rows(self.node_t, r)
            dt, dh = d[:, tail], np.minimum(d[:, head], self.horizon_s)
            with np.errstate(invalid="ignore"):
                tight = np.isfinite(dt) & (dt + w[None, :] <= dh + tol_s)
            hit[r] |= tight.any(axis=1)
        return hit

    def _evaluate(
        self, travel_s: np.ndarray, bases_after: gpd.GeoDataFrame, log: ChangeLog, edges: EdgeChanges | None = None
    ) -> WhatIfOutcome:
        old_t = self.net.travel_s
        changed = np.flatnonzero(old_t != travel_s)
        if not len(changed):
            net2 = self.net
        else:
            net2 = edges.network(self.net) if edges is not None else self.net.with_travel_s(travel_s)
        old_ids = self.bases["id"].astype(str).tolist()
        new_ids = bases_after["id"].astype(str).tolist()
        # a base keeps its stored searches only under the same id at the same place (a moved or re-added one not)
        old_geom = self.bases.geometry.to_numpy()
        new_geom = bases_after.to_crs(self.bases.crs).geometry.to_numpy()
        old_pos = {
            b: i
            for i, b in enumerate(old_ids)
            if b in new_ids and shapely.equals_exact(old_geom[i], new_geom[new_ids.index(b)], 0.0)
        }
        aff_old = self.affected_bases(travel_s)
        base_snap2 = (
            snap_points(net2, bases_after, max_snap_m=self.base_snap_m, off_network="raise", what="bases")
            if len(changed) or new_ids != old_ids or len(old_pos) < len(old_ids)
            else self.base_snap
        )
        search = np.array([b not in old_pos or bool(aff_old[old_pos[b]]) for b in new_ids], dtype=bool)
        rows_new = np.flatnonzero(search)
        # node times after: stored rows for untouched bases, a new search for the others
        keep_src = np.array([old_pos.get(b, -1) for b in new_ids])
        moved_nodes: dict[str, np.ndarray] = {}
        repair = self._repairable_rows(rows_new, new_ids, keep_src, base_snap2, changed, net2)
        full = np.setdiff1d(rows_new, repair)
        if len(repair) and not len(full) and new_ids == old_ids and len(old_pos) == len(old_ids):
            # every base kept or repaired (times that only rose): repair the whole table at once; a base without a
            # tight changed edge keeps its row as it is
            node_t2, touched = repaired_node_times(
                self.net, net2, base_snap2, self.node_t, self.horizon_s, self.direction, return_affected=True
            )
            moved_nodes = _row_masks(touched, repair, new_ids, net2.n_nodes)
        else:
            kept = np.flatnonzero(~search)
            stored = self.node_t[keep_src[kept]].tocoo()
            parts_r, parts_c, parts_t = [kept[stored.row]], [stored.col], [stored.data]
            if len(repair):
                # times that only rose: repair the stored searches instead of searching again (same times exactly)
                fixed, touched = repaired_node_times(
                    self.net, net2, base_snap2.subset(repair), self.node_t[keep_src[repair]], self.horizon_s,
                    self.direction, return_affected=True,
                )  # fmt: skip
                local = _row_masks(touched, np.arange(len(repair)), [new_ids[j] for j in repair], net2.n_nodes)
                moved_nodes.update(local)
                fixed = fixed.tocoo()
                parts_r.append(repair[fixed.row])
                parts_c.append(fixed.col)
                parts_t.append(fixed.data)
            if len(full):
                note(f"what-if: searching again from {len(full)} of {len(new_ids)} bases")
                fresh = node_times(net2, base_snap2.subset(full), self.horizon_s, self.direction).tocoo()
                parts_r.append(full[fresh.row])
                parts_c.append(fresh.col)
                parts_t.append(fresh.data)
            node_t2 = sp.csr_matrix(
                (np.concatenate(parts_t), (np.concatenate(parts_r), np.concatenate(parts_c))),
                shape=(len(new_ids), self.node_t.shape[1]),  # the search graph's vertices (turn states too)
            )
        results = {}
        again = {new_ids[i] for i in rows_new}
        for name, dem in self.demand.items():
            snap2 = self.point_snap[name]
            # stored times where nothing they depend on changed; derived from the node times after elsewhere
            times = self._derived_times(
                snap2, self.tables[name].times, new_ids, again, net2, node_t2, base_snap2, moved_nodes
            )
            table = TravelTable(base_snap2, snap2, times, self.horizon_s, self.direction)
            nearest = nearest_sources(times, k=2)  # the same for every standard
            for s in self.standards:
                results[(s.name, name)] = evaluate_coverage(net2, bases_after, dem, s, table=table, nearest=nearest)
        identical = all(
            np.array_equal(results[k].demand["travel_s"].to_numpy(), self.results[k].demand["travel_s"].to_numpy())
            and (results[k].demand["first_base"] == self.results[k].demand["first_base"]).all()
            for k in results
        )
        if identical and new_ids == old_ids:
            if len(log.closed_edge_ids) and not len(rows_new):
                tails = self.net.u[changed] if self.direction == "out" else self.net.v[changed]
                reached = self.node_t[:, tails].nnz > 0
                log.notes.append(
                    "no base's shortest paths use the closed roads; coverage unchanged" if reached else NO_REACH_NOTE
                )
            else:
                log.notes.append("coverage unchanged")
        return WhatIfOutcome(
            results, net2, bases_after, log, [new_ids[i] for i in rows_new], node_t2, base_snap2, moved_nodes
        )


__all__ = ["NO_REACH_NOTE", "WhatIf", "WhatIfOutcome", "times_from_nodes"]
