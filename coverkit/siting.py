"""Station siting: the published covering and median location models, exact and heuristic.

Every model works on plain arrays so that it can be tested against an independent solver:

* ``covers`` -- a sparse boolean matrix, shape ``(n_demand, n_sites)``, true where site ``j`` reaches demand point
  ``i`` within the response standard (for example 480 s travel);
* ``weights`` -- demand weight per demand point (people, incidents), finite and ``>= 0``;
* ``fixed`` -- a boolean mask of sites that are already open (existing bases); they are always open and never
  count towards ``p``, the number of *new* sites;
* for the p-median, ``travel_s`` -- travel time in seconds from each site to each demand point, dense (``inf`` means
  unreachable) or sparse (absent or ``inf`` means unreachable; a stored ``0`` is a real 0 s).

Each model is solved exactly with HiGHS (``scipy.optimize.milp``) under a time limit, reporting the solver's
optimality gap, or -- when the instance is too large (``method="auto"``) or on request -- by greedy construction
followed by vertex substitution (Teitz & Bart 1968), whose result is compared with a bound: the LP relaxation
(interior point) for the covering models, a Lagrangian relaxation for the p-median (its LP is slow to solve).

Demand points with identical coverage patterns are merged (weights summed) before a covering model is posed;
this is exact, since such points are covered by exactly the same sets of sites, and it shrinks raster-based
demand a great deal. Zero-weight points and points no site can reach are left out of the models (they cannot
change any optimum) but stay in the total used for shares.

Ties: the heuristics and the ranking break ties by the lowest site index. HiGHS is deterministic for the same
model, so the exact solves repeat too, but among several optimal sets it returns the one it finds first.

Results are planning estimates, not for live dispatch or routing (see ``coverkit.CAUTION``).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.sparse as sp
from numpy.typing import ArrayLike

from coverkit.errors import ModelError
from coverkit.milp import CurveSolver, Milp
from coverkit.progress import note

#: Above this many constraint-matrix nonzeros ``method="auto"`` uses the heuristic instead of the MILP.
MILP_NNZ_LIMIT = 2_000_000
#: Above this many reachable pairs ``method="auto"`` solves the p-median by the heuristic (its LP is weak to solve).
MEDIAN_MILP_PAIR_LIMIT = 50_000
#: Above this many nonzeros the heuristic's bound comes from a cheap argument, not the LP relaxation.
LP_NNZ_LIMIT = 6_000_000
DEFAULT_TIME_LIMIT_S = 60.0
#: Time limit of the LP relaxation that bounds a heuristic's result.
LP_TIME_LIMIT_S = 30.0
#: Relative MIP gap at which HiGHS may stop (its own default is 1e-4; planners want the optimum).
DEFAULT_REL_GAP = 1e-6
METHODS = ("auto", "milp", "heuristic")
#: Seed of the random column hashes used to find demand points with identical coverage patterns.
_HASH_SEED = 20_240_601
#: Share of one ``p``'s time that backup coverage's first stage (an MCLP) may take; its second stage is posed on
#: the sites the first one leaves and is usually solved by its LP alone (measured on the county benchmark).
STAGE1_TIME_SHARE = 0.75
#: Cap on interchange moves, far above what the instances of a county study need.
_MAX_SWAPS = 100_000


@dataclass(frozen=True)
class SitingResult:
    """The outcome of one siting model.

    Attributes
    ----------
    model
        ``"lscp"``, ``"mclp"``, ``"backup"``, ``"mexclp"`` or ``"p-median"``.
    sites
        New sites chosen (column indices of ``covers`` / ``travel_s``), sorted; fixed sites are not listed.
        For MEXCLP, the sites that receive at least one new unit (possibly fixed ones).
    open_sites
        Fixed and new sites together, sorted.
    objective
        Value of the model's objective on the chosen sites, evaluated directly from the data: LSCP number of new
        sites; MCLP covered weight; backup, weight covered twice (lexicographic form) or
        ``theta * single + (1 - theta) * double`` (weighted form); MEXCLP expected covered weight; p-median the
        weighted mean travel time in seconds (with the penalty for unreached demand, if one was given).
    covered_weight, covered_share
        Demand weight reached within the standard by at least one open site, and its share of all demand weight.
        For the p-median: the weight assigned to a reachable open site.
    method
        ``"milp"`` or ``"heuristic"``.
    status
        A short phrase: ``"optimal"``, ``"time limit, best solution found"``, ``"local optimum"``, ...
    mip_gap
        Relative gap ``|bound - objective| / max(|objective|, 1e-12)`` on the full objective. For ``"milp"`` the
        bound is HiGHS's reported dual bound, for ``"heuristic"`` the LP relaxation (see ``bound_source``).
    bound
        Best bound on the objective: an upper bound for maximising models, a lower bound for LSCP and p-median.
    bound_source
        ``"HiGHS dual bound"``, ``"LP relaxation"``, ``"Lagrangian relaxation"`` (p-median heuristic), or a named
        cheap bound for instances too large for an LP.
    solve_s
        Wall-clock seconds spent solving.
    p
        Number of new sites (LSCP: the number found; MEXCLP: new units).
    second_weight
        Demand weight reached by at least two open sites (units, for MEXCLP).
    units
        MEXCLP only: new units per site, length ``n_sites``.
    assigned_site, assigned_s
        p-median only: per demand point, the nearest open site (``-1`` if none reaches it) and its travel time
        (``inf`` if none).
    """

    model: str
    sites: np.ndarray
    open_sites: np.ndarray
    objective: float
    covered_weight: float
    covered_share: float
    method: str
    status: str
    mip_gap: float
    bound: float
    bound_source: str
    solve_s: float
    p: int
    second_weight: float = math.nan
    units: np.ndarray | None = None
    assigned_site: np.ndarray | None = None
    assigned_s: np.ndarray | None = None


# ---------------------------------------------------------------------------------------------------------------
# input checks


def _check_method(method: str) -> None:
    if method not in METHODS:
        raise ModelError(f"method: {method!r} is not one of {', '.join(METHODS)}; pick one of them")


def _check_time(time_limit_s: float, rel_gap: float) -> None:
    if not (isinstance(time_limit_s, int | float) and time_limit_s > 0 and math.isfinite(time_limit_s)):
        raise ModelError(f"time_limit_s: {time_limit_s!r} is not a positive number of seconds; pass e.g. 60")
    if not (isinstance(rel_gap, int | float) and 0 <= rel_gap < 1):
        raise ModelError(f"rel_gap: {rel_gap!r} is outside [0, 1); pass e.g. 1e-6")


def _check_weights(weights: ArrayLike | None, n_demand: int) -> np.ndarray:
    if n_demand == 0:
        raise ModelError("demand: there are no demand points; supply at least one weighted demand point")
    if weights is None:
        return np.ones(n_demand)
    w = np.asarray(weights, dtype=float)
    if w.shape != (n_demand,):
        raise ModelError(
            f"weights: shape {w.shape} does not match the {n_demand} demand rows; pass one weight per demand point"
        )
    bad = ~np.isfinite(w) | (w < 0)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise ModelError(
            f"weights: {int(bad.sum())} negative or non-finite values (first at row {first}); "
            "weights must be finite and >= 0"
        )
    if w.sum() <= 0:
        raise ModelError("weights: all demand weights are zero; supply some positive demand (people, incidents)")
    return w


def _check_fixed(fixed: ArrayLike | None, n_sites: int) -> np.ndarray:
    if fixed is None:
        return np.zeros(n_sites, dtype=bool)
    f = np.asarray(fixed)
    if f.shape != (n_sites,):
        raise ModelError(
            f"fixed: shape {f.shape} does not match the {n_sites} site columns; pass one true/false per site"
        )
    if f.dtype != bool:
        if not np.isin(f, (0, 1)).all():
            raise ModelError("fixed: values must be true/false (1/0); pass a boolean mask of existing sites")
        f = f.astype(bool)
    return f


def _check_p(p: int, n_free: int, what: str = "candidate (non-fixed) sites") -> int:
    if isinstance(p, bool) or not isinstance(p, int | np.integer) or p < 0:
        raise ModelError(f"p: {p!r} is not a whole number >= 0; pass the number of new sites to open")
    if p > n_free:
        raise ModelError(f"p: {p} new sites requested but there are only {n_free} {what}; lower p or add more")
    return int(p)


def _as_cover_matrix(covers: ArrayLike) -> sp.csr_array:
    if sp.issparse(covers):
        a = sp.csr_array(covers)
    else:
        arr = np.asarray(covers)
        if arr.ndim != 2:
            raise ModelError(
                f"covers: expected a 2-D matrix (demand x sites), got {arr.ndim}-D; "
                "pass a scipy.sparse matrix of shape (n_demand, n_sites)"
            )
        a = sp.csr_array(arr)
    if a.shape[1] == 0:
        raise ModelError("covers: there are no sites (0 columns); supply candidate or existing sites")
    a = sp.csr_array(a != 0, dtype=bool)
    a.sum_duplicates()
    a.eliminate_zeros()
    a.sort_indices()
    return a


@dataclass(frozen=True)
class _Cover:
    """A coverage instance after merging identical rows and dropping rows that cannot matter."""

    a: sp.csr_array  # merged rows x all sites, float 0/1
    w: np.ndarray  # merged weights (> 0)
    fixed: np.ndarray  # bool per site
    free: np.ndarray  # indices of non-fixed sites
    total_w: float  # all demand weight, including uncoverable points
    n_sites: int
    points: np.ndarray  # demand points merged into each row

    @property
    def kfix(self) -> np.ndarray:
        return np.asarray(self.a[:, self.fixed].sum(axis=1)).ravel()

    @property
    def af(self) -> sp.csr_array:
        return sp.csr_array(self.a[:, self.free])


def _merge_rows(a: sp.csr_array, w: np.ndarray) -> tuple[sp.csr_array, np.ndarray]:
    """Merge rows with identical sparsity patterns, summing their weights (exact; verified after hashing).

    ``w`` may hold several weights per row (one column each); each is summed.
    """
    if a.shape[0] <= 1:
        return a, w
    rng = np.random.default_rng(_HASH_SEED)
    keys = a.astype(float) @ rng.random((a.shape[1], 2))
    keys = np.column_stack([np.diff(a.indptr).astype(float), keys])
    _, first, inverse = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    inverse = np.asarray(inverse).ravel()
    if (a != a[first[inverse]]).nnz:  # a hash collision: astronomically rare, but stay exact
        return a, w
    order = np.argsort(first, kind="stable")  # groups in order of first appearance
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    group = rank[inverse]
    w2 = np.asarray(w, dtype=float).reshape(a.shape[0], -1)
    sums = [np.bincount(group, weights=col, minlength=order.size) for col in w2.T]
    return sp.csr_array(a[first[order]]), np.column_stack(sums) if np.ndim(w) == 2 else sums[0]


def _prepare_cover(covers: ArrayLike, weights: ArrayLike | None, fixed: ArrayLike | None) -> _Cover:
    a = _as_cover_matrix(covers)
    w = _check_weights(weights, a.shape[0])
    f = _check_fixed(fixed, a.shape[1])
    keep = (w > 0) & (np.diff(a.indptr) > 0)
    a_kept = sp.csr_array(a[np.flatnonzero(keep)])
    a_m, w_m = _merge_rows(a_kept, np.column_stack([w[keep], np.ones(int(keep.sum()))]))
    return _Cover(
        a=sp.csr_array(a_m, dtype=float),
        w=w_m[:, 0],
        points=w_m[:, 1],
        fixed=f,
        free=np.flatnonzero(~f),
        total_w=float(w.sum()),
        n_sites=a.shape[1],
    )


# ---------------------------------------------------------------------------------------------------------------
# MILP plumbing


def _stack(constraints: list[tuple[sp.csr_array, ArrayLike, ArrayLike]], n: int) -> tuple[sp.csr_array, ...]:
    """One row block from several ``(a, lo, hi)`` blocks."""
    blocks = [(sp.csr_array(a), lo, hi) for a, lo, hi in constraints if a.shape[0] > 0]
    a = sp.vstack([b[0] for b in blocks], format="csr") if blocks else sp.csr_array((0, n))
    lo = np.concatenate([np.broadcast_to(np.asarray(b[1], dtype=float), b[0].shape[0]) for b in blocks])
    hi = np.concatenate([np.broadcast_to(np.asarray(b[2], dtype=float), b[0].shape[0]) for b in blocks])
    return a, lo, hi


def _milp(
    c: np.ndarray,
    integrality: np.ndarray,
    lb: np.ndarray,
    ub: np.ndarray,
    constraints: list[tuple[sp.csr_array, ArrayLike, ArrayLike]],
    maximise: bool,
    constant: float = 0.0,
    integral: bool = False,
) -> Milp:
    a, lo, hi = _stack(constraints, c.size)
    return Milp(c, integrality, lb, ub, a, lo, hi, maximise, constant, integral)


def _whole(*values: np.ndarray | float) -> bool:
    """All values whole numbers (people, incidents): objectives built from them are whole numbers too."""
    return all(bool(np.all(np.asarray(v) == np.round(np.asarray(v)))) for v in values)


def _rel_gap(objective: float, bound: float) -> float:
    if not (math.isfinite(objective) and math.isfinite(bound)):
        return math.nan
    return abs(bound - objective) / max(abs(objective), 1e-12)


def _use_milp(method: str, size: int, limit: int = MILP_NNZ_LIMIT) -> bool:
    """Solve exactly when asked to, or under ``auto`` when the model is no larger than ``limit``."""
    return method == "milp" or (method == "auto" and size <= limit)


# ---------------------------------------------------------------------------------------------------------------
# greedy + interchange on coverage counts


Value = Callable[[np.ndarray], np.ndarray]


def _lex_pick(deltas: list[np.ndarray], valid: np.ndarray, tol: float) -> int:
    """Index (lowest among ties) of the lexicographically best entry of ``deltas`` where ``valid``."""
    cand = valid.copy()
    for d in deltas:
        best = d[cand].max()
        cand &= d >= best - tol
    return int(np.flatnonzero(cand)[0])


def _improves(values: list[float], tol: float) -> bool:
    for v in values:
        if v > tol:
            return True
        if v < -tol:
            return False
    return False


def _cover_next(at: sp.csr_array, k: np.ndarray, values: list[Value], units: np.ndarray, cap: np.ndarray, tol: float):
    """The column adding most value to coverage counts ``k`` (lowest index on ties), or -1 if none is free."""
    valid = units < cap
    if not valid.any():
        return -1
    return _lex_pick([at @ (f(k + 1) - f(k)) for f in values], valid, tol)


def _cover_search(
    af: sp.csr_array,
    k0: np.ndarray,
    values: list[Value],
    p: int,
    cap: np.ndarray,
    scale: float,
    start: np.ndarray | None = None,
    at: sp.csr_array | None = None,
) -> np.ndarray:
    """Greedy construction (from ``start``, if given) then best-improvement unit moves (vertex substitution).

    ``af`` (rows x columns, 0/1) says which columns reach which rows, ``k0`` the coverage count from fixed sites,
    ``values`` the per-row value of a coverage count, compared lexicographically (one function for a plain
    objective), ``cap`` the units allowed per column (1 for a site model). Only strict improvements are made, so
    the result is never worse than the start. Returns units per column.

    Source: M. B. Teitz & P. Bart (1968), "Heuristic methods for estimating the generalized vertex median of a
    weighted graph", Operations Research 16(5).
    """
    n_cols = af.shape[1]
    units = np.zeros(n_cols, dtype=np.int64) if start is None else np.asarray(start, dtype=np.int64).copy()
    at = sp.csr_array(af.T) if at is None else at
    k = k0.astype(float) + af @ units.astype(float)
    tol = 1e-9 * max(scale, 1.0)
    while units.sum() < p:  # greedy: the column adding most value, lowest index on ties
        a = _cover_next(at, k, values, units, cap, tol)
        units[a] += 1
        k += at[[a]].toarray().ravel()
    for _ in range(_MAX_SWAPS):  # interchange: move one unit from column r to column a
        held = np.flatnonzero(units > 0)
        if held.size == 0 or not (units < cap).any():
            break
        af_held = sp.csr_array(at[held].T)
        deltas = []
        for f in values:
            add = f(k + 1) - f(k)
            rem = f(np.maximum(k - 1, 0)) - f(k)
            both = at @ sp.diags_array(-(add + rem)) @ af_held  # rows reached by both a and r keep their count
            d = (at @ add)[:, None] + (af_held.T @ rem)[None, :] + sp.csr_array(both).toarray()
            deltas.append(d.ravel())
        valid = ((units < cap)[:, None] & (np.arange(n_cols)[:, None] != held[None, :])).ravel()
        if not valid.any():
            break
        best = _lex_pick(deltas, valid, tol)
        if not _improves([float(d[best]) for d in deltas], tol):
            break
        a, r = divmod(best, held.size)
        units[a] += 1
        units[held[r]] -= 1
        k += at[[a]].toarray().ravel() - at[[held[r]]].toarray().ravel()
    return units


def _dominators(af: sp.csr_array) -> np.ndarray:
    """Per site (column of ``af``), the site that stands in for it: itself, or a site covering all it covers.

    A site whose covered rows another site covers too (a superset; among equal sets the lowest index stays) can
    be swapped for that one without losing cover, so covering models need not consider it. A site covering no
    row gets ``-1``. The stand-in is itself kept (the largest superset is chosen, so chains end at once).
    """
    at = sp.csr_array(af.T, dtype=float)
    n = at.shape[0]
    size = np.diff(at.indptr)
    c = sp.coo_array(at @ sp.csr_array(af, dtype=float))
    r, q, v = c.row, c.col, c.data
    dom = (v >= size[r] - 0.5) & (r != q) & ((size[q] > size[r]) | ((size[q] == size[r]) & (q < r)))
    r, q = r[dom], q[dom]
    order = np.lexsort((q, -size[q], r))
    r, q = r[order], q[order]
    first = np.ones(r.size, dtype=bool)
    first[1:] = r[1:] != r[:-1]
    dom_of = np.arange(n)
    dom_of[r[first]] = q[first]
    dom_of[size == 0] = -1
    return dom_of


def _step(w: np.ndarray, level: int) -> Value:
    return lambda k: w * (k >= level)


# ---------------------------------------------------------------------------------------------------------------
# results


def _open_from(cv_n_sites: int, fixed: np.ndarray, new_sites: np.ndarray) -> np.ndarray:
    is_open = fixed.copy()
    is_open[new_sites] = True
    return np.flatnonzero(is_open)


def _cover_counts(cv: _Cover, site_units: np.ndarray) -> np.ndarray:
    return cv.a @ site_units.astype(float)


def _result(
    model: str,
    cv_fixed: np.ndarray,
    new_sites: np.ndarray,
    objective: float,
    covered: float,
    total_w: float,
    method: str,
    status: str,
    bound: float,
    bound_source: str,
    t0: float,
    p: int,
    **extra: object,
) -> SitingResult:
    new_sites = np.sort(np.asarray(new_sites, dtype=np.int64))
    return SitingResult(
        model=model,
        sites=new_sites,
        open_sites=_open_from(cv_fixed.size, cv_fixed, new_sites),
        objective=float(objective),
        covered_weight=float(covered),
        covered_share=float(covered / total_w) if total_w > 0 else math.nan,
        method=method,
        status=status,
        mip_gap=_rel_gap(objective, bound),
        bound=float(bound),
        bound_source=bound_source,
        solve_s=time.perf_counter() - t0,
        p=int(p),
        **extra,  # type: ignore[arg-type]
    )


# ---------------------------------------------------------------------------------------------------------------
# one engine for a single p and for a whole curve


@dataclass(frozen=True)
class _Point:
    units: np.ndarray  # per model column
    method: str  # which answer is kept: "milp" or "heuristic"
    status: str
    bound: float
    bound_source: str


def _status(proven: bool, method: str, ran_milp: bool) -> str:
    if proven:
        return "proven optimal" if method == "milp" else "proven optimal (the heuristic's answer)"
    if method == "milp":
        return "solver's best within the time budget"
    if ran_milp:
        return "heuristic (greedy plus interchange); the solver found nothing better within the time budget"
    return "heuristic (greedy plus interchange)"


def _run_points(spec, ps: list[int], method: str, budget_s: float, rel_gap: float, chain: bool) -> list[_Point]:
    """Solve the model ``spec`` for each ``p`` in ``ps`` within one time budget for them all.

    Each ``p`` starts from the better of greedy plus interchange and (``chain``, consecutive ``p``) the previous
    answer plus its best addition, improved by interchange; the exact solver starts from that and the better of
    the two answers is kept, then tidied by interchange (strict improvements only). So the answer is never worse
    than greedy plus interchange, and along a chained curve it never gets worse as ``p`` grows.
    """
    t_end = time.perf_counter() + budget_s
    out: list[_Point] = []
    prev: np.ndarray | None = None
    prev_p = -2
    ran_any = False
    for idx, p in enumerate(ps):
        cand = spec.local(spec.greedy_prefix(p), p)
        if chain and prev is not None and prev_p == p - 1:
            warm = spec.local(spec.best_add(prev), p)
            if spec.better(warm, cand):
                cand = warm
        obj = spec.objective(cand)
        if p == 0:
            out.append(_Point(cand, "heuristic", "proven optimal (no site to choose)", obj, "trivial"))
            prev, prev_p = cand, p
            continue
        bound, source = spec.cheap_bound(p)
        kept, ran = "heuristic", False
        if not spec.reached(obj, bound):
            left = max(t_end - time.perf_counter(), 0.0)
            share = left / (len(ps) - idx)
            if _use_milp(method, spec.milp_size, spec.milp_limit) and share > 0:
                if not ran_any:  # the first LP is solved from scratch; later ones restart from its basis
                    share = max(share, 0.5 * left)
                ran = ran_any = True
                units, b, proven = spec.exact(p, cand, share, rel_gap)
                if units is not None:
                    units = spec.local(units, p)
                    if spec.better(units, cand):
                        cand, kept = units, "milp"
                if math.isfinite(b) and spec.tighter(bound, b) != bound:
                    bound = b
                    solver = getattr(spec, "_solver", None)
                    source = solver.last_source if solver is not None else "HiGHS dual bound"
                obj = spec.objective(cand)
                if proven and kept == "heuristic" and not spec.reached(obj, bound):
                    kept = "milp"  # cannot happen with a valid start; kept for safety
            else:
                b, s = spec.lp_bound(p, min(max(share, 1.0), LP_TIME_LIMIT_S), cand)
                if math.isfinite(b) and spec.tighter(bound, b) != bound:
                    bound, source = b, s
        proven = spec.reached(spec.objective(cand), bound) and spec.settled(p)
        out.append(_Point(cand, kept, _status(proven, kept, ran), bound, source))
        prev, prev_p = cand, p
    return out


class _Spec:
    """What the engine needs from a model; subclasses fill in the model's own parts."""

    maximise = True
    tol = 1e-9
    milp_limit = MILP_NNZ_LIMIT

    def tighter(self, a: float, b: float) -> float:
        return min(a, b) if self.maximise else max(a, b)

    #: The objective is a sum of whole numbers (people, incidents), so any bound may be rounded to one: a solver's
    #: bound a few millionths above a whole optimum (its feasibility tolerances) still proves that optimum.
    whole = False

    def reached(self, obj: float, bound: float) -> bool:
        if self.whole and math.isfinite(bound):
            bound = math.floor(bound + 1e-6) if self.maximise else math.ceil(bound - 1e-6)
        slack = self.tol * max(abs(obj), 1.0)
        return obj >= bound - slack if self.maximise else obj <= bound + slack

    def settled(self, p: int) -> bool:
        """Whatever else an answer reaching its bound needs to be proven optimal (backup's first stage)."""
        return True


class _CoverSpec(_Spec):
    """Shared by MCLP, backup and MEXCLP: a row's value depends only on its coverage count."""

    def __init__(self, af: sp.csr_array, k0: np.ndarray, values: list[Value], cap: np.ndarray, scale: float):
        self.af = sp.csr_array(af, dtype=float)
        self.at = sp.csr_array(self.af.T)
        self.k0 = np.asarray(k0, dtype=float)
        self.values = values
        self.cap = np.asarray(cap, dtype=np.int64)
        self.scale = float(scale)
        self.tol_abs = 1e-9 * max(self.scale, 1.0)
        self._greedy: list[int] = []
        self._solver: CurveSolver | None = None

    def counts(self, units: np.ndarray) -> np.ndarray:
        return self.k0 + self.af @ units.astype(float)

    def key(self, units: np.ndarray) -> list[float]:
        k = self.counts(units)
        return [float(f(k).sum()) for f in self.values]

    def better(self, a: np.ndarray, b: np.ndarray) -> bool:
        return _improves([x - y for x, y in zip(self.key(a), self.key(b), strict=True)], self.tol_abs)

    def greedy_prefix(self, p: int) -> np.ndarray:
        units = np.zeros(self.af.shape[1], dtype=np.int64)
        for a in self._greedy[:p]:
            units[a] += 1
        while len(self._greedy) < p:
            a = _cover_next(self.at, self.counts(units), self.values, units, self.cap, self.tol_abs)
            self._greedy.append(a)
            units[a] += 1
        return units

    def best_add(self, units: np.ndarray) -> np.ndarray:
        units = units.copy()
        a = _cover_next(self.at, self.counts(units), self.values, units, self.cap, self.tol_abs)
        if a >= 0:
            units[a] += 1
        return units

    def local(self, units: np.ndarray, p: int) -> np.ndarray:
        return _cover_search(self.af, self.k0, self.values, p, self.cap, self.scale, start=units, at=self.at)

    def lp_bound(self, p: int, time_s: float, cand: np.ndarray | None = None) -> tuple[float, str]:
        if self.milp_size > LP_NNZ_LIMIT:
            return math.nan, ""
        value, _ = self.solver(p).lp_bound(time_s)
        return value, "LP relaxation"


class _MclpSpec(_CoverSpec):
    """MCLP on the rows no fixed site covers, merged; the exact model is reduced before it is posed."""

    def __init__(self, cv: _Cover, *, prune: bool = True):
        kfix = cv.kfix
        self.cv, self.prune = cv, prune
        self.rows = np.flatnonzero(kfix == 0)
        self.w = cv.w[self.rows]
        self.constant = float(cv.w[kfix > 0].sum())
        af = sp.csr_array(cv.af[self.rows])
        super().__init__(af, np.zeros(self.rows.size), [_step(self.w, 1)], np.ones(af.shape[1]), cv.total_w)
        self.whole = _whole(cv.w)
        self.gain1 = self.at @ self.w
        self.milp_size = int(af.nnz + af.shape[0])
        self.reduction: dict[str, int] = {}

    def objective(self, units: np.ndarray) -> float:
        return self.constant + self.key(units)[0]

    def cheap_bound(self, p: int) -> tuple[float, str]:
        top = float(np.sort(self.gain1)[::-1][:p].sum())
        return self.constant + min(float(self.w.sum()), top), "sum of the best single-site additions"

    def solver(self, p: int) -> CurveSolver:
        if self._solver is None:
            self._build()
        self._solver.set_row_bounds(self._card_row, 0.0, float(p))
        return self._solver

    def _build(self) -> None:
        af, w = self.af, self.w
        n = af.shape[1]
        dom_of = _dominators(af) if self.prune else np.arange(n)
        # without pruning every site is a column: the LP's reduced costs then speak for every site (backup)
        kept = np.flatnonzero(dom_of == np.arange(n))
        self._dom_of = dom_of
        self._kept = kept
        knum = np.full(n, -1, dtype=np.int64)
        knum[kept] = np.arange(kept.size)
        self._knum = knum
        ak = sp.csr_array(af[:, kept])
        cnt = np.diff(ak.indptr)
        # a row only one kept site reaches is covered exactly when that site is open: fold it into the site's value
        single = cnt == 1
        agg = np.bincount(ak.indices[ak.indptr[:-1][single]], weights=w[single], minlength=kept.size)
        multi = np.flatnonzero(cnt >= 2)
        a2 = sp.csr_array(ak[multi])
        self._a2 = a2
        m2, nk = a2.shape
        model = _milp(
            c=np.concatenate([-agg, -w[multi]]),
            integrality=np.concatenate([np.ones(nk), np.zeros(m2)]),
            lb=np.zeros(nk + m2),
            ub=np.ones(nk + m2),
            constraints=[
                (sp.hstack([-a2, sp.identity(m2, format="csr")], format="csr"), -np.inf, 0.0),
                (sp.csr_array(np.concatenate([np.ones(nk), np.zeros(m2)])[None, :]), 0.0, 0.0),
            ],
            maximise=True,
            constant=self.constant,
            integral=_whole(self.w, self.constant),
        )
        self._card_row = m2
        self.reduction = {
            "demand_rows": int(self.cv.a.shape[0]),
            "model_rows": int(m2),
            "sites": int(n),
            "model_sites": int(nk),
        }
        self._solver = CurveSolver(model)

    def _start(self, start: np.ndarray) -> np.ndarray:
        x0 = np.zeros(self._kept.size)
        tgt = self._dom_of[np.flatnonzero(start)]
        x0[self._knum[tgt[tgt >= 0]]] = 1.0
        return np.concatenate([x0, np.minimum(self._a2 @ x0, 1.0)])

    def exact(self, p: int, start: np.ndarray, time_s: float, rel_gap: float):
        solver = self.solver(p)
        nk = self._kept.size
        ans = solver.solve(self._start(start), self.objective(start), time_s, rel_gap)
        units = None
        if ans.x is not None:
            units = np.zeros(self.af.shape[1], dtype=np.int64)
            units[self._kept[np.rint(ans.x[:nk]) > 0.5]] = 1
        return units, ans.bound, ans.proven

    def site_fixings(self, target: float, units: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Sites that may be open / must be open in every answer covering at least ``target`` (at the last ``p``).

        From the reduced costs of the LP last solved (an unpruned model: every site is a column); all sites may
        be open and none must be when there is no LP.
        """
        n = self.af.shape[1]
        if self.prune or self._solver is None or self._solver.last_lp is None:
            return np.ones(n, dtype=bool), np.zeros(n, dtype=bool)
        lo, hi = self._solver.fixings(target, self._start(units))
        return hi[:n] > 0.5, lo[:n] > 0.5

    def result(self, pt: _Point, t0: float, p: int) -> SitingResult:
        new = self.cv.free[np.flatnonzero(pt.units)]
        covered, second = _mclp_eval(self.cv, new)
        return _result(
            "mclp",
            self.cv.fixed,
            new,
            covered,
            covered,
            self.cv.total_w,
            pt.method,
            pt.status,
            pt.bound,
            pt.bound_source,
            t0,
            p,
            second_weight=second,
        )


class _BackupModel:
    """The backup MILP on a subset of the free sites, reduced exactly before it is posed.

    Columns ``[x, y, u0, u1]``: sites ``x``; rows no fixed site covers need ``y`` (covered once) and ``u0``
    (twice); rows one fixed site covers need only ``u1`` (one new site covers them twice; continuous, it is
    ``min(1, count)`` at an optimum); rows two fixed sites cover are a constant (the spec leaves them out). A row
    only one of the model's sites reaches is folded into that site's value; rows with the same sites and the same
    fixed count are merged (weights summed). Each step is exact.
    """

    def __init__(self, spec: _BackupSpec, cols: np.ndarray, must: np.ndarray, *, keep: bool):
        self.cols = cols
        af, w, kr = spec.af, spec.wr, spec.kr
        r0, r1 = np.flatnonzero(kr == 0), np.flatnonzero(kr == 1)
        b0, b1 = sp.csr_array(af[r0][:, cols]), sp.csr_array(af[r1][:, cols])
        nc = cols.size
        c0, c1 = np.diff(b0.indptr), np.diff(b1.indptr)
        # reached by one model site: covered once (rows no fixed site covers) or twice (rows one covers) with it
        self.x_single = np.bincount(b0.indices[b0.indptr[:-1][c0 == 1]], weights=w[r0][c0 == 1], minlength=nc)
        self.x_double = np.bincount(b1.indices[b1.indptr[:-1][c1 == 1]], weights=w[r1][c1 == 1], minlength=nc)
        m0_rows, m1_rows = np.flatnonzero(c0 >= 2), np.flatnonzero(c1 >= 2)
        a0, self.w0 = _merge_rows(sp.csr_array(b0[m0_rows], dtype=bool), w[r0][m0_rows])
        a1, self.w1 = _merge_rows(sp.csr_array(b1[m1_rows], dtype=bool), w[r1][m1_rows])
        self.a0, self.a1 = sp.csr_array(a0, dtype=float), sp.csr_array(a1, dtype=float)
        m0, m1 = self.a0.shape[0], self.a1.shape[0]
        self.m0, self.m1 = m0, m1
        theta = spec.theta
        # u0 binary: with a continuous one y = u = 1/2 counts a single cover as half a double one; for theta >= 1/2
        # a second cover is worth no more than the first, so the LP fills y first and u0 may stay continuous
        u0_int = theta is None or theta < 0.5
        i0, i1 = sp.identity(m0, format="csr"), sp.identity(m1, format="csr")
        z = lambda r, c: sp.csr_array((r, c))  # noqa: E731
        rows = [
            (sp.hstack([-self.a0, i0, i0, z(m0, m1)]), -np.inf, 0.0),  # y + u0 <= count (so y <= count)
            (sp.hstack([-self.a1, z(m1, 2 * m0), i1]), -np.inf, 0.0),  # u1 <= count
            (sp.csr_array(np.concatenate([np.ones(nc), np.zeros(2 * m0 + m1)])[None, :]), 0.0, 0.0),  # sites
        ]
        if u0_int:
            rows.insert(1, (sp.hstack([z(m0, nc), -i0, i0, z(m0, m1)]), -np.inf, 0.0))  # u0 <= y
        single = np.concatenate([self.x_single, self.w0, np.zeros(m0 + m1)])
        double = np.concatenate([self.x_double, np.zeros(m0), self.w0, self.w1])
        if keep:
            rows.append((sp.csr_array(single[None, :]), -np.inf, np.inf))
        if theta is None:
            cost, constant, whole = -double, spec.const2, _whole(spec.wr, spec.const2)
        else:
            cost = -(theta * single + (1 - theta) * double)
            constant, whole = theta * spec.const1 + (1 - theta) * spec.const2, False
        lb = np.zeros(nc + 2 * m0 + m1)
        lb[:nc] = must.astype(float)
        model = _milp(
            c=cost,
            integrality=np.concatenate([np.ones(nc), np.zeros(m0), np.full(m0, float(u0_int)), np.zeros(m1)]),
            lb=lb,
            ub=np.ones(lb.size),
            constraints=rows,
            maximise=True,
            constant=constant,
            integral=whole,
        )
        self.card_row = model.a.shape[0] - (2 if keep else 1)
        self.keep_row = model.a.shape[0] - 1 if keep else -1
        self.solver = CurveSolver(model)

    def set_p(self, p: int, single_lo: float | None = None) -> None:
        self.solver.set_row_bounds(self.card_row, 0.0, float(p))
        if single_lo is not None and self.keep_row >= 0:
            self.solver.set_row_bounds(self.keep_row, single_lo, np.inf)

    def start(self, units: np.ndarray) -> np.ndarray:
        x = units[self.cols].astype(float)
        k0, k1 = self.a0 @ x, self.a1 @ x
        return np.concatenate([x, np.minimum(k0, 1.0), (k0 >= 2).astype(float), np.minimum(k1, 1.0)])

    def units(self, x: np.ndarray | None, n: int) -> np.ndarray | None:
        if x is None:
            return None
        units = np.zeros(n, dtype=np.int64)
        units[self.cols[np.rint(x[: self.cols.size]) > 0.5]] = 1
        return units


class _BackupSpec(_CoverSpec):
    """Backup coverage on the rows fixed sites cover fewer than twice (lexicographic or weighted form).

    The lexicographic form solves its first stage (the most demand covered once) as an MCLP, on every site so that
    the MCLP's LP reduced costs say which sites no answer reaching that cover can use; the second stage (the most
    demand covered twice keeping it) is posed on the sites left, which on county instances is a small model.
    """

    def __init__(self, cv: _Cover, theta: float | None):
        kfix = cv.kfix
        self.cv, self.theta = cv, theta
        rows = np.flatnonzero(kfix < 2)
        af = sp.csr_array(cv.af[rows])
        self.wr, self.kr = cv.w[rows], kfix[rows]
        self.const2 = float(cv.w[kfix >= 2].sum())  # covered twice by fixed sites alone
        self.const1 = float(cv.w[kfix >= 1].sum())  # covered once by fixed sites alone
        self.can_twice = (self.kr + np.diff(af.indptr)) >= 2
        wr = self.wr
        values = (
            [_step(wr, 1), _step(wr, 2)]
            if theta is None
            else [lambda k: theta * wr * (k >= 1) + (1 - theta) * wr * (k >= 2)]
        )
        super().__init__(af, self.kr.astype(float), values, np.ones(af.shape[1]), cv.total_w)
        self.milp_size = int(2 * af.nnz + 5 * af.shape[0])
        self._stage1 = _MclpSpec(cv, prune=False) if theta is None else None
        self._model: _BackupModel | None = None  # the weighted form's one model, kept along the curve
        self._settled: dict[int, bool] = {}
        self.reduction: dict[str, int] = {}
        self.whole = theta is None and _whole(cv.w)

    def _eval(self, units: np.ndarray) -> tuple[float, float, float]:
        single, double = _mclp_eval(self.cv, self.cv.free[np.flatnonzero(units)])
        obj = double if self.theta is None else self.theta * single + (1 - self.theta) * double
        return obj, single, double

    def objective(self, units: np.ndarray) -> float:
        return self._eval(units)[0]

    def settled(self, p: int) -> bool:
        """Lexicographic form: whether the single cover kept at ``p`` is proven the most possible."""
        return self._settled.get(p, self.theta is not None)

    def cheap_bound(self, p: int) -> tuple[float, str]:
        twice = self.const2 + float(self.wr[self.can_twice].sum())
        if self.theta is None:
            return twice, "all demand two sites can reach"
        return self.theta * float(self.cv.w.sum()) + (1 - self.theta) * twice, "all coverable demand"

    def _stage2(self, p: int, start: np.ndarray, time_s: float, rel_gap: float, relax: bool):
        """Lexicographic stage 1 (MCLP), then stage 2 on the sites stage 1's LP leaves: units, bound, proven."""
        t_end = time.perf_counter() + time_s
        s1 = self._stage1
        single = lambda u: self._eval(u)[1]  # noqa: E731
        if relax:
            s1.solver(p).lp_bound(STAGE1_TIME_SHARE * time_s)
            units1, b1, proven1 = None, math.nan, False
        else:
            units1, b1, proven1 = s1.exact(p, start, STAGE1_TIME_SHARE * time_s, rel_gap)
        best = start
        if units1 is not None and self.better(units1, start):
            best = units1
        z1 = single(best)
        self._settled[p] = bool(proven1 or (math.isfinite(b1) and z1 >= b1 - 1e-9 * max(z1, 1.0)))
        # every answer keeping z1 satisfies the LP's fixings; a fixed-open site (none, usually) is forced open
        can, must = s1.site_fixings(z1, best)
        m = _BackupModel(self, np.flatnonzero(can), must[can], keep=True)
        # the keep row: the single cover of the fixed sites' rows is a constant; a small slack for the LP's tolerance
        m.set_p(p, z1 - self.const1 - max(1e-7 * z1, 1e-6))
        self.reduction = {
            "demand_rows": int(self.cv.a.shape[0]),
            "model_rows": int(m.m0 + m.m1),
            "sites": int(self.af.shape[1]),
            "model_sites": int(m.cols.size),
        }
        left = max(t_end - time.perf_counter(), 0.05)
        if relax:
            value, _ = m.solver.lp_bound(left)
            return None, value, False
        ans = m.solver.solve(m.start(best), self.objective(best), left, rel_gap)
        units2 = m.units(ans.x, self.af.shape[1])
        if units2 is not None and self.better(units2, best):
            best = units2
        self._solver = m.solver  # its bound source names the bound
        return best, ans.bound, ans.proven

    def _weighted(self, p: int) -> _BackupModel:
        if self._model is None:
            n = self.af.shape[1]
            self._model = _BackupModel(self, np.arange(n), np.zeros(n, dtype=bool), keep=False)
            self._solver = self._model.solver
        self._model.set_p(p)
        return self._model

    def lp_bound(self, p: int, time_s: float, cand: np.ndarray | None = None) -> tuple[float, str]:
        if self.milp_size > LP_NNZ_LIMIT:
            return math.nan, ""
        if self.theta is None:
            start = cand if cand is not None else self.local(self.greedy_prefix(p), p)
            _, value, _ = self._stage2(p, start, time_s, DEFAULT_REL_GAP, relax=True)
            return value, "LP relaxation"
        value, _ = self._weighted(p).solver.lp_bound(time_s)
        return value, "LP relaxation"

    def exact(self, p: int, start: np.ndarray, time_s: float, rel_gap: float):
        if self.theta is None:
            return self._stage2(p, start, time_s, rel_gap, relax=False)
        m = self._weighted(p)
        ans = m.solver.solve(m.start(start), self.objective(start), time_s, rel_gap)
        return m.units(ans.x, self.af.shape[1]), ans.bound, ans.proven

    def result(self, pt: _Point, t0: float, p: int) -> SitingResult:
        new = self.cv.free[np.flatnonzero(pt.units)]
        obj, single, double = self._eval(pt.units)
        return _result(
            "backup",
            self.cv.fixed,
            new,
            obj,
            single,
            self.cv.total_w,
            pt.method,
            pt.status,
            pt.bound,
            pt.bound_source,
            t0,
            p,
            second_weight=double,
        )


class _MexclpSpec(_CoverSpec):
    """MEXCLP on every site (fixed ones may take more units), units stacked up to each site's capacity."""

    def __init__(self, cv: _Cover, q: float, cap: np.ndarray, existing: np.ndarray, p_max: int):
        self.cv, self.q, self.p_max = cv, q, int(p_max)
        self.e = cv.a @ existing.astype(float)
        w = cv.w
        self.value = lambda k: w * (1.0 - q**k)
        super().__init__(cv.a, self.e, [self.value], cap, cv.total_w)
        reach_cap = cv.a @ cap.astype(float)
        k_rows = np.minimum(self.p_max, reach_cap).astype(np.int64)
        if q == 0:
            k_rows = np.where(self.e >= 1, 0, np.minimum(k_rows, 1))
        self.k_rows = k_rows
        self.milp_size = int(cv.a.nnz + 2 * k_rows.sum())

    def objective(self, units: np.ndarray) -> float:
        return self.key(units)[0]

    def cheap_bound(self, p: int) -> tuple[float, str]:
        g = self.at @ (self.value(self.e + 1) - self.value(self.e))  # each unit adds at most its first-unit gain
        order = np.argsort(-g, kind="stable")
        top = np.repeat(g[order], np.minimum(self.cap[order], p))[:p]
        base = float(self.value(self.e).sum())
        return min(float(self.cv.w.sum()), base + float(top.sum())), "sum of the best single-unit additions"

    def solver(self, p: int) -> CurveSolver:
        if self._solver is None:
            cv, q, w, e, k_rows = self.cv, self.q, self.cv.w, self.e, self.k_rows
            n = cv.n_sites
            row_of = np.repeat(np.arange(w.size), k_rows)
            t = np.arange(row_of.size) - np.repeat(np.cumsum(k_rows) - k_rows, k_rows) + 1
            self._row_of, self._t = row_of, t
            coef = w[row_of] * (1 - q) * q ** (e[row_of] + t - 1)
            ny = row_of.size
            link = sp.hstack(
                [-cv.a, sp.csr_array((np.ones(ny), (row_of, np.arange(ny))), shape=(w.size, ny))], format="csr"
            )
            self._solver = CurveSolver(
                _milp(
                    c=np.concatenate([np.zeros(n), -coef]),
                    integrality=np.concatenate([np.ones(n), np.zeros(ny)]),
                    lb=np.zeros(n + ny),
                    ub=np.concatenate([self.cap.astype(float), np.ones(ny)]),
                    constraints=[
                        (link, -np.inf, 0.0),
                        (sp.csr_array(np.concatenate([np.ones(n), np.zeros(ny)])[None, :]), 0.0, 0.0),
                    ],
                    maximise=True,
                    constant=float(self.value(e).sum()),
                )
            )
            self._card_row = w.size
        self._solver.set_row_bounds(self._card_row, 0.0, float(p))
        return self._solver

    def exact(self, p: int, start: np.ndarray, time_s: float, rel_gap: float):
        solver = self.solver(p)
        n = self.cv.n_sites
        new_k = self.af @ start.astype(float)
        y0 = (self._t <= new_k[self._row_of]).astype(float)
        ans = solver.solve(np.concatenate([start.astype(float), y0]), self.objective(start), time_s, rel_gap)
        units = None if ans.x is None else np.rint(ans.x[:n]).astype(np.int64)
        return units, ans.bound, ans.proven

    def result(self, pt: _Point, t0: float, p: int) -> SitingResult:
        units = pt.units
        k = self.counts(units)
        w = self.cv.w
        return _result(
            "mexclp",
            self.cv.fixed,
            np.flatnonzero(units),
            self.objective(units),
            float(w[k >= 1].sum()),
            self.cv.total_w,
            pt.method,
            pt.status,
            pt.bound,
            pt.bound_source,
            t0,
            p,
            second_weight=float(w[k >= 2].sum()),
            units=units,
        )


# ---------------------------------------------------------------------------------------------------------------
# MCLP


def mclp(
    covers: ArrayLike,
    weights: ArrayLike | None,
    p: int,
    fixed: ArrayLike | None = None,
    *,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> SitingResult:
    """Maximal covering location problem: open ``p`` new sites covering the most demand weight.

    ``maximise sum_i h_i y_i`` subject to ``y_i <= sum_{j in N_i} x_j``, ``sum_j x_j = p``, ``x_j`` binary,
    ``0 <= y_i <= 1`` (``y`` needs no integrality: at an optimum with integral ``x`` it is ``min(1, ...)``); fixed
    sites have ``x_j = 1`` and the demand they cover enters as a constant.

    The exact model is made small first, each step exact: demand rows with the same set of covering sites are
    merged (weights summed); rows a fixed site covers are a constant; a site whose covered rows another site
    covers too is dropped (it can always be swapped for that one); a row only one site reaches is folded into that
    site's value. HiGHS starts from greedy plus interchange, and the better answer is kept.

    Source: R. Church & C. ReVelle (1974), "The maximal covering location problem", Papers of the Regional Science
    Association 32.

    Parameters
    ----------
    covers
        Sparse boolean matrix ``(n_demand, n_sites)``: site ``j`` reaches demand ``i`` within the standard.
    weights
        Demand weight per demand point (``None``: 1 each).
    p
        Number of new sites, at most the number of non-fixed sites.
    fixed
        Boolean mask of sites that are always open (existing bases).
    method
        ``"milp"`` (HiGHS from the heuristic's answer), ``"heuristic"`` (greedy plus interchange, bounded by the
        LP relaxation) or ``"auto"`` (the MILP unless the model has more than :data:`MILP_NNZ_LIMIT` nonzeros).
    time_limit_s
        Time budget in seconds.
    rel_gap
        Relative MIP gap at which HiGHS may stop.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    cv = _prepare_cover(covers, weights, fixed)
    p = _check_p(p, cv.free.size)
    t0 = time.perf_counter()
    spec = _MclpSpec(cv)
    (pt,) = _run_points(spec, [p], method, time_limit_s, rel_gap, chain=False)
    return spec.result(pt, t0, p)


def _mclp_eval(cv: _Cover, new_sites: np.ndarray) -> tuple[float, float]:
    units = cv.fixed.astype(float)
    units[new_sites] = 1.0
    k = _cover_counts(cv, units)
    return float(cv.w[k >= 1].sum()), float(cv.w[k >= 2].sum())


# ---------------------------------------------------------------------------------------------------------------
# LSCP


def lscp(
    covers: ArrayLike,
    weights: ArrayLike | None = None,
    fixed: ArrayLike | None = None,
    *,
    target_share: float | None = None,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> SitingResult:
    """Location set covering problem: the fewest new sites that cover all coverable demand, or a target share.

    Full cover (``target_share=None``): ``minimise sum_j x_j`` subject to ``sum_{j in N_i} x_j >= 1`` for every
    demand point with positive weight that some site can reach and no fixed site covers (Toregas et al. 1971).
    Target variant: ``minimise sum_j x_j`` subject to ``y_i <= sum_{j in N_i} x_j``, ``sum_i h_i y_i >= target *
    sum_i h_i - (weight the fixed sites cover)``, ``x_j`` and the coverage indicators ``y_i`` binary. Among the
    smallest sets, the one covering most weight is returned (an MCLP solve with ``p`` = the minimum count).

    Source: C. Toregas, R. Swain, C. ReVelle & L. Bergman (1971), "The location of emergency service facilities",
    Operations Research 19(6). The target form is the covering-share variant used with MCLP (Church & ReVelle
    1974).

    Parameters
    ----------
    covers, weights, fixed
        As for :func:`mclp`. Zero-weight demand points need no cover.
    target_share
        Share of all demand weight (including points no site reaches) to cover, in ``(0, 1]``.
    method, time_limit_s, rel_gap
        As for :func:`mclp`. The heuristic searches downwards from the greedy count with the MCLP heuristic.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    cv = _prepare_cover(covers, weights, fixed)
    t0 = time.perf_counter()
    kfix = cv.kfix
    rows = np.flatnonzero(kfix == 0)
    af = sp.csr_array(cv.af[rows])
    wr = cv.w[rows]
    tol = 1e-9 * cv.total_w
    need = _lscp_need(cv, wr, target_share, tol)
    if need <= tol:
        covered, second = _mclp_eval(cv, np.zeros(0, np.int64))
        return _result(
            "lscp",
            cv.fixed,
            [],
            0,
            covered,
            cv.total_w,
            "heuristic",
            "proven optimal (no new site needed)",
            0,
            "trivial",
            t0,
            0,
            second_weight=second,
        )
    # a site whose rows another site covers too is never needed: swap it for that one (one site for one)
    dom_of = _dominators(af)
    kept = np.flatnonzero(dom_of == np.arange(af.shape[1]))
    knum = np.full(af.shape[1], -1, dtype=np.int64)
    knum[kept] = np.arange(kept.size)
    nk = kept.size
    model, ak = _lscp_model(sp.csr_array(af[:, kept]), wr, need - tol if target_share is not None else None)
    # greedy plus interchange first; the exact solver starts from it and the better answer is kept
    heur = _lscp_heuristic(cv, rows, af, wr, need, target_share is None, tol)
    new, method_used = heur, "heuristic"
    proven, ran = False, False
    bound, source = 1.0, "one site"
    x_h = np.zeros(nk)
    stand_in = dom_of[np.searchsorted(cv.free, heur)]
    x_h[knum[stand_in[stand_in >= 0]]] = 1.0  # the stand-ins cover at least as much, with no more sites
    if x_h.sum() < heur.size:
        heur = new = cv.free[kept[np.flatnonzero(x_h)]]
    start = x_h if target_share is None else np.concatenate([x_h, np.minimum(ak @ x_h, 1.0)])
    solver = CurveSolver(model)
    if _use_milp(method, model.nnz):
        ran = True
        ans = solver.solve(start, float(x_h.sum()), time_limit_s, rel_gap)
        if ans.x is not None:
            cand = cv.free[kept[np.flatnonzero(np.rint(ans.x[:nk]) > 0.5)]]
            if cand.size < heur.size:
                new, method_used = cand, "milp"
        if math.isfinite(ans.bound):
            bound, source = max(bound, math.ceil(ans.bound - 1e-6)), "HiGHS dual bound"
    elif model.nnz <= LP_NNZ_LIMIT:
        lp_value, _ = solver.lp_bound(min(time_limit_s, LP_TIME_LIMIT_S))
        if math.isfinite(lp_value):
            bound, source = max(bound, math.ceil(lp_value - 1e-6)), "LP relaxation"
    proven = new.size <= bound
    status = _status(proven, method_used, ran)
    count = int(new.size)
    if target_share is not None and count > 0:  # among the smallest sets, the one covering most weight
        spent = time.perf_counter() - t0
        left = max(time_limit_s - spent, 0.1 * time_limit_s)
        (pt,) = _run_points(_MclpSpec(cv), [count], method, left, rel_gap, chain=False)
        best = cv.free[np.flatnonzero(pt.units)]
        if _mclp_eval(cv, best)[0] >= _mclp_eval(cv, new)[0]:
            new = best
    covered, second = _mclp_eval(cv, new)
    return _result(
        "lscp",
        cv.fixed,
        new,
        count,
        covered,
        cv.total_w,
        method_used,
        status,
        bound,
        source,
        t0,
        count,
        second_weight=second,
    )


def _lscp_need(cv: _Cover, wr: np.ndarray, target_share: float | None, tol: float) -> float:
    """The weight new sites must cover: every coverable row no fixed site covers, or the target's remainder."""
    if target_share is None:
        return float(wr.sum())
    if not (isinstance(target_share, int | float) and 0 < target_share <= 1):
        raise ModelError(f"target_share: {target_share!r} is outside (0, 1]; pass a share such as 0.95")
    reachable = float(cv.w.sum())
    target_w = float(target_share) * cv.total_w
    if target_w > reachable + tol:
        raise ModelError(
            f"target_share: {target_share:g} is above the {reachable / cv.total_w:.4f} share that all sites "
            "together cover within the standard; lower target_share or add candidates"
        )
    return target_w - float(cv.w[cv.kfix > 0].sum())


def _lscp_model(ak: sp.csr_array, wr: np.ndarray, need: float | None) -> tuple[Milp, sp.csr_array]:
    """The LSCP on the kept sites' columns ``ak``: full cover (``need`` None) or covered weight ``>= need``."""
    m, nk = ak.shape
    if need is None:
        ak, _ = _merge_rows(sp.csr_array(ak, dtype=bool), np.ones(m))  # the same sites, the same row
        ak = sp.csr_array(ak, dtype=float)
        return _milp(np.ones(nk), np.ones(nk), np.zeros(nk), np.ones(nk), [(ak, 1.0, np.inf)], maximise=False), ak
    link = sp.hstack([-ak, sp.identity(m, format="csr")], format="csr")
    share = sp.csr_array(np.concatenate([np.zeros(nk), wr])[None, :])
    model = _milp(
        np.concatenate([np.ones(nk), np.zeros(m)]),
        np.ones(nk + m),
        np.zeros(nk + m),
        np.ones(nk + m),
        [(link, -np.inf, 0.0), (share, need, np.inf)],
        maximise=False,
    )
    return model, ak


def _lscp_heuristic(
    cv: _Cover, rows: np.ndarray, af: sp.csr_array, wr: np.ndarray, need: float, full: bool, tol: float
) -> np.ndarray:
    """Greedy until the target is met, then the MCLP heuristic at one site fewer while it still meets it.

    Full cover counts demand points (merged rows by how many they hold), so tiny weights cannot be skipped and the
    greedy picks what the textbook greedy over the points picks; the descent only removes sites.
    """
    w_eff = cv.points[rows] if full else wr
    need_eff = float(w_eff.sum()) - 0.5 if full else need - tol
    n = af.shape[1]
    at = sp.csr_array(af.T)
    covered = np.zeros(af.shape[0], dtype=bool)
    chosen: list[int] = []
    while float(w_eff[covered].sum()) < need_eff:
        gains = at @ (w_eff * ~covered)
        gains[chosen] = -1.0
        a = int(np.argmax(gains))
        chosen.append(a)
        covered |= af[:, [a]].toarray().ravel() > 0
    best = np.array(sorted(chosen), dtype=np.int64)
    f = _step(w_eff, 1)
    for q in range(best.size - 1, 0, -1):
        units = _cover_search(af, np.zeros(af.shape[0]), [f], q, np.ones(n), float(w_eff.sum()))
        if float(f(af @ units.astype(float)).sum()) >= need_eff:
            best = np.flatnonzero(units)
        else:
            break
    return cv.free[best]


# ---------------------------------------------------------------------------------------------------------------
# backup coverage


def backup_coverage(
    covers: ArrayLike,
    weights: ArrayLike | None,
    p: int,
    fixed: ArrayLike | None = None,
    *,
    theta: float | None = None,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> SitingResult:
    """Backup coverage: ``p`` new sites covering the most demand twice while keeping single coverage.

    Variables: ``x_j`` (site open), ``y_i`` (covered at least once), ``u_i`` (covered at least twice), with
    ``y_i + u_i <= sum_{j in N_i} x_j``, ``u_i <= y_i``, ``sum_j x_j = p``. ``u`` is binary (with a continuous
    ``u`` the pair ``y = u = 1/2`` would count a single cover as half a double one); ``y`` may stay continuous.

    * ``theta=None`` (default) -- lexicographic, two stages: first the most weight covered once (the MCLP
      optimum ``Z1``), then the most weight covered twice subject to ``sum_i h_i y_i >= Z1``. The result's
      ``objective`` is the weight covered twice.
    * ``theta`` in ``(0, 1)`` -- Hogan & ReVelle's weighted form (their BACOP2): ``maximise theta * sum_i h_i y_i +
      (1 - theta) * sum_i h_i u_i``; the result's ``objective`` is that weighted sum.

    Source: K. Hogan & C. ReVelle (1986), "Concepts and applications of backup coverage", Management Science
    32(11).

    Parameters
    ----------
    covers, weights, p, fixed, method, time_limit_s, rel_gap
        As for :func:`mclp`.
    theta
        Weight of single coverage in the weighted form, or ``None`` for the lexicographic form.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    if theta is not None and not (isinstance(theta, int | float) and 0 < theta < 1):
        raise ModelError(f"theta: {theta!r} is outside (0, 1); pass e.g. 0.5, or None for the lexicographic form")
    cv = _prepare_cover(covers, weights, fixed)
    p = _check_p(p, cv.free.size)
    t0 = time.perf_counter()
    spec = _BackupSpec(cv, theta)
    (pt,) = _run_points(spec, [p], method, time_limit_s, rel_gap, chain=False)
    return spec.result(pt, t0, p)


# ---------------------------------------------------------------------------------------------------------------
# MEXCLP


def mexclp(
    covers: ArrayLike,
    weights: ArrayLike | None,
    p: int,
    q: float,
    fixed: ArrayLike | None = None,
    *,
    capacity: ArrayLike | None = None,
    existing_units: ArrayLike | None = None,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> SitingResult:
    """Maximum expected covering location: place ``p`` new units to maximise expected covered demand.

    Each unit is busy with probability ``q`` independently, so a demand point within reach of ``k`` units is
    served with probability ``1 - q^k``; the increments ``(1 - q) q^(k-1)`` fall with ``k``. The model:
    ``maximise sum_i h_i sum_k (1 - q) q^(k-1) y_ik`` subject to ``sum_k y_ik <= sum_{j in N_i} x_j``,
    ``sum_j x_j = p``, ``x_j`` integer in ``[0, capacity_j]``, ``0 <= y_ik <= 1`` (continuous suffices: the
    increments fall, so the LP fills ``k = 1, 2, ...`` in order). Several units may share a site.

    Source: M. S. Daskin (1983), "A maximum expected covering location model: formulation, properties and
    heuristic solution", Transportation Science 17(1).

    Parameters
    ----------
    covers, weights, method, time_limit_s, rel_gap
        As for :func:`mclp`.
    p
        Number of new units.
    q
        System busy fraction, in ``[0, 1)``.
    fixed
        Existing sites; each holds ``existing_units`` (default one unit) before the new ones are placed.
    capacity
        Most new units per site (integers ``>= 0``); default ``p`` at every site, fixed ones included.
    existing_units
        Units already at each site (integers ``>= 0``); default one per fixed site.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    if not (isinstance(q, int | float) and 0 <= q < 1):
        raise ModelError(f"q: busy fraction {q!r} is outside [0, 1); pass the share of time a unit is busy, e.g. 0.3")
    cv = _prepare_cover(covers, weights, fixed)
    n = cv.n_sites
    if isinstance(p, bool) or not isinstance(p, int | np.integer) or p < 0:
        raise ModelError(f"p: {p!r} is not a whole number >= 0; pass the number of new units to place")
    p = int(p)
    cap = _int_vector(capacity, n, "capacity", np.full(n, p))
    existing = _int_vector(existing_units, n, "existing_units", cv.fixed.astype(np.int64))
    if p > int(cap.sum()):
        raise ModelError(f"p: {p} new units exceed the total site capacity {int(cap.sum())}; lower p or raise capacity")
    t0 = time.perf_counter()
    spec = _MexclpSpec(cv, q, cap, existing, p)
    (pt,) = _run_points(spec, [p], method, time_limit_s, rel_gap, chain=False)
    return spec.result(pt, t0, p)


def _int_vector(values: ArrayLike | None, n: int, name: str, default: np.ndarray) -> np.ndarray:
    if values is None:
        return default.astype(np.int64)
    v = np.asarray(values)
    if v.shape != (n,):
        raise ModelError(f"{name}: shape {v.shape} does not match the {n} site columns; pass one count per site")
    if not np.issubdtype(v.dtype, np.number) or (v < 0).any() or (v != np.round(v)).any():
        raise ModelError(f"{name}: values must be whole numbers >= 0; pass one unit count per site")
    return v.astype(np.int64)


# ---------------------------------------------------------------------------------------------------------------
# p-median


def _travel_pairs(travel_s: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray, tuple[int, int]]:
    """(row, col, seconds) of every reachable pair; duplicates keep the shortest time."""
    if sp.issparse(travel_s):
        coo = sp.coo_array(travel_s)
        rows, cols, vals = coo.row.astype(np.int64), coo.col.astype(np.int64), coo.data.astype(float)
        shape = coo.shape
    else:
        arr = np.asarray(travel_s, dtype=float)
        if arr.ndim != 2:
            raise ModelError(
                f"travel_s: expected a 2-D matrix (demand x sites), got {arr.ndim}-D; pass seconds per pair"
            )
        rows, cols = np.nonzero(~np.isinf(arr) | np.isnan(arr))
        vals, shape = arr[rows, cols], arr.shape
    if np.isnan(vals).any() or (vals < 0).any():
        i = int(np.flatnonzero(np.isnan(vals) | (vals < 0))[0])
        raise ModelError(
            f"travel_s: bad time {vals[i]} s at demand {rows[i]}, site {cols[i]}; "
            "times must be >= 0 (inf = unreachable)"
        )
    ok = np.isfinite(vals)
    rows, cols, vals = rows[ok], cols[ok], vals[ok]
    order = np.lexsort((vals, cols, rows))
    rows, cols, vals = rows[order], cols[order], vals[order]
    first = np.ones(rows.size, dtype=bool)
    first[1:] = (rows[1:] != rows[:-1]) | (cols[1:] != cols[:-1])
    if shape[1] == 0:
        raise ModelError("travel_s: there are no sites (0 columns); supply candidate or existing sites")
    return rows[first], cols[first], vals[first], (int(shape[0]), int(shape[1]))


def _nearest_two(
    rows: np.ndarray, cols: np.ndarray, vals: np.ndarray, is_open: np.ndarray, n_rows: int, far: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per row: the nearest open site (-1 if none), its time and the second-nearest open time (``far`` if none)."""
    sel = is_open[cols]
    r, c, v = rows[sel], cols[sel], vals[sel]
    order = np.lexsort((c, v, r))  # by row, then time, then lowest site index
    r, c, v = r[order], c[order], v[order]
    start = np.ones(r.size, dtype=bool)
    start[1:] = r[1:] != r[:-1]
    best = np.full(n_rows, -1, dtype=np.int64)
    d1 = np.full(n_rows, far)
    d2 = np.full(n_rows, far)
    best[r[start]] = c[start]
    d1[r[start]] = v[start]
    second = np.flatnonzero(start) + 1
    second = second[second < r.size]
    second = second[~start[second]]
    d2[r[second]] = v[second]
    return best, d1, d2


def _median_search(
    rows: np.ndarray,
    cols: np.ndarray,
    vals: np.ndarray,
    h: np.ndarray,
    fixed: np.ndarray,
    p: int,
    far: float,
    start: np.ndarray | None = None,
) -> np.ndarray:
    """Greedy addition (from the open sites ``start``, if given) then best-improvement vertex substitution.

    Only strict improvements are made, so the result is never worse than the start. Source: M. B. Teitz & P.
    Bart (1968), "Heuristic methods for estimating the generalized vertex median of a weighted graph",
    Operations Research 16(5).
    """
    n_rows, n_sites = h.size, fixed.size
    is_open = fixed.copy()
    if start is not None:
        is_open |= np.asarray(start, dtype=bool)
    scale = float(h.sum()) * far
    tol = 1e-12 * max(scale, 1.0)
    hr = h[rows]
    for _ in range(p - int((is_open & ~fixed).sum())):
        _, d1, _ = _nearest_two(rows, cols, vals, is_open, n_rows, far)
        gain = np.bincount(cols, weights=hr * np.maximum(d1[rows] - vals, 0.0), minlength=n_sites)
        gain[is_open] = -1.0
        is_open[int(np.argmax(gain))] = True  # argmax: lowest index on ties
    for _ in range(_MAX_SWAPS):
        held = np.flatnonzero(is_open & ~fixed)
        if held.size == 0 or is_open.all():
            break
        best, d1, d2 = _nearest_two(rows, cols, vals, is_open, n_rows, far)
        gain_add = np.bincount(cols, weights=hr * np.maximum(d1[rows] - vals, 0.0), minlength=n_sites)
        served = best >= 0
        loss_rem = np.bincount(best[served], weights=(h * (d2 - d1))[served], minlength=n_sites)
        slot = np.full(n_sites, -1, dtype=np.int64)
        slot[held] = np.arange(held.size)
        pair_slot = slot[np.where(best[rows] >= 0, best[rows], 0)]
        pick = (best[rows] >= 0) & (pair_slot >= 0)
        corr_vals = hr * (np.maximum(d1[rows] - vals, 0.0) + np.minimum(d2[rows], vals) - d2[rows])
        corr = sp.coo_array((corr_vals[pick], (cols[pick], pair_slot[pick])), shape=(n_sites, held.size)).toarray()
        change = loss_rem[held][None, :] - gain_add[:, None] + corr  # cost change of (add a, drop r)
        change[is_open, :] = np.inf
        flat = int(np.argmin(change))  # lowest (a, r) on ties
        if not change.flat[flat] < -tol:
            break
        a, r = divmod(flat, held.size)
        is_open[a] = True
        is_open[held[r]] = False
    return np.flatnonzero(is_open & ~fixed)


def _median_lagrangian(
    rows: np.ndarray,
    cols: np.ndarray,
    cost: np.ndarray,
    penalty: np.ndarray | None,
    fixed: np.ndarray,
    p: int,
    upper: float,
    n_iter: int = 400,
    time_limit_s: float = math.inf,
    lam0: np.ndarray | None = None,
) -> tuple[float, np.ndarray]:
    """Lower bound on the p-median by Lagrangian relaxation of the assignment rows, subgradient steps.

    With multipliers ``lam_i`` on ``sum_j z_ij (+ u_i) = 1`` the relaxed problem splits by site: site ``j`` is worth
    ``rho_j = sum_i min(0, c_ij - lam_i)``; the fixed sites and the ``p`` free sites of least ``rho`` are opened.
    Source: G. Cornuejols, M. L. Fisher & G. L. Nemhauser (1977), "Location of bank accounts to optimize float",
    Management Science 23(8) (from memory); Polyak step sizes towards the heuristic's cost ``upper``.
    """
    n_rows, n_sites = int(rows.max()) + 1, fixed.size
    lam = np.full(n_rows, np.inf)
    np.minimum.at(lam, rows, cost)  # start at the nearest-site bound
    if penalty is not None:
        lam = np.minimum(lam, penalty)
    if lam0 is not None:  # multipliers of a neighbouring p: a warm start along a curve
        lam = lam0.copy()
    best, mu, stall = -np.inf, 2.0, 0
    best_lam = lam
    free = np.flatnonzero(~fixed)
    t_end = time.perf_counter() + time_limit_s
    for _ in range(n_iter):
        if time.perf_counter() > t_end:
            break
        red = np.minimum(cost - lam[rows], 0.0)
        rho = np.bincount(cols, weights=red, minlength=n_sites)
        is_open = fixed.copy()
        if p:
            is_open[free[np.argsort(rho[free], kind="stable")[:p]]] = True
        value = float(lam.sum() + rho[is_open].sum())
        if penalty is not None:
            value += float(np.minimum(penalty - lam, 0.0).sum())
        if best == -np.inf or value > best + 1e-12 * max(abs(best), 1.0):
            best, stall, best_lam = value, 0, lam
        else:
            stall += 1
            if stall >= 20:
                mu, stall = mu / 2, 0
        served = np.bincount(rows, weights=(is_open[cols] & (cost < lam[rows])).astype(float), minlength=n_rows)
        if penalty is not None:
            served += penalty < lam
        g = 1.0 - served
        norm = float(g @ g)
        if norm == 0 or mu < 1e-4 or upper - best <= 1e-9 * max(abs(upper), 1.0):
            break
        lam = lam + mu * (upper - value) / norm * g
    return best, best_lam


def p_median(
    travel_s: ArrayLike,
    weights: ArrayLike | None,
    p: int,
    fixed: ArrayLike | None = None,
    *,
    unreached_penalty_s: float | None = None,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> SitingResult:
    """p-median: ``p`` new sites minimising the weighted mean travel time to each point's nearest open site.

    Sparse form over reachable pairs (ReVelle & Swain 1970): ``minimise sum_ij h_i t_ij z_ij`` subject to
    ``sum_j z_ij = 1``, ``z_ij <= x_j``, ``sum_j x_j = p``, ``x_j`` binary, ``z_ij >= 0``. Pairs slower than the
    point's nearest fixed site are dropped (that site is always open). Demand points no site reaches at all are
    left out (``covered_weight`` shows what is assigned); with ``unreached_penalty_s`` a point may instead stay
    unassigned at that cost, otherwise every reachable point must be reached by an open site. With
    ``method="auto"`` instances above :data:`MEDIAN_MILP_PAIR_LIMIT` pairs go to the heuristic, bounded by a
    Lagrangian relaxation.

    Source: S. L. Hakimi (1964), "Optimum locations of switching centers and the absolute centers and medians of a
    graph", Operations Research 12(3); integer form from C. ReVelle & R. Swain (1970), "Central facilities
    location", Geographical Analysis 2(1) (from memory).

    Parameters
    ----------
    travel_s
        Travel time in seconds, ``(n_demand, n_sites)``: dense with ``inf`` for unreachable, or sparse (absent or
        ``inf`` is unreachable).
    weights, p, fixed, method, time_limit_s, rel_gap
        As for :func:`mclp`.
    unreached_penalty_s
        Cost in seconds of leaving a reachable demand point unassigned; ``None`` forbids it.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    spec = _MedianSpec(travel_s, weights, fixed, unreached_penalty_s)
    p = _check_p(p, spec.free.size)
    t0 = time.perf_counter()
    (pt,) = _run_points(spec, [p], method, time_limit_s, rel_gap, chain=False)
    return spec.result(pt, t0, p)


class _MedianSpec(_Spec):
    """The p-median over reachable pairs; columns are the non-fixed sites."""

    maximise = False

    def __init__(self, travel_s, weights, fixed, unreached_penalty_s):
        all_r, all_c, all_v, (n_dem, n_sites) = _travel_pairs(travel_s)
        rows, cols, vals = all_r, all_c, all_v
        h_all = _check_weights(weights, n_dem)
        fx = _check_fixed(fixed, n_sites)
        if unreached_penalty_s is not None and not (
            isinstance(unreached_penalty_s, int | float) and 0 < unreached_penalty_s < math.inf
        ):
            raise ModelError(f"unreached_penalty_s: {unreached_penalty_s!r} is not a positive number of seconds")
        self.total_w = float(h_all.sum())
        use = h_all[rows] > 0
        rows, cols, vals = rows[use], cols[use], vals[use]
        if unreached_penalty_s is not None:
            keep = vals < unreached_penalty_s  # never better than staying unassigned
            rows, cols, vals = rows[keep], cols[keep], vals[keep]
        demand_rows = np.unique(rows)
        if demand_rows.size == 0:
            raise ModelError("travel_s: no site reaches any weighted demand point; widen the travel-time search")
        rnum = np.full(n_dem, -1, dtype=np.int64)
        rnum[demand_rows] = np.arange(demand_rows.size)
        r_, h = rnum[rows], h_all[demand_rows]
        m = demand_rows.size
        far = unreached_penalty_s if unreached_penalty_s is not None else 1e3 * (float(vals.max()) + 1.0)
        if fx.any():  # keep pairs no slower than the nearest fixed site (ties: the fixed site itself stays)
            fixed_best, dfix, _ = _nearest_two(r_, cols, vals, fx, m, math.inf)
            keep = (vals < dfix[r_]) | (cols == fixed_best[r_])
        else:
            keep = np.ones(r_.size, dtype=bool)
        self.all = (all_r, all_c, all_v, n_dem)
        self.r_, self.cols, self.vals = r_, cols, vals
        self.mr, self.mc, self.mv = r_[keep], cols[keep], vals[keep]
        self.h, self.h_all, self.fx, self.far, self.m = h, h_all, fx, float(far), m
        self.penal = unreached_penalty_s is not None
        self.free = np.flatnonzero(~fx)
        self.wsum = float(h.sum())
        self.milp_size = int(self.mr.size)
        self.milp_limit = MEDIAN_MILP_PAIR_LIMIT
        self._lam: np.ndarray | None = None
        self._greedy: list[int] = []
        self._solver: CurveSolver | None = None
        self.tol = 1e-9

    def _open(self, units: np.ndarray) -> np.ndarray:
        is_open = self.fx.copy()
        is_open[self.free[np.asarray(units) > 0]] = True
        return is_open

    def _units(self, is_open: np.ndarray) -> np.ndarray:
        return is_open[self.free].astype(np.int64)

    def cost(self, units: np.ndarray) -> float:
        best, d1, _ = _nearest_two(self.mr, self.mc, self.mv, self._open(units), self.m, self.far)
        return float(self.h @ np.where(best >= 0, d1, self.far))

    def objective(self, units: np.ndarray) -> float:
        return self.cost(units) / self.wsum

    def better(self, a: np.ndarray, b: np.ndarray) -> bool:
        return self.cost(a) < self.cost(b) - 1e-12 * max(self.wsum * self.far, 1.0)

    def greedy_prefix(self, p: int) -> np.ndarray:
        units = np.zeros(self.free.size, dtype=np.int64)
        units[self._greedy[:p]] = 1
        while len(self._greedy) < p:
            nxt = self.best_add(units)
            added = np.flatnonzero(nxt != units)
            if added.size == 0:
                break
            self._greedy.append(int(added[0]))
            units = nxt
        return units

    def best_add(self, units: np.ndarray) -> np.ndarray:
        is_open = self._open(units)
        if is_open.all():
            return units.copy()
        _, d1, _ = _nearest_two(self.mr, self.mc, self.mv, is_open, self.m, self.far)
        hr = self.h[self.mr]
        gain = np.bincount(self.mc, weights=hr * np.maximum(d1[self.mr] - self.mv, 0.0), minlength=self.fx.size)
        gain[is_open] = -1.0
        is_open[int(np.argmax(gain))] = True  # argmax: lowest index on ties
        return self._units(is_open)

    def local(self, units: np.ndarray, p: int) -> np.ndarray:
        new = _median_search(self.mr, self.mc, self.mv, self.h, self.fx, p, self.far, start=self._open(units))
        is_open = self.fx.copy()
        is_open[new] = True
        return self._units(is_open)

    def cheap_bound(self, p: int) -> tuple[float, str]:
        nearest = np.full(self.m, math.inf)
        np.minimum.at(nearest, self.mr, self.mv)
        return float(self.h @ np.minimum(nearest, self.far)) / self.wsum, "nearest site for every point"

    def lp_bound(self, p: int, time_s: float, cand: np.ndarray | None = None) -> tuple[float, str]:
        upper = self.cost(cand if cand is not None else self.local(self.greedy_prefix(p), p))
        lagr, self._lam = _median_lagrangian(
            self.mr,
            self.mc,
            self.h[self.mr] * self.mv,
            self.h * self.far if self.penal else None,
            self.fx,
            p,
            upper,
            n_iter=1000,
            time_limit_s=time_s,
            lam0=self._lam,
        )
        return min(lagr, upper) / self.wsum, "Lagrangian relaxation"

    def solver(self, p: int) -> CurveSolver:
        if self._solver is None:
            mr, mc, mv, h, m, nf = self.mr, self.mc, self.mv, self.h, self.m, self.free.size
            npair = mr.size
            link_pairs = np.flatnonzero(~self.fx[mc])
            xcol = np.full(self.fx.size, -1, dtype=np.int64)
            xcol[self.free] = np.arange(nf)
            nu = m if self.penal else 0
            nvar = nf + npair + nu
            assign = sp.csr_array(
                (np.ones(npair + nu), (np.concatenate([mr, np.arange(nu)]), nf + np.arange(npair + nu))),
                shape=(m, nvar),
            )
            nl = link_pairs.size
            link = sp.csr_array(
                (
                    np.concatenate([np.ones(nl), -np.ones(nl)]),
                    (np.tile(np.arange(nl), 2), np.concatenate([nf + link_pairs, xcol[mc[link_pairs]]])),
                ),
                shape=(nl, nvar),
            )
            card = sp.csr_array(np.concatenate([np.ones(nf), np.zeros(npair + nu)])[None, :])
            c = np.concatenate([np.zeros(nf), h[mr] * mv, h * self.far if self.penal else np.zeros(0)]) / self.wsum
            self._solver = CurveSolver(
                _milp(
                    c=c,
                    integrality=np.concatenate([np.ones(nf), np.zeros(npair + nu)]),
                    lb=np.zeros(nvar),
                    ub=np.ones(nvar),
                    constraints=[(assign, 1.0, 1.0), (link, -np.inf, 0.0), (card, 0.0, 0.0)],
                    maximise=False,
                )
            )
            self._card_row = m + nl
        self._solver.set_row_bounds(self._card_row, float(p), float(p))
        return self._solver

    def exact(self, p: int, start: np.ndarray, time_s: float, rel_gap: float):
        solver = self.solver(p)
        nf = self.free.size
        best, _, _ = _nearest_two(self.mr, self.mc, self.mv, self._open(start), self.m, self.far)
        z = ((best[self.mr] == self.mc) & (best[self.mr] >= 0)).astype(float)
        u = (best < 0).astype(float) if self.penal else np.zeros(0)
        if not self.penal and (best < 0).any():
            x0 = None
        else:
            x0 = np.concatenate([start.astype(float), z, u])
        ans = (
            solver.solve(x0, self.objective(start), time_s, rel_gap)
            if x0 is not None
            else solver.mip.run(time_s, rel_gap)
        )
        units = None if ans.x is None else (np.rint(ans.x[:nf]) > 0.5).astype(np.int64)
        return units, ans.bound, ans.proven

    def result(self, pt: _Point, t0: float, p: int) -> SitingResult:
        is_open = self._open(pt.units)
        best, d1, _ = _nearest_two(self.r_, self.cols, self.vals, is_open, self.m, math.inf)
        if not self.penal and (best < 0).any():
            raise ModelError(
                f"p: {p} new sites (with the fixed ones) leave {int((best < 0).sum())} reachable demand points "
                "unreached; raise p, widen the travel-time search or pass unreached_penalty_s"
            )
        objective = float(self.h @ np.where(best >= 0, d1, self.far)) / self.wsum
        all_r, all_c, all_v, n_dem = self.all
        # every point (zero-weight ones too, for maps) gets its nearest open site
        assigned_site, assigned_s, _ = _nearest_two(all_r, all_c, all_v, is_open, n_dem, math.inf)
        covered = float(self.h_all[assigned_site >= 0].sum())
        return _result(
            "p-median",
            self.fx,
            self.free[np.flatnonzero(pt.units)],
            objective,
            covered,
            self.total_w,
            pt.method,
            pt.status,
            pt.bound,
            pt.bound_source,
            t0,
            p,
            assigned_site=assigned_site,
            assigned_s=assigned_s,
        )


# ---------------------------------------------------------------------------------------------------------------
# ranking and coverage curve


def rank_candidates(covers: ArrayLike, weights: ArrayLike | None, fixed: ArrayLike | None = None) -> pd.DataFrame:
    """Each candidate alone added to the fixed sites: the demand weight it adds.

    Returns one row per non-fixed site, best first (ties: lowest site index), with columns ``site``, ``place``
    (1 = best), ``added_weight`` and ``added_share`` (newly covered), ``share_with_site`` (covered share with the
    fixed sites plus this one) and ``added_second_weight`` (weight it lifts from single to double coverage).
    """
    cv = _prepare_cover(covers, weights, fixed)
    kfix = cv.kfix
    af = cv.af
    base = float(cv.w[kfix >= 1].sum())
    added = af.T @ (cv.w * (kfix == 0))
    added2 = af.T @ (cv.w * (kfix == 1))
    order = np.lexsort((cv.free, -added))
    return pd.DataFrame(
        {
            "site": cv.free[order],
            "place": np.arange(1, order.size + 1),
            "added_weight": added[order],
            "added_share": added[order] / cv.total_w,
            "share_with_site": (base + added[order]) / cv.total_w,
            "added_second_weight": added2[order],
        }
    )


CURVE_MODELS = ("mclp", "backup", "mexclp", "p-median")


def siting_curve(
    model: str,
    data: ArrayLike,
    weights: ArrayLike | None,
    max_new: int,
    fixed: ArrayLike | None = None,
    *,
    q: float | None = None,
    theta: float | None = None,
    capacity: ArrayLike | None = None,
    existing_units: ArrayLike | None = None,
    unreached_penalty_s: float | None = None,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> list[SitingResult]:
    """One model solved for ``p = 0 .. max_new`` new sites (MEXCLP: units), within one time budget for them all.

    Each ``p`` starts from the better of greedy plus interchange and the answer for ``p - 1`` plus its best
    addition, so the curve never falls by construction: covered demand (MCLP; backup's single cover, then double;
    MEXCLP's expected cover) never decreases, and the p-median's mean travel time never increases. Unused time of
    one ``p`` passes to the next. Each result says whether it is proven optimal, the solver's best or the
    heuristic's, and its gap to the bound.

    Parameters
    ----------
    model
        ``"mclp"``, ``"backup"``, ``"mexclp"`` or ``"p-median"``.
    data
        The coverage matrix (covering models) or travel seconds (p-median), as for the single-``p`` functions.
    weights, fixed, method, rel_gap
        As for :func:`mclp`.
    max_new
        The largest ``p`` on the curve.
    q, capacity, existing_units
        MEXCLP, as for :func:`mexclp`.
    theta
        Backup, as for :func:`backup_coverage`.
    unreached_penalty_s
        p-median, as for :func:`p_median`.
    time_limit_s
        Seconds for the whole curve.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    if model not in CURVE_MODELS:
        raise ModelError(f"model: {model!r} is not one of {', '.join(CURVE_MODELS)}; pick one of them")
    if model == "p-median":
        spec = _MedianSpec(data, weights, fixed, unreached_penalty_s)
        max_new = _check_p(max_new, spec.free.size)
    else:
        cv = _prepare_cover(data, weights, fixed)
        if model == "mexclp":
            if not (isinstance(q, int | float) and 0 <= q < 1):
                raise ModelError(f"q: busy fraction {q!r} is outside [0, 1); pass the share of time a unit is busy")
            if isinstance(max_new, bool) or not isinstance(max_new, int | np.integer) or max_new < 0:
                raise ModelError(f"p: {max_new!r} is not a whole number >= 0; pass the number of new units")
            max_new = int(max_new)
            n = cv.n_sites
            cap = _int_vector(capacity, n, "capacity", np.full(n, max_new))
            existing = _int_vector(existing_units, n, "existing_units", cv.fixed.astype(np.int64))
            if max_new > int(cap.sum()):
                raise ModelError(f"p: {max_new} new units exceed the total site capacity {int(cap.sum())}")
            spec = _MexclpSpec(cv, q, cap, existing, max_new)
        else:
            max_new = _check_p(max_new, cv.free.size)
            if model == "backup":
                if theta is not None and not (isinstance(theta, int | float) and 0 < theta < 1):
                    raise ModelError(f"theta: {theta!r} is outside (0, 1); pass e.g. 0.5, or None")
                spec = _BackupSpec(cv, theta)
            else:
                spec = _MclpSpec(cv)
    t0 = time.perf_counter()
    note(f"siting: {model} curve for 0..{max_new} new sites, {time_limit_s:g} s in all")
    points = _run_points(spec, list(range(max_new + 1)), method, time_limit_s, rel_gap, chain=True)
    return [spec.result(pt, t0, p) for p, pt in enumerate(points)]


def curve_frame(results: list[SitingResult]) -> pd.DataFrame:
    """A curve as a table: one row per ``p`` with the objective, its bound and gap, and who found the answer."""
    return pd.DataFrame.from_records(
        [
            {
                "new_sites": r.p,
                "objective": r.objective,
                "bound": r.bound,
                "gap": r.mip_gap,
                "covered_weight": r.covered_weight,
                "covered_share": r.covered_share,
                "second_weight": r.second_weight,
                "sites": " ".join(str(s) for s in r.sites),
                "method": r.method,
                "status": r.status,
                "bound_source": r.bound_source,
            }
            for r in results
        ]
    )


def coverage_curve(
    covers: ArrayLike,
    weights: ArrayLike | None,
    max_new: int,
    fixed: ArrayLike | None = None,
    *,
    method: str = "auto",
    time_limit_s: float = DEFAULT_TIME_LIMIT_S,
    rel_gap: float = DEFAULT_REL_GAP,
) -> pd.DataFrame:
    """The MCLP curve, ``p = 0 .. max_new`` (see :func:`siting_curve`), as a table.

    Columns as :func:`curve_frame` plus ``gain_share`` (over ``p - 1``, never negative) and ``mip_gap`` (= ``gap``).

    Source: each point is an MCLP answer, Church & ReVelle (1974).
    """
    res = siting_curve(
        "mclp", covers, weights, max_new, fixed, method=method, time_limit_s=time_limit_s, rel_gap=rel_gap
    )
    df = curve_frame(res)
    df.insert(df.columns.get_loc("covered_share") + 1, "gain_share", df["covered_share"].diff().fillna(0.0))
    df["mip_gap"] = df["gap"]
    return df
