"""Safety of the local server: the start token, the Host check and the body size limit (an ASGI middleware).

A web page elsewhere must not reach the API through the user's browser (DNS rebinding, cross-site posts): every
request must name the served ``host:port`` in its ``Host`` header, and every write must carry the token printed at
start (``?token=`` or ``Authorization: Bearer``). Bodies over :data:`MAX_BODY_BYTES` are refused.
"""

from __future__ import annotations

import hmac
import json
import secrets
from typing import Any
from urllib.parse import parse_qs

#: Largest request body accepted (bytes); a scenario of a few hundred changes fits (our choice).
MAX_BODY_BYTES = 256 * 1024


def new_token() -> str:
    """A fresh random token (URL-safe, 32 bytes of entropy from :mod:`secrets`)."""
    return secrets.token_urlsafe(32)


def token_of(scope: dict[str, Any]) -> str:
    """The token a request carries (``Authorization: Bearer`` first, then ``?token=``), or ``""``."""
    for name, value in scope.get("headers", []):
        if name == b"authorization":
            text = value.decode("latin-1")
            if text.lower().startswith("bearer "):
                return text[7:].strip()
    query = parse_qs(scope.get("query_string", b"").decode("latin-1"))
    return query.get("token", [""])[0]


class Guard:
    """ASGI middleware: refuse a foreign ``Host``, a write without the token and an oversized body.

    Parameters
    ----------
    app
        The wrapped ASGI app.
    token
        The start token.
    hosts
        The accepted ``Host`` header values (``host:port`` as served).
    """

    def __init__(self, app: Any, *, token: str, hosts: set[str]) -> None:
        self.app, self.token, self.hosts = app, token, {h.lower() for h in hosts}

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        host = next((v.decode("latin-1").lower() for k, v in scope["headers"] if k == b"host"), "")
        if host not in self.hosts:
            await _refuse(send, 421, f"Host '{host}' is not the served address; open {sorted(self.hosts)[0]}.")
            return
        if scope["method"] not in ("GET", "HEAD") and not hmac.compare_digest(token_of(scope), self.token):
            await _refuse(send, 403, "this request needs the token printed at start (?token= or Authorization).")
            return
        length = next((v for k, v in scope["headers"] if k == b"content-length"), None)
        if length is not None and (not length.isdigit() or int(length) > MAX_BODY_BYTES):
            await _refuse(send, 413, f"request body over {MAX_BODY_BYTES} bytes; send a smaller scenario.")
            return
        total = 0

        async def limited() -> dict[str, Any]:
            nonlocal total
            message = await receive()
            total += len(message.get("body", b""))
            if total > MAX_BODY_BYTES:
                raise BodyTooLarge
            return message

        try:
            await self.app(scope, limited, send)
        except BodyTooLarge:
            await _refuse(send, 413, f"request body over {MAX_BODY_BYTES} bytes; send a smaller scenario.")


class BodyTooLarge(Exception):
    """A streamed body went past :data:`MAX_BODY_BYTES`."""


async def _refuse(send: Any, status: int, message: str) -> None:
    body = json.dumps({"error": message}).encode()
    headers = [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode())]
    await send({"type": "http.response.start", "status": status, "headers": headers})
    await send({"type": "http.response.body", "body": body})


__all__ = ["MAX_BODY_BYTES", "Guard", "new_token", "token_of"]
