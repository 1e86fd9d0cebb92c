"""Routes of `coverkit serve` beyond the page, the base layers and the comparison (see :mod:`coverkit.serve.app`).

``GET /api/layers/demand?demand=`` (density cells), ``POST /api/rank`` (candidates added alone),
``POST /api/scenario/read`` (a scenario file's text to validated tables), ``POST /api/export.gpkg`` (the current
state as a GeoPackage) and ``GET /api/openapi.json``. Every error is a 422 with one line naming the field and the fix.
"""

from __future__ import annotations

import json
import threading
import tomllib
from collections.abc import Callable
from typing import Any

from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.responses import JSONResponse, Response
from starlette.routing import Route

from coverkit.demand_sources import unit_word
from coverkit.errors import CoverkitError, StudyError
from coverkit.scenario import scenario_from_table

_READ_WHERE = "scenario text"


def _error(status: int, message: str) -> JSONResponse:
    return JSONResponse({"error": str(message).splitlines()[0]}, status_code=status)


def demand_name(state: Any, name: str | None) -> str:
    """The demand layer called ``name`` (the first when None); a StudyError names the query field otherwise."""
    names = list(state.whatif.demand)
    if name is None:
        return names[0]
    if name not in names:
        raise StudyError(f"query 'demand': '{name}' is not a demand layer; use one of {', '.join(names)}.")
    return name


def read_scenario_text(raw: bytes) -> dict[str, Any]:
    """The tables of a scenario file's text, validated (a polygon naming a file is refused: give it inline)."""
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise StudyError(f"{_READ_WHERE}: not UTF-8 text; send the scenario file as UTF-8 TOML.") from None
    try:
        tables = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{_READ_WHERE}: not valid TOML ({str(exc).splitlines()[0]}); fix the syntax.") from None
    except RecursionError:  # arrays nested hundreds deep: tomllib reads them recursively
        raise StudyError(f"{_READ_WHERE}: arrays nested too deep for a scenario; fix the file.") from None
    scenario_from_table(tables, where=_READ_WHERE)
    return tables


def more_routes(
    state: Any, *, lock: threading.Lock, body_of: Callable, candidates: Any, check_numbers: Callable
) -> list[Route]:
    """The routes of this module, sharing ``lock`` (one what-if at a time), the body reader ``body_of`` and the
    whole-number check ``check_numbers`` of :mod:`coverkit.serve.app`; ``candidates`` are the study's sites."""
    from coverkit.serve.export import EXPORT_FILE, EXPORT_MEDIA_TYPE, export_bytes
    from coverkit.serve.openapi import openapi
    from coverkit.serve.rank import rank_answer
    from coverkit.serve.study_extras import demand_cells

    cells: dict[str, dict[str, Any]] = {}

    def locked(fn: Callable, *args: Any) -> Any:
        with lock:
            return fn(*args)

    async def scenario_of(request: Request) -> Any:
        body = await body_of(request)
        return scenario_from_table(body, where="request body", allow_empty=True)

    async def demand_layer(request: Request) -> Response:
        try:
            name = demand_name(state, request.query_params.get("demand"))
        except CoverkitError as exc:
            return _error(422, str(exc))
        if name not in cells:
            cells[name] = await run_in_threadpool(demand_cells, state.whatif.demand[name], unit_word(state.kinds[name]))
        return JSONResponse(cells[name])

    async def rank(request: Request) -> Response:
        try:
            std = state.standard_name(request.query_params.get("standard"))
            dem = demand_name(state, request.query_params.get("demand"))
            scenario = await scenario_of(request)
            answer = await run_in_threadpool(locked, rank_answer, state, candidates, scenario, std, dem)
        except CoverkitError as exc:
            return _error(422, str(exc))
        return JSONResponse(answer)

    async def scenario_read(request: Request) -> Response:
        try:
            raw = await request.body()
            tables = read_scenario_text(raw)
            check_numbers(tables, "")
            text = json.dumps({"scenario": tables}, ensure_ascii=False, allow_nan=False)
        except CoverkitError as exc:
            return _error(422, str(exc))
        except ValueError:  # an infinite or NaN number the schema lets through (a note cannot hold one)
            return _error(422, f"{_READ_WHERE}: a number is inf or nan; give finite numbers.")
        return Response(text, media_type="application/json")

    async def export(request: Request) -> Response:
        try:
            std = state.standard_name(request.query_params.get("standard"))
            scenario = await scenario_of(request)
            data = await run_in_threadpool(locked, export_bytes, state, scenario, std)
        except CoverkitError as exc:
            return _error(422, str(exc))
        headers = {"Content-Disposition": f'attachment; filename="{EXPORT_FILE}"'}
        return Response(data, media_type=EXPORT_MEDIA_TYPE, headers=headers)

    async def openapi_json(request: Request) -> Response:
        return Response(json.dumps(openapi(), indent=1), media_type="application/json")

    return [
        Route("/api/layers/demand", demand_layer),
        Route("/api/rank", rank, methods=["POST"]),
        Route("/api/scenario/read", scenario_read, methods=["POST"]),
        Route("/api/export.gpkg", export, methods=["POST"]),
        Route("/api/openapi.json", openapi_json),
    ]


__all__ = ["demand_name", "more_routes", "read_scenario_text"]
