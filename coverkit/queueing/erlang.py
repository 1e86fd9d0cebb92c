"""Erlang B and C, the birth–death busy-count law, and Larson's correction factors Q(N, rho, j).

Sources: A. K. Erlang (1917), Elektroteknikeren 13; R. C. Larson (1975), Operations Research 23(5);
R. C. Larson & A. R. Odoni (1981), *Urban Operations Research*, §5.5.3.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import gammaln, logsumexp

from coverkit.errors import ModelError
from coverkit.queueing._checks import (
    MIN_PER_H,
    QueueKind,
    check_nonneg,
    check_positive,
    check_queue,
    check_servers,
    unstable,
)


def offered_load(calls_per_h: float, mean_service_min: float) -> float:
    """Offered load in erlangs: call rate times mean service time.

    Parameters
    ----------
    calls_per_h
        Call rate, calls per hour (>= 0).
    mean_service_min
        Mean time a unit is busy per call, minutes (> 0).

    Returns
    -------
    float
        Offered load E = lambda / mu, erlangs (mean number of busy units if none were ever short).
    """
    lam = check_nonneg(calls_per_h, "calls_per_h")
    service = check_positive(mean_service_min, "mean_service_min")
    return lam * service / MIN_PER_H


def utilisation(calls_per_h: float, mean_service_min: float, servers: int = 1) -> float:
    """Offered utilisation per server, rho = lambda / (N mu).

    Parameters
    ----------
    calls_per_h
        Call rate, calls per hour (>= 0).
    mean_service_min
        Mean time a unit is busy per call, minutes (> 0).
    servers
        Number of units N sharing the calls (>= 1).

    Returns
    -------
    float
        rho; with an infinite queue this is each unit's busy fraction and must stay below 1.
    """
    servers = check_servers(servers, minimum=1)
    return offered_load(calls_per_h, mean_service_min) / servers


# --------------------------------------------------------------------------------------------------------------------
# Erlang B and C
# --------------------------------------------------------------------------------------------------------------------


def erlang_b(offered_load: float, servers: int) -> float:
    """Erlang's loss formula: probability that a call finds all servers busy and is lost (M/M/c/c).

    Uses the stable recursion B(E, 0) = 1, B(E, m) = E B(E, m-1) / (m + E B(E, m-1)).

    Parameters
    ----------
    offered_load
        Offered load E, erlangs (>= 0).
    servers
        Number of servers c (>= 0).

    Returns
    -------
    float
        Blocking probability B(E, c).

    References
    ----------
    A. K. Erlang (1917), "Solution of some problems in the theory of probabilities of significance in automatic
    telephone exchanges", Elektroteknikeren 13.

    Examples
    --------
    Two erlangs on two servers: B = (E^c / c!) / sum_k E^k / k! = 2 / (1 + 2 + 2) = 0.4 (the closed form, worked
    by hand).

    >>> erlang_b(2.0, 2)
    0.4
    """
    load = check_nonneg(offered_load, "offered_load")
    c = check_servers(servers)
    b = 1.0
    for m in range(1, c + 1):
        b = load * b / (m + load * b)
    return b


def erlang_c(offered_load: float, servers: int) -> float:
    """Erlang's waiting formula: probability that a call has to wait (M/M/c, infinite queue).

    C(E, c) = B / (1 - rho (1 - B)), with B = B(E, c) and rho = E / c.

    Parameters
    ----------
    offered_load
        Offered load E, erlangs (>= 0).
    servers
        Number of servers c (>= 1).

    Returns
    -------
    float
        Probability of waiting C(E, c).

    Raises
    ------
    ModelError
        If rho = E / c >= 1: the queue is unstable.

    References
    ----------
    A. K. Erlang (1917), as for :func:`erlang_b`; the relation to B is in standard queueing texts, e.g.
    L. Kleinrock (1975), *Queueing Systems* vol. 1, §3.5.

    Examples
    --------
    Two erlangs on three servers: B(2, 3) = 4/19, rho = 2/3, so C = (4/19) / (1 - (2/3)(15/19)) = 4/9 (worked by
    hand from the relation above).

    >>> round(erlang_c(2.0, 3), 6)
    0.444444
    """
    load = check_nonneg(offered_load, "offered_load")
    c = check_servers(servers, minimum=1)
    rho = load / c
    if rho >= 1:
        raise unstable(load, c)
    b = erlang_b(load, c)
    return b / (1.0 - rho * (1.0 - b))


def _log_busy_distribution(load: float, n: int, queue: str) -> np.ndarray:
    """log P(k busy), k = 0..n, for M/M/n/n (zero queue) or M/M/n (infinite; k = n aggregates the queue)."""
    k = np.arange(n + 1)
    log_w = k * math.log(load) - gammaln(k + 1) if load > 0 else np.where(k == 0, 0.0, -np.inf)
    if queue == "infinite":
        rho = load / n
        # all-busy states n, n+1, ... form a geometric tail with ratio rho
        log_w = log_w.copy()
        log_w[n] -= math.log1p(-rho)
    return log_w - logsumexp(log_w)


def busy_count_distribution(offered_load: float, servers: int, queue: QueueKind = "infinite") -> np.ndarray:
    """Probability that k units are busy, k = 0..N (birth–death model of N identical servers).

    Parameters
    ----------
    offered_load
        Offered load E, erlangs (>= 0).
    servers
        Number of servers N (>= 1).
    queue
        ``"zero"``: M/M/N/N (truncated Poisson). ``"infinite"``: M/M/N; the last entry is the probability that all
        units are busy, whatever the queue length (Erlang C).

    Returns
    -------
    numpy.ndarray
        Shape (N + 1,), sums to 1.

    References
    ----------
    Erlang (1917); Larson (1974) shows the hypercube's busy count follows this distribution.
    """
    load = check_nonneg(offered_load, "offered_load")
    n = check_servers(servers, minimum=1)
    queue = check_queue(queue)
    if queue == "infinite" and load >= n:
        raise unstable(load, n)
    return np.exp(_log_busy_distribution(load, n, queue))


# --------------------------------------------------------------------------------------------------------------------
# Larson's correction factors
# --------------------------------------------------------------------------------------------------------------------


def _correction_factors(log_p: np.ndarray, rho: float) -> np.ndarray:
    """Q(N, rho, j), j = 0..N-1, from a busy-count distribution ``log_p`` (length N+1) and the busy fraction ``rho``.

    In a system of identical units with k busy, every set of k busy units is equally likely, so the chance that j
    named units are busy and another named unit is free is C(N-j-1, k-j) / C(N, k). Q is that probability summed
    over k and divided by rho^j (1 - rho), the value it would have if units were busy independently (Larson 1975).
    """
    n = log_p.size - 1
    if rho <= 0:
        return np.ones(n)
    j = np.arange(n)[:, None]
    k = np.arange(n)[None, :]
    valid = k >= j
    kj = np.where(valid, k - j, 0)
    # log[C(N-j-1, k-j) / C(N, k)] = log[(N-j-1)! (N-k) k! / ((k-j)! N!)]
    log_coef = gammaln(n - j) + np.log(n - k) + gammaln(k + 1) - gammaln(kj + 1) - gammaln(n + 1)
    terms = np.where(valid, log_coef + log_p[None, :n], -np.inf)
    log_q = logsumexp(terms, axis=1) - np.arange(n) * math.log(rho) - math.log1p(-rho)
    return np.exp(log_q)


def _carried_rho(offered_per_unit: float, n: int) -> float:
    load = offered_per_unit * n
    return load * (1.0 - erlang_b(load, n)) / n


def larson_correction(
    n_units: int, utilisation: float, j: int | ArrayLike, *, queue: QueueKind = "infinite"
) -> float | np.ndarray:
    """Larson's correction factor Q(N, rho, j) of the hypercube approximation.

    The approximation estimates the chance that the j + 1-th unit on a preference list answers as
    Q(N, rho, j) rho_1 ... rho_j (1 - rho_{j+1}); Q corrects for busy units not being independent. For an infinite
    queue (M/M/N):

        Q(N, rho, j) = sum_{k=j}^{N-1} [(N-j-1)! (N-k) / (k-j)!] [N^k rho^(k-j) / N!] P_0 / (1 - rho)

    with P_0 the M/M/N probability that no unit is busy. For ``queue="zero"`` the same construction uses the
    M/M/N/N (Erlang loss) busy-count distribution and the carried busy fraction rho (1 - B).

    Parameters
    ----------
    n_units
        N, number of units (>= 1).
    utilisation
        rho = lambda / (N mu), offered load per unit; below 1 for ``queue="infinite"``.
    j
        Number of busy units ahead on the list, 0 <= j <= N - 1 (int or array of ints).
    queue
        ``"infinite"`` (default, as in the published tables) or ``"zero"``.

    Returns
    -------
    float or numpy.ndarray
        Q(N, rho, j); a float for an int ``j``.

    References
    ----------
    R. C. Larson (1975), "Approximating the performance of urban emergency service systems", Operations Research
    23(5); R. C. Larson & A. R. Odoni (1981), *Urban Operations Research*, §5.5.3.
    """
    n = check_servers(n_units, "n_units", minimum=1)
    rho = check_nonneg(utilisation, "utilisation")
    queue = check_queue(queue)
    if queue == "infinite" and rho >= 1:
        raise unstable(rho * n, n)
    j_arr = np.asarray(j)
    if not np.issubdtype(j_arr.dtype, np.integer) or np.any(j_arr < 0) or np.any(j_arr > n - 1):
        raise ModelError(f"j must be whole numbers between 0 and n_units - 1 = {n - 1}, got {j!r}")
    log_p = _log_busy_distribution(rho * n, n, queue)
    busy = rho if queue == "infinite" else _carried_rho(rho, n)
    q = _correction_factors(log_p, busy)[j_arr]
    return float(q) if q.ndim == 0 else q
