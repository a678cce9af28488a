"""Errors and JSON answers: one place decides which status a failure gets and how an error body looks.

Every error is `{"error": "<what is wrong and what to do>", "field": "<where>" | null}`. A non-2xx answer
means the work was not done (or, where the message says so, is journaled and finished later): a client may
resend a request that failed, with the same Idempotency-Key for a correction.
"""

from __future__ import annotations

import errno
import json
from typing import Any

from starlette.responses import Response

from triage.app import StoreBusyError, StoreError, StoreFullError

RETRY_AFTER_S = "1"


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


def to_json(content: Any) -> bytes:
    """Compact UTF-8 JSON; NaN and infinities are refused rather than sent as invalid JSON."""
    return json.dumps(content, ensure_ascii=False, allow_nan=False, separators=(",", ":"),
                      default=_json_default).encode("utf-8")


class JSON(Response):
    """A JSON answer rendered by `to_json`."""

    media_type = "application/json"

    def render(self, content: Any) -> bytes:
        return to_json(content)


def error_response(status: int, message: str, field: str | None = None,
                   headers: dict[str, str] | None = None) -> JSON:
    return JSON({"error": message, "field": field}, status_code=status, headers=headers)


def busy(message: str) -> ApiError:
    """503 with Retry-After: nothing was done, the same request may be sent again shortly."""
    return ApiError(503, message, None, {"Retry-After": RETRY_AFTER_S})


def is_disk_full(exc: BaseException) -> bool:
    return isinstance(exc, StoreFullError) or (
        isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT))


def store_failure(exc: BaseException, message: str, field: str | None = None) -> ApiError:
    """The status of a store or file failure: 507 disk full, 503 (Retry-After) locked, else 409."""
    if is_disk_full(exc):
        return ApiError(507, f"the workspace's disk is full; nothing was stored ({message}). Free space "
                             "and send the request again", field)
    if isinstance(exc, StoreBusyError):
        return busy(f"the store is locked by another process; nothing was done, try again ({message})")
    if isinstance(exc, StoreError):
        return ApiError(409, message, field)
    raise TypeError(f"not a store failure: {exc!r}")


def kind(v: Any) -> str:
    """How a JSON value is named in an error message."""
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
