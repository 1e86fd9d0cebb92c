"""Mixed-integer programs on HiGHS through its own Python interface (``highspy``), with a starting solution.

``scipy.optimize.milp`` wraps the same solver but cannot take a starting solution, and rebuilds the model for
every call. Here one model is built once and kept: a siting curve changes only the bound of its site-count row
between ``p`` and hands the solver the best known answer as its incumbent, so the solver's answer is never
worse than the start and the time it has goes into closing the gap.

Source: Q. Huangfu & J. A. J. Hall (2018), "Parallelizing the dual revised simplex method", Mathematical
Programming Computation 10(1) (HiGHS); the branch-and-cut solver is HiGHS's own (from memory).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import highspy
import numpy as np
import scipy.sparse as sp

#: Share of the remaining time handed to branch and cut, which overruns its limit between clock checks.
MIP_TIME_SHARE = 0.7


@dataclass
class Milp:
    """``minimise c @ x + constant`` (reported as a maximum of ``-(c @ x) + constant`` when ``maximise``).

    Rows are ``row_lo <= a @ x <= row_hi``; ``integrality`` is 1 for integer columns.
    """

    c: np.ndarray
    integrality: np.ndarray
    lb: np.ndarray
    ub: np.ndarray
    a: sp.csr_array
    row_lo: np.ndarray
    row_hi: np.ndarray
    maximise: bool
    constant: float = 0.0
    #: Every integer answer's value (its best completion, constant included) is a whole number, as with whole
    #: demand weights: a bound can then be rounded to a whole number and a gap below 1 is optimality.
    integral: bool = False

    @property
    def nnz(self) -> int:
        return int(self.a.nnz)


def round_bound(model: Milp, bound: float) -> float:
    """``bound`` rounded towards the answers (down for a maximum) when every answer's value is a whole number."""
    if not (model.integral and math.isfinite(bound)):
        return bound
    slack = 1e-6 * max(abs(bound), 1.0)  # the solver's tolerances: a bound of 41.9999999 means 42
    return float(math.floor(bound + slack)) if model.maximise else float(math.ceil(bound - slack))


@dataclass(frozen=True)
class MilpAnswer:
    """What the solver returned, in the model's own sense (constant included)."""

    x: np.ndarray | None
    value: float
    bound: float
    proven: bool  # optimal within the requested relative gap
    status: str


class Solver:
    """One HiGHS model kept across solves (bounds, costs and the start change; the matrix does not)."""

    def __init__(self, model: Milp, *, threads: int = 1):
        self.model = model
        # the plain core object: the Python wrapper class prints a banner on stdout when it is created
        h = highspy._core._Highs()
        h.setOptionValue("output_flag", False)
        h.setOptionValue("threads", int(threads))
        lp = highspy.HighsLp()
        n = model.c.size
        a = sp.csr_array(model.a)
        lp.num_col_ = n
        lp.num_row_ = a.shape[0]
        lp.col_cost_ = np.asarray(model.c, dtype=float)
        lp.col_lower_ = np.asarray(model.lb, dtype=float)
        lp.col_upper_ = np.asarray(model.ub, dtype=float)
        lp.row_lower_ = np.asarray(model.row_lo, dtype=float)
        lp.row_upper_ = np.asarray(model.row_hi, dtype=float)
        lp.a_matrix_.format_ = highspy.MatrixFormat.kRowwise
        lp.a_matrix_.num_col_ = n
        lp.a_matrix_.num_row_ = a.shape[0]
        lp.a_matrix_.start_ = a.indptr.astype(np.int32)
        lp.a_matrix_.index_ = a.indices.astype(np.int32)
        lp.a_matrix_.value_ = a.data.astype(float)
        kinds = (highspy.HighsVarType.kContinuous, highspy.HighsVarType.kInteger)
        lp.integrality_ = [kinds[int(k)] for k in np.asarray(model.integrality) > 0]
        h.passModel(lp)
        self.h = h
        self._int_cols = np.flatnonzero(np.asarray(model.integrality) > 0).astype(np.int32)

    def set_row_bounds(self, row: int, lo: float, hi: float) -> None:
        self.h.changeRowBounds(int(row), float(lo), float(hi))

    def set_costs(self, c: np.ndarray, constant: float) -> None:
        c = np.asarray(c, dtype=float)
        self.h.changeColsCost(c.size, np.arange(c.size, dtype=np.int32), c)
        self.model.c = c
        self.model.constant = float(constant)

    def run(
        self, time_limit_s: float, rel_gap: float, start: np.ndarray | None = None, *, relax: bool = False
    ) -> MilpAnswer:
        """Solve (or its LP relaxation when ``relax``) within ``time_limit_s``, from ``start`` when given."""
        h, model = self.h, self.model
        # HiGHS counts its time limit against all the runs of one object: add the time already spent
        h.setOptionValue("time_limit", float(h.getRunTime()) + float(max(time_limit_s, 0.01)))
        h.setOptionValue("mip_rel_gap", float(rel_gap))
        # whole-number values: a gap below 1 proves the incumbent's best completion optimal
        h.setOptionValue("mip_abs_gap", 1.0 - 1e-6 if model.integral else 1e-6)
        if relax and self._int_cols.size:
            cont = np.full(self._int_cols.size, highspy.HighsVarType.kContinuous)
            h.changeColsIntegrality(self._int_cols.size, self._int_cols, cont)
        elif start is not None:
            x0 = np.asarray(start, dtype=float)
            h.setSolution(x0.size, np.arange(x0.size, dtype=np.int32), x0)
        h.run()
        st = h.getModelStatus()
        info = h.getInfo()
        if relax and self._int_cols.size:
            integ = np.full(self._int_cols.size, highspy.HighsVarType.kInteger)
            h.changeColsIntegrality(self._int_cols.size, self._int_cols, integ)
        sign = -1.0 if model.maximise else 1.0
        if st == highspy.HighsModelStatus.kInfeasible:
            return MilpAnswer(None, math.nan, math.nan, False, "infeasible")
        sol = h.getSolution()
        has_x = bool(getattr(sol, "value_valid", True)) and info.primal_solution_status >= 2
        x = np.asarray(sol.col_value, dtype=float) if has_x else None
        value = model.constant + sign * float(info.objective_function_value) if x is not None else math.nan
        proven = st == highspy.HighsModelStatus.kOptimal
        if relax:
            bound = round_bound(model, value) if proven else math.nan
            return MilpAnswer(x if proven else None, value, bound, proven, "LP relaxation" if proven else "time limit")
        dual = float(info.mip_dual_bound)
        bound = round_bound(model, model.constant + sign * dual) if math.isfinite(dual) else math.nan
        if proven and x is not None and not math.isfinite(bound):
            bound = round_bound(model, value)
        return MilpAnswer(x, value, bound, proven, "optimal" if proven else "time limit")


class CurveSolver:
    """LP relaxation first, then the MILP on what the LP leaves open, for a model solved at many ``p``.

    The LP is kept warm: between ``p`` only the site-count row changes, so the dual simplex restarts from the
    last basis (the first LP is solved by interior point). The LP value is the bound; integer columns the LP
    proves cannot be in any better answer than the start (reduced-cost fixing) are fixed before the MILP starts
    from the given solution.

    Source: reduced-cost fixing, G. L. Nemhauser & L. A. Wolsey (1988), "Integer and Combinatorial
    Optimization", Wiley, section II.5 (from memory).
    """

    def __init__(self, model: Milp):
        self.model = model
        relaxed = Milp(
            model.c,
            np.zeros_like(model.integrality),
            model.lb,
            model.ub,
            model.a,
            model.row_lo,
            model.row_hi,
            model.maximise,
            model.constant,
            model.integral,
        )
        self.lp = Solver(relaxed)
        self.lp.h.setOptionValue("solver", "ipm")
        self.mip = Solver(model)
        self.int_cols = np.flatnonzero(np.asarray(model.integrality) > 0)
        self.fixed_cols = 0
        self.last_source = "HiGHS dual bound"
        #: The last LP relaxation solved: its value and reduced costs (``None`` if it was not solved).
        self.last_lp: tuple[float, np.ndarray] | None = None

    def set_row_bounds(self, row: int, lo: float, hi: float) -> None:
        self.lp.set_row_bounds(row, lo, hi)
        self.mip.set_row_bounds(row, lo, hi)

    def set_costs(self, c: np.ndarray, constant: float) -> None:
        self.lp.set_costs(c, constant)
        self.mip.set_costs(c, constant)

    def lp_bound(self, time_limit_s: float) -> tuple[float, np.ndarray | None]:
        """The LP relaxation's value (a bound on the model) and its reduced costs, or ``nan`` if not solved."""
        ans = self.lp.run(time_limit_s, 0.0)
        self.lp.h.setOptionValue("solver", "simplex")  # later solves restart from this basis
        if not ans.proven:
            self.lp.h.setOptionValue("solver", "ipm")
            self.last_lp = None
            return math.nan, None
        rc = np.asarray(self.lp.h.getSolution().col_dual, dtype=float)
        self.last_lp = (ans.value, rc)
        return round_bound(self.model, ans.value), rc

    def fixings(self, target: float, start: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Column bounds that every answer at least as good as ``target`` meets, from the last LP's reduced costs.

        An integer column at a bound in the LP whose reduced cost says that moving it off that bound takes the LP
        value past ``target`` is fixed there (only where ``start`` has it there too, so ``start`` stays feasible).
        Without a solved LP the model's own bounds come back.
        """
        model = self.model
        lo = np.asarray(model.lb, dtype=float).copy()
        hi = np.asarray(model.ub, dtype=float).copy()
        self.fixed_cols = 0
        if self.last_lp is None:
            return lo, hi
        lp_value, rc = self.last_lp
        sign = -1.0 if model.maximise else 1.0
        # in the minimising form: a column at 0 costs at least lp + rc to raise, one at 1 lp - rc to lower
        z_lp, z_inc = sign * (lp_value - model.constant), sign * (target - model.constant)
        margin = 1e-7 * max(abs(target), 1.0)
        ic = self.int_cols
        up = z_lp + np.maximum(rc[ic], 0.0) * (hi[ic] - lo[ic]) > z_inc + margin
        down = z_lp - np.minimum(rc[ic], 0.0) * (hi[ic] - lo[ic]) > z_inc + margin
        at_lo = np.abs(np.asarray(start)[ic] - lo[ic]) < 0.5
        at_hi = np.abs(np.asarray(start)[ic] - hi[ic]) < 0.5
        fix_lo = up & (rc[ic] > 0) & at_lo
        fix_hi = down & (rc[ic] < 0) & at_hi
        hi[ic[fix_lo]] = lo[ic[fix_lo]]
        lo[ic[fix_hi]] = hi[ic[fix_hi]]
        self.fixed_cols = int(fix_lo.sum() + fix_hi.sum())
        return lo, hi

    def solve(self, start: np.ndarray, start_value: float, time_limit_s: float, rel_gap: float) -> MilpAnswer:
        """Bound by the LP, fix what it rules out, then branch and cut from ``start`` (its model value given)."""
        model = self.model
        t_end = time.perf_counter() + time_limit_s
        lp_value, rc = self.lp_bound(time_limit_s)
        sign = -1.0 if model.maximise else 1.0
        scale = max(abs(start_value), 1.0)
        if math.isfinite(lp_value) and sign * (start_value - lp_value) <= 1e-9 * scale:
            self.last_source = "LP relaxation"
            return MilpAnswer(None, start_value, lp_value, True, "LP bound reached")
        self.last_source = "LP relaxation and HiGHS dual bound" if math.isfinite(lp_value) else "HiGHS dual bound"
        lo, hi = self.fixings(start_value, start)
        self.mip.h.changeColsBounds(lo.size, np.arange(lo.size, dtype=np.int32), lo, hi)
        # branch and cut checks its clock only now and then (measured: up to 1.4 x the limit): keep a margin
        ans = self.mip.run(max(MIP_TIME_SHARE * (t_end - time.perf_counter()), 0.05), rel_gap, start)
        bound = ans.bound
        if math.isfinite(lp_value):
            bound = lp_value if not math.isfinite(bound) else (min if model.maximise else max)(bound, lp_value)
        if ans.proven and math.isfinite(ans.value):
            bound = (max if model.maximise else min)(ans.value, start_value) if rc is not None else ans.bound
        return MilpAnswer(ans.x, ans.value, bound, ans.proven, ans.status)
