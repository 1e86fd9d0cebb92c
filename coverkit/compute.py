"""Where independent blocks of work run: in this process (the default) or spread over a Dask cluster.

Library code with embarrassingly parallel blocks (per-base search chunks, the rows of siting's coverage matrix)
calls :func:`map_blocks` with a module-level function, the list of blocks and the large inputs every block shares
(the network's arrays). The front end picks the runner once, for the whole command, with :func:`use_runner`: the
command line from its scheduler options, a study from its ``[compute]`` section, Python callers directly::

    with use_runner(DaskRunner(workers=4)):
        table = travel_table(net, bases, demand, horizon_s)

A :class:`DaskRunner` sends each shared input to every worker once (``Client.scatter`` with ``broadcast=True``; the
same object is not sent again while it lives, and the workers' copies are released when it is collected), maps the
blocks (``Client.map``) and gathers the results in block order, so the outcome is the same as in process: every
block is computed by the same function on the same inputs and the caller assembles them in the same order
(tests/test_compute.py, tests/test_compute_search.py). ``dask.distributed`` is imported only when a cluster is asked
for.
"""

from __future__ import annotations

import contextlib
import contextvars
import weakref
from collections.abc import Callable, Iterator, Sequence
from typing import Any, Protocol

from coverkit.errors import CoverkitError
from coverkit.progress import note

#: The Dask packages a cluster run needs (one home for the install hint).
DASK_PACKAGES = "dask[distributed]"


class BlockRunner(Protocol):
    """Runs ``fn(block, **shared)`` for every block and returns the results in block order."""

    def map(self, fn: Callable[..., Any], blocks: Sequence[Any], shared: dict[str, Any]) -> list[Any]: ...


class InProcess:
    """Every block in this process, one after the other (the default runner)."""

    def map(self, fn: Callable[..., Any], blocks: Sequence[Any], shared: dict[str, Any]) -> list[Any]:
        return [fn(block, **shared) for block in blocks]

    def __repr__(self) -> str:
        return "InProcess()"


class DaskRunner:
    """Blocks spread over a Dask cluster: an existing scheduler (``address``) or a local one of ``workers``
    processes started for this runner and stopped with it.

    Use it as a context manager (or call :meth:`close`): the client, and a local cluster, live until then.

    Parameters
    ----------
    address
        The scheduler's address (``tcp://host:8786``); None starts a local cluster.
    workers
        Worker processes of a local cluster (one thread each: the searches hold the GIL for most of their time).
    connect_timeout_s
        How long to try reaching ``address`` (s).
    """

    def __init__(
        self, address: str | None = None, *, workers: int | None = None, connect_timeout_s: float = 10.0
    ) -> None:
        if address is None and not workers:
            raise CoverkitError("name a scheduler address or a number of local workers (>= 1).", param="scheduler")
        if workers is not None and workers < 1:
            raise CoverkitError("workers must be >= 1 (the local worker processes to start).", param="workers")
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:  # pragma: no cover - dask is a declared dependency
            raise CoverkitError(f"a cluster run needs {DASK_PACKAGES}; install it with pip.") from None
        self.address, self.workers = address, workers
        self._cluster = None
        if address is None:
            note(f"compute: starting a local Dask cluster of {workers} worker processes")
            self._cluster = LocalCluster(
                n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None
            )
            self.client = Client(self._cluster)
        else:
            try:
                self.client = Client(address, timeout=f"{connect_timeout_s:g}s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise CoverkitError(
                    f"cannot reach the Dask scheduler at '{address}' ({type(exc).__name__}); start it "
                    "(`dask scheduler`) and its workers, or run without a scheduler.",
                    param="scheduler",
                ) from None
        self._sent: dict[int, tuple[Callable[[], Any], Any]] = {}

    def _shared(self, shared: dict[str, Any]) -> dict[str, Any]:
        """Futures of the shared inputs, each sent to every worker once while the object lives (keyed by the object):
        the network's graph, cached on the network, goes once per run; a step's own inputs leave the workers when
        the step lets them go."""
        out = {}
        for key, value in shared.items():
            kept = self._sent.get(id(value))
            if kept is None or kept[0]() is not value:
                kept = (_holder(value, self._sent), self.client.scatter(value, broadcast=True, hash=False))
                self._sent[id(value)] = kept
            out[key] = kept[1]
        return out

    def map(self, fn: Callable[..., Any], blocks: Sequence[Any], shared: dict[str, Any]) -> list[Any]:
        if not len(blocks):
            return []
        futures = self.client.map(fn, list(blocks), pure=False, **self._shared(shared))
        return self.client.gather(futures)

    def describe(self) -> str:
        """One line naming the cluster (for progress and run records)."""
        if self._cluster is not None:
            return f"local Dask cluster, {self.workers} worker processes"
        return f"Dask scheduler {self.address}"

    def close(self) -> None:
        """Close the client (and stop the local cluster)."""
        self._sent.clear()
        self.client.close()
        if self._cluster is not None:
            self._cluster.close()

    def __enter__(self) -> DaskRunner:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"DaskRunner({self.describe()})"


def _holder(value: Any, sent: dict[int, Any]) -> Callable[[], Any]:
    """A callable giving ``value`` back (to tell it from a later object of the same id): a weak reference whose
    object's collection drops its entry from ``sent``, and with it the workers' copy; for objects that take no weak
    reference (numbers, tuples: small) the object itself, kept as long as the runner."""
    try:
        ref = weakref.ref(value)
    except TypeError:
        return lambda: value
    weakref.finalize(value, sent.pop, id(value), None)
    return ref


_IN_PROCESS = InProcess()
_RUNNER: contextvars.ContextVar[BlockRunner | None] = contextvars.ContextVar("coverkit_runner", default=None)


def current_runner() -> BlockRunner:
    """The runner :func:`map_blocks` uses here (:class:`InProcess` unless a front end chose another)."""
    return _RUNNER.get() or _IN_PROCESS


@contextlib.contextmanager
def use_runner(runner: BlockRunner) -> Iterator[BlockRunner]:
    """Run the blocks of every step inside the ``with`` on ``runner``."""
    token = _RUNNER.set(runner)
    try:
        yield runner
    finally:
        _RUNNER.reset(token)


@contextlib.contextmanager
def runner_for(*, scheduler: str | None = None, workers: int | None = None) -> Iterator[BlockRunner]:
    """The runner a front end asked for, in use inside the ``with``: a Dask scheduler address, a local cluster of
    ``workers`` processes, or (neither) this process. A cluster started here is stopped on leaving."""
    if scheduler is None and not workers:
        yield current_runner()
        return
    with DaskRunner(scheduler, workers=workers) as runner, use_runner(runner):
        note(f"compute: blocks run on the {runner.describe()}")
        yield runner


def map_blocks(fn: Callable[..., Any], blocks: Sequence[Any], *, shared: dict[str, Any] | None = None) -> list[Any]:
    """``[fn(block, **shared) for block in blocks]`` on the current runner, in block order.

    ``fn`` must be a module-level function (a cluster pickles it by name); ``shared`` holds the large inputs every
    block reads (sent to each worker once, so they must not be changed in place while they live: make a new
    object instead), the blocks the small ones.

    >>> import operator
    >>> map_blocks(operator.neg, [1, 2, 3])
    [-1, -2, -3]
    """
    return current_runner().map(fn, blocks, shared or {})


__all__ = [
    "DASK_PACKAGES",
    "BlockRunner",
    "DaskRunner",
    "InProcess",
    "current_runner",
    "map_blocks",
    "runner_for",
    "use_runner",
]
