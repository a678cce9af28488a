"""One row checked against the schema: an `ItemRecord`, or a `Reject` naming the field and why."""

from __future__ import annotations

from typing import Any

from triage.core.schema import FieldRole, Schema
from triage.ingest.rejects import Reject
from triage.ingest.values import (
    BadTime,
    BadValue,
    as_category,
    as_key,
    as_label,
    as_number,
    as_text,
    as_time,
    printable,
    unusable,
)
from triage.records import ItemRecord


class RowChecker:
    """Turns one raw row (a dict from any reader) into an ItemRecord, or explains why not."""

    def __init__(self, schema: Schema, *, require_label: bool, max_text_chars: int,
                 labels: dict[str, str] | None = None) -> None:
        self.schema = schema
        self.require_label = require_label
        self.max_text_chars = max_text_chars
        self.labels = labels or {}
        self.truncated: list[tuple[int, str, int]] = []  # (row, field, original length)
        self.bad_times: list[tuple[int, str]] = []  # (row, value) of times that could not be read

    def check(self, raw: dict[str, Any], row: int) -> ItemRecord | Reject:
        s = self.schema
        for name in (s.id, s.label, s.time, *(f.name for f in s.fields)):
            why = unusable(raw.get(name)) if name else None
            if why is not None:
                return Reject(row=row, field=name, reason=why, raw=printable(raw))
        try:
            item_id = as_key(raw.get(s.id), s.id, "an id")
            if item_id is None:
                raise BadValue(s.id, "the id is empty")
            label = as_label(raw.get(s.label), s.label)
            if label is not None:
                label = self.labels.get(label, label)
            if label is None and self.require_label:
                raise BadValue(s.label, "the label (queue) is empty")
            values: dict[str, Any] = {}
            cut: list[tuple[int, str, int]] = []
            for spec in s.fields:
                v = raw.get(spec.name)
                if spec.role is FieldRole.TEXT:
                    text = as_text(v, spec.name)
                    if len(text) > self.max_text_chars:
                        cut.append((row, spec.name, len(text)))
                        text = text[: self.max_text_chars]
                    values[spec.name] = text
                elif spec.role is FieldRole.NUMBER:
                    values[spec.name] = as_number(v, spec.name, spec.thousands)
                else:
                    values[spec.name] = as_category(v, spec.name)
            bad_time: str | None = None
            try:
                arrived = as_time(raw.get(s.time), s.time) if s.time else None
            except BadTime as t:
                arrived, bad_time = None, str(t)
        except BadValue as bad:
            return Reject(row=row, field=bad.field_name, reason=bad.reason, raw=printable(raw))
        if bad_time is not None:
            self.bad_times.append((row, bad_time))
        self.truncated.extend(cut)  # only for rows kept: a rejected row is in the rejects file whole
        return ItemRecord(item_id=item_id, fields=values, label=label, arrived_at=arrived)
