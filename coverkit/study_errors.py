"""Library errors worded for a study file: the study key in place of the library parameter.

A :class:`~coverkit.errors.CoverkitError` about one of the caller's values names the library parameter (``param``).
A study run sets those parameters from keys of the study file, so an error raised inside it names the key the user
wrote (``availability.calls_per_h``), after the study file's path.

>>> from coverkit.errors import PARAM, ModelError
>>> @study_keys
... def solve(study_path):
...     raise ModelError(f"{PARAM} 20 is more than the 5 candidate sites.", param="add")
>>> solve("county.toml")
Traceback (most recent call last):
coverkit.errors.ModelError: county.toml: siting.add 20 is more than the 5 candidate sites.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

from coverkit.errors import CoverkitError

F = TypeVar("F", bound=Callable[..., Any])

#: library parameter -> the study key that sets it
STUDY_KEY_OF_PARAM = {
    "boundary": "roads.boundary",
    "fields": "roads.fields",
    "crs": "roads.crs",
    "add": "siting.add",
    "q": "siting.busy_fraction",
    "calls_per_h": "availability.calls_per_h",
    "mean_service_min": "availability.service_min",
    "reach_m": "outputs.reach_m",
    "units": "units.file",
    "hour": "units.hour",
}


def _study_path(first: Any) -> str:
    path = getattr(first, "path", first)
    return str(path) if isinstance(path, (str, Path)) else "study"


def study_keys(func: F) -> F:
    """Re-raise library errors from ``func`` (whose first argument is the study or its path) with the study key.

    The error keeps its class; an error naming no parameter, or one no study key sets, passes unchanged.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except CoverkitError as exc:
            key = STUDY_KEY_OF_PARAM.get(exc.param or "")
            if key is None:
                raise
            where = _study_path(args[0] if args else kwargs.get("study", kwargs.get("study_path")))
            raise type(exc)(f"{where}: {exc.worded(key)}") from None

    return wrapper  # type: ignore[return-value]
