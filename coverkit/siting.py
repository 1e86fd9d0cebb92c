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
from scipy.optimize import Bounds, LinearConstraint, linprog, milp

from coverkit.errors import ModelError
from coverkit.progress import counted

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

    @property
    def kfix(self) -> np.ndarray:
        return np.asarray(self.a[:, self.fixed].sum(axis=1)).ravel()

    @property
    def af(self) -> sp.csr_array:
        return sp.csr_array(self.a[:, self.free])


def _merge_rows(a: sp.csr_array, w: np.ndarray) -> tuple[sp.csr_array, np.ndarray]:
    """Merge rows with identical sparsity patterns, summing their weights (exact; verified after hashing)."""
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
    return sp.csr_array(a[first[order]]), np.bincount(group, weights=w, minlength=order.size)


def _prepare_cover(covers: ArrayLike, weights: ArrayLike | None, fixed: ArrayLike | None) -> _Cover:
    a = _as_cover_matrix(covers)
    w = _check_weights(weights, a.shape[0])
    f = _check_fixed(fixed, a.shape[1])
    keep = (w > 0) & (np.diff(a.indptr) > 0)
    a_kept = sp.csr_array(a[np.flatnonzero(keep)])
    a_m, w_m = _merge_rows(a_kept, w[keep])
    return _Cover(
        a=sp.csr_array(a_m, dtype=float),
        w=w_m,
        fixed=f,
        free=np.flatnonzero(~f),
        total_w=float(w.sum()),
        n_sites=a.shape[1],
    )


# ---------------------------------------------------------------------------------------------------------------
# MILP plumbing


@dataclass
class _Milp:
    """``minimise c @ x`` (or maximise ``-c @ x`` when ``maximise``) plus a constant."""

    c: np.ndarray
    integrality: np.ndarray
    lb: np.ndarray
    ub: np.ndarray
    constraints: list[LinearConstraint]
    maximise: bool
    constant: float = 0.0

    @property
    def nnz(self) -> int:
        return int(sum(sp.csr_array(k.A).nnz for k in self.constraints))


@dataclass(frozen=True)
class _Sol:
    x: np.ndarray | None
    value: float  # full objective in the model's own sense, constant included
    bound: float
    status: str
    solver_gap: float


def _solve(model: _Milp, time_limit_s: float, rel_gap: float, relax: bool = False) -> _Sol:
    integrality = np.zeros_like(model.integrality) if relax else model.integrality
    res = milp(
        model.c,
        integrality=integrality,
        bounds=Bounds(model.lb, model.ub),
        constraints=[k for k in model.constraints if k.A.shape[0] > 0],
        options={"time_limit": float(time_limit_s), "mip_rel_gap": float(rel_gap), "disp": False},
    )
    if res.status == 2:
        return _Sol(None, math.nan, math.nan, "infeasible", math.nan)
    if res.x is None:
        status = "time limit, no solution" if res.status == 1 else f"solver failed: {res.message}"
        return _Sol(None, math.nan, math.nan, status, math.nan)
    sign = -1.0 if model.maximise else 1.0
    value = model.constant + sign * float(res.fun)
    dual = getattr(res, "mip_dual_bound", None)
    bound = value if (relax or dual is None) else model.constant + sign * float(dual)
    status = "optimal" if res.status == 0 else "time limit, best solution found"
    gap = float(res.mip_gap) if getattr(res, "mip_gap", None) is not None else 0.0
    return _Sol(np.asarray(res.x), value, bound, status, gap)


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


def _cover_search(
    af: sp.csr_array,
    k0: np.ndarray,
    values: list[Value],
    p: int,
    cap: np.ndarray,
    scale: float,
) -> np.ndarray:
    """Greedy construction then best-improvement unit moves (vertex substitution, Teitz & Bart 1968).

    ``af`` (rows x columns, 0/1) says which columns reach which rows, ``k0`` the coverage count from fixed sites,
    ``values`` the per-row value of a coverage count, compared lexicographically (one function for a plain
    objective), ``cap`` the units allowed per column (1 for a site model). Returns units per column.
    """
    n_cols = af.shape[1]
    units = np.zeros(n_cols, dtype=np.int64)
    k = k0.astype(float).copy()
    at = sp.csr_array(af.T)
    tol = 1e-9 * max(scale, 1.0)
    for _ in range(p):  # greedy: the column adding most value, lowest index on ties
        gains = [at @ (f(k + 1) - f(k)) for f in values]
        a = _lex_pick(gains, units < cap, tol)
        units[a] += 1
        k += af[:, [a]].toarray().ravel()
    for _ in range(_MAX_SWAPS):  # interchange: move one unit from column r to column a
        held = np.flatnonzero(units > 0)
        if held.size == 0 or not (units < cap).any():
            break
        af_held = sp.csr_array(af[:, held])
        deltas = []
        for f in values:
            add = f(k + 1) - f(k)
            rem = f(np.maximum(k - 1, 0)) - f(k)
            both = at @ sp.diags_array(-(add + rem)) @ af_held  # rows reached by both a and r keep their count
            d = (at @ add)[:, None] + (af_held.T @ rem)[None, :] + both.toarray()
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
        k += af[:, [a]].toarray().ravel() - af[:, [held[r]]].toarray().ravel()
    return units


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
# MCLP


def _mclp_model(af: sp.csr_array, w: np.ndarray, p: int, constant: float) -> _Milp:
    m, nf = af.shape
    cover_rows = sp.hstack([-af, sp.identity(m, format="csr")], format="csr")  # y_i <= sum_j a_ij x_j
    card = sp.csr_array(np.concatenate([np.ones(nf), np.zeros(m)])[None, :])
    return _Milp(
        c=np.concatenate([np.zeros(nf), -w]),
        integrality=np.concatenate([np.ones(nf), np.zeros(m)]),
        lb=np.zeros(nf + m),
        ub=np.ones(nf + m),
        constraints=[LinearConstraint(cover_rows, -np.inf, 0.0), LinearConstraint(card, p, p)],
        maximise=True,
        constant=constant,
    )


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
        ``"milp"`` (HiGHS), ``"heuristic"`` (greedy plus interchange) or ``"auto"`` (MILP unless the model has
        more than :data:`MILP_NNZ_LIMIT` nonzeros, or no MILP solution is found within the time limit).
    time_limit_s
        HiGHS time limit in seconds.
    rel_gap
        Relative MIP gap at which HiGHS may stop.
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    cv = _prepare_cover(covers, weights, fixed)
    p = _check_p(p, cv.free.size)
    return _mclp_solve(cv, p, method, time_limit_s, rel_gap)


def _mclp_eval(cv: _Cover, new_sites: np.ndarray) -> tuple[float, float]:
    units = cv.fixed.astype(float)
    units[new_sites] = 1.0
    k = _cover_counts(cv, units)
    return float(cv.w[k >= 1].sum()), float(cv.w[k >= 2].sum())


def _mclp_solve(cv: _Cover, p: int, method: str, time_limit_s: float, rel_gap: float) -> SitingResult:
    t0 = time.perf_counter()
    kfix = cv.kfix
    rows = np.flatnonzero(kfix == 0)
    af = sp.csr_array(cv.af[rows])
    constant = float(cv.w[kfix > 0].sum())
    model = _mclp_model(af, cv.w[rows], p, constant)
    status = None
    if p == 0:
        new, method_used, status, bound, source = np.zeros(0, np.int64), "milp", "optimal", None, "trivial"
    elif _use_milp(method, model.nnz):
        sol = _solve(model, time_limit_s, rel_gap)
        if sol.x is not None:
            new = cv.free[np.flatnonzero(np.rint(sol.x[: cv.free.size]) > 0.5)]
            method_used, status, bound, source = "milp", sol.status, sol.bound, "HiGHS dual bound"
    if status is None:
        units = _cover_search(af, np.zeros(af.shape[0]), [_step(cv.w[rows], 1)], p, np.ones(af.shape[1]), cv.total_w)
        new = cv.free[np.flatnonzero(units)]
        method_used, status = "heuristic", "local optimum"
        bound, source = _lp_bound(model, time_limit_s, constant + float(cv.w[rows].sum()), "all coverable demand")
    covered, second = _mclp_eval(cv, new)
    if bound is None:
        bound = covered
    return _result(
        "mclp",
        cv.fixed,
        new,
        covered,
        covered,
        cv.total_w,
        method_used,
        status,
        bound,
        source,
        t0,
        p,
        second_weight=second,
    )


def _lp_bound(model: _Milp, time_limit_s: float, cheap: float, cheap_name: str) -> tuple[float, str]:
    """The LP relaxation's value (HiGHS interior point), or a cheap bound when the LP is too large or slow."""
    if model.nnz <= LP_NNZ_LIMIT:
        eq_a, eq_b, ub_a, ub_b = [], [], [], []
        for k in model.constraints:
            a = sp.csr_array(k.A)
            if a.shape[0] == 0:
                continue
            lo = np.broadcast_to(np.asarray(k.lb, dtype=float), a.shape[0])
            hi = np.broadcast_to(np.asarray(k.ub, dtype=float), a.shape[0])
            eq = lo == hi
            up = ~eq & np.isfinite(hi)
            down = ~eq & np.isfinite(lo)
            eq_a.append(a[np.flatnonzero(eq)])
            eq_b.append(hi[eq])
            ub_a += [a[np.flatnonzero(up)], -a[np.flatnonzero(down)]]
            ub_b += [hi[up], -lo[down]]
        res = linprog(
            model.c,
            A_ub=sp.vstack(ub_a, format="csr"),
            b_ub=np.concatenate(ub_b),
            A_eq=sp.vstack(eq_a, format="csr"),
            b_eq=np.concatenate(eq_b),
            bounds=np.column_stack([model.lb, model.ub]),
            method="highs-ipm",
            options={"time_limit": float(min(time_limit_s, LP_TIME_LIMIT_S))},
        )
        if res.status == 0:
            return model.constant + (-1.0 if model.maximise else 1.0) * float(res.fun), "LP relaxation"
    return cheap, cheap_name


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
    reachable = float(cv.w.sum())
    fixed_w = float(cv.w[kfix > 0].sum())
    tol = 1e-9 * cv.total_w
    if target_share is None:
        need = float(wr.sum())
        target_w = reachable
    else:
        if not (isinstance(target_share, int | float) and 0 < target_share <= 1):
            raise ModelError(f"target_share: {target_share!r} is outside (0, 1]; pass a share such as 0.95")
        target_w = float(target_share) * cv.total_w
        if target_w > reachable + tol:
            raise ModelError(
                f"target_share: {target_share:g} is above the {reachable / cv.total_w:.4f} share that all sites "
                "together cover within the standard; lower target_share or add candidates"
            )
        need = target_w - fixed_w
    nf, m = cv.free.size, rows.size
    if need <= tol:
        covered, second = _mclp_eval(cv, np.zeros(0, np.int64))
        return _result(
            "lscp", cv.fixed, [], 0, covered, cv.total_w, "milp", "optimal", 0, "trivial", t0, 0, second_weight=second
        )
    if target_share is None:
        model = _Milp(
            c=np.ones(nf),
            integrality=np.ones(nf),
            lb=np.zeros(nf),
            ub=np.ones(nf),
            constraints=[LinearConstraint(af, 1.0, np.inf)],
            maximise=False,
        )
    else:
        link = sp.hstack([-af, sp.identity(m, format="csr")], format="csr")
        share = sp.csr_array(np.concatenate([np.zeros(nf), wr])[None, :])
        model = _Milp(
            c=np.concatenate([np.ones(nf), np.zeros(m)]),
            integrality=np.ones(nf + m),
            lb=np.zeros(nf + m),
            ub=np.ones(nf + m),
            constraints=[LinearConstraint(link, -np.inf, 0.0), LinearConstraint(share, need - tol, np.inf)],
            maximise=False,
        )
    status = None
    if _use_milp(method, model.nnz):
        sol = _solve(model, time_limit_s, rel_gap)
        if sol.status == "infeasible":  # guarded above; kept for a clear message
            raise ModelError("target_share: no set of sites reaches the target; lower target_share")
        if sol.x is not None:
            new = cv.free[np.flatnonzero(np.rint(sol.x[:nf]) > 0.5)]
            method_used, status = "milp", sol.status
            bound, source = math.ceil(sol.bound - 1e-6), "HiGHS dual bound"
    if status is None:
        new = _lscp_heuristic(cv, rows, af, wr, need, target_share is None, tol)
        method_used, status = "heuristic", "local optimum"
        lp_value, source = _lp_bound(model, time_limit_s, 1.0, "one site")
        bound = math.ceil(lp_value - 1e-6)
    count = int(new.size)
    if target_share is not None and count > 0:  # among the smallest sets, the one covering most weight
        spent = time.perf_counter() - t0
        best = _mclp_solve(cv, count, method_used, max(time_limit_s - spent, 0.1 * time_limit_s), rel_gap)
        if best.covered_weight >= _mclp_eval(cv, new)[0]:
            new = best.sites
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


def _lscp_heuristic(
    cv: _Cover, rows: np.ndarray, af: sp.csr_array, wr: np.ndarray, need: float, full: bool, tol: float
) -> np.ndarray:
    """Greedy until the target is met, then the MCLP heuristic at one site fewer while it still meets it."""
    w_eff = np.ones_like(wr) if full else wr  # full cover: count rows, so tiny weights cannot be skipped
    need_eff = float(w_eff.size) - 0.5 if full else need - tol
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
    kfix = cv.kfix
    rows = np.flatnonzero(kfix < 2)
    af = sp.csr_array(cv.af[rows])
    wr, kr = cv.w[rows], kfix[rows]
    const2 = float(cv.w[kfix >= 2].sum())  # covered twice by fixed sites alone
    nf, m = cv.free.size, rows.size
    can_twice = (kr + np.diff(af.indptr)) >= 2
    link = sp.hstack([-af, sp.identity(m, format="csr"), sp.identity(m, format="csr")], format="csr")
    order = sp.hstack(
        [sp.csr_array((m, nf)), -sp.identity(m, format="csr"), sp.identity(m, format="csr")], format="csr"
    )
    card = sp.csr_array(np.concatenate([np.ones(nf), np.zeros(2 * m)])[None, :])
    base_constraints = [
        LinearConstraint(link, -np.inf, kr),  # y + u <= (fixed count) + sum_j a_ij x_j
        LinearConstraint(order, -np.inf, 0.0),  # u <= y
        LinearConstraint(card, p, p),
    ]
    lb = np.concatenate([np.zeros(nf), (kr >= 1).astype(float), np.zeros(m)])
    ub = np.concatenate([np.ones(nf), np.ones(m), can_twice.astype(float)])
    integrality = np.concatenate([np.ones(nf), np.zeros(m), np.ones(m)])

    def model_with(c: np.ndarray, constant: float, extra: list[LinearConstraint]) -> _Milp:
        return _Milp(c, integrality, lb, ub, base_constraints + extra, True, constant)

    zeros = np.zeros(nf)
    if theta is None:
        stage1 = model_with(np.concatenate([zeros, -wr, np.zeros(m)]), const2, [])

        def stage2_with(z1: float) -> _Milp:
            keep = LinearConstraint(
                sp.csr_array(np.concatenate([zeros, wr, np.zeros(m)])[None, :]), z1 - 1e-9 * cv.total_w, np.inf
            )
            return model_with(np.concatenate([zeros, np.zeros(m), -wr]), const2, [keep])

        final = stage2_with(float(wr.sum()))  # for the size check only
    else:
        final = model_with(np.concatenate([zeros, -theta * wr, -(1 - theta) * wr]), const2 * 1.0, [])

    def evaluate(new: np.ndarray) -> tuple[float, float, float]:
        single, double = _mclp_eval(cv, new)
        obj = double if theta is None else theta * single + (1 - theta) * double
        return obj, single, double

    status = None
    if p == 0:
        new, method_used, status, source = np.zeros(0, np.int64), "milp", "optimal", "trivial"
        bound = evaluate(new)[0]
    elif _use_milp(method, final.nnz):
        if theta is None:
            s1 = _solve(stage1, time_limit_s, rel_gap)
            sol = s1
            if s1.x is not None:
                new1 = cv.free[np.flatnonzero(np.rint(s1.x[:nf]) > 0.5)]
                z1 = evaluate(new1)[1] - const2  # single cover on the model's rows, from the sites
                left = max(time_limit_s - (time.perf_counter() - t0), 0.1 * time_limit_s)
                sol = _solve(stage2_with(z1), left, rel_gap)
                if sol.x is None:  # stage 2 found nothing in time: fall back on the stage-1 sites
                    sol = _Sol(s1.x, math.nan, math.nan, "time limit in stage 2, stage-1 sites", math.nan)
                elif s1.status != "optimal":
                    sol = _Sol(sol.x, sol.value, sol.bound, "time limit in stage 1, " + sol.status, sol.solver_gap)
        else:
            sol = _solve(final, time_limit_s, rel_gap)
        if sol.x is not None:
            new = cv.free[np.flatnonzero(np.rint(sol.x[:nf]) > 0.5)]
            method_used, status, source = "milp", sol.status, "HiGHS dual bound"
            bound = sol.bound if math.isfinite(sol.bound) else math.nan
    if status is None:
        values = (
            [_step(wr, 1), _step(wr, 2)]
            if theta is None
            else [lambda k: theta * wr * (k >= 1) + (1 - theta) * wr * (k >= 2)]
        )
        units = _cover_search(af, kr.astype(float), values, p, np.ones(nf), cv.total_w)
        new = cv.free[np.flatnonzero(units)]
        method_used, status = "heuristic", "local optimum"
        if theta is None:
            final = stage2_with(evaluate(new)[1] - float(cv.w[kfix >= 2].sum()))
        cheap = const2 + float(wr[can_twice].sum()) if theta is None else float(cv.w.sum())
        bound, source = _lp_bound(final, time_limit_s, cheap, "all coverable demand")
    obj, single, double = evaluate(new)
    return _result(
        "backup",
        cv.fixed,
        new,
        obj,
        single,
        cv.total_w,
        method_used,
        status,
        bound,
        source,
        t0,
        p,
        second_weight=double,
    )


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
    e = cv.a @ existing.astype(float)
    w = cv.w

    def value(k: np.ndarray) -> np.ndarray:
        return w * (1.0 - q**k)

    # y_ik for new units t = 1..K_i reaching row i; K_i is capped by p and by the capacity in reach
    reach_cap = cv.a @ cap.astype(float)
    k_rows = np.minimum(p, reach_cap).astype(np.int64)
    if q == 0:
        k_rows = np.where(e >= 1, 0, np.minimum(k_rows, 1))
    row_of = np.repeat(np.arange(w.size), k_rows)
    t = np.arange(row_of.size) - np.repeat(np.cumsum(k_rows) - k_rows, k_rows) + 1
    coef = w[row_of] * (1 - q) * q ** (e[row_of] + t - 1)
    ny = row_of.size
    link = sp.hstack([-cv.a, sp.csr_array((np.ones(ny), (row_of, np.arange(ny))), shape=(w.size, ny))], format="csr")
    card = sp.csr_array(np.concatenate([np.ones(n), np.zeros(ny)])[None, :])
    model = _Milp(
        c=np.concatenate([np.zeros(n), -coef]),
        integrality=np.concatenate([np.ones(n), np.zeros(ny)]),
        lb=np.zeros(n + ny),
        ub=np.concatenate([cap.astype(float), np.ones(ny)]),
        constraints=[LinearConstraint(link, -np.inf, 0.0), LinearConstraint(card, p, p)],
        maximise=True,
        constant=float(value(e).sum()),
    )
    status = None
    if p == 0:
        units, method_used, status, bound, source = np.zeros(n, np.int64), "milp", "optimal", None, "trivial"
    elif _use_milp(method, model.nnz):
        sol = _solve(model, time_limit_s, rel_gap)
        if sol.x is not None:
            units = np.rint(sol.x[:n]).astype(np.int64)
            method_used, status, bound, source = "milp", sol.status, sol.bound, "HiGHS dual bound"
    if status is None:
        units = _cover_search(cv.a, e, [value], p, cap, cv.total_w)
        method_used, status = "heuristic", "local optimum"
        bound, source = _lp_bound(model, time_limit_s, float(w.sum()), "all coverable demand")
    k = e + cv.a @ units.astype(float)
    objective = float(value(k).sum())
    if bound is None:
        bound = objective
    return _result(
        "mexclp",
        cv.fixed,
        np.flatnonzero(units),
        objective,
        float(w[k >= 1].sum()),
        cv.total_w,
        method_used,
        status,
        bound,
        source,
        t0,
        p,
        second_weight=float(w[k >= 2].sum()),
        units=units,
    )


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
    rows: np.ndarray, cols: np.ndarray, vals: np.ndarray, h: np.ndarray, fixed: np.ndarray, p: int, far: float
) -> np.ndarray:
    """Greedy addition then best-improvement vertex substitution (Teitz & Bart 1968) for the p-median."""
    n_rows, n_sites = h.size, fixed.size
    is_open = fixed.copy()
    scale = float(h.sum()) * far
    tol = 1e-12 * max(scale, 1.0)
    hr = h[rows]
    for _ in range(p):
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
) -> float:
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
    best, mu, stall = -np.inf, 2.0, 0
    free = np.flatnonzero(~fixed)
    for _ in range(n_iter):
        red = np.minimum(cost - lam[rows], 0.0)
        rho = np.bincount(cols, weights=red, minlength=n_sites)
        is_open = fixed.copy()
        if p:
            is_open[free[np.argsort(rho[free], kind="stable")[:p]]] = True
        value = float(lam.sum() + rho[is_open].sum())
        if penalty is not None:
            value += float(np.minimum(penalty - lam, 0.0).sum())
        if best == -np.inf or value > best + 1e-12 * max(abs(best), 1.0):
            best, stall = value, 0
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
    return best


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
    all_r, all_c, all_v, (n_dem, n_sites) = _travel_pairs(travel_s)
    rows, cols, vals = all_r, all_c, all_v
    h_all = _check_weights(weights, n_dem)
    fx = _check_fixed(fixed, n_sites)
    free = np.flatnonzero(~fx)
    p = _check_p(p, free.size)
    if unreached_penalty_s is not None and not (
        isinstance(unreached_penalty_s, int | float) and 0 < unreached_penalty_s < math.inf
    ):
        raise ModelError(f"unreached_penalty_s: {unreached_penalty_s!r} is not a positive number of seconds")
    t0 = time.perf_counter()
    total_w = float(h_all.sum())
    use = h_all[rows] > 0
    rows, cols, vals = rows[use], cols[use], vals[use]
    if unreached_penalty_s is not None:
        keep = vals < unreached_penalty_s  # never better than staying unassigned
        rows, cols, vals = rows[keep], cols[keep], vals[keep]
    demand_rows = np.unique(rows)
    if demand_rows.size == 0:
        raise ModelError("travel_s: no site reaches any weighted demand point; widen the travel-time search")
    # renumber the model's rows
    rnum = np.full(n_dem, -1, dtype=np.int64)
    rnum[demand_rows] = np.arange(demand_rows.size)
    r_, h = rnum[rows], h_all[demand_rows]
    m = demand_rows.size
    far = unreached_penalty_s if unreached_penalty_s is not None else 1e3 * (float(vals.max()) + 1.0)
    _, dfix, _ = _nearest_two(r_, cols, vals, fx, m, math.inf)
    if fx.any():  # keep pairs no slower than the nearest fixed site (ties: the fixed site itself stays)
        fixed_best, _, _ = _nearest_two(r_, cols, vals, fx, m, math.inf)
        keep = (vals < dfix[r_]) | (cols == fixed_best[r_])
    else:
        keep = np.ones(r_.size, dtype=bool)
    mr, mc, mv = r_[keep], cols[keep], vals[keep]
    npair = mr.size
    link_pairs = np.flatnonzero(~fx[mc])
    xcol = np.full(n_sites, -1, dtype=np.int64)
    xcol[free] = np.arange(free.size)
    nf = free.size
    penal = unreached_penalty_s is not None
    nu = m if penal else 0
    nvar = nf + npair + nu
    assign = sp.csr_array(
        (np.ones(npair + nu), (np.concatenate([mr, np.arange(nu)]), nf + np.arange(npair + nu))), shape=(m, nvar)
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
    c = np.concatenate([np.zeros(nf), h[mr] * mv, h * far if penal else np.zeros(0)])
    model = _Milp(
        c=c,
        integrality=np.concatenate([np.ones(nf), np.zeros(npair + nu)]),
        lb=np.zeros(nvar),
        ub=np.ones(nvar),
        constraints=[
            LinearConstraint(assign, 1.0, 1.0),
            LinearConstraint(link, -np.inf, 0.0),
            LinearConstraint(card, p, p),
        ],
        maximise=False,
    )
    wsum = float(h.sum())
    status = None
    if _use_milp(method, npair, MEDIAN_MILP_PAIR_LIMIT):
        sol = _solve(model, time_limit_s, rel_gap)
        if sol.status == "infeasible":
            raise ModelError(
                f"p: {p} new sites (with the fixed ones) cannot reach every demand point in travel_s; "
                "raise p, widen the travel-time search or pass unreached_penalty_s"
            )
        if sol.x is not None:
            new = free[np.flatnonzero(np.rint(sol.x[:nf]) > 0.5)]
            method_used, status = "milp", sol.status
            bound, source = sol.bound / wsum, "HiGHS dual bound"
    if status is None:
        new = _median_search(mr, mc, mv, h, fx, p, far)
        method_used, status = "heuristic", "local optimum"
        is_open = fx.copy()
        is_open[new] = True
        b_h, d_h, _ = _nearest_two(r_, cols, vals, is_open, m, math.inf)
        upper = float(h @ np.where(b_h >= 0, d_h, far))
        nearest = np.full(m, math.inf)
        np.minimum.at(nearest, mr, mv)
        cheap = float(h @ np.minimum(nearest, far))
        lagr = _median_lagrangian(mr, mc, h[mr] * mv, h * far if penal else None, fx, p, upper)
        bound, source = (lagr, "Lagrangian relaxation") if lagr > cheap else (cheap, "nearest site for every point")
        bound = min(bound, upper) / wsum
    is_open = fx.copy()
    is_open[new] = True
    best, d1, _ = _nearest_two(r_, cols, vals, is_open, m, math.inf)
    if not penal and (best < 0).any():
        raise ModelError(
            f"p: {p} new sites (with the fixed ones) leave {int((best < 0).sum())} reachable demand points "
            "unreached; raise p, widen the travel-time search or pass unreached_penalty_s"
        )
    objective = float(h @ np.where(best >= 0, d1, far)) / wsum
    # every point (zero-weight ones too, for maps) gets its nearest open site
    assigned_site, assigned_s, _ = _nearest_two(all_r, all_c, all_v, is_open, n_dem, math.inf)
    covered = float(h_all[assigned_site >= 0].sum())
    return _result(
        "p-median",
        fx,
        new,
        objective,
        covered,
        total_w,
        method_used,
        status,
        bound,
        source,
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
    """Covered share against the number of new sites, ``p = 0 .. max_new``, each ``p`` solved as its own MCLP.

    The sets need not nest: the best three sites need not contain the best two. Columns: ``new_sites``,
    ``covered_weight``, ``covered_share``, ``gain_share`` (over ``p - 1``), ``sites`` (space-separated indices),
    ``method``, ``status``, ``mip_gap``.

    Source: each point is an MCLP optimum, Church & ReVelle (1974).
    """
    _check_method(method)
    _check_time(time_limit_s, rel_gap)
    cv = _prepare_cover(covers, weights, fixed)
    max_new = _check_p(max_new, cv.free.size)
    records = []
    for p in counted(range(max_new + 1), max_new + 1, "coverage curve: p", every=1):
        res = _mclp_solve(cv, p, method, time_limit_s, rel_gap)
        records.append(
            {
                "new_sites": p,
                "covered_weight": res.covered_weight,
                "covered_share": res.covered_share,
                "sites": " ".join(str(s) for s in res.sites),
                "method": res.method,
                "status": res.status,
                "mip_gap": res.mip_gap,
            }
        )
    df = pd.DataFrame.from_records(records)
    df.insert(3, "gain_share", df["covered_share"].diff().fillna(0.0))
    return df
