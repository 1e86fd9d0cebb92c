"""Tests of coverkit.queueing: Erlang B/C and the hypercube model.

Each check names its outside source. Reference values from ../shared/REFERENCES.md (the team's list of outside
check values, beside the repository) and the publications it cites; independent constructions
(birth–death chains, an explicit state-by-state generator, a discrete-event simulation) are written here from the
published model definitions, not from the module's code.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy.optimize import brentq

from coverkit import queueing as qn
from coverkit.errors import CoverkitError, ModelError
from coverkit.progress import set_quiet

set_quiet(True)


# --------------------------------------------------------------------------------------------------------------------
# independent references written from the textbook definitions
# --------------------------------------------------------------------------------------------------------------------


def birth_death(calls_per_h: float, mu_per_h: float, servers: int, queue: str, cap: int = 4000) -> np.ndarray:
    """P(k busy), k = 0..servers, of the M/M/c (truncated at ``cap`` in system) or M/M/c/c birth–death chain.

    Detailed balance p_k lambda = p_{k+1} min(k+1, c) mu (any birth–death text, e.g. Kleinrock 1975 §3).
    For an infinite queue the last entry sums all states with every server busy.
    """
    top = servers if queue == "zero" else cap
    log_p = [0.0]
    for k in range(top):
        log_p.append(log_p[-1] + math.log(calls_per_h) - math.log(min(k + 1, servers) * mu_per_h))
    p = np.exp(np.array(log_p) - max(log_p))
    p /= p.sum()
    return np.concatenate([p[:servers], [p[servers:].sum()]])


def explicit_chain(calls_per_h, pref, mu_per_h, queue, queue_cap=300):
    """Stationary law of the hypercube chain built state by state (Larson 1974's definition), dense solve.

    States (busy set, queue length); a call goes to the first free unit on its atom's list, else waits (FCFS) or
    is lost; a finishing unit takes the head of the queue if any. Returns workloads and the fraction of each
    atom's calls dispatched at once to each unit.
    """
    n_atoms, n = pref.shape
    states = [(s, 0) for s in range(2**n)]
    if queue == "infinite":
        states += [(2**n - 1, k) for k in range(1, queue_cap + 1)]
    index = {st: i for i, st in enumerate(states)}
    gen = np.zeros((len(states), len(states)))
    for (s, k), i in index.items():
        for a in range(n_atoms):
            free = [u for u in pref[a] if not (s >> u) & 1]
            if free:
                gen[i, index[(s | 1 << free[0], 0)]] += calls_per_h[a]
            elif queue == "infinite" and k < queue_cap:
                gen[i, index[(s, k + 1)]] += calls_per_h[a]
        for u in range(n):
            if (s >> u) & 1:
                target = (s, k - 1) if k > 0 else (s ^ (1 << u), 0)
                gen[i, index[target]] += mu_per_h
    np.fill_diagonal(gen, -gen.sum(axis=1))
    lhs = np.vstack([gen.T, np.ones(len(states))])
    rhs = np.zeros(len(states) + 1)
    rhs[-1] = 1.0
    pi = np.linalg.lstsq(lhs, rhs, rcond=None)[0]
    workload = np.zeros(n)
    first = np.zeros((n_atoms, n))
    for (s, _), p in zip(states, pi, strict=True):
        for u in range(n):
            workload[u] += p * ((s >> u) & 1)
        for a in range(n_atoms):
            free = [u for u in pref[a] if not (s >> u) & 1]
            if free:
                first[a, free[0]] += p
    return workload, first


def random_instance(rng, n_units, n_atoms, rho, service_min):
    """Units and atoms uniform in a unit square, Manhattan travel, closest-first lists, rates scaled to rho."""
    units = rng.random((n_units, 2))
    atoms = rng.random((n_atoms, 2))
    travel = np.abs(atoms[:, None, :] - units[None, :, :]).sum(axis=2) * 600.0
    rates = rng.random(n_atoms)
    rates *= rho * n_units * 60.0 / service_min / rates.sum()
    return rates, qn.preference_lists(travel), travel


# --------------------------------------------------------------------------------------------------------------------
# Erlang B and C
# --------------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("servers", "blocking", "table_erlangs"),
    [(5, 0.01, 1.36), (5, 0.02, 1.66), (10, 0.01, 4.46), (10, 0.02, 5.08)],
)
def test_erlang_b_classic_table(servers, blocking, table_erlangs):
    """Erlang-B traffic table (REFERENCES.md; Erlang 1917): load carried at a given blocking, to table rounding."""
    load = brentq(lambda e: qn.erlang_b(e, servers) - blocking, 1e-6, 100.0, xtol=1e-12)
    assert abs(load - table_erlangs) <= 0.005  # tables print two decimals


@pytest.mark.parametrize(("load", "servers"), [(0.5, 1), (2.0, 3), (7.3, 10), (25.0, 30)])
def test_erlang_b_closed_form(load, servers):
    """Erlang (1917): B = (E^c / c!) / sum_k E^k / k!, computed directly with exact factorials."""
    terms = [load**k / math.factorial(k) for k in range(servers + 1)]
    assert qn.erlang_b(load, servers) == pytest.approx(terms[-1] / sum(terms), rel=1e-12)


@pytest.mark.parametrize(("load", "servers"), [(0.4, 1), (2.5, 3), (8.0, 10), (27.0, 30)])
def test_erlang_c_against_birth_death(load, servers):
    """Erlang C against a direct M/M/c birth–death computation, and the textbook relation C = B / (1 - rho(1 - B))
    checked on the independent birth–death values (standard queueing texts, REFERENCES.md)."""
    p_wait = birth_death(load, 1.0, servers, "infinite")[-1]
    p_loss = birth_death(load, 1.0, servers, "zero")[-1]
    rho = load / servers
    assert p_wait == pytest.approx(p_loss / (1 - rho * (1 - p_loss)), rel=1e-9)
    assert qn.erlang_c(load, servers) == pytest.approx(p_wait, rel=1e-9)
    assert qn.erlang_b(load, servers) == pytest.approx(p_loss, rel=1e-9)


def test_utilisation_and_offered_load():
    """Offered load = call rate x mean service time (Erlang's definition; common practice)."""
    assert qn.offered_load(6.0, 45.0) == pytest.approx(4.5)
    assert qn.utilisation(6.0, 45.0, servers=9) == pytest.approx(0.5)


# --------------------------------------------------------------------------------------------------------------------
# Larson's correction factors
# --------------------------------------------------------------------------------------------------------------------


def test_larson_correction_published_values():
    """Q(3, 1/2, j) = 1, 0.73684, 0.63158: Larson (1975) Operations Research 23(5); Larson & Odoni (1981) §5.5.3."""
    published = [1.0, 0.73684, 0.63158]
    for j, value in enumerate(published):
        assert qn.larson_correction(3, 0.5, j) == pytest.approx(value, abs=5e-6)
    assert np.allclose(qn.larson_correction(3, 0.5, np.arange(3)), published, atol=5e-6)


@pytest.mark.parametrize("queue", ["zero", "infinite"])
def test_correction_exact_in_symmetric_system(queue):
    """Larson (1975): Q makes the approximation exact when all busy sets of a size are equally likely.

    With one atom per permutation of 4 units at equal rates, the exact hypercube (Larson 1974) is symmetric, so the
    fraction of calls sent to the (j+1)-th choice is Q(N, rho, j) rho^j (1 - rho), rho the mean busy fraction.
    """
    n = 4
    pref = np.array(list(itertools.permutations(range(n))))
    rates = np.full(len(pref), 1.8 / len(pref))
    exact = qn.hypercube_exact(rates, pref, 60.0, queue=queue)
    rho = float(exact.workload.mean())
    by_position = np.take_along_axis(exact.immediate_fraction, pref, axis=1).mean(axis=0)
    q = qn.larson_correction(n, 1.8 / n, np.arange(n), queue=queue)
    assert np.allclose(by_position, q * rho ** np.arange(n) * (1 - rho), atol=1e-10)
    approx = qn.hypercube_approx(rates, pref, 60.0, queue=queue)
    assert np.allclose(approx.workload, exact.workload, atol=1e-9)
    assert np.allclose(approx.dispatch_fraction, exact.dispatch_fraction, atol=1e-9)


# --------------------------------------------------------------------------------------------------------------------
# exact hypercube
# --------------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("n_units", "rho"), [(5, 0.6), (12, 0.8)])
def test_exact_busy_counts_are_birth_death(n_units, rho):
    """Larson (1974): summed over states, P(k busy) is the M/M/N birth–death law (infinite queue), and with zero
    queue capacity the busy count is M/M/N/N, so the all-busy probability is Erlang B (Erlang 1917)."""
    rng = np.random.default_rng(11)
    rates, pref, _ = random_instance(rng, n_units, 60, rho, 30.0)
    total = rates.sum()
    inf = qn.hypercube_exact(rates, pref, 30.0, queue="infinite")
    assert np.allclose(inf.busy_count_probability, birth_death(total, 2.0, n_units, "infinite"), atol=1e-10)
    zero = qn.hypercube_exact(rates, pref, 30.0, queue="zero")
    assert np.allclose(zero.busy_count_probability, birth_death(total, 2.0, n_units, "zero"), atol=1e-10)
    assert zero.loss_probability[0] == pytest.approx(birth_death(total, 2.0, n_units, "zero")[-1], rel=1e-8)
    assert zero.busy_count_probability[-1] == pytest.approx(qn.erlang_b(total / 2.0, n_units), rel=1e-8)


@pytest.mark.parametrize("queue", ["zero", "infinite"])
def test_exact_matches_state_by_state_chain(queue):
    """The vectorised generator against the chain written out state by state from Larson's (1974) definition."""
    rng = np.random.default_rng(3)
    pref = np.array([rng.permutation(3) for _ in range(5)])
    rates = rng.random(5)
    rates *= 0.6 * 3 * 2.0 / rates.sum()
    workload, first = explicit_chain(rates, pref, 2.0, queue)
    res = qn.hypercube_exact(rates, pref, 30.0, queue=queue)
    # the explicit chain truncates the queue at 300 calls: tail ~ 0.6^300, negligible
    assert np.allclose(res.workload, workload, atol=1e-9)
    assert np.allclose(res.immediate_fraction, first, atol=1e-9)


@pytest.mark.parametrize("queue", ["zero", "infinite"])
def test_two_units_by_hand(queue):
    """Two units worked by hand (Larson & Odoni 1981 §5.5 style; algebra below).

    Unit 1 (id 0) and unit 2 (id 1). Atom A (rate a) lists 1 then 2; atom B (rate b) lists 2 then 1;
    lambda = a + b; service rate mu. States 00, 10 (unit 1 busy), 01, 11. Zero queue capacity:

        (00)  lambda P00        = mu P10 + mu P01
        (10)  (lambda + mu) P10 = a P00 + mu P11
        (01)  (lambda + mu) P01 = b P00 + mu P11
        (11)  2 mu P11          = lambda (P10 + P01)

    (00) gives S = P10 + P01 = (lambda/mu) P00; (11) gives P11 = lambda^2 / (2 mu^2) P00; (10) - (01) gives
    D = P10 - P01 = (a - b) P00 / (lambda + mu). Normalising, P00 = 1 / (1 + lambda/mu + lambda^2/(2 mu^2)), and
    P10 = (S + D)/2, P01 = (S - D)/2. Infinite queue: the all-busy states (11, q) satisfy the cut equations
    lambda P(11,q) = 2 mu P(11,q+1), so P(11,q) = r^q P(11,0), r = lambda/(2 mu), and the same algebra holds with
    P11 = P(11,0) = lambda^2/(2 mu^2) P00, total all-busy F = P11 / (1 - r), P00 = 1 / (1 + lambda/mu + F/P00).
    Workload of unit 1: P10 + F; A is sent at once to unit 1 with P00 + P01, to unit 2 with P10; B to unit 2
    with P00 + P10, to unit 1 with P01. All-busy calls are lost (zero) or wait and go to either unit with 1/2
    (infinite: both busy, each finishes first with probability 1/2).
    """
    a, b, service_min = 1.2, 0.4, 30.0
    mu = 60.0 / service_min
    lam = a + b
    r = lam / (2 * mu)
    tail = 1.0 if queue == "zero" else 1.0 / (1.0 - r)
    p00 = 1.0 / (1.0 + lam / mu + lam**2 / (2 * mu**2) * tail)
    full = lam**2 / (2 * mu**2) * p00 * tail
    s = lam / mu * p00
    d = (a - b) * p00 / (lam + mu)
    p10, p01 = (s + d) / 2, (s - d) / 2
    queued = 0.0 if queue == "zero" else full / 2

    pref = np.array([[0, 1], [1, 0]])
    res = qn.hypercube_exact([a, b], pref, service_min, queue=queue)
    assert np.allclose(res.workload, [p10 + full, p01 + full], atol=1e-12)
    assert np.allclose(
        res.dispatch_fraction, [[p00 + p01 + queued, p10 + queued], [p01 + queued, p00 + p10 + queued]], atol=1e-12
    )
    assert np.allclose(res.loss_probability, full if queue == "zero" else 0.0, atol=1e-12)

    # travel times (s): unit 1 is 200 s from A, 500 s from B; unit 2 is 450 s from A, 150 s from B
    travel = np.array([[200.0, 450.0], [500.0, 150.0]])
    served = 1.0 - (full if queue == "zero" else 0.0)
    mean_a = ((p00 + p01 + queued) * 200 + (p10 + queued) * 450) / served
    assert qn.expected_travel_s(res, travel)[0] == pytest.approx(mean_a, rel=1e-12)
    # standard 300 s: only unit 1 reaches A in time; a waiting call counts only if its wait leaves time to travel
    cov = qn.availability_coverage(res, travel, 300.0, count_wait=False)
    assert cov[0] == pytest.approx(p00 + p01 + queued, rel=1e-12)


def test_exact_against_simulation():
    """A discrete-event simulation of the model's definition (Larson 1974: closest free unit, FCFS queue, the unit
    that frees first takes the queue head) checks dispatch fractions, workloads and coverage including waits."""
    rng = np.random.default_rng(2026)
    n, service_min = 3, 30.0
    rates, pref, travel = random_instance(rng, n, 4, 0.6, service_min)
    res = qn.hypercube_exact(rates, pref, service_min, queue="infinite")
    standard = 420.0

    total_per_s = rates.sum() / 3600.0
    n_calls = 60_000
    gaps = rng.exponential(1.0 / total_per_s, n_calls)
    service = rng.exponential(service_min * 60.0, n_calls)
    atoms = rng.choice(rates.size, n_calls, p=rates / rates.sum())
    free_at = [0.0] * n
    busy_s = [0.0] * n
    counts = np.zeros((rates.size, n))
    reached = np.zeros(rates.size)
    now = 0.0
    for gap, work, atom in zip(gaps.tolist(), service.tolist(), atoms.tolist(), strict=True):
        now += gap
        order = pref[atom]
        unit = next((int(u) for u in order if free_at[u] <= now), None)
        start = now
        if unit is None:  # all busy: FCFS, the earliest finishing unit takes this call
            unit = min(range(n), key=free_at.__getitem__)
            start = free_at[unit]
        free_at[unit] = start + work
        busy_s[unit] += work
        counts[atom, unit] += 1
        reached[atom] += (start - now) + travel[atom, unit] <= standard
    per_atom = counts.sum(axis=1)
    assert np.allclose(counts / per_atom[:, None], res.dispatch_fraction, atol=0.02)
    assert np.allclose(np.array(busy_s) / now, res.workload, atol=0.02)
    cov = qn.availability_coverage(res, travel, standard)
    assert np.allclose(reached / per_atom, cov, atol=0.02)


# --------------------------------------------------------------------------------------------------------------------
# Larson's approximation against the exact model
# --------------------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("queue", ["zero", "infinite"])
@pytest.mark.parametrize("n_units", [4, 5, 6, 7, 8])
def test_approx_within_two_percent_of_exact(n_units, queue):
    """Larson & Odoni (1981) §5.5.3, Larson (1975): the approximation's workloads fall within about 1–2 % of the
    exact hypercube's. Checked as the total absolute workload error relative to the total exact workload, on
    seeded random instances (100 atoms in a square, Manhattan travel) at utilisations 0.3, 0.5, 0.7.

    The per-unit relative error is larger for lightly loaded units: on 1200 such instances the worst single unit
    was 33 % off at rho 0.3 (a unit with workload near 0.05) and the worst absolute error 0.027 (rho 0.5).
    """
    rng = np.random.default_rng(1975 + n_units)
    for rho in (0.3, 0.5, 0.7):
        rates, pref, _ = random_instance(rng, n_units, 100, rho, 45.0)
        exact = qn.hypercube_exact(rates, pref, 45.0, queue=queue)
        approx = qn.hypercube_approx(rates, pref, 45.0, queue=queue)
        assert approx.converged
        error = np.abs(approx.workload - exact.workload).sum() / exact.workload.sum()
        assert error <= 0.02, f"rho {rho}: total workload error {error:.4f}"
        assert np.allclose(approx.dispatch_fraction.sum(axis=1), exact.dispatch_fraction.sum(axis=1))


def test_auto_method_by_size():
    """Method 'auto' is exact up to AUTO_EXACT_UNITS units, approximate above (design choice, no source)."""
    rng = np.random.default_rng(4)
    small = random_instance(rng, 3, 10, 0.5, 45.0)
    big = random_instance(rng, qn.AUTO_EXACT_UNITS + 1, 10, 0.5, 45.0)
    assert qn.hypercube(small[0], small[1], 45.0).method == "exact"
    assert qn.hypercube(big[0], big[1], 45.0).method == "approx"


# --------------------------------------------------------------------------------------------------------------------
# stations, preference lists
# --------------------------------------------------------------------------------------------------------------------


def test_station_units_and_preferences():
    """Several units per station are servers at one place (Larson & Odoni 1981 §5.5); lists sort by time, ties by id
    (checked against Python's sorted on (time, id))."""
    station, number = qn.expand_station_units([2, 0, 1])
    assert station.tolist() == [0, 0, 2]
    assert number.tolist() == [1, 2, 1]
    times = qn.unit_travel_s([[100.0, 50.0, 300.0], [80.0, 90.0, 80.0]], [2, 0, 1])
    assert times.tolist() == [[100.0, 100.0, 300.0], [80.0, 80.0, 80.0]]
    pref = qn.preference_lists(times)
    for row, t in zip(pref, times, strict=True):
        assert row.tolist() == sorted(range(t.size), key=lambda u, t=t: (t[u], u))


# --------------------------------------------------------------------------------------------------------------------
# bad input
# --------------------------------------------------------------------------------------------------------------------


def _one_line(err: pytest.ExceptionInfo) -> str:
    message = str(err.value)
    assert "\n" not in message
    assert isinstance(err.value, CoverkitError)
    return message


def test_unstable_infinite_queue_is_refused():
    """Utilisation >= 1 with an infinite queue has no steady state (any M/M/c text): a clear error."""
    pref = np.array([[0, 1], [1, 0]])
    for call in (
        lambda: qn.erlang_c(3.0, 3),
        lambda: qn.hypercube_exact([3.0, 1.0], pref, 30.0),
        lambda: qn.hypercube_approx([3.0, 1.0], pref, 30.0),
        lambda: qn.larson_correction(3, 1.2, 0),
    ):
        with pytest.raises(ModelError) as err:
            call()
        message = _one_line(err)
        assert "unstable" in message and "units" in message
    # the same load is fine with zero queue capacity (calls lost)
    assert qn.hypercube_exact([3.0, 1.0], pref, 30.0, queue="zero").loss_probability[0] > 0


@pytest.mark.parametrize(
    ("rates", "pref", "needle"),
    [
        ([1.0, -0.5], [[0, 1], [1, 0]], "calls_per_h row 1"),
        ([1.0, np.nan], [[0, 1], [1, 0]], "calls_per_h row 1"),
        ([1.0, 0.5], [[0, 1], [1, 1]], "preference row 1 is not a permutation"),
        ([1.0, 0.5], [[0, 1], [1, 2]], "preference row 1 is not a permutation"),
        ([1.0, 0.5], [[0, 1]], "preference has shape"),
        ([1.0, 0.5], [[0.0, 1.0], [1.0, 0.0]], "integer unit ids"),
    ],
)
def test_bad_model_input(rates, pref, needle):
    """Bad rates and preference lists raise a one-line ModelError naming the field and row (project rule)."""
    for solve in (qn.hypercube_exact, qn.hypercube_approx):
        with pytest.raises(ModelError) as err:
            solve(rates, np.asarray(pref), 30.0)
        assert needle in _one_line(err)


def test_other_bad_input():
    """Other user errors: service time, queue kind, too many units for the exact model, j, shapes, counts."""
    pref = np.array([[0, 1]])
    cases = [
        (lambda: qn.hypercube_exact([1.0], pref, 0.0), "mean_service_min"),
        (lambda: qn.hypercube_exact([1.0], pref, 30.0, queue="finite"), "queue must be"),
        (lambda: qn.hypercube([1.0], pref, 30.0, method="fast"), "method must be"),
        (
            lambda: qn.hypercube_exact([1.0], np.arange(qn.EXACT_MAX_UNITS + 1)[None, :], 30.0),
            "method='approx'",
        ),
        (lambda: qn.hypercube([1.0, 2.0], [[0, 1], [1]], 30.0), "preference is not a rectangular"),
        (lambda: qn.hypercube(["x"], pref, 30.0), "calls_per_h is not a rectangular"),
        (lambda: qn.hypercube_approx([1.0], pref, 30.0, max_iter=0), "max_iter"),
        (lambda: qn.larson_correction(3, 0.5, 3), "j must be"),
        (lambda: qn.erlang_b(-1.0, 3), "offered_load"),
        (lambda: qn.erlang_b(1.0, 2.5), "servers"),
        (lambda: qn.expand_station_units([1, -1]), "units_per_station row 1"),
        (lambda: qn.unit_travel_s([[1.0, 2.0]], [1, 1, 1]), "one column per station"),
        (lambda: qn.preference_lists([[1.0, np.nan]]), "travel_s row 0"),
    ]
    for call, needle in cases:
        with pytest.raises(ModelError) as err:
            call()
        assert needle in _one_line(err)
    res = qn.hypercube_exact([1.0], pref, 30.0)
    with pytest.raises(ModelError) as err:
        qn.expected_travel_s(res, [[1.0, 2.0, 3.0]])
    assert "travel_s has shape" in _one_line(err)
    with pytest.raises(ModelError) as err:
        qn.availability_coverage(res, [[1.0, -2.0]], 300.0)
    assert "negative" in _one_line(err)
