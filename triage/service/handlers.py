"""The endpoints over one open workspace. Each handler checks its body first, then does one workspace call.

Workspace calls run in a bounded pool of worker threads (`workers`), one at a time under the workspace lock.
Time limit: a request that has not *started* its work within `request_timeout_s` gets 503 and nothing is done;
once the work has started it is finished and answered (a thread cannot be stopped, and answering "failed" for
work that went on to be done would make every retry a double). So a non-2xx answer always means "not done".
"""

from __future__ import annotations

import asyncio
import functools
import logging
import shutil
import threading
import time
from collections.abc import Awaitable, Callable, Iterator
from contextlib import contextmanager
from typing import Any

import anyio
import anyio.to_thread
from starlette.requests import Request
from starlette.responses import Response

from triage.app import (
    BadInput,
    Conflict,
    NoModel,
    StoreError,
    UnknownItem,
    UnknownQueue,
    Workspace,
    WorkspaceError,
)
from triage.service.errors import JSON, ApiError, busy, error_response, is_disk_full, store_failure, to_json
from triage.service.groups import NotStarted, Pending, RouteGroups
from triage.service.metrics import ServiceMetrics
from triage.service.openapi import openapi_document
from triage.service.validation import MAX_ID_CHARS, ItemChecker, correction_request

log = logging.getLogger(__name__)

SOURCE = "service"
GROUP_ITEMS = 1000  # at most this many items (or max_batch, if larger) routed together by the group commit
MIN_FREE_BYTES = 64 * 1024 * 1024  # below this, health says degraded: the next model version may not fit
KEY_HEADER = "idempotency-key"


class Service:
    """The endpoints over one open workspace; every workspace call runs in a worker thread."""

    def __init__(self, ws: Workspace, *, max_body_bytes: int, max_batch: int, request_timeout_s: float,
                 workers: int = 8, min_free_bytes: int = MIN_FREE_BYTES) -> None:
        self.ws = ws
        self.max_body_bytes = max_body_bytes
        self.max_batch = max_batch
        self.request_timeout_s = request_timeout_s
        self.min_free_bytes = min_free_bytes
        self.items = ItemChecker(ws.config.schema, ws.config.max_text_chars)
        self.openapi = openapi_document(ws.config.schema, max_batch=max_batch)
        self.groups = RouteGroups(self._route_group, max_items=max(max_batch, GROUP_ITEMS))
        self.limiter = anyio.CapacityLimiter(workers)
        self.workers = workers
        self.metrics = ServiceMetrics()
        # what health reports without taking any lock: set by the requests that find out
        self._last_write_full = False

    # -- plumbing ------------------------------------------------------------------------------------------
    @contextmanager
    def _current(self, deadline: float) -> Iterator[Workspace]:
        """The workspace, with the newest loadable active version, held for one request's work.

        Checking the store's active version and loading it happen under the workspace lock, together with the
        request's work: a check made outside it could load a version older than a correction committed by
        another thread in between. The lock is waited for only until the deadline (then: 503, not done).
        A version that cannot be loaded (files lost or damaged) is reported by health and the one already
        loaded keeps serving.
        """
        lock: threading.RLock = self.ws.lock  # the workspace's own lock (re-entrant), not a second one
        if not lock.acquire(timeout=max(deadline - time.monotonic(), 0.0)):
            raise NotStarted
        try:
            self._refresh()
            yield self.ws
        finally:
            lock.release()

    def _refresh(self) -> None:
        # a version that cannot be loaded is kept as ws.load_problem (health reports it) and the last good one
        # keeps serving; this never raises for it
        self.ws.refresh_if_changed()

    def _require_model(self, ws: Workspace) -> None:
        if ws.active_version is None:
            raise ApiError(409, "no model has been trained in this workspace yet; run `triage train` first")

    async def _body(self, request: Request, deadline: float) -> bytes:
        """The body, read within the request's time (a client trickling it in gets 408, nothing done)."""
        try:
            async with asyncio.timeout(max(deadline - time.monotonic(), 0.001)):
                return await self._read(request)
        except TimeoutError:
            raise ApiError(408, "the request body did not arrive in time; nothing was done") from None

    async def _read(self, request: Request) -> bytes:
        limit = self.max_body_bytes
        declared = request.headers.get("content-length")
        if declared is not None:
            try:
                n = int(declared)
            except ValueError:
                raise ApiError(400, f"Content-Length {declared[:40]!r} is not a number") from None
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
        return message.replace(f"{self.ws.store_path}: ", "").replace(f"{self.ws.root}/", "") \
            .replace(f"{self.ws.root}: ", "")

    def _failure(self, exc: BaseException, field: str | None = None) -> ApiError:
        self._last_write_full = is_disk_full(exc)
        self.metrics.store_errors.inc()
        return store_failure(exc, self._clean(str(exc)), field)

    def endpoint(self, handler: Callable[[Request, float], Awaitable[Any]]) -> Callable[[Request], Awaitable[Response]]:
        """Wrap a handler: its deadline, ApiError -> 4xx/5xx JSON, anything else -> 500 JSON (and a log line)."""

        @functools.wraps(handler)
        async def run(request: Request) -> Response:
            started = time.monotonic()
            response = await answer(request, started + self.request_timeout_s)
            self.metrics.request(handler.__name__, response.status_code, time.monotonic() - started)
            return response

        async def answer(request: Request, deadline: float) -> Response:
            try:
                result = await handler(request, deadline)
                return result if isinstance(result, Response) else JSON(result)
            except ApiError as exc:
                return error_response(exc.status, exc.message, exc.field, exc.headers)
            except NotStarted:
                log.warning("%s %s not started within %.3g s", request.method, request.url.path,
                            self.request_timeout_s)
                return error_response(503, f"the service is busy: the request waited longer than "
                                           f"{self.request_timeout_s:g} s for its turn and was not started; "
                                           "nothing was done, send it again", None, {"Retry-After": "1"})
            except Exception:
                log.exception("%s %s failed", request.method, request.url.path)
                return error_response(500, "internal error; the server log has the details")

        return run

    async def _thread(self, fn: Callable[..., Any], *args: Any) -> Any:
        # never abandoned: the answer waits for the work, so it can say truthfully whether it was done, and
        # the pool (`workers` threads) cannot grow past its limit with threads nobody waits for
        return await anyio.to_thread.run_sync(functools.partial(fn, *args), limiter=self.limiter)

    # -- endpoints -----------------------------------------------------------------------------------------
    async def health(self, request: Request, deadline: float) -> Any:
        """Never waits on the workspace lock or the store: it reads what the requests found out."""
        problems: list[str] = []
        active = self.ws.active_version
        problem = self.ws.load_problem
        if problem is not None:
            problems.append(self._clean(problem.message()))
        try:
            free = shutil.disk_usage(self.ws.root).free
        except OSError as exc:
            problems.append(f"cannot read the free disk space: {exc.strerror}")
        else:
            if free < self.min_free_bytes:
                problems.append(f"the workspace's disk has {free // (1024 * 1024)} MiB free; new model versions "
                                "and corrections may not fit")
        if self._last_write_full:
            problems.append("the last write failed: the disk is full")
        return {"ok": not problems, "status": "degraded" if problems else "ok",
                "model_version": active.version if active else None, "problems": problems}

    async def model(self, request: Request, deadline: float) -> Any:
        def job() -> dict[str, Any]:
            with self._current(deadline) as ws:
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

    async def route(self, request: Request, deadline: float) -> Any:
        body = await self._body(request, deadline)

        def job() -> dict[str, Any]:
            records, prefixes, single = self.items.request(body, self.max_batch)  # checked before grouping
            decisions = self.groups.submit(Pending(records, prefixes, deadline))
            return {"decision": decisions[0]} if single else {"decisions": decisions}

        return await self._thread(job)

    def _route_group(self, group: list[Pending]) -> None:
        """Decide and store the items of several requests in one workspace call (one pair of commits)."""
        with self._current(min(j.deadline for j in group)) as ws:
            self._require_model(ws)
            ready: list[Pending] = []
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
            except (StoreError, OSError) as exc:
                raise self._failure(exc) from exc
            except WorkspaceError as exc:
                raise ApiError(status_for(exc), self._clean(str(exc))) from exc
            self._last_write_full = False
        self.metrics.decisions(decisions)
        at = 0
        for job in ready:
            job.decisions = decisions[at:at + len(job.records)]
            at += len(job.records)

    async def correct(self, request: Request, deadline: float) -> Any:
        body = await self._body(request, deadline)
        key = request.headers.get(KEY_HEADER)
        if key is not None and not (0 < len(key.strip()) <= MAX_ID_CHARS):
            raise ApiError(422, f"the Idempotency-Key must be 1 to {MAX_ID_CHARS} characters", "Idempotency-Key")

        def job() -> Any:
            req = correction_request(body)
            with self._current(deadline) as ws:
                self._require_model(ws)
                if key is not None:
                    first = ws.reply_for(key.strip())
                    if first is not None:
                        return Response(first, media_type="application/json",
                                        headers={"Idempotent-Replayed": "true"})
                if ws.item(req.item_id) is None:
                    raise ApiError(404, f"no item with id {req.item_id!r}; route it (or import it) first",
                                   "item_id")
                try:
                    report = ws.correct(req.item_id, req.queue, req.by or SOURCE, request_key=key and key.strip(),
                                        new_queue=req.new_queue)
                except (StoreError, OSError) as exc:  # e.g. a correction of this item pending in another process
                    raise self._failure(exc, "item_id") from exc
                except WorkspaceError as exc:
                    field = "item_id" if isinstance(exc, UnknownItem) else \
                        None if isinstance(exc, NoModel | Conflict) else "queue"
                    raise ApiError(status_for(exc), self._clean(str(exc)), field) from exc
                self._last_write_full = False
                self.metrics.corrections.inc()
                c = report.correction
                answer = to_json({"correction_id": c.id, "item_id": c.item_id, "before": report.before,
                                  "after": report.after, "by": c.by, "at": c.at,
                                  "model_version": report.version.version, "decision": report.decision})
                if key is not None:
                    try:
                        ws.save_reply(key.strip(), c.id, answer.decode("utf-8"))
                    except StoreError as exc:  # the correction is done; a repeat finds it by its key
                        log.warning("the reply to correction %d was not kept: %s", c.id, exc)
                return Response(answer, media_type="application/json")

        return await self._thread(job)

    async def openapi_json(self, request: Request, deadline: float) -> Any:
        return self.openapi

    async def metrics_text(self, request: Request, deadline: float) -> Any:
        """Never waits on the workspace lock: the counters and the version already loaded."""
        active = self.ws.active_version
        return Response(self.metrics.exposition(active.version if active else None),
                        media_type=self.metrics.content_type)


def status_for(exc: WorkspaceError) -> int:
    """The HTTP status of a typed application error: the one table the whole service uses."""
    for kind, status in ((UnknownItem, 404), (NoModel, 409), (Conflict, 409), (UnknownQueue, 422),
                         (BadInput, 422)):
        if isinstance(exc, kind):
            return status
    return 422  # any other user-facing problem: the request cannot be served as sent


def unknown_route_error(status: int, path: str, method: str, detail: str,
                        headers: dict[str, str] | None) -> JSON:
    messages = {404: f"no endpoint {path}; see /openapi.json",
                405: f"{method} is not allowed on {path}; see /openapi.json"}
    return error_response(status, messages.get(status, detail), None, headers)


__all__ = ["Service", "busy", "unknown_route_error"]
