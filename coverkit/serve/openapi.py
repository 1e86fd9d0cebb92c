"""The OpenAPI 3.1 description of `coverkit serve` (``GET /api/openapi.json``), written by hand, served offline.

One entry per route of :func:`coverkit.serve.app.create_app` (a test checks both ways). Writes (POST) need the
token printed at start (``Authorization: Bearer TOKEN`` or ``?token=``); errors are ``{"error": "one line"}``.
"""

from __future__ import annotations

from typing import Any

from coverkit import CAUTION

_ERROR = {"type": "object", "properties": {"error": {"type": "string"}}, "required": ["error"]}
_JSON = "application/json"


def _answer(description: str, media: str = _JSON, schema: dict | None = None) -> dict[str, Any]:
    return {"description": description, "content": {media: {"schema": schema or {"type": "object"}}}}


def _errors(*codes: int) -> dict[str, Any]:
    words = {
        400: "bad request",
        403: "token missing or wrong",
        404: "no such layer",
        413: "body too large",
        421: "foreign Host header",
        422: "bad input: one line naming the field and the fix",
    }
    return {str(c): _answer(words[c], schema={"$ref": "#/components/schemas/Error"}) for c in codes}


def _query(name: str, text: str) -> dict[str, Any]:
    return {"name": name, "in": "query", "required": False, "schema": {"type": "string"}, "description": text}


_STANDARD = _query("standard", "a standard's name (default: the study's first)")
_DEMAND = _query("demand", "a demand layer's name (default: the study's first)")
_SCENARIO_BODY = {
    "required": True,
    "content": {_JSON: {"schema": {"$ref": "#/components/schemas/Scenario"}}},
}


def _post(summary: str, answer: dict, *params: dict, body: dict | None = None) -> dict[str, Any]:
    return {
        "post": {
            "summary": summary,
            "security": [{"token": []}, {"tokenQuery": []}],
            "parameters": list(params),
            "requestBody": body or _SCENARIO_BODY,
            "responses": {"200": answer, **_errors(403, 413, 421, 422)},
        }
    }


def _get(summary: str, answer: dict, *params: dict, codes: tuple[int, ...] = (421,)) -> dict[str, Any]:
    return {"get": {"summary": summary, "parameters": list(params), "responses": {"200": answer, **_errors(*codes)}}}


def _scenario_schema() -> dict[str, Any]:
    geometry = {
        "type": "object",
        "description": "GeoJSON Polygon or MultiPolygon, lon/lat degrees (EPSG:4326); an open ring is closed",
        "properties": {"type": {"enum": ["Polygon", "MultiPolygon"]}, "coordinates": {"type": "array"}},
        "required": ["type", "coordinates"],
        "additionalProperties": False,
    }
    entries = {"type": "array", "items": {"type": "object"}}
    return {
        "type": "object",
        "properties": {
            "scenario": {
                "type": "object",
                "properties": {"name": {"type": "string"}, "description": {"type": "string"}},
                "required": ["name"],
            },
            "closure": {**entries, "description": "one of edge_ids, way_ids, road_name, polygon (inline geometry)"},
            "slowdown": {**entries, "description": "factor with road_class and/or polygon (inline geometry)"},
            "base_change": {**entries, "description": "one of add, remove, move, units"},
        },
        "required": ["scenario"],
        "$defs": {"InlinePolygon": geometry},
    }


def openapi() -> dict[str, Any]:
    """The OpenAPI 3.1 document (a JSON-ready dict)."""
    geo = _answer("GeoJSON FeatureCollection in EPSG:4326")
    paths = {
        "/": _get("the page", _answer("HTML page", "text/html", {"type": "string"})),
        "/static/{path}": _get(
            "the page's files",
            _answer("a static file", "application/octet-stream", {"type": "string"}),
            codes=(404, 421),
        ),
        "/api/study": _get(
            "study, standards, demand layers, bases, base figures, per base rows, availability, road names and classes",
            _answer("the study"),
        ),
        "/api/layers/{name}": _get(
            "a base layer: roads, bases, boundary, candidates; gaps, first_due, depth of one standard",
            geo,
            {"name": "name", "in": "path", "required": True, "schema": {"type": "string"}},
            _STANDARD,
            codes=(404, 421, 422),
        ),
        "/api/layers/demand": _get("demand density cells (per_km2, weight, unit)", geo, _DEMAND, codes=(421, 422)),
        "/api/compare": _post(
            "a scenario against the base state: comparison rows, changes, changed areas",
            _answer("the comparison"),
            _STANDARD,
            _query("layers", "comma list of gaps, first_due, depth to add after the change"),
        ),
        "/api/scenario.toml": _post(
            "the scenario body as a scenario file", _answer("TOML text", "application/toml", {"type": "string"})
        ),
        "/api/rank": _post(
            "each candidate added alone (one unit) to the current state: demand newly covered",
            _answer("the ranking"),
            _STANDARD,
            _DEMAND,
        ),
        "/api/scenario/read": _post(
            "a scenario file's text to validated tables",
            _answer("{scenario: tables}"),
            body={"required": True, "content": {"text/plain": {"schema": {"type": "string"}}}},
        ),
        "/api/export.gpkg": _post(
            "the current state's layers as a GeoPackage",
            _answer("GeoPackage file", "application/geopackage+sqlite3", {"type": "string", "format": "binary"}),
            _STANDARD,
        ),
        "/api/openapi.json": _get("this document", _answer("OpenAPI 3.1")),
    }
    return {
        "openapi": "3.1.0",
        "info": {
            "title": "coverkit serve",
            "version": "1",
            "description": "Local what-if API of one coverage study. " + CAUTION,
        },
        "paths": paths,
        "components": {
            "schemas": {"Error": _ERROR, "Scenario": _scenario_schema()},
            "securitySchemes": {
                "token": {"type": "http", "scheme": "bearer", "description": "the token printed at start"},
                "tokenQuery": {"type": "apiKey", "in": "query", "name": "token"},
            },
        },
    }


__all__ = ["openapi"]
