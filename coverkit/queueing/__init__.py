"""Queueing models of unit availability: Erlang B and C, and the hypercube model.

A drive-time map assumes the closest unit is always free. These functions say how often it is not, and which unit
answers instead. Pure functions on numpy arrays: no file reading, no printing beyond progress notes.

Conventions
-----------
* Call rates are in calls per hour (``calls_per_h``), the mean service time (the time a unit is busy per call) in
  minutes (``mean_service_min``), travel times and standards in seconds (``travel_s``, ``standard_s``).
* ``N`` units are servers with one common service rate ``mu = 60 / mean_service_min`` per hour. Several units at one
  station are simply several servers: see :func:`expand_station_units` and :func:`unit_travel_s`.
* Demand atoms (demand points) are rows; a dispatch preference list per atom is an ``(n_atoms, N)`` integer array
  listing every unit once, closest first (see :func:`preference_lists`).
* ``queue="zero"``: a call that finds every unit busy is lost (served elsewhere, e.g. by mutual aid).
  ``queue="infinite"``: it waits first-come first-served and is served by the first unit to become free.

Sources
-------
* A. K. Erlang (1917), "Solution of some problems in the theory of probabilities of significance in automatic
  telephone exchanges", Elektroteknikeren 13 — the loss formula (Erlang B) and the waiting formula (Erlang C).
* R. C. Larson (1974), "A hypercube queuing model for facility location and redistricting in urban emergency
  services", Computers & Operations Research 1(1) — the exact 2^N-state model.
* R. C. Larson (1975), "Approximating the performance of urban emergency service systems", Operations Research
  23(5) — the approximation with correction factors Q(N, rho, j).
* R. C. Larson & A. R. Odoni (1981), *Urban Operations Research*, Prentice-Hall, §5.5.3.

Results are planning estimates, not for live dispatch; validate against local response data.
"""

from __future__ import annotations

from coverkit.queueing.erlang import (
    busy_count_distribution,
    erlang_b,
    erlang_c,
    larson_correction,
    offered_load,
    utilisation,
)
from coverkit.queueing.hypercube import (
    AUTO_EXACT_UNITS,
    EXACT_MAX_UNITS,
    HypercubeResult,
    hypercube,
    hypercube_approx,
    hypercube_exact,
)
from coverkit.queueing.response import availability_coverage, expected_travel_s
from coverkit.queueing.units import expand_station_units, preference_lists, unit_travel_s

__all__ = [
    "AUTO_EXACT_UNITS",
    "EXACT_MAX_UNITS",
    "HypercubeResult",
    "availability_coverage",
    "busy_count_distribution",
    "erlang_b",
    "erlang_c",
    "expand_station_units",
    "expected_travel_s",
    "hypercube",
    "hypercube_approx",
    "hypercube_exact",
    "larson_correction",
    "offered_load",
    "preference_lists",
    "unit_travel_s",
    "utilisation",
]
