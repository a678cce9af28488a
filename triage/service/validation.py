"""Request bodies: parse, then check every value before any of it reaches the workspace.

JSON can carry values Python reads but nothing downstream can use: an integer of thousands of digits (its text
form is refused past 4,300 digits, and no float holds it), `1e400` (read as infinity), a lone surrogate such as
`\\ud800` (a str that cannot be encoded as UTF-8, so SQLite and the JSON writer refuse it). `parse_json` reads
over-long numbers and non-finite floats as `Unusable` markers instead, and `scan` walks the parsed body once,
naming the first unusable key or value by its path (`items[3].fields.subject`), so each is a 422 naming the
field and never reaches the group commit, where it would fail its neighbours.

Item fields are then checked by the same row checker that checks imported files (`triage.ingest`), so a value
accepted or refused here is accepted or refused there too.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from triage.app import Reject, Schema, read_jsonl_stream
from triage.records import ItemRecord
from triage.service.errors import ApiError, kind

ITEM_KEYS = ("id", "fields", "arrived_at")
CORRECTION_KEYS = ("item_id", "queue", "by", "new_queue")
MAX_NAME_CHARS = 100  # queue names
MAX_BY_CHARS = 200
MAX_ID_CHARS = 200
MAX_DIGITS = 200  # a JSON integer longer than this is no id, count or measurement we can store


@dataclass(frozen=True)
class Unusable:
    """A JSON number the parser read but the service cannot use; `why` says what it was."""

    why: str


def _parse_int(text: str) -> int | Unusable:
    digits = len(text.lstrip("-"))
    if digits > MAX_DIGITS:
        return Unusable(f"an integer of {digits} digits (at most {MAX_DIGITS})")
    return int(text)


def _parse_float(text: str) -> float | Unusable:
    value = float(text)
    if value != value or value in (float("inf"), float("-inf")):
        return Unusable(f"the number {text[:40]} is out of range (not a finite number)")
    return value


def parse_json(body: bytes) -> Any:
    """The parsed body; 400 when it is not UTF-8 JSON. Unusable numbers come back as `Unusable` markers."""
    if not body.strip():
        raise ApiError(400, "the request body is empty; send a JSON object")
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ApiError(400, f"the request body is not UTF-8 (byte offset {exc.start})") from None

    def no_constant(name: str) -> Any:
        raise ApiError(400, f"the request body is not valid JSON: {name} is not a JSON number")

    try:
        return json.loads(text.removeprefix("\ufeff"), parse_constant=no_constant, parse_int=_parse_int,
                          parse_float=_parse_float)
    except json.JSONDecodeError as exc:
        raise ApiError(400, f"the request body is not valid JSON: {exc.msg} "
                            f"(line {exc.lineno}, column {exc.colno})") from None
    except RecursionError:
        raise ApiError(400, "the request body is nested too deeply") from None


def _encodable(text: str) -> bool:
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def scan(value: Any, where: str = "") -> None:
    """422 naming the first key or value no store or answer can hold (see the module docstring)."""
    stack: list[tuple[Any, str]] = [(value, where)]
    while stack:
        v, at = stack.pop()
        if isinstance(v, Unusable):
            raise ApiError(422, f"{at or 'the body'}: {v.why}", at or None)
        if isinstance(v, str):
            if not _encodable(v):
                raise ApiError(422, f"{at or 'the body'}: the text holds a lone surrogate (such as \\ud800), "
                                    "which is not a character; send valid Unicode", at or None)
        elif isinstance(v, dict):
            for k, item in v.items():
                path = f"{at}.{k}" if at else str(k)
                if not _encodable(k):
                    shown = k.encode("utf-8", "backslashreplace").decode("ascii")
                    raise ApiError(422, f"the key {shown!r} holds a lone surrogate, which is not a character",
                                   (f"{at}." if at else "") + shown)
                stack.append((item, path))
        elif isinstance(v, list):
            stack.extend((item, f"{at}[{i}]") for i, item in enumerate(v))


def as_object(obj: Any, where: str | None) -> dict[str, Any]:
    if not isinstance(obj, dict):
        raise ApiError(422, f"{where or 'the body'} is {kind(obj)}, expected a JSON object", where)
    return obj


def unknown_keys(obj: dict[str, Any], allowed: tuple[str, ...], prefix: str) -> None:
    for k in obj:
        if k not in allowed:
            raise ApiError(422, f"unknown key {k!r}; expected {', '.join(allowed)}", f"{prefix}{k}")


def string(obj: dict[str, Any], key: str, *, required: bool, limit: int) -> str | None:
    v = obj.get(key)
    if v is None:
        if required:
            raise ApiError(422, f"{key} is missing", key)
        return None
    if not isinstance(v, str):
        raise ApiError(422, f"{key} is {kind(v)}, expected a string", key)
    v = v.strip()
    if required and not v:
        raise ApiError(422, f"{key} is empty", key)
    if len(v) > limit:
        raise ApiError(422, f"{key} is longer than {limit} characters", key)
    return v


def flag(obj: dict[str, Any], key: str) -> bool:
    v = obj.get(key, False)
    if not isinstance(v, bool):
        raise ApiError(422, f"{key} is {kind(v)}, expected true or false", key)
    return v


@dataclass(frozen=True)
class CorrectionRequest:
    item_id: str
    queue: str
    by: str | None
    new_queue: bool


def correction_request(body: bytes) -> CorrectionRequest:
    """The checked body of POST /v1/corrections."""
    obj = parse_json(body)
    scan(obj)
    obj = as_object(obj, None)
    unknown_keys(obj, CORRECTION_KEYS, "")
    item_id = string(obj, "item_id", required=True, limit=MAX_ID_CHARS)
    queue = string(obj, "queue", required=True, limit=MAX_NAME_CHARS)
    by = string(obj, "by", required=False, limit=MAX_BY_CHARS)
    assert item_id is not None and queue is not None
    return CorrectionRequest(item_id, queue, by, flag(obj, "new_queue"))


class ItemChecker:
    """Checks route items and turns them into ItemRecords with the ingest row checker."""

    def __init__(self, schema: Schema, max_text_chars: int) -> None:
        self.schema = schema
        self.max_text_chars = max_text_chars
        self.field_names = frozenset(f.name for f in schema.fields)

    def request(self, body: bytes, max_batch: int) -> tuple[list[ItemRecord], list[str], bool]:
        """The records of POST /v1/route, their key prefixes, and whether the body was one item."""
        obj = parse_json(body)
        scan(obj)
        obj = as_object(obj, None)
        single = "items" not in obj
        if single:
            items, prefixes = [obj], [""]
        else:
            unknown_keys(obj, ("items",), "")
            items = obj["items"]
            if not isinstance(items, list):
                raise ApiError(422, f"items is {kind(items)}, expected a list of items", "items")
            if not items:
                raise ApiError(422, "items is empty; send at least one item", "items")
            if len(items) > max_batch:
                raise ApiError(413, f"{len(items)} items in one request; the limit is {max_batch}", "items")
            prefixes = [f"items[{i}]." for i in range(len(items))]
        records = self.records(items, prefixes)
        first: dict[str, int] = {}
        for i, r in enumerate(records):
            j = first.setdefault(r.item_id, i)
            if j != i:
                raise ApiError(422, f"id {r.item_id!r} is also the id of items[{j}]", f"{prefixes[i]}id")
        return records, prefixes, single

    def flat(self, obj: Any, prefix: str) -> dict[str, Any]:
        """The shape checks ingest cannot make (it reads flat rows); returns the flat row for the checker."""
        where = prefix[:-1] if prefix else None
        item = as_object(obj, where)
        unknown_keys(item, ITEM_KEYS, prefix)
        if "id" not in item or item["id"] is None:
            raise ApiError(422, "the item has no id", f"{prefix}id")
        item_id = item["id"]
        if isinstance(item_id, bool) or not isinstance(item_id, str | int):
            raise ApiError(422, f"the id is {kind(item_id)}, expected a string", f"{prefix}id")
        if len(str(item_id)) > MAX_ID_CHARS:
            raise ApiError(422, f"the id is longer than {MAX_ID_CHARS} characters", f"{prefix}id")
        if "fields" not in item:
            raise ApiError(422, "the item has no fields object (send {} when no value is known)",
                           f"{prefix}fields")
        fields = item["fields"]
        if not isinstance(fields, dict):
            raise ApiError(422, f"fields is {kind(fields)}, expected an object", f"{prefix}fields")
        for name in fields:
            if name not in self.field_names:
                known = ", ".join(sorted(self.field_names))
                raise ApiError(422, f"unknown field {name!r}; this workspace's fields are: {known}",
                               f"{prefix}fields.{name}")
        arrived = item.get("arrived_at")
        if arrived is not None:
            if not isinstance(arrived, str):
                raise ApiError(422, f"arrived_at is {kind(arrived)}, expected an ISO 8601 date and time",
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
