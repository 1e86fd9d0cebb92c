"""The hypercube model of spatially distributed units: exact 2^N-state solution and Larson's approximation.

Sources: R. C. Larson (1974), "A hypercube queuing model for facility location and redistricting in urban emergency
services", Computers & Operations Research 1(1); R. C. Larson (1975), "Approximating the performance of urban
emergency service systems", Operations Research 23(5); R. C. Larson & A. R. Odoni (1981), *Urban Operations
Research*, §5.5.3.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numpy.typing import ArrayLike
from scipy.special import gammaln

from coverkit.errors import ModelError
from coverkit.progress import note, warn
from coverkit.queueing._checks import MIN_PER_H, QueueKind, check_positive, check_queue, unstable
from coverkit.queueing.erlang import _correction_factors, _log_busy_distribution

MethodKind = Literal["auto", "exact", "approx"]

#: Largest N the exact model accepts (memory grows as N * 2^N floats).
EXACT_MAX_UNITS = 20
#: ``method="auto"`` solves the exact model up to this many units, the approximation above. Chosen from
#: benchmarks/bench_hypercube.py: with 10,000 atoms the exact solve takes about 0.35 s at 16 units, 2 s at 18.
AUTO_EXACT_UNITS = 16


@dataclass(frozen=True)
class HypercubeResult:
    """Solution of the hypercube model.

    Attributes
    ----------
    method
        ``"exact"`` or ``"approx"``.
    queue
        ``"zero"`` or ``"infinite"``.
    workload
        Busy fraction of each unit, shape (N,).
    dispatch_fraction
        Fraction of each atom's calls served by each unit, shape (n_atoms, N). Rows sum to 1 minus the loss
        probability. With an infinite queue it includes the waiting calls, which go to the first unit to become
        free — with one common service rate each unit equally often (1 / N of them).
    immediate_fraction
        Same, counting only calls dispatched at once (no wait), shape (n_atoms, N).
    loss_probability
        Probability that a call is lost, per atom, shape (n_atoms,); all equal (calls arrive as Poisson streams
        and see the time-average state), zero with an infinite queue.
    wait_probability
        Probability that a call waits for a unit, per atom, shape (n_atoms,); zero with zero queue capacity.
    busy_count_probability
        Probability that k units are busy, k = 0..N, shape (N + 1,).
    calls_per_h
        Call rate per atom, calls per hour, shape (n_atoms,).
    mean_service_min
        Mean service time, minutes.
    iterations
        Iterations of the approximation (0 for the exact model).
    converged
        Whether the approximation met its tolerance (always True for the exact model).
    """

    method: str
    queue: str
    workload: np.ndarray
    dispatch_fraction: np.ndarray
    immediate_fraction: np.ndarray
    loss_probability: np.ndarray
    wait_probability: np.ndarray
    busy_count_probability: np.ndarray
    calls_per_h: np.ndarray
    mean_service_min: float
    iterations: int
    converged: bool

    @property
    def n_units(self) -> int:
        """Number of units N."""
        return int(self.workload.size)

    @property
    def offered_load(self) -> float:
        """Total offered load, erlangs."""
        return float(self.calls_per_h.sum()) * self.mean_service_min / MIN_PER_H


def _as_array(values: ArrayLike, name: str, dtype: type | None) -> np.ndarray:
    try:
        return np.asarray(values, dtype=dtype)
    except (TypeError, ValueError):
        raise ModelError(
            f"{name} is not a rectangular table of numbers: give one row per atom, all rows the same length"
        ) from None


def _check_inputs(
    calls_per_h: ArrayLike, preference: ArrayLike, mean_service_min: float, queue: str
) -> tuple[np.ndarray, np.ndarray, float, str]:
    queue = check_queue(queue)
    service = check_positive(mean_service_min, "mean_service_min")
    lam = _as_array(calls_per_h, "calls_per_h", float)
    if lam.ndim != 1 or lam.size == 0:
        raise ModelError(f"calls_per_h must be a non-empty 1-D array, one rate per atom; got shape {lam.shape}")
    bad = ~np.isfinite(lam) | (lam < 0)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise ModelError(f"calls_per_h row {row} is {lam[row]!r}: call rates must be finite and >= 0 calls per hour")
    pref = _as_array(preference, "preference", None)
    if pref.ndim != 2 or pref.shape[0] != lam.size or pref.shape[1] == 0:
        raise ModelError(
            f"preference has shape {pref.shape}; expected ({lam.size}, N): one row per atom, listing all N units"
        )
    if not np.issubdtype(pref.dtype, np.integer):
        raise ModelError(f"preference must hold integer unit ids, got dtype {pref.dtype}")
    n = pref.shape[1]
    ok = np.all(np.sort(pref, axis=1) == np.arange(n), axis=1)
    if not ok.all():
        row = int(np.flatnonzero(~ok)[0])
        raise ModelError(
            f"preference row {row} is not a permutation of the unit ids 0..{n - 1}: each row must list every "
            "unit exactly once, closest first"
        )
    pref = pref.astype(np.int64)
    load = float(lam.sum()) * service / MIN_PER_H
    if queue == "infinite" and load >= n:
        raise unstable(load, n)
    return lam, pref, service, queue


def _result(method, queue, workload, immediate, p_block, busy, lam, service, iterations, converged):
    n_atoms, n = immediate.shape
    if queue == "infinite":
        dispatch = immediate + p_block / n
        loss = np.zeros(n_atoms)
        wait = np.full(n_atoms, p_block)
    else:
        dispatch = immediate
        loss = np.full(n_atoms, p_block)
        wait = np.zeros(n_atoms)
    return HypercubeResult(
        method=method,
        queue=queue,
        workload=workload,
        dispatch_fraction=dispatch,
        immediate_fraction=immediate,
        loss_probability=loss,
        wait_probability=wait,
        busy_count_probability=busy,
        calls_per_h=lam,
        mean_service_min=service,
        iterations=iterations,
        converged=converged,
    )


def _prefix_masks(pref: np.ndarray) -> np.ndarray:
    """Bit mask of the units ahead of position k on each list, shape (n_atoms, N)."""
    bits = np.left_shift(np.int64(1), pref)
    return np.bitwise_or.accumulate(bits, axis=1) ^ bits


def _subset_sum(x: np.ndarray, n: int) -> None:
    """In place over the last axis (length 2^n): x[..., s] <- sum of x[..., t] over subsets t of s."""
    lead = x.shape[:-1]
    for b in range(n):
        v = x.reshape(*lead, -1, 2, 1 << b)
        v[..., 1, :] += v[..., 0, :]


def _superset_sum(x: np.ndarray, n: int) -> None:
    """In place over the last axis (length 2^n): x[..., s] <- sum of x[..., t] over supersets t of s."""
    lead = x.shape[:-1]
    for b in range(n):
        v = x.reshape(*lead, -1, 2, 1 << b)
        v[..., 0, :] += v[..., 1, :]


def _solve_balance(
    src: np.ndarray, dst: np.ndarray, val: np.ndarray, m: int, load: float, n: int, queue: str
) -> np.ndarray:
    """Stationary distribution of the chain with transitions src -> dst at rates val (m states).

    The balance equations sum_s pi_s q(s, t) = pi_t sum_u q(t, u) are solved with one reference state fixed (a
    state of the most likely busy count), by BiCGSTAB with a diagonal preconditioner from a start that spreads the
    birth–death busy-count distribution evenly over the states of each count. Direct sparse LU fills in badly on
    the hypercube's graph; the Krylov solver converges in a few dozen products.
    """
    states = np.arange(m, dtype=np.int64)
    out_rate = np.bincount(src, weights=val, minlength=m)
    log_level = _log_busy_distribution(load, n, queue)
    count = np.bitwise_count(states)
    log_guess = log_level[count] - (gammaln(n + 1) - gammaln(count + 1) - gammaln(n - count + 1))
    ref = (1 << int(np.argmax(log_level))) - 1
    guess = np.exp(log_guess - log_guess[ref])
    keep = states != ref
    # unknowns and equations: every state but ref, renumbered; flows out of ref move to the right-hand side
    b = -np.bincount(dst[src == ref], weights=val[src == ref], minlength=m)[keep]
    inner = (src != ref) & (dst != ref)
    renumber = states - (states > ref)
    rows = np.concatenate([renumber[dst[inner]], np.arange(m - 1)])
    cols = np.concatenate([renumber[src[inner]], np.arange(m - 1)])
    a = sp.csr_matrix((np.concatenate([val[inner], -out_rate[keep]]), (rows, cols)), shape=(m - 1, m - 1))
    diag = a.diagonal()
    precond = spla.LinearOperator(a.shape, matvec=lambda v: v / diag, dtype=float)
    x, info = spla.bicgstab(a, b, x0=guess[keep], M=precond, rtol=1e-12, atol=0.0, maxiter=20 * n + 2000)
    if info != 0:
        if m > 1 << 12:
            raise ModelError(
                f"the exact hypercube model did not converge for {n} units: use the approximation (method='approx')"
            )
        x = spla.spsolve(a.tocsc(), b)
    pi = np.empty(m)
    pi[keep] = x
    pi[ref] = 1.0
    np.clip(pi, 0.0, None, out=pi)
    return pi / pi.sum()


def hypercube_exact(
    calls_per_h: ArrayLike,
    preference: ArrayLike,
    mean_service_min: float,
    *,
    queue: QueueKind = "infinite",
) -> HypercubeResult:
    """Exact hypercube model: the continuous-time Markov chain on the 2^N busy/free states of N units.

    State s is a bit set (bit n = unit n busy). A call from atom a in state s goes to the first free unit on a's
    preference list, which moves the chain to s + {n} at rate lambda_a; a busy unit finishes at rate mu. With
    ``queue="infinite"`` the all-busy state stands for all-busy with any queue length: the queue is an M/M/N tail
    left only when it is empty (probability 1 - rho given all busy), so each unit leaves it at rate mu (1 - rho) — an
    exact reduction. Queued calls go to the unit that frees first, each unit equally likely (one common service
    rate); that unit is assumed to travel from its station.

    The generator is built with numpy bit operations (the up-rates for all states at once by a subset-sum
    transform over the prefix masks of the preference lists) and the balance equations pi Q = 0, sum(pi) = 1 are
    solved with ``scipy.sparse.linalg``.

    Parameters
    ----------
    calls_per_h
        Call rate of each demand atom, calls per hour, shape (n_atoms,).
    preference
        Dispatch preference lists, shape (n_atoms, N): every unit id 0..N-1 once per row, first choice first.
    mean_service_min
        Mean service time per call (busy time of a unit), minutes.
    queue
        ``"infinite"`` (calls wait, first come first served) or ``"zero"`` (a call finding all busy is lost).

    Returns
    -------
    HypercubeResult

    Raises
    ------
    ModelError
        On bad input, N > ``EXACT_MAX_UNITS``, or an unstable infinite queue.

    References
    ----------
    R. C. Larson (1974), "A hypercube queuing model for facility location and redistricting in urban emergency
    services", Computers & Operations Research 1(1); Larson & Odoni (1981), *Urban Operations Research*, §5.5.
    """
    lam, pref, service, queue = _check_inputs(calls_per_h, preference, mean_service_min, queue)
    n_atoms, n = pref.shape
    if n > EXACT_MAX_UNITS:
        raise ModelError(
            f"the exact hypercube model is limited to {EXACT_MAX_UNITS} units (2^N states), got {n}: "
            "use the approximation (method='approx')"
        )
    mu = MIN_PER_H / service
    total = float(lam.sum())
    load = total / mu
    m = 1 << n
    full = m - 1
    states = np.arange(m, dtype=np.int64)

    # up-rates R[u, s]: calls dispatched to unit u in state s (u free). An atom's k-th choice is dispatched when
    # the units ahead of it (mask T) are all busy, i.e. in every superset s of T: a subset-sum of rates over T.
    masks = _prefix_masks(pref)
    rate = np.bincount((pref * m + masks).ravel(), weights=np.repeat(lam, n), minlength=n * m)
    rate = rate.reshape(n, m)
    _subset_sum(rate, n)

    busy_bits = ((states[None, :] >> np.arange(n)[:, None]) & 1).astype(bool)  # (n, m)
    down = np.full(m, mu)
    if queue == "infinite":
        down[full] = mu * (1.0 - load / n)
    up_u, up_s = np.nonzero(~busy_bits & (rate > 0))
    dn_u, dn_s = np.nonzero(busy_bits)
    src = np.concatenate([up_s, dn_s])
    dst = np.concatenate([up_s | (1 << up_u), dn_s ^ (1 << dn_u)])
    val = np.concatenate([rate[up_u, up_s], down[dn_s]])
    del rate, up_u, up_s, dn_u, dn_s
    pi = _solve_balance(src, dst, val, m, load, n, queue) if total > 0 else np.eye(1, m).ravel()

    workload = busy_bits @ pi
    busy = np.bincount(np.bitwise_count(states), weights=pi, minlength=n + 1)
    # h[u, T] = P(units in T busy and unit u free): superset-sum of pi restricted to states with u free
    h = np.where(busy_bits, 0.0, pi[None, :])
    _superset_sum(h, n)
    immediate = np.zeros((n_atoms, n))
    np.put_along_axis(immediate, pref, h[pref, masks], axis=1)
    return _result("exact", queue, workload, immediate, float(pi[full]), busy, lam, service, 0, True)


def hypercube_approx(
    calls_per_h: ArrayLike,
    preference: ArrayLike,
    mean_service_min: float,
    *,
    queue: QueueKind = "infinite",
    tol: float = 1e-10,
    max_iter: int = 1000,
) -> HypercubeResult:
    """Larson's approximation of the hypercube model for many units.

    Each atom's k-th choice (0-based) is taken to answer with probability Q(N, rho, k) rho_1 ... rho_k
    (1 - rho_{k+1}), the rho_i being the workloads of the units ahead on the list. The workloads solve

        rho_n = (V_n + lambda P_W / N) / (mu + V_n),   V_n = sum over (atom a, position k) with unit n at position k
        of lambda_a Q(N, rho, k) rho_1 ... rho_k,

    (the P_W term — queued calls shared equally — only with an infinite queue), found by fixed-point iteration.
    After each step the workloads are scaled so that they add up to the mean number of busy units, which the
    birth–death model gives exactly (Larson 1974): lambda / mu with an infinite queue, E (1 - B(E, N)) with none.
    Each atom's dispatch fractions are then scaled to sum to 1 - P(all busy), their exact total.

    Parameters
    ----------
    calls_per_h, preference, mean_service_min, queue
        As for :func:`hypercube_exact`.
    tol
        Stop when no workload changes by more than this between iterations.
    max_iter
        Iteration limit; a warning is printed if it is reached.

    Returns
    -------
    HypercubeResult

    References
    ----------
    R. C. Larson (1975), "Approximating the performance of urban emergency service systems", Operations Research
    23(5); R. C. Larson & A. R. Odoni (1981), *Urban Operations Research*, §5.5.3.
    """
    lam, pref, service, queue = _check_inputs(calls_per_h, preference, mean_service_min, queue)
    if not (tol > 0) or isinstance(max_iter, bool) or int(max_iter) != max_iter or max_iter < 1:
        raise ModelError(f"tol must be > 0 and max_iter a whole number >= 1, got tol={tol!r}, max_iter={max_iter!r}")
    n_atoms, n = pref.shape
    mu = MIN_PER_H / service
    total = float(lam.sum())
    load = total / mu
    busy = np.exp(_log_busy_distribution(load, n, queue))
    if total == 0:
        immediate = np.zeros((n_atoms, n))
        immediate[np.arange(n_atoms), pref[:, 0]] = 1.0
        return _result("approx", queue, np.zeros(n), immediate, 0.0, busy, lam, service, 0, True)
    p_block = float(busy[n])
    mean_busy = load if queue == "infinite" else load * (1.0 - p_block)
    rho_bar = mean_busy / n
    q = _correction_factors(np.log(busy), rho_bar)
    queued_share = total * p_block / n if queue == "infinite" else 0.0
    weights = lam[:, None] * q[None, :]
    flat_pref = pref.ravel()

    rho = np.full(n, rho_bar)
    converged = False
    iterations = 0
    change = float("inf")
    while iterations < max_iter:
        iterations += 1
        ahead = np.ones((n_atoms, n))
        np.cumprod(rho[pref[:, :-1]], axis=1, out=ahead[:, 1:])
        v = np.bincount(flat_pref, weights=(weights * ahead).ravel(), minlength=n)
        new = (v + queued_share) / (mu + v)
        new *= mean_busy / new.sum()
        np.clip(new, 0.0, 1.0, out=new)
        change = float(np.max(np.abs(new - rho)))
        rho = new
        if change <= tol:
            converged = True
            break
    if not converged:
        warn(f"hypercube approximation stopped after {max_iter} iterations (last change {change:.2e})")

    ahead = np.ones((n_atoms, n))
    np.cumprod(rho[pref[:, :-1]], axis=1, out=ahead[:, 1:])
    by_position = q[None, :] * ahead * (1.0 - rho[pref])
    sums = by_position.sum(axis=1, keepdims=True)
    by_position *= (1.0 - p_block) / np.where(sums > 0, sums, 1.0)
    immediate = np.zeros((n_atoms, n))
    np.put_along_axis(immediate, pref, by_position, axis=1)
    return _result("approx", queue, rho, immediate, p_block, busy, lam, service, iterations, converged)


def hypercube(
    calls_per_h: ArrayLike,
    preference: ArrayLike,
    mean_service_min: float,
    *,
    queue: QueueKind = "infinite",
    method: MethodKind = "auto",
) -> HypercubeResult:
    """Hypercube model of spatially distributed units: exact for small N, Larson's approximation for large N.

    Parameters
    ----------
    calls_per_h, preference, mean_service_min, queue
        As for :func:`hypercube_exact`.
    method
        ``"exact"``, ``"approx"`` or ``"auto"`` (exact up to ``AUTO_EXACT_UNITS`` units).

    Returns
    -------
    HypercubeResult

    References
    ----------
    Larson (1974), Computers & Operations Research 1(1); Larson (1975), Operations Research 23(5).
    """
    if method not in ("auto", "exact", "approx"):
        raise ModelError(f"method must be 'auto', 'exact' or 'approx', got {method!r}")
    pref = _as_array(preference, "preference", None)
    n = pref.shape[1] if pref.ndim == 2 else 0
    if method == "exact" or (method == "auto" and 0 < n <= AUTO_EXACT_UNITS):
        note(f"hypercube: exact model, {n} units, {1 << n} states")
        return hypercube_exact(calls_per_h, preference, mean_service_min, queue=queue)
    note(f"hypercube: Larson's approximation, {n} units")
    return hypercube_approx(calls_per_h, preference, mean_service_min, queue=queue)
