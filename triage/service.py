"""HTTP front end: routing as a service over one workspace, as thin as the command line.

Endpoints (JSON in, JSON out):
    POST /v1/route         one item {"id", "fields", "arrived_at"} or {"items": [...]}: decide, store, answer
    POST /v1/corrections   {"item_id", "queue", "by", "new_queue"}: journal, learn at once, answer the item's new decision
    GET  /v1/health        liveness and the active model version (never needs the token)
    GET  /v1/model         the active model: version, text model, queues, cutoffs, never-auto queues, ...
    GET  /openapi.json     the OpenAPI 3.1 description of all of the above (`OPENAPI`, written by hand)

Every error is `{"error": "<what is wrong and what to do>", "field": "<where>" | null}` with a 4xx status:
400 not JSON, 401 no or wrong bearer token, 404 unknown item, 409 no model yet or a clash with stored state,
413 body or batch too large, 422 a value of the wrong type or shape; 503 when a request overran its time.

Request bodies are checked by the same row checker that checks imported files (`triage.ingest`), so a value
accepted or refused here is accepted or refused there too. Workspace calls run in worker threads, one at a
time under the workspace lock; before each request the active model version is compared with the store's, so a
version activated by another process (training, rollback) is served from the next request on, without a
restart and without failing requests in flight.
"""

from __future__ import annotations

import asyncio
import copy
import functools
import hmac
import ipaddress
import json
import logging
import math
import threading
from collections.abc import Awaitable, Callable, Iterator
from contextlib import asynccontextmanager, contextmanager
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import anyio.to_thread
from starlette.applications import Starlette
from starlette.exceptions import HTTPException
from starlette.requests import Request
from starlette.responses import Response
from starlette.routing import Route
from starlette.types import ASGIApp, Receive, Scope, Send

from triage.app import (
    BadInput,
    Conflict,
    NoModel,
    Reject,
    Schema,
    StoreError,
    UnknownItem,
    UnknownQueue,
    Workspace,
    WorkspaceError,
    read_jsonl_stream,
)
from triage.records import ItemRecord

log = logging.getLogger(__name__)

API_VERSION = "1.0.0"
ITEM_KEYS = ("id", "fields", "arrived_at")
MAX_NAME_CHARS = 100  # queue names
MAX_BY_CHARS = 200
MAX_ID_CHARS = 200
SOURCE = "service"
PUBLIC_PATHS = frozenset({"/v1/health"})
GROUP_ITEMS = 1000  # at most this many items (or max_batch, if larger) routed together by the group commit


# ----------------------------------------------------------------------------------------------------------
# errors and responses


class ApiError(Exception):
    """A request that cannot be served; becomes `{"error": message, "field": field}` with `status`."""

    def __init__(self, status: int, message: str, field: str | None = None,
                 headers: dict[str, str] | None = None) -> None:
        super().__init__(message)
        self.status = status
        self.message = message
        self.field = field
        self.headers = headers or {}


def _json_default(value: Any) -> Any:
    item = getattr(value, "item", None)  # numpy scalars
    if callable(item):
        return item()
    if isinstance(value, frozenset | set | tuple):
        return sorted(value) if isinstance(value, frozenset | set) else list(value)
    raise TypeError(f"cannot send a {type(value).__name__} as JSON")


class JSON(Response):
    """Compact UTF-8 JSON; NaN and infinities are refused rather than sent as invalid JSON."""

    media_type = "application/json"

    def render(self, content: Any) -> bytes:
        return json.dumps(content, ensure_ascii=False, allow_nan=False, separators=(",", ":"),
                          default=_json_default).encode("utf-8")


def _error(status: int, message: str, field: str | None = None,
           headers: dict[str, str] | None = None) -> JSON:
    return JSON({"error": message, "field": field}, status_code=status, headers=headers)


def _kind(v: Any) -> str:
    if v is None:
        return "null"
    if isinstance(v, bool):
        return "a boolean"
    if isinstance(v, dict):
        return "an object"
    if isinstance(v, list):
        return "a list"
    if isinstance(v, str):
        return "a string"
    return "a number"


# ----------------------------------------------------------------------------------------------------------
# the bind rule


def is_loopback(host: str) -> bool:
    """True for localhost, 127.0.0.0/8 and ::1 (with or without brackets)."""
    h = host.strip().lower()
    if h == "localhost":
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


# ----------------------------------------------------------------------------------------------------------
# request bodies


def _parse_json(body: bytes) -> Any:
    if not body.strip():
        raise ApiError(400, "the request body is empty; send a JSON object")
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ApiError(400, f"the request body is not UTF-8 (byte offset {exc.start})") from None

    def no_constant(name: str) -> Any:
        raise ApiError(400, f"the request body is not valid JSON: {name} is not a JSON number")

    try:
        return json.loads(text.removeprefix("\ufeff"), parse_constant=no_constant)
    except json.JSONDecodeError as exc:
        raise ApiError(400, f"the request body is not valid JSON: {exc.msg} "
                            f"(line {exc.lineno}, column {exc.colno})") from None
    except RecursionError:
        raise ApiError(400, "the request body is nested too deeply") from None


def _object(obj: Any, where: str | None) -> dict[str, Any]:
    if not isinstance(obj, dict):
        raise ApiError(422, f"{where or 'the body'} is {_kind(obj)}, expected a JSON object", where)
    return obj


def _unknown_keys(obj: dict[str, Any], allowed: tuple[str, ...], prefix: str) -> None:
    for k in obj:
        if k not in allowed:
            raise ApiError(422, f"unknown key {k!r}; expected {', '.join(allowed)}", f"{prefix}{k}")


class _ItemChecker:
    """Checks route items and turns them into ItemRecords with the ingest row checker."""

    def __init__(self, schema: Schema, max_text_chars: int) -> None:
        self.schema = schema
        self.max_text_chars = max_text_chars
        self.field_names = frozenset(f.name for f in schema.fields)

    def flat(self, obj: Any, prefix: str) -> dict[str, Any]:
        """The shape checks ingest cannot make (it reads flat rows); returns the flat row for the checker."""
        where = prefix[:-1] if prefix else None
        item = _object(obj, where)
        _unknown_keys(item, ITEM_KEYS, prefix)
        if "id" not in item or item["id"] is None:
            raise ApiError(422, "the item has no id", f"{prefix}id")
        item_id = item["id"]
        if isinstance(item_id, bool) or not isinstance(item_id, str | int):
            raise ApiError(422, f"the id is {_kind(item_id)}, expected a string", f"{prefix}id")
        if len(str(item_id)) > MAX_ID_CHARS:
            raise ApiError(422, f"the id is longer than {MAX_ID_CHARS} characters", f"{prefix}id")
        if "fields" not in item:
            raise ApiError(422, "the item has no fields object (send {} when no value is known)",
                           f"{prefix}fields")
        fields = item["fields"]
        if not isinstance(fields, dict):
            raise ApiError(422, f"fields is {_kind(fields)}, expected an object", f"{prefix}fields")
        for name in fields:
            if name not in self.field_names:
                known = ", ".join(sorted(self.field_names))
                raise ApiError(422, f"unknown field {name!r}; this workspace's fields are: {known}",
                               f"{prefix}fields.{name}")
        arrived = item.get("arrived_at")
        if arrived is not None:
            if not isinstance(arrived, str):
                raise ApiError(422, f"arrived_at is {_kind(arrived)}, expected an ISO 8601 date and time",
                               f"{prefix}arrived_at")
            try:
                datetime.fromisoformat(arrived.strip())
            except ValueError:
                raise ApiError(422, f"arrived_at {arrived!r} is not an ISO 8601 date and time "
                                    "(e.g. 2026-03-01T09:00:00Z)", f"{prefix}arrived_at") from None
        raw = dict(fields)
        raw[self.schema.id] = item_id
        if self.schema.time:
            raw[self.schema.time] = arrived
        return raw

    def records(self, items: list[Any], prefixes: list[str]) -> list[ItemRecord]:
        flats = [self.flat(obj, p) for obj, p in zip(items, prefixes, strict=True)]
        lines = [json.dumps(r, ensure_ascii=False, allow_nan=False) for r in flats]
        out: list[ItemRecord] = []
        for result, prefix in zip(read_jsonl_stream(lines, self.schema, source="request",
                                                    max_text_chars=self.max_text_chars),
                                  prefixes, strict=True):
            if isinstance(result, Reject):
                raise ApiError(422, f"{self._name(result.field, prefix) or 'the item'}: {result.reason}",
                               self._name(result.field, prefix))
            out.append(result)
        return out

    def _name(self, field: str | None, prefix: str) -> str | None:
        if field is None:
            return prefix[:-1] or None
        if field == self.schema.id:
            return f"{prefix}id"
        if field == self.schema.time:
            return f"{prefix}arrived_at"
        return f"{prefix}fields.{field}"


def _string(obj: dict[str, Any], key: str, *, required: bool, limit: int) -> str | None:
    v = obj.get(key)
    if v is None:
        if required:
            raise ApiError(422, f"{key} is missing", key)
        return None
    if not isinstance(v, str):
        raise ApiError(422, f"{key} is {_kind(v)}, expected a string", key)
    v = v.strip()
    if required and not v:
        raise ApiError(422, f"{key} is empty", key)
    if len(v) > limit:
        raise ApiError(422, f"{key} is longer than {limit} characters", key)
    return v


# ----------------------------------------------------------------------------------------------------------
# the application


class _Service:
    """The endpoints over one open workspace; every workspace call runs in a worker thread."""

    def __init__(self, ws: Workspace, *, max_body_bytes: int, max_batch: int, request_timeout_s: float) -> None:
        self.ws = ws
        self.max_body_bytes = max_body_bytes
        self.max_batch = max_batch
        self.request_timeout_s = request_timeout_s
        self.items = _ItemChecker(ws.config.schema, ws.config.max_text_chars)
        self.openapi = openapi_document(ws.config.schema, max_batch=max_batch)
        self.groups = _RouteGroups(self._route_group, max_items=max(max_batch, GROUP_ITEMS))

    # -- plumbing ------------------------------------------------------------------------------------------
    @contextmanager
    def _current(self) -> Iterator[Workspace]:
        """The workspace, with the newest active version loaded, held for one request's work.

        Checking the store's active version and loading it happen under the workspace lock, together with the
        request's work: a check made outside it could load a version older than a correction committed by
        another thread in between, and the next correction would then be learned without that one.
        """
        lock: threading.RLock = self.ws.lock  # the workspace's own lock (re-entrant), not a second one
        with lock:
            self.ws.refresh_if_changed()
            yield self.ws

    def _require_model(self, ws: Workspace) -> None:
        if ws.active_version is None:
            raise ApiError(409, "no model has been trained in this workspace yet; run `triage train` first")

    async def _body(self, request: Request) -> bytes:
        limit = self.max_body_bytes
        declared = request.headers.get("content-length")
        if declared is not None:
            try:
                n = int(declared)
            except ValueError:
                raise ApiError(400, f"Content-Length {declared!r} is not a number") from None
            if n > limit:
                raise ApiError(413, f"the body is {n} bytes; the limit is {limit} (send smaller batches)")
        chunks: list[bytes] = []
        size = 0
        async for chunk in request.stream():
            size += len(chunk)
            if size > limit:
                raise ApiError(413, f"the body is over the limit of {limit} bytes (send smaller batches)")
            chunks.append(chunk)
        return b"".join(chunks)

    def _clean(self, message: str) -> str:
        """Messages from the store name its file; a client needs no server path."""
        return message.replace(f"{self.ws.store.path}: ", "").replace(f"{self.ws.root}: ", "")

    def endpoint(self, handler: Callable[[Request], Awaitable[Any]]) -> Callable[[Request], Awaitable[Response]]:
        """Wrap a handler: the time limit, ApiError -> 4xx JSON, anything else -> 500 JSON (and a log line)."""

        @functools.wraps(handler)
        async def run(request: Request) -> Response:
            try:
                async with asyncio.timeout(self.request_timeout_s):
                    result = await handler(request)
                return result if isinstance(result, Response) else JSON(result)
            except ApiError as exc:
                return _error(exc.status, exc.message, exc.field, exc.headers)
            except TimeoutError:
                log.warning("%s %s took longer than %.3g s", request.method, request.url.path,
                            self.request_timeout_s)
                return _error(503, f"the request took longer than {self.request_timeout_s:g} s and was given "
                                   "up; its work may still finish (routed items stored, a correction applied), "
                                   "so check before sending it again", None, {"Retry-After": "1"})
            except Exception:
                log.exception("%s %s failed", request.method, request.url.path)
                return _error(500, "internal error; the server log has the details")

        return run

    async def _thread(self, fn: Callable[..., Any], *args: Any) -> Any:
        # abandon_on_cancel: when the time limit passes the client gets its 503 at once; the worker thread
        # finishes on its own (a thread cannot be stopped), holding the workspace lock until it does
        return await anyio.to_thread.run_sync(functools.partial(fn, *args), abandon_on_cancel=True)

    # -- endpoints -----------------------------------------------------------------------------------------
    async def health(self, request: Request) -> Any:
        def job() -> dict[str, Any]:
            with self._current() as ws:
                v = ws.active_version
                return {"ok": True, "model_version": v.version if v else None}

        return await self._thread(job)

    async def model(self, request: Request) -> Any:
        def job() -> dict[str, Any]:
            with self._current() as ws:
                self._require_model(ws)
                v, model, policy = ws.active_version, ws.model, ws.policy
                assert v is not None and model is not None and policy is not None
                return {
                    "model_version": v.version, "kind": v.kind, "created_at": v.created_at,
                    "text_model": model.spec.text_model, "queues": list(model.queues),
                    "cutoffs": {q: policy.cutoff(q) for q in model.queues},
                    "never_auto": sorted(policy.never_auto), "watch_probability": policy.watch_probability,
                    "temperature": policy.temperature,
                    "fields": [{"name": f.name, "role": f.role.value} for f in ws.config.schema.fields],
                }

        return await self._thread(job)

    async def route(self, request: Request) -> Any:
        body = await self._body(request)

        def job() -> dict[str, Any]:
            obj = _object(_parse_json(body), None)
            single = "items" not in obj
            if single:
                items, prefixes = [obj], [""]
            else:
                _unknown_keys(obj, ("items",), "")
                items = obj["items"]
                if not isinstance(items, list):
                    raise ApiError(422, f"items is {_kind(items)}, expected a list of items", "items")
                if not items:
                    raise ApiError(422, "items is empty; send at least one item", "items")
                if len(items) > self.max_batch:
                    raise ApiError(413, f"{len(items)} items in one request; the limit is {self.max_batch}",
                                   "items")
                prefixes = [f"items[{i}]." for i in range(len(items))]
            records = self.items.records(items, prefixes)
            first: dict[str, int] = {}
            for i, r in enumerate(records):
                j = first.setdefault(r.item_id, i)
                if j != i:
                    raise ApiError(422, f"id {r.item_id!r} is also the id of items[{j}]", f"{prefixes[i]}id")
            decisions = self.groups.submit(_Pending(records, prefixes))
            return {"decision": decisions[0]} if single else {"decisions": decisions}

        return await self._thread(job)

    def _route_group(self, group: list[_Pending]) -> None:
        """Decide and store the items of several requests in one workspace call (one pair of commits)."""
        with self._current() as ws:
            self._require_model(ws)
            ready: list[_Pending] = []
            for job in group:
                clash = ws.stored_with_other_fields(job.records)
                for r, p in zip(job.records, job.prefixes, strict=True):
                    if r.item_id in clash:
                        job.error = ApiError(409, f"item {r.item_id!r} is already stored with other field values; "
                                                  "a corrected item needs a new id", f"{p}id")
                        break
                else:
                    ready.append(job)
            if not ready:
                return
            try:
                decisions, _batch = ws.route_records([r for job in ready for r in job.records], SOURCE)
            except WorkspaceError as exc:
                raise ApiError(status_for(exc), self._clean(str(exc))) from exc
            except StoreError as exc:
                raise ApiError(409, self._clean(str(exc))) from exc
        at = 0
        for job in ready:
            job.decisions = decisions[at:at + len(job.records)]
            at += len(job.records)

    async def correct(self, request: Request) -> Any:
        body = await self._body(request)

        def job() -> dict[str, Any]:
            obj = _object(_parse_json(body), None)
            _unknown_keys(obj, ("item_id", "queue", "by", "new_queue"), "")
            item_id = _string(obj, "item_id", required=True, limit=MAX_ID_CHARS)
            queue = _string(obj, "queue", required=True, limit=MAX_NAME_CHARS)
            by = _string(obj, "by", required=False, limit=MAX_BY_CHARS) or SOURCE
            assert item_id is not None and queue is not None
            with self._current() as ws:
                self._require_model(ws)
                if ws.store.get_item(item_id) is None:
                    raise ApiError(404, f"no item with id {item_id!r}; route it (or import it) first", "item_id")
                try:
                    # a queue not yet known needs "new_queue": true; the rule itself is the app layer's
                    if not isinstance(obj.get("new_queue", False), bool):
                        raise ApiError(422, "new_queue must be true or false", "new_queue")
                    report = ws.correct(item_id, queue, by, new_queue=obj.get("new_queue", False))
                except WorkspaceError as exc:
                    field = "item_id" if isinstance(exc, UnknownItem) else "queue"
                    raise ApiError(status_for(exc), self._clean(str(exc)), field) from exc
                except StoreError as exc:  # e.g. a correction of this item still pending in another process
                    raise ApiError(409, self._clean(str(exc)), "item_id") from exc
            c = report.correction
            return {"correction_id": c.id, "item_id": c.item_id, "before": report.before, "after": report.after,
                    "by": c.by, "at": c.at, "model_version": report.version.version,
                    "decision": report.decision}

        return await self._thread(job)

    async def openapi_json(self, request: Request) -> Any:
        return self.openapi


def status_for(exc: WorkspaceError) -> int:
    """The HTTP status of a typed application error: the one table the whole service uses."""
    for kind, status in ((UnknownItem, 404), (NoModel, 409), (Conflict, 409), (UnknownQueue, 422),
                         (BadInput, 422)):
        if isinstance(exc, kind):
            return status
    return 422  # any other user-facing problem: the request cannot be served as sent


@dataclass
class _Pending:
    """One route request waiting for its decisions."""

    records: list[ItemRecord]
    prefixes: list[str]
    decisions: list[dict[str, Any]] | None = None
    error: BaseException | None = None
    done: bool = False


class _RouteGroups:
    """Group commit for routes: requests that arrive while a route is being stored go together in the next one.

    Storing an item and its decision costs two durable commits (an fsync each), far more than deciding, so
    routing requests one at a time caps throughput at a few hundred per second whatever the number of clients.
    Here the first waiting request leads: it takes every request queued behind it (up to `max_items` items, no
    id twice) and routes them in one workspace call; the others wait and get their share. A lone request is
    routed at once, as before. Each request still gets exactly its own decisions, in its own order.
    """

    def __init__(self, run: Callable[[list[_Pending]], None], max_items: int) -> None:
        self._run = run
        self._max_items = max_items
        self._cv = threading.Condition()
        self._queue: list[_Pending] = []
        self._busy = False

    def submit(self, job: _Pending) -> list[dict[str, Any]]:
        group: list[_Pending] = []
        with self._cv:
            self._queue.append(job)
            while self._busy and not job.done:
                self._cv.wait()
            if not job.done:  # nobody took it: lead the next group
                self._busy = True
                group = self._take(job)
        if group:
            try:
                self._run(group)
            except BaseException as exc:
                for j in group:
                    if j.error is None and j.decisions is None:
                        j.error = exc
            finally:
                with self._cv:
                    for j in group:
                        j.done = True
                    self._busy = False
                    self._cv.notify_all()
        if job.error is not None:
            raise job.error
        assert job.decisions is not None
        return job.decisions

    def _take(self, leader: _Pending) -> list[_Pending]:
        group = [leader]
        ids = {r.item_id for r in leader.records}
        n = len(leader.records)
        for j in self._queue:
            if j is leader:
                continue
            mine = {r.item_id for r in j.records}
            if n + len(j.records) > self._max_items or ids & mine:
                continue
            group.append(j)
            ids |= mine
            n += len(j.records)
        taken = {id(j) for j in group}
        self._queue = [j for j in self._queue if id(j) not in taken]
        return group


class _BearerToken:
    """Pure ASGI middleware: every /v1/ request except the public ones needs `Authorization: Bearer <token>`."""

    def __init__(self, app: ASGIApp, token: str) -> None:
        self.app = app
        self.token = token.encode("utf-8")

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http":
            path = scope.get("path", "")
            if path.startswith("/v1/") and path not in PUBLIC_PATHS and not self._allowed(scope):
                response = _error(401, "missing or wrong bearer token; send 'Authorization: Bearer <token>'",
                                  "Authorization", {"WWW-Authenticate": 'Bearer realm="triage"'})
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


async def _http_error(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, HTTPException)
    messages = {404: f"no endpoint {request.url.path}; see /openapi.json",
                405: f"{request.method} is not allowed on {request.url.path}; see /openapi.json"}
    return _error(exc.status_code, messages.get(exc.status_code, str(exc.detail)), None,
                  dict(exc.headers or {}))


def create_app(workspace: Path | str, *, token: str | None = None, max_body_bytes: int = 1_000_000,
               max_batch: int = 1000, request_timeout_s: float = 10.0) -> Starlette:
    """The ASGI app serving the workspace folder `workspace` (opened now, closed when the app shuts down)."""
    if token is not None and not token.strip():
        raise ValueError("the token is empty; give a long random token or none")
    if max_body_bytes < 1 or max_batch < 1:
        raise ValueError("max_body_bytes and max_batch must be at least 1")
    if not (request_timeout_s > 0 and math.isfinite(request_timeout_s)):
        raise ValueError("request_timeout_s must be a positive number of seconds")
    ws = Workspace.open(workspace)
    svc = _Service(ws, max_body_bytes=max_body_bytes, max_batch=max_batch, request_timeout_s=request_timeout_s)

    @asynccontextmanager
    async def lifespan(app: Starlette) -> Any:
        try:
            yield
        finally:
            ws.close()

    routes = [
        Route("/v1/route", svc.endpoint(svc.route), methods=["POST"]),
        Route("/v1/corrections", svc.endpoint(svc.correct), methods=["POST"]),
        Route("/v1/health", svc.endpoint(svc.health), methods=["GET"]),
        Route("/v1/model", svc.endpoint(svc.model), methods=["GET"]),
        Route("/openapi.json", svc.endpoint(svc.openapi_json), methods=["GET"]),
    ]
    app = Starlette(routes=routes, lifespan=lifespan, exception_handlers={HTTPException: _http_error})
    if token is not None:
        app.add_middleware(_BearerToken, token=token.strip())
    app.state.workspace = ws
    app.state.openapi = svc.openapi
    return app


def serve(workspace: Path | str, host: str = "127.0.0.1", port: int = 8477, token: str | None = None) -> None:
    """Serve the workspace until interrupted. Beyond loopback a token is required (ValueError otherwise)."""
    import uvicorn

    check_bind(host, token)
    if not 0 <= int(port) <= 65535:
        raise ValueError(f"port {port} is not a TCP port (0-65535)")
    app = create_app(workspace, token=token)
    uvicorn.run(app, host=host, port=int(port), log_level="info", server_header=False)


# ----------------------------------------------------------------------------------------------------------
# the OpenAPI document

_ERROR_REF = {"$ref": "#/components/schemas/Error"}


def _answer(description: str) -> dict[str, Any]:
    return {"description": description, "content": {"application/json": {"schema": _ERROR_REF}}}


OPENAPI: dict[str, Any] = {
    "openapi": "3.1.0",
    "info": {
        "title": "triage routing service",
        "version": API_VERSION,
        "description": "Route items (tickets, leads) into queues, explain each decision, learn from corrections. "
                       "Errors are {error, field}. When the server has a token, every /v1/ path except "
                       "/v1/health needs 'Authorization: Bearer <token>'.",
    },
    "servers": [{"url": "http://127.0.0.1:8477"}],
    "security": [{"bearer": []}],
    "paths": {
        "/v1/route": {
            "post": {
                "summary": "Decide the queue of one item or a batch; the items and decisions are stored",
                "operationId": "route",
                "requestBody": {"required": True, "content": {"application/json": {"schema": {
                    "oneOf": [{"$ref": "#/components/schemas/Item"},
                              {"$ref": "#/components/schemas/ItemBatch"}]}}}},
                "responses": {
                    "200": {"description": "The decision (one item) or the decisions in order (a batch)",
                            "content": {"application/json": {"schema": {"oneOf": [
                                {"$ref": "#/components/schemas/RouteOne"},
                                {"$ref": "#/components/schemas/RouteMany"}]}}}},
                    "400": _answer("The body is not JSON"),
                    "401": _answer("No or wrong bearer token"),
                    "409": _answer("No model trained yet, or an id already stored with other field values"),
                    "413": _answer("The body or the batch is over the limit"),
                    "422": _answer("A value of the wrong type or shape; `field` names it"),
                    "503": _answer("The request overran the time limit"),
                },
            }
        },
        "/v1/corrections": {
            "post": {
                "summary": "Correct an item's queue: journaled, learned at once, the next decision uses it",
                "operationId": "correct",
                "requestBody": {"required": True, "content": {"application/json": {
                    "schema": {"$ref": "#/components/schemas/CorrectionRequest"}}}},
                "responses": {
                    "200": {"description": "The correction, the new model version and the item's new decision",
                            "content": {"application/json": {
                                "schema": {"$ref": "#/components/schemas/CorrectionResult"}}}},
                    "400": _answer("The body is not JSON"),
                    "401": _answer("No or wrong bearer token"),
                    "404": _answer("No stored item has this id"),
                    "409": _answer("No model trained yet, or a correction of this item is still pending"),
                    "413": _answer("The body is over the limit"),
                    "422": _answer("A missing or empty value, or a queue name that cannot be a new queue"),
                    "503": _answer("The request overran the time limit"),
                },
            }
        },
        "/v1/health": {
            "get": {
                "summary": "Liveness and the active model version (no token needed)",
                "operationId": "health",
                "security": [],
                "responses": {"200": {"description": "The service is up", "content": {"application/json": {
                    "schema": {"$ref": "#/components/schemas/Health"}}}}},
            }
        },
        "/v1/model": {
            "get": {
                "summary": "The active model and its routing policy",
                "operationId": "model",
                "responses": {
                    "200": {"description": "The active model", "content": {"application/json": {
                        "schema": {"$ref": "#/components/schemas/ModelInfo"}}}},
                    "401": _answer("No or wrong bearer token"),
                    "409": _answer("No model trained yet"),
                },
            }
        },
        "/openapi.json": {
            "get": {
                "summary": "This document",
                "operationId": "openapi",
                "security": [],
                "responses": {"200": {"description": "The OpenAPI document",
                                      "content": {"application/json": {"schema": {"type": "object"}}}}},
            }
        },
    },
    "components": {
        "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}},
        "schemas": {
            "Error": {
                "type": "object", "required": ["error", "field"], "additionalProperties": False,
                "properties": {
                    "error": {"type": "string", "description": "What is wrong and what to do"},
                    "field": {"type": ["string", "null"],
                              "description": "Where: a key path such as items[3].fields.tenure_days"},
                },
            },
            "FieldValue": {"type": ["string", "number", "null"]},
            "Item": {
                "type": "object", "required": ["id", "fields"], "additionalProperties": False,
                "properties": {
                    "id": {"type": ["string", "integer"], "minLength": 1, "maxLength": MAX_ID_CHARS},
                    "fields": {
                        "type": "object", "additionalProperties": False,
                        "description": "Field name -> value. A field left out, or null, is treated as missing. "
                                       "Text fields take text, category fields one value, number fields a "
                                       "number (or a string holding one).",
                        "properties": {},
                    },
                    "arrived_at": {"type": ["string", "null"], "format": "date-time"},
                },
            },
            "ItemBatch": {
                "type": "object", "required": ["items"], "additionalProperties": False,
                "properties": {"items": {"type": "array", "minItems": 1, "maxItems": 1000,
                                         "items": {"$ref": "#/components/schemas/Item"},
                                         "description": "Ids must differ within a batch"}},
            },
            "Evidence": {
                "type": "object", "required": ["feature", "weight", "kind"],
                "properties": {
                    "feature": {"type": "string"},
                    "weight": {"type": "number",
                               "description": "Log-likelihood-ratio for the suggested queue over the runner-up"},
                    "kind": {"type": "string", "enum": ["prior", "token", "field", "absent"],
                             "description": "prior, token, field or absent (a word the item lacks; Bernoulli)"},
                },
            },
            "Decision": {
                "type": "object",
                "required": ["id", "queue", "suggested", "confidence", "held", "reason", "runner_up",
                             "evidence", "model_version"],
                "properties": {
                    "id": {"type": "string"},
                    "queue": {"type": ["string", "null"], "description": "null when held for review"},
                    "suggested": {"type": "string", "description": "The most likely queue"},
                    "confidence": {"type": "number", "minimum": 0, "maximum": 1},
                    "held": {"type": "boolean"},
                    "reason": {"type": "string"},
                    "runner_up": {"type": ["string", "null"]},
                    "runner_up_confidence": {"type": "number", "minimum": 0, "maximum": 1},
                    "held_by": {"type": ["string", "null"], "enum": ["never_auto", "watch_word",
                                "watch_probability", "no_cutoff", "below_cutoff", None],
                                "description": "why it is held; null when routed"},
                    "flag": {"type": ["string", "null"], "enum": ["never_auto", "watch", None],
                             "description": "never_auto or watch: a person must see it (from held_by)"},
                    "watch": {"type": "array", "items": {"type": "string"},
                              "description": "the watch-word hits or never-auto queues behind a watch hold"},
                    "evidence": {"type": "array", "items": {"$ref": "#/components/schemas/Evidence"}},
                    "unseen_words": {"type": "array", "items": {"type": "string"}},
                    "model_version": {"type": "integer"},
                },
            },
            "RouteOne": {
                "type": "object", "required": ["decision"],
                "properties": {"decision": {"$ref": "#/components/schemas/Decision"}},
            },
            "RouteMany": {
                "type": "object", "required": ["decisions"],
                "properties": {"decisions": {"type": "array",
                                             "items": {"$ref": "#/components/schemas/Decision"}}},
            },
            "CorrectionRequest": {
                "type": "object", "required": ["item_id", "queue"], "additionalProperties": False,
                "properties": {
                    "item_id": {"type": "string", "minLength": 1, "maxLength": MAX_ID_CHARS},
                    "queue": {"type": "string", "minLength": 1, "maxLength": MAX_NAME_CHARS,
                              "description": "A known queue, or a new one (letters, digits, '_' or '-')"},
                    "by": {"type": ["string", "null"], "maxLength": MAX_BY_CHARS,
                           "description": "Who corrected it"},
                },
            },
            "CorrectionResult": {
                "type": "object",
                "required": ["correction_id", "item_id", "before", "after", "by", "at", "model_version",
                             "decision"],
                "properties": {
                    "correction_id": {"type": "integer"},
                    "item_id": {"type": "string"},
                    "before": {"type": ["string", "null"], "description": "The item's queue before"},
                    "after": {"type": "string"},
                    "by": {"type": "string"},
                    "at": {"type": "string", "format": "date-time"},
                    "model_version": {"type": "integer", "description": "The version that learned it"},
                    "decision": {"$ref": "#/components/schemas/Decision"},
                },
            },
            "Health": {
                "type": "object", "required": ["ok", "model_version"],
                "properties": {"ok": {"type": "boolean"}, "model_version": {"type": ["integer", "null"]}},
            },
            "ModelInfo": {
                "type": "object",
                "required": ["model_version", "text_model", "queues", "cutoffs", "never_auto",
                             "watch_probability", "temperature", "fields"],
                "properties": {
                    "model_version": {"type": "integer"},
                    "kind": {"type": "string"},
                    "created_at": {"type": "string"},
                    "text_model": {"type": "string"},
                    "queues": {"type": "array", "items": {"type": "string"}},
                    "cutoffs": {"type": "object", "additionalProperties": {"type": ["number", "null"]},
                                "description": "Confidence needed to auto-route; null: every item is held"},
                    "never_auto": {"type": "array", "items": {"type": "string"}},
                    "watch_probability": {"type": "number"},
                    "temperature": {"type": "number"},
                    "fields": {"type": "array", "items": {
                        "type": "object", "required": ["name", "role"],
                        "properties": {"name": {"type": "string"}, "role": {"type": "string"}}}},
                },
            },
        },
    },
}


def openapi_document(schema: Schema | None = None, *, max_batch: int = 1000) -> dict[str, Any]:
    """`OPENAPI` with this workspace's field names and value types (and batch limit) filled in."""
    doc = copy.deepcopy(OPENAPI)
    schemas = doc["components"]["schemas"]
    schemas["ItemBatch"]["properties"]["items"]["maxItems"] = max_batch
    if schema is not None:
        types = {"text": ["string", "number", "null"], "category": ["string", "number", "null"],
                 "number": ["number", "string", "null"]}
        schemas["Item"]["properties"]["fields"]["properties"] = {
            f.name: {"type": types.get(f.role.value, ["string", "number", "null"]),
                     "description": f"{f.role.value} field"} for f in schema.fields}
    return doc


__all__ = ["create_app", "serve", "check_bind", "is_loopback", "OPENAPI", "openapi_document", "ApiError"]
