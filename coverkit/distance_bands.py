"""Route-length bands: the one home of how a trip's length is put in a band (calibration errors, travel-time spread).

Band k holds lengths in (edge k, edge k+1] km, the first from 0 and the last open (``> 10 km``). The default edges
are our own choice (common practice for reporting errors by trip length, no source).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from coverkit.errors import FieldError

#: Upper edges of the route-length bands (km); the last band is open (``> 10 km``).
DEFAULT_BANDS_KM = (2.0, 5.0, 10.0)


def band_labels(bands_km: Sequence[float] = DEFAULT_BANDS_KM) -> list[str]:
    """Labels of the route-length bands: ``0-2 km``, ``2-5 km``, ..., ``>10 km``.

    >>> band_labels((2, 5))
    ['0-2 km', '2-5 km', '>5 km']
    """
    edges = [0.0, *(float(b) for b in bands_km)]
    labels = [f"{edges[i]:g}-{edges[i + 1]:g} km" for i in range(len(edges) - 1)]
    return [*labels, f">{edges[-1]:g} km"]


def band_of(route_m: np.ndarray, bands_km: Sequence[float] = DEFAULT_BANDS_KM) -> np.ndarray:
    """Band index of each route length (m): band k holds lengths in (edge k, edge k+1] km (the first from 0).

    >>> band_of(np.array([0.0, 2000.0, 2000.5, 12000.0])).tolist()
    [0, 0, 1, 3]
    """
    check_bands(bands_km)
    return np.searchsorted(np.asarray(bands_km, dtype=float) * 1000.0, np.asarray(route_m, dtype=float), side="left")


def check_bands(bands_km: Sequence[float]) -> None:
    """Raise :class:`~coverkit.errors.FieldError` unless the band edges are increasing positive kilometres."""
    b = np.asarray(bands_km, dtype=float)
    if b.ndim != 1 or b.size == 0 or not np.all(np.isfinite(b)) or b[0] <= 0 or np.any(np.diff(b) <= 0):
        raise FieldError(f"distance bands {list(bands_km)} must be increasing positive kilometres, e.g. 2, 5, 10.")
