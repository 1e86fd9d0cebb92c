"""`coverkit serve`: a study's base state behind a local web page and a JSON API.

:func:`serve` computes the base state once (:class:`coverkit.serve.state.BaseState`), prints one ``ready URL`` line
on stdout and serves until interrupted. Planning estimates only: not for live dispatch or routing.
"""

from __future__ import annotations

import ipaddress
import sys
from pathlib import Path

#: Port served when none is asked for (our choice, unassigned by IANA).
DEFAULT_PORT = 8750
DEFAULT_HOST = "127.0.0.1"


def is_loopback(host: str) -> bool:
    """True for localhost and loopback addresses (127.0.0.0/8, ::1)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def serve(
    study_path: str | Path, *, host: str = DEFAULT_HOST, port: int = DEFAULT_PORT, open_browser: bool = True
) -> int:
    """Compute the study's base state, print ``ready http://HOST:PORT/?token=TOKEN`` and serve until Ctrl-C."""
    import uvicorn

    from coverkit.serve.app import create_app
    from coverkit.serve.security import new_token
    from coverkit.serve.state import BaseState

    if not is_loopback(host):
        print(
            f"warning: serving on {host}, reachable from other machines; anyone with the token can run scenarios.",
            file=sys.stderr,
        )
    import socket

    from coverkit.errors import CoverkitError

    state = BaseState(study_path)
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    # IPPROTO_TCP named: asyncio turns Nagle off (TCP_NODELAY) only on sockets made with it, and with Nagle on,
    # every answer on a kept-alive connection waits ~40 ms for the client's delayed ACK
    sock = socket.socket(family, socket.SOCK_STREAM, socket.IPPROTO_TCP)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((host.strip("[]"), port))
    except OSError as exc:
        sock.close()
        raise CoverkitError(f"cannot serve on {host}:{port} ({exc.strerror}); give another port or host.") from None
    port = sock.getsockname()[1]
    token = new_token()
    shown = f"[{host.strip('[]')}]" if ":" in host else host
    hosts = {f"{shown}:{port}"}
    if is_loopback(host):
        hosts |= {f"localhost:{port}", f"127.0.0.1:{port}"}
    url = f"http://{shown}:{port}/?token={token}"
    config = uvicorn.Config(create_app(state, token=token, hosts=hosts), log_level="warning")
    server = uvicorn.Server(config)

    async def run() -> None:
        config.load()
        server.lifespan = config.lifespan_class(config)
        await server.startup(sockets=[sock])
        if server.should_exit:
            return
        print(f"ready {url}", flush=True)
        if open_browser:
            import webbrowser

            webbrowser.open(url)
        await server.main_loop()
        await server.shutdown(sockets=[sock])

    import asyncio

    try:
        asyncio.run(run())
    except KeyboardInterrupt:
        pass
    return 0


__all__ = ["DEFAULT_HOST", "DEFAULT_PORT", "is_loopback", "serve"]
