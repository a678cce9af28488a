"""The ASGI app and the server around it: routes, middleware order, and connection hygiene.

Middleware, outermost first: the browser guard (Host, Origin, JSON content type), then the bearer token, then
the routes. uvicorn runs with bounded resources: idle keep-alive connections close after
`KEEP_ALIVE_S`, a connection that has not sent a complete request head within `HEADER_TIMEOUT_S` is closed
(uvicorn has no such timer, so `_HeadTimeout` adds one), a request head is at most `MAX_HEAD_BYTES`, at most
`MAX_CONNECTIONS` are served at once (more get 503), and workspace work runs in a fixed pool of threads.
"""

from __future__ import annotations

import asyncio
import math
from collections.abc import Iterable
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

from starlette.applications import Starlette
from starlette.exceptions import HTTPException
from starlette.middleware import Middleware
from starlette.requests import Request
from starlette.responses import Response
from starlette.routing import Route

from triage.app import Workspace
from triage.service.guards import BearerToken, BrowserGuard, check_bind
from triage.service.handlers import Service, unknown_route_error

KEEP_ALIVE_S = 5
HEADER_TIMEOUT_S = 10.0
MAX_HEAD_BYTES = 32 * 1024
MAX_CONNECTIONS = 200
WORKERS = 8


async def _http_error(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, HTTPException)
    return unknown_route_error(exc.status_code, request.url.path, request.method, str(exc.detail),
                               dict(exc.headers or {}))


def create_app(workspace: Path | str, *, token: str | None = None, max_body_bytes: int = 1_000_000,
               max_batch: int = 1000, request_timeout_s: float = 10.0, allowed_hosts: Iterable[str] = (),
               workers: int = WORKERS, min_free_bytes: int | None = None) -> Starlette:
    """The ASGI app serving the workspace folder `workspace` (opened now, closed when the app shuts down).

    `allowed_hosts`: Host names this service answers to besides the loopback names (e.g. the name a proxy
    forwards, or the address it listens on beyond loopback)."""
    if token is not None and not token.strip():
        raise ValueError("the token is empty; give a long random token or none")
    if max_body_bytes < 1 or max_batch < 1 or workers < 1:
        raise ValueError("max_body_bytes, max_batch and workers must be at least 1")
    if not (request_timeout_s > 0 and math.isfinite(request_timeout_s)):
        raise ValueError("request_timeout_s must be a positive number of seconds")
    ws = Workspace.open(workspace, serve_last_good=True)  # a damaged active version never stops serving
    options: dict[str, Any] = {} if min_free_bytes is None else {"min_free_bytes": min_free_bytes}
    svc = Service(ws, max_body_bytes=max_body_bytes, max_batch=max_batch, request_timeout_s=request_timeout_s,
                  workers=workers, **options)

    @asynccontextmanager
    async def lifespan(app: Starlette) -> Any:
        checkpoints = ws.checkpoint_in_background()  # no request waits for a checkpoint of the store's log
        try:
            yield
        finally:
            if checkpoints is not None:
                checkpoints.stop()
            ws.close()

    routes = [
        Route("/v1/route", svc.endpoint(svc.route), methods=["POST"]),
        Route("/v1/corrections", svc.endpoint(svc.correct), methods=["POST"]),
        Route("/v1/health", svc.endpoint(svc.health), methods=["GET"]),
        Route("/v1/model", svc.endpoint(svc.model), methods=["GET"]),
        Route("/openapi.json", svc.endpoint(svc.openapi_json), methods=["GET"]),
        Route("/metrics", svc.endpoint(svc.metrics_text), methods=["GET"]),
    ]
    middleware = [Middleware(BrowserGuard, allowed_hosts=tuple(allowed_hosts))]
    if token is not None:
        middleware.append(Middleware(BearerToken, token=token.strip()))
    app = Starlette(routes=routes, lifespan=lifespan, middleware=middleware,
                    exception_handlers={HTTPException: _http_error})
    app.state.workspace = ws
    app.state.service = svc
    app.state.openapi = svc.openapi
    return app


def _head_timeout_protocol(head_timeout_s: float) -> type:
    """uvicorn's h11 protocol with a timer for the request head (see the module docstring)."""
    from uvicorn.protocols.http.h11_impl import H11Protocol

    class _HeadTimeout(H11Protocol):
        _head_timer: asyncio.TimerHandle | None = None

        def _arm(self) -> None:
            self._disarm()
            self._head_timer = self.loop.call_later(head_timeout_s, self._head_overdue)

        def _disarm(self) -> None:
            if self._head_timer is not None:
                self._head_timer.cancel()
                self._head_timer = None

        def _in_request(self) -> bool:
            return self.cycle is not None and not self.cycle.response_complete

        def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
            super().connection_made(transport)
            self._arm()

        def handle_events(self) -> None:
            super().handle_events()
            if self._in_request():
                self._disarm()

        def on_response_complete(self) -> None:
            super().on_response_complete()
            self._arm()

        def connection_lost(self, exc: Exception | None) -> None:
            self._disarm()
            super().connection_lost(exc)

        def _head_overdue(self) -> None:
            self._head_timer = None
            if not self._in_request() and not self.transport.is_closing():
                self.transport.close()

    return _HeadTimeout


def server_config(app: Any, host: str, port: int, *, head_timeout_s: float = HEADER_TIMEOUT_S,
                  **overrides: Any) -> Any:
    """The uvicorn configuration `serve` uses (tests run the same one, with shorter timers)."""
    import uvicorn

    options: dict[str, Any] = {
        "host": host, "port": int(port), "log_level": "info", "server_header": False,
        "timeout_keep_alive": KEEP_ALIVE_S, "h11_max_incomplete_event_size": MAX_HEAD_BYTES,
        "limit_concurrency": MAX_CONNECTIONS, "http": _head_timeout_protocol(head_timeout_s), "lifespan": "on",
    }
    options.update(overrides)
    return uvicorn.Config(app, **options)


def serve(workspace: Path | str, host: str = "127.0.0.1", port: int = 8477, token: str | None = None,
          allowed_hosts: Iterable[str] = ()) -> None:
    """Serve the workspace until interrupted. Beyond loopback a token is required (ValueError otherwise)."""
    import uvicorn

    check_bind(host, token)
    if not 0 <= int(port) <= 65535:
        raise ValueError(f"port {port} is not a TCP port (0-65535)")
    hosts = [*allowed_hosts, host] if host not in ("0.0.0.0", "::", "") else list(allowed_hosts)
    app = create_app(workspace, token=token, allowed_hosts=hosts)
    uvicorn.Server(server_config(app, host, port)).run()
