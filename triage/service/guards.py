"""Who may talk to the service: the bind rule, the bearer token, and the browser guard.

A service on 127.0.0.1 is still reachable from a web page the operator has open: the browser will send a
cross-site `text/plain` POST (no preflight), and DNS rebinding lets a page on `evil.example` resolve its own
name to 127.0.0.1 and read the answers. So every request must carry a Host this service answers to (loopback
names, the address it listens on, and any configured name), must not come from another origin (a browser
always sends `Origin` on cross-site POSTs; `Sec-Fetch-Site: cross-site` is refused too), and a POST must say
`Content-Type: application/json`, which a page can only send after a CORS preflight this service never grants.
"""

from __future__ import annotations

import hmac
import ipaddress
from collections.abc import Iterable
from urllib.parse import urlsplit

from starlette.types import ASGIApp, Receive, Scope, Send

from triage.service.errors import error_response

PUBLIC_PATHS = frozenset({"/v1/health"})
MIN_TOKEN_CHARS = 16  # off loopback: a short token can be guessed (common practice, no source)
LOOPBACK_NAMES = ("localhost", "127.0.0.1", "::1")


def is_loopback(host: str) -> bool:
    """True for localhost, 127.0.0.0/8 and ::1 (with or without brackets)."""
    h = host.strip().lower()
    if h == "localhost" or h.endswith(".localhost"):
        return True
    try:
        return ipaddress.ip_address(h.strip("[]")).is_loopback
    except ValueError:
        return False


def check_bind(host: str, token: str | None) -> None:
    """Refuse to listen beyond this machine without a token: anyone on the network could route and correct."""
    if token is not None and not token.strip():
        raise ValueError("the token is empty; give a long random token or none")
    if not is_loopback(host) and token is None:
        raise ValueError(
            f"refusing to listen on {host!r} without a token: any machine that can reach it could route items "
            "and correct queues. Listen on 127.0.0.1, or give a token (clients then send "
            "'Authorization: Bearer <token>')"
        )
    if not is_loopback(host) and token is not None and len(token.strip()) < MIN_TOKEN_CHARS:
        raise ValueError(f"the token has {len(token.strip())} characters; listening on {host!r} needs at "
                         f"least {MIN_TOKEN_CHARS} (e.g. `python -c 'import secrets; print(secrets.token_urlsafe())'`)")


def _host_name(value: str) -> str:
    """The name part of a Host header or an origin's netloc, lower case, without port or brackets."""
    value = value.strip().lower()
    if value.startswith("["):
        return value[1:].split("]", 1)[0]
    if value.count(":") > 1:  # a bare IPv6 address
        return value
    return value.rsplit(":", 1)[0] if ":" in value else value


class BrowserGuard:
    """Pure ASGI middleware: expected Host, no foreign Origin, JSON bodies on POST (see the module docstring)."""

    def __init__(self, app: ASGIApp, allowed_hosts: Iterable[str] = ()) -> None:
        self.app = app
        self.allowed = {_host_name(h) for h in (*LOOPBACK_NAMES, *allowed_hosts) if h}

    def host_allowed(self, name: str) -> bool:
        return name in self.allowed or is_loopback(name)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            problem = self._problem(scope)
            if problem is not None:
                status, message, field = problem
                await error_response(status, message, field)(scope, receive, send)
                return
        await self.app(scope, receive, send)

    def _problem(self, scope: Scope) -> tuple[int, str, str] | None:
        headers: dict[bytes, bytes] = {}
        for name, value in scope.get("headers", []):
            headers.setdefault(name, value)
        host = headers.get(b"host", b"").decode("latin-1")
        if not host or not self.host_allowed(_host_name(host)):
            return (400, f"this service does not answer to the host {host[:100]!r}; use 127.0.0.1 or "
                         "localhost (or start it with --allow-host NAME)", "Host")
        origin = headers.get(b"origin")
        if origin is not None:
            text = origin.decode("latin-1")
            netloc = urlsplit(text).netloc
            if text == "null" or not netloc or not self.host_allowed(_host_name(netloc)):
                return 403, f"cross-origin requests are refused (Origin {text[:100]!r})", "Origin"
        if headers.get(b"sec-fetch-site", b"") == b"cross-site":
            return 403, "cross-site requests are refused", "Sec-Fetch-Site"
        if scope.get("method") == "POST":
            ctype = headers.get(b"content-type", b"").decode("latin-1")
            if ctype.split(";", 1)[0].strip().lower() != "application/json":
                return (415, f"send the body as JSON with 'Content-Type: application/json' "
                             f"(got {ctype[:100]!r})", "Content-Type")
        return None


class BearerToken:
    """Pure ASGI middleware: every /v1/ request except the public ones, and /metrics (per-queue counts), needs
    `Authorization: Bearer <token>`."""

    def __init__(self, app: ASGIApp, token: str) -> None:
        self.app = app
        self.token = token.encode("utf-8")

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            path = scope.get("path", "")
            guarded = (path.startswith("/v1/") and path not in PUBLIC_PATHS) or path == "/metrics"
            if guarded and not self._allowed(scope):
                response = error_response(401, "missing or wrong bearer token; send 'Authorization: Bearer "
                                               "<token>'", "Authorization",
                                          {"WWW-Authenticate": 'Bearer realm="triage"'})
                await response(scope, receive, send)
                return
        await self.app(scope, receive, send)

    def _allowed(self, scope: Scope) -> bool:
        for name, value in scope.get("headers", []):
            if name == b"authorization":
                scheme, _, given = value.partition(b" ")
                if scheme.lower() == b"bearer":
                    return hmac.compare_digest(given.strip(), self.token)
                return False
        return False
