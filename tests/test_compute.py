"""Blocks on a Dask cluster give what they give in process (issue 13, point 5).

The reference is the same function run in this process: scipy's Dijkstra (``scipy.sparse.csgraph``, a
general-purpose reference library) on a random graph, one block of sources at a time.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from coverkit.compute import DaskRunner, InProcess, current_runner, map_blocks, runner_for, use_runner
from coverkit.errors import CoverkitError


def _search_block(sources: np.ndarray, *, graph: sp.csr_matrix, limit_s: float) -> sp.csr_matrix:
    """One block: times from ``sources`` within ``limit_s`` as a sparse matrix (module level: a cluster pickles it)."""
    dist = dijkstra(graph, directed=True, indices=sources, limit=limit_s)
    dist[~np.isfinite(dist)] = 0.0
    return sp.csr_matrix(dist)


def _random_graph(n: int = 2000, seed: int = 3) -> sp.csr_matrix:
    rng = np.random.default_rng(seed)
    u = rng.integers(0, n, 8 * n)
    v = rng.integers(0, n, 8 * n)
    w = rng.uniform(5.0, 90.0, 8 * n)
    return sp.csr_matrix((w, (u, v)), shape=(n, n))


def test_in_process_is_the_default_and_keeps_block_order():
    assert isinstance(current_runner(), InProcess)
    out = map_blocks(
        _search_block, [np.array([0, 1]), np.array([2])], shared={"graph": _random_graph(), "limit_s": 300}
    )
    assert [m.shape[0] for m in out] == [2, 1]


def test_local_cluster_gives_the_in_process_blocks_and_sends_shared_inputs_once():
    g = _random_graph()
    blocks = [np.arange(i, i + 25) for i in range(0, 200, 25)]
    shared = {"graph": g, "limit_s": 400.0}
    expected = [_search_block(b, **shared) for b in blocks]
    with DaskRunner(workers=2) as runner, use_runner(runner):
        first = map_blocks(_search_block, blocks, shared=shared)
        again = map_blocks(_search_block, blocks[::-1], shared=shared)
        assert len(runner._sent) == 2  # the graph and the limit, each sent once for both maps
    assert isinstance(current_runner(), InProcess)  # restored on leaving
    for got, want in zip(first, expected, strict=True):
        assert (got != want).nnz == 0
    for got, want in zip(again, expected[::-1], strict=True):
        assert (got != want).nnz == 0


def test_runner_for_without_a_cluster_stays_in_process():
    with runner_for() as runner:
        assert isinstance(runner, InProcess)


def test_an_unreachable_scheduler_is_one_plain_error():
    with pytest.raises(CoverkitError, match=r"cannot reach the Dask scheduler at 'tcp://127.0.0.1:9'"):
        DaskRunner("tcp://127.0.0.1:9", connect_timeout_s=2)


def test_neither_address_nor_workers_is_refused():
    with pytest.raises(CoverkitError, match="scheduler"):
        DaskRunner(None, workers=None)
