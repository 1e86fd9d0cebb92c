"""The kinds of demand file a study may name, one entry each: adding a source is one :class:`DemandSource` in
:data:`DEMAND_SOURCES` (and its reader in :mod:`coverkit.demand`).

A study's ``[[demand]]`` entry names its file under the source's key (``raster = ...``, ``polygons = ...``,
``points = ...``); the study's validation, the default demand kind, the word the report counts its rows in and
the road classes its points may snap to follow from the entry.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class DemandSource:
    """One kind of demand file.

    Attributes
    ----------
    name
        The key of a ``[[demand]]`` entry naming the file, and the ``source`` column of its demand points.
    reader
        Its reader in :mod:`coverkit.demand`.
    default_kind
        The demand kind when the entry gives none: ``residents`` (population) or ``incidents`` (calls).
    row_word
        What one demand point of it is called in tables and the report (plural).
    needs
        Keys the ``[[demand]]`` entry must also give.
    spreads_population
        Population that lives beside the roads (cells, polygon shares): its points never snap onto roads with no
        access from the land beside them (:data:`coverkit.network.road_classes.NO_ACCESS_CLASSES`); point demand
        (incidents) snaps to every class, since crashes happen on motorways.
    """

    name: str
    reader: str
    default_kind: str
    row_word: str
    needs: tuple[str, ...] = ()
    spreads_population: bool = False


DEMAND_SOURCES: tuple[DemandSource, ...] = (
    DemandSource("raster", "demand_from_raster", "residents", "cells", spreads_population=True),
    DemandSource(
        "polygons", "demand_from_polygons", "residents", "points", needs=("population_field",), spreads_population=True
    ),
    DemandSource("points", "demand_from_points", "incidents", "points"),
)

#: Source name -> its entry.
BY_NAME: dict[str, DemandSource] = {s.name: s for s in DEMAND_SOURCES}

#: The source names (the keys a ``[[demand]]`` entry may name its file under).
NAMES: tuple[str, ...] = tuple(BY_NAME)

#: Sources whose points keep off roads with no access from beside them.
POPULATION_SOURCES: tuple[str, ...] = tuple(s.name for s in DEMAND_SOURCES if s.spreads_population)


#: What each demand kind is counted in: residents in people, incidents in calls.
KIND_UNITS: dict[str, str] = {"residents": "people", "incidents": "calls"}


def unit_word(kind: str | None) -> str:
    """What demand of ``kind`` is counted in (``people``, ``calls``); ``calls`` for any kind but residents."""
    return KIND_UNITS["residents"] if kind == "residents" else KIND_UNITS["incidents"]


def kind_of_source(source: str) -> str:
    """The demand kind of a source when none is given (``residents`` for rasters and polygons, ``incidents`` for
    points)."""
    return BY_NAME[source].default_kind if source in BY_NAME else "residents"


def row_word(source: str) -> str:
    """What a demand point of ``source`` is called (``cells``, ``points``); ``points`` for an unknown source."""
    return BY_NAME[source].row_word if source in BY_NAME else "points"
