"""A process-wide setting changed while any caller is inside, and put back when the last one leaves.

Why one home: the GDAL SQLite sync setting of :func:`coverkit.atomic.unsynced_gpkg` and the garbage collector of
:func:`coverkit.cli.startup.collections_paused` are both global to the process, may be entered by several threads of
a server at once, and nest; the counting and the restore belong in one place.
"""

from __future__ import annotations

import contextlib
import threading
from collections.abc import Callable, Iterator


class NestedSetting:
    """Hold a process-wide setting while inside :meth:`held`.

    Parameters
    ----------
    change
        Called when the first holder enters: changes the setting and returns what it was.
    restore
        Called with that value when the last holder leaves.

    >>> state = {"on": True}
    >>> def change():
    ...     was, state["on"] = state["on"], False
    ...     return was
    >>> off = NestedSetting(change, lambda was: state.update(on=was))
    >>> with off.held():
    ...     with off.held():
    ...         inner = state["on"]
    ...     outer = state["on"]
    >>> inner, outer, state["on"]
    (False, False, True)
    """

    def __init__(self, change: Callable[[], object], restore: Callable[[object], None]) -> None:
        self._change, self._restore = change, restore
        self._lock = threading.Lock()
        self._depth = 0
        self._before: object = None

    @contextlib.contextmanager
    def held(self) -> Iterator[None]:
        """The setting changed while inside (nested and concurrent holders share one change)."""
        with self._lock:
            if self._depth == 0:
                self._before = self._change()
            self._depth += 1
        try:
            yield
        finally:
            with self._lock:
                self._depth -= 1
                if self._depth == 0:
                    self._restore(self._before)
