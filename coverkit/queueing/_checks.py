"""Input checks shared by the queueing modules: one-line ModelError messages naming the field and the fix."""

from __future__ import annotations

import math
from typing import Literal

from coverkit.errors import ModelError

QueueKind = Literal["zero", "infinite"]

MIN_PER_H = 60.0
S_PER_H = 3600.0


def check_servers(servers: int, name: str = "servers", minimum: int = 0) -> int:
    if isinstance(servers, bool) or not float(servers).is_integer() or servers < minimum:
        raise ModelError(f"{name} must be a whole number >= {minimum}, got {servers!r}")
    return int(servers)


def check_nonneg(value: float, name: str) -> float:
    value = float(value)
    if not math.isfinite(value) or value < 0:
        raise ModelError(f"{name} must be a finite number >= 0, got {value!r}")
    return value


def check_positive(value: float, name: str) -> float:
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise ModelError(f"{name} must be a finite number > 0, got {value!r}")
    return value


def check_queue(queue: str) -> str:
    if queue not in ("zero", "infinite"):
        raise ModelError(f"queue must be 'zero' (calls lost) or 'infinite' (calls wait), got {queue!r}")
    return queue


def unstable(offered_load: float, servers: int) -> ModelError:
    need = math.floor(offered_load) + 1
    return ModelError(
        f"unstable queue: offered load {offered_load:.4g} erlangs on {servers} servers is utilisation "
        f"{offered_load / max(servers, 1):.3f} >= 1, so waiting calls pile up without bound; use at least {need} "
        "units, lower the call rate or the mean service time, or use queue='zero' (calls lost)"
    )
