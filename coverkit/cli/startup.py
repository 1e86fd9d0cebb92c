"""Keep Python's garbage collector out of the command's start-up and exit.

A ``coverkit`` run imports numpy, scipy, pandas, geopandas and (for the compiled kernels) numba: about a million
objects, none of them garbage. Collections during those imports walk them again and again (about 0.1 s of CPU on
the isochrones command), and the final collections at exit walked them for 0.4-0.8 s on a busy 2-core machine.
:func:`collections_paused` pauses collection while importing; :func:`freeze` moves every object alive into the
permanent generation (:func:`gc.freeze`), so that later collections skip them. Neither changes what a command does:
objects are only kept a little longer (or, frozen, until the process ends), exit handlers still run.
"""

from __future__ import annotations

import contextlib
import gc
from collections.abc import Iterator

from coverkit.process_setting import NestedSetting


def _pause() -> bool:
    was = gc.isenabled()
    gc.disable()
    return was


def _resume(was: object) -> None:
    if was:
        gc.enable()


#: Nested or concurrent pauses (threads of a server importing at once): collection resumes when the last ends.
_PAUSE = NestedSetting(_pause, _resume)


@contextlib.contextmanager
def collections_paused() -> Iterator[None]:
    """No garbage collection while inside (around imports of large libraries); the previous state after.

    >>> import gc
    >>> before = gc.isenabled()
    >>> with collections_paused():
    ...     gc.isenabled()
    False
    >>> gc.isenabled() == before
    True
    """
    with _PAUSE.held():
        yield


def freeze() -> None:
    """Exempt every object alive now from later collections (for a program run only: the libraries' objects live
    until the process ends anyway; callers in Python keep their normal collections)."""
    gc.freeze()
