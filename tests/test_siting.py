"""Checks of the siting models against independent solvers and exhaustive enumeration.

Independent references used here:

* PuLP with its bundled CBC solver (``pulp.PULP_CBC_CMD(msg=False)``), each model formulated afresh in this file
  from the published paper's formulation, not from coverkit's code;
* exhaustive enumeration of site sets with ``itertools.combinations`` (unit placements with
  ``itertools.combinations_with_replacement`` for MEXCLP), scoring each set with plain numpy;
* Daskin's expected-coverage formula evaluated by hand.

Instances are random but seeded (``numpy.random.default_rng(seed)``): demand points and sites in a square,
a site covering a point within a radius (a stand-in for a drive-time standard).
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pulp
import pytest
import scipy.sparse as sp

from coverkit import siting
from coverkit.errors import CoverkitError, ModelError

# PuLP 3.x flags its v4 API changes; the bundled CBC is what we use as the independent solver.
pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning:pulp")
with warnings.catch_warnings():
    warnings.simplefilter("ignore", DeprecationWarning)
    CBC = pulp.PULP_CBC_CMD(msg=False)


def plane(seed: int, n_demand: int, n_sites: int, radius: float, n_fixed: int = 0):
    """Seeded geometric instance: covers (sparse bool), integer weights, fixed mask and distances."""
    rng = np.random.default_rng(seed)
    dem = rng.random((n_demand, 2))
    sites = rng.random((n_sites, 2))
    dist = np.linalg.norm(dem[:, None, :] - sites[None, :, :], axis=2)
    covers = sp.csr_array(dist <= radius)
    weights = rng.integers(0, 40, n_demand).astype(float)  # some zero-weight points on purpose
    fixed = np.zeros(n_sites, dtype=bool)
    fixed[rng.choice(n_sites, n_fixed, replace=False)] = True
    return covers, weights, fixed, dist


def coverage_counts(covers, open_mask):
    return covers.toarray().astype(int) @ open_mask.astype(int)


def enum_sets(fixed, p):
    free = np.flatnonzero(~fixed)
    for combo in itertools.combinations(free, p):
        is_open = fixed.copy()
        is_open[list(combo)] = True
        yield combo, is_open


# --- PuLP / CBC formulations, written from the papers ---------------------------------------------------------


def cbc_mclp(covers, w, fixed, p):
    """Church & ReVelle (1974) MCLP in PuLP."""
    a = covers.toarray()
    n_dem, n_sites = a.shape
    prob = pulp.LpProblem("mclp", pulp.LpMaximize)
    x = [pulp.LpVariable(f"x{j}", cat="Binary") for j in range(n_sites)]
    y = [pulp.LpVariable(f"y{i}", cat="Binary") for i in range(n_dem)]
    prob += pulp.lpSum(w[i] * y[i] for i in range(n_dem))
    for i in range(n_dem):
        prob += y[i] <= pulp.lpSum(x[j] for j in range(n_sites) if a[i, j])
    for j in np.flatnonzero(fixed):
        prob += x[j] == 1
    prob += pulp.lpSum(x[j] for j in np.flatnonzero(~fixed)) == p
    prob.solve(CBC)
    assert pulp.LpStatus[prob.status] == "Optimal"
    return pulp.value(prob.objective)


def cbc_lscp(covers, w, fixed, target_share=None):
    """Toregas et al. (1971) LSCP in PuLP; the target form with binary coverage indicators."""
    a = covers.toarray()
    n_dem, n_sites = a.shape
    prob = pulp.LpProblem("lscp", pulp.LpMinimize)
    x = [pulp.LpVariable(f"x{j}", cat="Binary") for j in range(n_sites)]
    prob += pulp.lpSum(x[j] for j in np.flatnonzero(~fixed))
    for j in np.flatnonzero(fixed):
        prob += x[j] == 1
    if target_share is None:
        for i in range(n_dem):
            if w[i] > 0 and a[i].any():
                prob += pulp.lpSum(x[j] for j in range(n_sites) if a[i, j]) >= 1
    else:
        y = [pulp.LpVariable(f"y{i}", cat="Binary") for i in range(n_dem)]
        for i in range(n_dem):
            prob += y[i] <= pulp.lpSum(x[j] for j in range(n_sites) if a[i, j])
        prob += pulp.lpSum(w[i] * y[i] for i in range(n_dem)) >= target_share * w.sum() - 1e-9
    prob.solve(CBC)
    assert pulp.LpStatus[prob.status] == "Optimal"
    return round(pulp.value(prob.objective))


def cbc_backup(covers, w, fixed, p, theta=None):
    """Hogan & ReVelle (1986) backup coverage in PuLP: weighted (BACOP2) or lexicographic in two solves."""
    a = covers.toarray()
    n_dem, n_sites = a.shape

    def solve(objective: str, single_at_least: float | None):
        prob = pulp.LpProblem("backup", pulp.LpMaximize)
        x = [pulp.LpVariable(f"x{j}", cat="Binary") for j in range(n_sites)]
        y = [pulp.LpVariable(f"y{i}", cat="Binary") for i in range(n_dem)]
        u = [pulp.LpVariable(f"u{i}", cat="Binary") for i in range(n_dem)]
        single = pulp.lpSum(w[i] * y[i] for i in range(n_dem))
        double = pulp.lpSum(w[i] * u[i] for i in range(n_dem))
        if objective == "weighted":
            prob += theta * single + (1 - theta) * double
        else:
            prob += single if objective == "single" else double
        for i in range(n_dem):
            prob += y[i] + u[i] <= pulp.lpSum(x[j] for j in range(n_sites) if a[i, j])
            prob += u[i] <= y[i]
        for j in np.flatnonzero(fixed):
            prob += x[j] == 1
        prob += pulp.lpSum(x[j] for j in np.flatnonzero(~fixed)) == p
        if single_at_least is not None:
            prob += single >= single_at_least - 1e-6
        prob.solve(CBC)
        assert pulp.LpStatus[prob.status] == "Optimal"
        return pulp.value(prob.objective)

    if theta is not None:
        return solve("weighted", None)
    z1 = solve("single", None)
    return z1, solve("double", z1)


def cbc_p_median(travel, w, fixed, p):
    """Hakimi (1964) p-median, ReVelle & Swain integer form, over all finite pairs, in PuLP."""
    n_dem, n_sites = travel.shape
    prob = pulp.LpProblem("pmedian", pulp.LpMinimize)
    x = [pulp.LpVariable(f"x{j}", cat="Binary") for j in range(n_sites)]
    pairs = [(i, j) for i in range(n_dem) for j in range(n_sites) if np.isfinite(travel[i, j]) and w[i] > 0]
    z = {ij: pulp.LpVariable(f"z{ij[0]}_{ij[1]}", lowBound=0) for ij in pairs}
    prob += pulp.lpSum(w[i] * travel[i, j] * z[i, j] for i, j in pairs)
    for i in {i for i, _ in pairs}:
        prob += pulp.lpSum(z[i, j] for j in range(n_sites) if (i, j) in z) == 1
    for i, j in pairs:
        prob += z[i, j] <= x[j]
    for j in np.flatnonzero(fixed):
        prob += x[j] == 1
    prob += pulp.lpSum(x[j] for j in np.flatnonzero(~fixed)) == p
    prob.solve(CBC)
    assert pulp.LpStatus[prob.status] == "Optimal"
    return pulp.value(prob.objective) / w[[i for i in range(n_dem) if np.isfinite(travel[i]).any()]].sum()


# --- MCLP -----------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("seed", "p", "n_fixed"), [(1, 3, 0), (2, 2, 2), (3, 4, 1)])
def test_mclp_optimum_equals_cbc_and_enumeration(seed, p, n_fixed):
    """MCLP (Church & ReVelle 1974): HiGHS optimum = CBC optimum = best of all C(n, p) sets."""
    covers, w, fixed, _ = plane(seed, 60, 11, 0.25, n_fixed)
    res = siting.mclp(covers, w, p, fixed, method="milp")
    best = max(float(w[coverage_counts(covers, m) >= 1].sum()) for _, m in enum_sets(fixed, p))
    assert res.objective == pytest.approx(best, rel=1e-9)
    assert res.objective == pytest.approx(cbc_mclp(covers, w, fixed, p), rel=1e-9)
    # the reported coverage is that of the reported sites, checked by hand
    is_open = np.zeros(covers.shape[1], dtype=bool)
    is_open[res.open_sites] = True
    assert res.covered_weight == pytest.approx(w[coverage_counts(covers, is_open) >= 1].sum())
    assert res.sites.size == p and not fixed[res.sites].any() and fixed[res.open_sites].sum() == n_fixed
    assert res.status.startswith("proven optimal") and res.mip_gap <= 1e-6
    assert res.bound >= res.objective - 1e-6


def test_mclp_heuristic_equals_enumeration_on_small_instances():
    """Greedy + vertex substitution (Teitz & Bart 1968) reaches the enumerated optimum on small cases, or at least
    stays below the LP bound, which must itself be at least the optimum (LP relaxation; Church & ReVelle 1974)."""
    hits = 0
    for seed in range(5):
        covers, w, fixed, _ = plane(10 + seed, 50, 10, 0.25, 1)
        res = siting.mclp(covers, w, 3, fixed, method="heuristic")
        best = max(float(w[coverage_counts(covers, m) >= 1].sum()) for _, m in enum_sets(fixed, 3))
        assert res.objective <= best + 1e-9
        assert res.bound >= best - 1e-6
        hits += res.objective == pytest.approx(best)
    assert hits >= 4  # a local search may miss once; on these it should not miss often


# --- LSCP -----------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("seed", "n_fixed"), [(4, 0), (5, 2)])
def test_lscp_full_cover_minimal_by_enumeration_and_cbc(seed, n_fixed):
    """LSCP (Toregas et al. 1971): the count equals CBC's, the sets cover every coverable positive-weight point,
    and no set with one site fewer does (enumeration)."""
    covers, w, fixed, _ = plane(seed, 50, 12, 0.3, n_fixed)
    for method in ("milp", "heuristic"):
        res = siting.lscp(covers, w, fixed, method=method)
        need = (w > 0) & (covers.toarray().any(axis=1))
        is_open = np.zeros(covers.shape[1], dtype=bool)
        is_open[res.open_sites] = True
        assert (coverage_counts(covers, is_open)[need] >= 1).all()
        if method == "milp":
            assert res.objective == cbc_lscp(covers, w, fixed)
            k = int(res.objective)
            assert k >= 1
            assert not any((coverage_counts(covers, m)[need] >= 1).all() for _, m in enum_sets(fixed, k - 1))
        else:
            exact = siting.lscp(covers, w, fixed, method="milp").objective
            assert exact <= res.objective <= exact + 1
            assert res.bound <= exact


@pytest.mark.parametrize("target", [0.6, 0.8])
def test_lscp_target_share_minimal_by_enumeration_and_cbc(target):
    """LSCP target form (Toregas et al. 1971 with Church & ReVelle's covering share): fewest new sites reaching
    the target share; CBC's count agrees; no smaller set reaches the target (enumeration)."""
    covers, w, fixed, _ = plane(6, 60, 12, 0.22, 1)
    res = siting.lscp(covers, w, fixed, target_share=target, method="milp")
    k = int(res.objective)
    assert k == cbc_lscp(covers, w, fixed, target)
    assert res.covered_share >= target - 1e-12
    shares = lambda size: [  # noqa: E731
        w[coverage_counts(covers, m) >= 1].sum() / w.sum() for _, m in enum_sets(fixed, size)
    ]
    assert max(shares(k - 1)) < target
    # among the smallest sets the one covering most weight is returned
    assert res.covered_share == pytest.approx(max(shares(k)))


def test_lscp_target_above_reach_is_refused():
    covers, w, fixed, _ = plane(6, 60, 12, 0.05, 0)
    with pytest.raises(ModelError, match="target_share"):
        siting.lscp(covers, w, fixed, target_share=1.0)


# --- backup coverage ------------------------------------------------------------------------------------------


def test_backup_lexicographic_equals_enumeration_and_cbc():
    """Backup coverage (Hogan & ReVelle 1986), lexicographic: most single cover, then most double cover; the
    (single, double) pair equals the lexicographic maximum over all sets and CBC's two-stage solve."""
    covers, w, fixed, _ = plane(7, 50, 10, 0.3, 1)
    p = 3
    res = siting.backup_coverage(covers, w, p, fixed, method="milp")
    pairs = []
    for _, m in enum_sets(fixed, p):
        k = coverage_counts(covers, m)
        pairs.append((float(w[k >= 1].sum()), float(w[k >= 2].sum())))
    single, double = max(pairs)
    assert (res.covered_weight, res.objective) == (pytest.approx(single), pytest.approx(double))
    z1, z2 = cbc_backup(covers, w, fixed, p)
    assert (res.covered_weight, res.second_weight) == (pytest.approx(z1), pytest.approx(z2))
    heur = siting.backup_coverage(covers, w, p, fixed, method="heuristic")
    # the heuristic's figures are those of its own sites (evaluated here), and it is a local optimum of the
    # interchange it claims: no one-for-one swap of a new site improves (single, double) lexicographically
    # (enumeration of every swap; Hogan & ReVelle 1986 for the objective)
    is_open = fixed.copy()
    is_open[heur.sites] = True
    k = coverage_counts(covers, is_open)
    assert heur.covered_weight == pytest.approx(float(w[k >= 1].sum()))
    assert heur.second_weight == pytest.approx(float(w[k >= 2].sum()))
    here = (float(w[k >= 1].sum()), float(w[k >= 2].sum()))
    for out in heur.sites:
        for into in np.flatnonzero(~is_open):
            swap = is_open.copy()
            swap[out], swap[into] = False, True
            ks = coverage_counts(covers, swap)
            there = (float(w[ks >= 1].sum()), float(w[ks >= 2].sum()))
            assert not (there[0] > here[0] + 1e-9 or (there[0] >= here[0] - 1e-9 and there[1] > here[1] + 1e-9))


@pytest.mark.parametrize("theta", [0.3, 0.7])
def test_backup_weighted_equals_enumeration_and_cbc(theta):
    """Backup coverage, Hogan & ReVelle's weighted form theta*single + (1-theta)*double: enumeration and CBC.
    theta = 0.3 < 1/2 also checks that a half-covered pair y = u = 1/2 cannot be counted (u binary)."""
    covers, w, fixed, _ = plane(8, 50, 10, 0.3, 0)
    p = 3
    res = siting.backup_coverage(covers, w, p, fixed, theta=theta, method="milp")
    best = max(
        theta * w[(k := coverage_counts(covers, m)) >= 1].sum() + (1 - theta) * w[k >= 2].sum()
        for _, m in enum_sets(fixed, p)
    )
    assert res.objective == pytest.approx(best, rel=1e-9)
    assert res.objective == pytest.approx(cbc_backup(covers, w, fixed, p, theta), rel=1e-7)


# --- MEXCLP ---------------------------------------------------------------------------------------------------


def daskin_expected(covers, w, units, q):
    """Daskin (1983): sum_i h_i sum_{k=1..n_i} (1-q) q^(k-1), n_i the units in reach of i, term by term."""
    n = covers.toarray().astype(int) @ units
    total = 0.0
    for i in range(len(w)):
        total += w[i] * sum((1 - q) * q ** (k - 1) for k in range(1, n[i] + 1))
    return total


@pytest.mark.parametrize(("q", "cap"), [(0.3, None), (0.6, 2), (0.0, None)])
def test_mexclp_objective_is_daskin_formula_and_optimum_by_enumeration(q, cap):
    """MEXCLP (Daskin 1983): the objective equals Daskin's sum evaluated by hand for the returned placement, and
    is the best over every placement of p units (several per site allowed, up to the capacity)."""
    covers, w, fixed, _ = plane(9, 40, 7, 0.3, 1)
    p = 4
    n = covers.shape[1]
    capacity = None if cap is None else np.full(n, cap)
    res = siting.mexclp(covers, w, p, q, fixed, capacity=capacity, method="milp")
    existing = fixed.astype(int)
    assert res.units.sum() == p and (cap is None or res.units.max() <= cap)
    assert res.objective == pytest.approx(daskin_expected(covers, w, existing + res.units, q), rel=1e-9)
    best = -1.0
    for combo in itertools.combinations_with_replacement(range(n), p):
        units = np.bincount(combo, minlength=n)
        if cap is not None and units.max() > cap:
            continue
        best = max(best, daskin_expected(covers, w, existing + units, q))
    assert res.objective == pytest.approx(best, rel=1e-9)
    heur = siting.mexclp(covers, w, p, q, fixed, capacity=capacity, method="heuristic")
    assert heur.objective == pytest.approx(daskin_expected(covers, w, existing + heur.units, q), rel=1e-9)
    assert heur.objective <= best + 1e-9 and heur.bound >= best - 1e-6


def test_mexclp_stacks_units_when_one_site_covers_everything():
    """MEXCLP places several units at one site when that is best (Daskin 1983): one site reaching all demand and
    others reaching a little; with capacity 1 the units must spread."""
    covers = sp.csr_array(np.array([[1, 1, 0], [1, 0, 1], [1, 0, 0], [1, 0, 0]], dtype=bool))
    w = np.array([1.0, 1.0, 10.0, 10.0])
    res = siting.mexclp(covers, w, 2, 0.5)
    assert res.units.tolist() == [2, 0, 0]
    assert res.objective == pytest.approx(22 * (1 - 0.5**2))
    spread = siting.mexclp(covers, w, 2, 0.5, capacity=np.ones(3, dtype=int))
    assert spread.units[0] == 1 and spread.units.sum() == 2


# --- p-median -------------------------------------------------------------------------------------------------


def median_cost(travel, w, is_open):
    reach = np.isfinite(travel).any(axis=1) & (w > 0)
    t = np.where(is_open[None, :], travel, np.inf).min(axis=1)
    return float((w[reach] * t[reach]).sum() / w[reach].sum())


@pytest.mark.parametrize(("seed", "p", "n_fixed"), [(11, 2, 0), (12, 3, 1)])
def test_p_median_equals_cbc_and_enumeration(seed, p, n_fixed):
    """p-median (Hakimi 1964): weighted mean travel time equals CBC's optimum and the enumerated best; each point
    goes to its nearest open site."""
    _, w, fixed, dist = plane(seed, 40, 9, 0.3, n_fixed)
    travel = dist * 3600.0  # seconds
    travel[dist > 0.7] = np.inf  # unreachable pairs
    res = siting.p_median(travel, w, p, fixed, method="milp")
    feasible = [median_cost(travel, w, m) for _, m in enum_sets(fixed, p)]
    assert res.objective == pytest.approx(min(feasible), rel=1e-9)
    assert res.objective == pytest.approx(cbc_p_median(travel, w, fixed, p), rel=1e-7)
    is_open = np.zeros(travel.shape[1], dtype=bool)
    is_open[res.open_sites] = True
    t = np.where(is_open[None, :], travel, np.inf)
    assert np.allclose(res.assigned_s, t.min(axis=1))
    heur = siting.p_median(travel, w, p, fixed, method="heuristic")
    assert min(feasible) - 1e-9 <= heur.objective and heur.bound <= min(feasible) + 1e-6


def test_p_median_sparse_input_keeps_stored_zero_times():
    """A stored 0 s in a sparse travel matrix is a reachable pair (a point at the site); absent is unreachable.
    Values worked by hand: site 1 alone costs (1000 + 50 + 2*0) / 4 = 262.5 s with a 1000 s penalty, site 0 alone
    (0 + 100 + 2*1000) / 4 = 525 s; both open, (0 + 50 + 0) / 4 = 12.5 s."""
    travel = sp.csr_array(
        (np.array([0.0, 100.0, 50.0, 0.0]), (np.array([0, 1, 1, 2]), np.array([0, 0, 1, 1]))), shape=(3, 2)
    )
    w = np.array([1.0, 1.0, 2.0])
    with pytest.raises(ModelError, match="unreached_penalty_s"):
        siting.p_median(travel, w, 1)  # either single site leaves a reachable point unreached
    one = siting.p_median(travel, w, 1, unreached_penalty_s=1000.0)
    assert one.sites.tolist() == [1] and one.objective == pytest.approx(262.5)
    assert one.assigned_site.tolist() == [-1, 1, 1] and one.covered_share == pytest.approx(0.75)
    two = siting.p_median(travel, w, 2)
    assert two.objective == pytest.approx(12.5) and two.assigned_s.tolist() == [0.0, 50.0, 0.0]


# --- heuristic against the exact optimum on a medium instance ---------------------------------------------------

#: Stated gap of the heuristic against the exact optimum on the medium instance below (our own acceptance level,
#: common practice for interchange heuristics on covering models, no source).
HEURISTIC_GAP = 0.02


def test_heuristic_within_stated_gap_of_exact_on_medium_instance(capsys):
    """On a seeded 1,500-point, 60-candidate instance the heuristic's MCLP coverage is within 2 % of HiGHS's
    optimum and its p-median mean time within 2 %; both below/above the exact value and the LP bound brackets
    it (MCLP: Church & ReVelle 1974; p-median: Hakimi 1964; interchange: Teitz & Bart 1968)."""
    covers, w, fixed, dist = plane(21, 1500, 60, 0.12, 3)
    exact = siting.mclp(covers, w, 8, fixed, method="milp")
    heur = siting.mclp(covers, w, 8, fixed, method="heuristic")
    gap_mclp = (exact.objective - heur.objective) / exact.objective
    assert exact.status.startswith("proven optimal")
    assert -1e-12 <= gap_mclp <= HEURISTIC_GAP
    assert heur.bound >= exact.objective - 1e-6 and heur.bound_source == "LP relaxation"
    travel = np.where(dist <= 0.45, dist * 3600.0, np.inf)
    pm_exact = siting.p_median(travel[:400], w[:400], 5, fixed, method="milp")
    pm_heur = siting.p_median(travel[:400], w[:400], 5, fixed, method="heuristic")
    gap_pm = (pm_heur.objective - pm_exact.objective) / pm_exact.objective
    assert -1e-12 <= gap_pm <= HEURISTIC_GAP
    assert pm_heur.bound <= pm_exact.objective + 1e-6 and pm_heur.bound_source == "Lagrangian relaxation"
    with capsys.disabled():
        print(
            f"\nheuristic vs exact: MCLP gap {gap_mclp:.4%} (gap to its LP bound {heur.mip_gap:.4%}), "
            f"p-median gap {gap_pm:.4%} (gap to its Lagrangian bound {pm_heur.mip_gap:.4%})"
        )


# --- ranking and the coverage curve -----------------------------------------------------------------------------


def test_rank_candidates_matches_one_site_enumeration():
    """Single-candidate ranking: each candidate's added weight equals the enumerated coverage gain of adding it
    alone to the fixed sites (plain numpy); the top one is the MCLP p = 1 optimum (Church & ReVelle 1974)."""
    covers, w, fixed, _ = plane(13, 80, 12, 0.25, 2)
    table = siting.rank_candidates(covers, w, fixed)
    base = w[coverage_counts(covers, fixed) >= 1].sum()
    gains = {combo[0]: w[coverage_counts(covers, m) >= 1].sum() - base for combo, m in enum_sets(fixed, 1)}
    assert sorted(table["site"]) == sorted(gains)
    for row in table.itertuples():
        assert row.added_weight == pytest.approx(gains[row.site])
        assert row.share_with_site == pytest.approx((base + gains[row.site]) / w.sum())
    assert list(table["added_weight"]) == sorted(table["added_weight"], reverse=True)
    assert table["share_with_site"].iloc[0] == pytest.approx(siting.mclp(covers, w, 1, fixed).covered_share)


def test_rank_ties_break_by_lowest_index():
    """Deterministic ties (common practice, no source): identical candidates rank by site index."""
    covers = sp.csr_array(np.ones((5, 4), dtype=bool))
    table = siting.rank_candidates(covers, np.ones(5))
    assert table["site"].tolist() == [0, 1, 2, 3]
    heur = siting.mclp(covers, np.ones(5), 2, method="heuristic")
    assert heur.sites.tolist() == [0, 1]


def test_coverage_curve_equals_enumeration_per_p():
    """Coverage curve: each point is the enumerated MCLP optimum for that p (Church & ReVelle 1974), starting
    from the fixed sites' share at p = 0, and never falls."""
    covers, w, fixed, _ = plane(14, 60, 10, 0.22, 1)
    curve = siting.coverage_curve(covers, w, 4, fixed)
    assert curve["new_sites"].tolist() == [0, 1, 2, 3, 4]
    for row in curve.itertuples():
        best = max(w[coverage_counts(covers, m) >= 1].sum() for _, m in enum_sets(fixed, row.new_sites))
        assert row.covered_weight == pytest.approx(best)
        assert len(row.sites.split()) == row.new_sites
    assert (np.diff(curve["covered_share"]) >= -1e-12).all()
    assert curve["gain_share"].iloc[1:].tolist() == pytest.approx(np.diff(curve["covered_share"]).tolist())


def test_same_inputs_same_outputs_and_duplicate_rows_merge_exactly():
    """Determinism (common practice, no source) and exact row merging: duplicating every demand point with half
    its weight changes no optimum (checked against the unmerged enumeration above via the MCLP value)."""
    covers, w, fixed, _ = plane(15, 50, 10, 0.25, 1)
    a = siting.mclp(covers, w, 3, fixed)
    b = siting.mclp(covers, w, 3, fixed)
    assert a.sites.tolist() == b.sites.tolist() and a.objective == b.objective
    doubled = sp.csr_array(sp.vstack([covers, covers]))
    c = siting.mclp(doubled, np.concatenate([w / 2, w / 2]), 3, fixed)
    assert c.objective == pytest.approx(a.objective)
    h1 = siting.mclp(covers, w, 3, fixed, method="heuristic")
    h2 = siting.mclp(covers, w, 3, fixed, method="heuristic")
    assert h1.sites.tolist() == h2.sites.tolist()


# --- bad input ----------------------------------------------------------------------------------------------------


def _one_line(err: CoverkitError) -> str:
    text = str(err)
    assert "\n" not in text
    return text


@pytest.mark.parametrize(
    ("call", "word"),
    [
        (lambda c, w, f: siting.mclp(c, w, 9, f), "p"),
        (lambda c, w, f: siting.backup_coverage(c, w, 9, f), "p"),
        (lambda c, w, f: siting.mclp(c, w, -1, f), "p"),
        (lambda c, w, f: siting.mclp(sp.csr_array((0, 4), dtype=bool), np.zeros(0), 1), "demand"),
        (lambda c, w, f: siting.mclp(c, w[:-1], 1, f), "weights"),
        (lambda c, w, f: siting.mclp(c, -w, 1, f), "weights"),
        (lambda c, w, f: siting.mclp(c, w * np.nan, 1, f), "weights"),
        (lambda c, w, f: siting.mclp(c, w, 1, f[:-1]), "fixed"),
        (lambda c, w, f: siting.mexclp(c, w, 2, 1.0, f), "q"),
        (lambda c, w, f: siting.mexclp(c, w, 2, -0.1, f), "q"),
        (lambda c, w, f: siting.mexclp(c, w, 9, 0.2, f, capacity=np.ones(6, dtype=int)), "p"),
        (lambda c, w, f: siting.backup_coverage(c, w, 1, f, theta=1.5), "theta"),
        (lambda c, w, f: siting.lscp(c, w, f, target_share=1.5), "target_share"),
        (lambda c, w, f: siting.mclp(c, w, 1, f, method="fast"), "method"),
        (lambda c, w, f: siting.mclp(c, w, 1, f, time_limit_s=0), "time_limit_s"),
        (lambda c, w, f: siting.p_median(np.full((3, 6), np.inf), np.ones(3), 1), "travel_s"),
        (lambda c, w, f: siting.p_median(-np.ones((3, 6)), np.ones(3), 1), "travel_s"),
        (lambda c, w, f: siting.p_median(np.ones((3, 6)), np.ones(4), 1), "weights"),
        (lambda c, w, f: siting.coverage_curve(c, w, 9, f), "p"),
    ],
)
def test_bad_input_is_one_line_model_error_naming_the_parameter(call, word):
    """Bad input raises ModelError with one line that names the parameter and says how to fix it."""
    covers, w, fixed, _ = plane(16, 10, 6, 0.4, 2)  # 4 candidates
    with pytest.raises(ModelError) as info:
        call(covers, w, fixed)
    text = _one_line(info.value)
    assert text.startswith(word + ":")
