"""Progress on stderr: counted steps for long work, silenced by ``--quiet``.

A single module-level switch keeps library calls and the CLI consistent: the CLI sets it from ``--quiet``; a
notebook user may call :func:`set_quiet`.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Iterable, Iterator
from typing import TypeVar

T = TypeVar("T")

_state = {"quiet": False}


def set_quiet(quiet: bool) -> None:
    """Silence (``True``) or enable progress messages."""
    _state["quiet"] = bool(quiet)


def is_quiet() -> bool:
    """Whether progress messages are silenced."""
    return _state["quiet"]


def note(message: str) -> None:
    """Print one progress or warning line to stderr unless quiet."""
    if not _state["quiet"]:
        print(message, file=sys.stderr, flush=True)


def warn(message: str) -> None:
    """Print a warning line to stderr; warnings show even when quiet, as they concern the result."""
    print(f"warning: {message}", file=sys.stderr, flush=True)


class Steps:
    """Counted steps: ``[2/5] reading roads ... 1.4 s``.

    Parameters
    ----------
    total
        Number of steps announced.
    label
        Prefix naming the job.
    """

    def __init__(self, total: int, label: str = "coverkit") -> None:
        self.total = total
        self.label = label
        self.done = 0
        self._t0 = time.perf_counter()

    def step(self, message: str) -> None:
        """Announce the next step."""
        self.done += 1
        elapsed = time.perf_counter() - self._t0
        note(f"{self.label} [{self.done}/{self.total}] {message} (t={elapsed:.1f} s)")


def counted(items: Iterable[T], total: int, message: str, every: int = 1) -> Iterator[T]:
    """Yield from ``items`` while printing ``message i/total`` on stderr every ``every`` items.

    On a terminal the count is rewritten in place on one line; otherwise (a log file, a pipe, a notebook's
    captured stream) each count is a whole line, so that lines never run together.
    """
    stream = sys.stderr
    in_place = _is_terminal(stream)
    for i, item in enumerate(items, start=1):
        if not _state["quiet"] and (i % every == 0 or i == total):
            if in_place:
                print(f"\r{message} {i}/{total}", end="" if i < total else "\n", file=stream, flush=True)
            else:
                print(f"{message} {i}/{total}", file=stream, flush=True)
        yield item


def _is_terminal(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # closed or replaced streams
        return False
