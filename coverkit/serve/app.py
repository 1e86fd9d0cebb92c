"""The web app of `coverkit serve`: the page, its static files and the JSON API (Starlette).

Routes: ``GET /`` (the page), ``GET /static/...``, ``GET /api/study``, ``GET /api/layers/{name}`` (``roads``,
``bases``, ``boundary``, ``candidates``; ``gaps``, ``first_due``, ``depth`` with ``?standard=``), ``POST
/api/compare`` (a scenario as JSON, ``?standard=`` for the changed areas) and ``POST /api/scenario.toml`` (the
same body as a scenario file); :mod:`coverkit.serve.routes_more` adds the demand density layer, ``/api/rank``,
``/api/scenario/read``, ``/api/export.gpkg`` and ``/api/openapi.json``. Every answer is a planning estimate (see
``coverkit.CAUTION``).
"""

from __future__ import annotations

import json
import threading
from pathlib import Path
from typing import Any

from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.responses import FileResponse, JSONResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from coverkit.errors import CoverkitError
from coverkit.scenario import scenario_from_table, scenario_text
from coverkit.serve.rank import study_candidates
from coverkit.serve.routes_more import more_routes
from coverkit.serve.security import Guard
from coverkit.serve.state import BaseState, after_layers
from coverkit.serve.study_extras import study_extras

STATIC = Path(__file__).parent / "static"
#: Whole numbers in a body must be exact in JavaScript too (2**53, the largest safe integer there).
_MAX_INT = 2**53
_SCALAR_LAYERS = ("roads", "bases", "boundary", "candidates")
_STANDARD_LAYERS = ("gaps", "first_due", "depth")


def _error(status: int, message: str) -> JSONResponse:
    return JSONResponse({"error": message}, status_code=status)


def _check_numbers(value: Any, key: str) -> None:
    """Refuse whole numbers beyond +-2**53 anywhere in a body (one line naming the key)."""
    if isinstance(value, dict):
        for k, v in value.items():
            _check_numbers(v, f"{key}.{k}" if key else str(k))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _check_numbers(v, f"{key}[{i}]")
    elif isinstance(value, int) and not isinstance(value, bool) and abs(value) > _MAX_INT:
        raise CoverkitError(f"request body: key '{key}' is {value}, beyond +-2**53; give a smaller whole number.")


async def _scenario_body(request: Request) -> dict[str, Any]:
    raw = await request.body()
    try:
        body = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        raise CoverkitError("request body: not JSON; send the scenario file's tables as a JSON object.") from None
    if not isinstance(body, dict):
        raise CoverkitError("request body: a scenario is a JSON object with 'scenario' and its changes.")
    try:
        _check_numbers(body, "")
    except RecursionError:  # json reads deeper nesting than a check walking it can: no scenario nests so deep
        raise CoverkitError("request body: nested too deep for a scenario; send the scenario file's tables.") from None
    return body


def create_app(state: BaseState, *, token: str, hosts: set[str]) -> Any:
    """The ASGI app serving ``state`` (read only), guarded by :class:`coverkit.serve.security.Guard`.

    Parameters
    ----------
    state
        The computed base state.
    token
        The start token every write must carry.
    hosts
        The accepted ``Host`` header values (``host:port``).
    """
    # one what-if at a time, off the event loop (the page and its layers stay served meanwhile): the engine is not
    # written to, but its caches (edge trees) fill on first use
    lock = threading.Lock()

    def locked_compare(scenario: Any, std: str | None, layers: tuple[str, ...]) -> dict[str, Any]:
        with lock:
            return state.compare(scenario, std, layers=layers)

    async def page(request: Request) -> Response:
        return FileResponse(STATIC / "index.html", headers={"Cache-Control": "no-store"})

    extras = study_extras(state)

    async def study(request: Request) -> Response:
        return JSONResponse({**state.info, **extras})

    async def layer(request: Request) -> Response:
        name = request.path_params["name"]
        if name in _STANDARD_LAYERS:
            try:
                std = state.standard_name(request.query_params.get("standard"))
            except CoverkitError as exc:
                return _error(422, str(exc))
            return JSONResponse(state.layers[f"{name}/{std}"])
        if name in _SCALAR_LAYERS and name in state.layers:
            return JSONResponse(state.layers[name])
        known = [n for n in (*_SCALAR_LAYERS, *_STANDARD_LAYERS) if n in state.layers or n in _STANDARD_LAYERS]
        known.append("demand")  # served by coverkit.serve.routes_more
        return _error(404, f"no layer '{name}'; layers are {', '.join(known)}.")

    async def compare(request: Request) -> Response:
        try:
            body = await _scenario_body(request)
            scenario = scenario_from_table(body, where="request body")
            std = request.query_params.get("standard")
            layers = after_layers(request.query_params.get("layers"))
            answer = await run_in_threadpool(locked_compare, scenario, std, layers)
        except CoverkitError as exc:
            return _error(422, str(exc).splitlines()[0])
        return JSONResponse(answer)

    async def scenario_file(request: Request) -> Response:
        try:
            body = await _scenario_body(request)
            scenario_from_table(body, where="request body")
        except CoverkitError as exc:
            return _error(422, str(exc).splitlines()[0])
        return Response(scenario_text(body), media_type="application/toml")

    routes = [
        Route("/", page),
        Route("/api/study", study),
        *more_routes(
            state, lock=lock, body_of=_scenario_body, candidates=study_candidates(state), check_numbers=_check_numbers
        ),
        Route("/api/layers/{name}", layer),
        Route("/api/compare", compare, methods=["POST"]),
        Route("/api/scenario.toml", scenario_file, methods=["POST"]),
        Mount("/static", StaticFiles(directory=STATIC), name="static"),
    ]
    return Guard(Starlette(routes=routes), token=token, hosts=hosts)


__all__ = ["create_app"]
