"""A clear stop before a step would run out of memory: what it needs, what it has, and what to change.

A step estimates its peak (entries x bytes per entry) before it allocates and compares it with the budget of
:func:`coverkit.settings.memory_budget_bytes`; over budget it raises :class:`~coverkit.errors.CoverkitError` in one
line (the command line exits 2), instead of swapping or being killed by the operating system.
"""

from __future__ import annotations

from coverkit import settings
from coverkit.errors import CoverkitError


def gb_text(n_bytes: float) -> str:
    """``"3.2 GB"`` (decimal gigabytes, one decimal; at least 0.1)."""
    return f"{max(n_bytes / 1e9, 0.1):.1f} GB"


def check_memory(step: str, need_bytes: float, advice: str, *, budget_bytes: int | None = None) -> None:
    """Stop when ``step`` would need more than the memory budget.

    Parameters
    ----------
    step
        What is about to run, e.g. ``"the travel times of 300 bases to 1,000,000 points within 3600 s"``.
    need_bytes
        Its estimated peak (bytes).
    advice
        What the user can change, e.g. ``"a shorter horizon, fewer demand points, or a cluster"``.
    budget_bytes
        The budget (default :func:`coverkit.settings.memory_budget_bytes`, read now).

    Raises
    ------
    CoverkitError
        One line: the step, the memory it needs and has, and the advice.
    """
    budget = settings.memory_budget_bytes() if budget_bytes is None else budget_bytes
    if need_bytes > budget:
        raise CoverkitError(
            f"{step} needs about {gb_text(need_bytes)} of memory and {gb_text(budget)} is available; use {advice}."
        )


def release_free_memory() -> None:
    """Hand freed heap pages back to the operating system (glibc's ``malloc_trim``; a no-op elsewhere).

    Why: glibc keeps freed blocks of big temporary arrays in the process's heap, where they still count as resident.
    Before a fork (the network save's GeoPackage writer) those pages would count again in the child.
    """
    import ctypes

    try:
        trim = getattr(ctypes.CDLL(None), "malloc_trim", None)  # the symbols already loaded: libc's on Linux
    except (OSError, TypeError):
        trim = None
    if trim is not None:
        trim(0)


__all__ = ["check_memory", "gb_text", "release_free_memory"]
