"""The registries of what users extend agree with the modules they describe.

Outside checks: road class names are OpenStreetMap ``highway`` values and ``oneway=yes`` is implied on
``highway=motorway`` (OSM wiki, Key:highway and Key:oneway, from memory); each covering model's citation is the
published source its formulation in coverkit.siting names (Church & ReVelle 1974; Toregas et al. 1971; Hogan &
ReVelle 1986; Daskin 1983; Hakimi 1964).
"""

from __future__ import annotations

import inspect

import pytest

from coverkit import demand, settings, siting, siting_models
from coverkit.demand_sources import DEMAND_SOURCES
from coverkit.errors import ModelError
from coverkit.network import load_profile, shipped_profiles
from coverkit.network.road_classes import (
    BY_NAME,
    CLASS_ORDER,
    IMPLIED_ONEWAY_CLASSES,
    NO_ACCESS_CLASSES,
    NO_STATION_CLASSES,
    ROAD_CLASSES,
)


def test_every_class_a_shipped_profile_drives_is_registered():
    """A profile class with no registry entry would have no hierarchy rank, snapping rule or map width."""
    for name in shipped_profiles():
        missing = set(load_profile(name).road_classes) - set(BY_NAME)
        assert not missing, f"profile {name}: classes {sorted(missing)} are not in coverkit.network.road_classes"


def test_road_class_rules_follow_the_osm_conventions():
    """OSM wiki (from memory): oneway implied on motorways only; links are not a level of the hierarchy; the
    main hierarchy runs motorway > trunk > primary > secondary > tertiary > unclassified > residential."""
    assert IMPLIED_ONEWAY_CLASSES == {"motorway"}
    assert all(BY_NAME[c].rank is None for c in BY_NAME if c.endswith("_link"))
    main = ["motorway", "trunk", "primary", "secondary", "tertiary", "unclassified", "residential"]
    assert [c for c in CLASS_ORDER if c in main] == main
    # population is never served from a motorway carriageway or ramp; stations never stand on one
    assert {"motorway", "motorway_link"} <= set(NO_ACCESS_CLASSES)
    assert {"motorway", "motorway_link"} == NO_STATION_CLASSES
    assert len({c.name for c in ROAD_CLASSES}) == len(ROAD_CLASSES)


@pytest.mark.parametrize("model", siting_models.MODEL_LIST, ids=lambda m: m.name)
def test_each_model_names_a_siting_function_citing_its_source(model):
    """The registry's function exists and its docstring cites the same first author and year."""
    fn = model.function
    assert fn is getattr(siting, model.function_name)
    author = model.citation.split()[0].rstrip(",")
    year = model.citation.split()[-1]
    doc = inspect.getdoc(fn) or ""
    assert author in doc and year in doc, f"{model.name}: {model.citation} not cited in siting.{model.function_name}"
    assert set(model.needs) | set(model.optional) <= set(siting_models.PARAMETERS)


def test_model_objective_words_read_as_before():
    """Worked values: 30 of 120 weight covered is 25.0 %; 90 s is 1.50 min; an LSCP count is a whole number."""
    by = siting_models.BY_NAME
    assert by["mclp"].objective_text(30.0, 120.0) == "30.0 of 120.0 (25.0 %)"
    assert by["p-median"].objective_text(90.0, 1.0) == "90.0 s (1.50 min)"
    assert by["lscp"].objective_text(3.0, 1.0) == "3"
    with pytest.raises(ModelError, match="unknown; use one of mclp, lscp"):
        siting_models.model_named("nearest")


def test_each_demand_source_has_its_reader():
    for source in DEMAND_SOURCES:
        assert callable(getattr(demand, source.reader)), source.name
        assert source.default_kind in settings.DEMAND_KINDS


def test_area_grid_reach_is_the_polygon_reach_plus_its_margin():
    """The one home of the 150 m reach and its 50 m grid margin (coverage's default grid reach is their sum)."""
    from coverkit.coverage import DEFAULT_REACH_M
    from coverkit.isochrones import DEFAULT_REACH_M as POLYGON_REACH_M

    assert DEFAULT_REACH_M == POLYGON_REACH_M + settings.AREA_REACH_MARGIN_M == 200.0
    assert settings.OutputsSettings(reach_m=300.0).area_reach_m == 350.0
