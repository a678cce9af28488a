"""Plain records passed between ingest, the store and the workspace (no behaviour, no I/O)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class ItemRecord:
    """One ticket or lead as read from a file or a request.

    `fields` maps every configured field name to its value: text fields to str ("" when missing),
    category fields to str or None, number fields to float or None. `label` is the queue, None when unlabelled.
    """

    item_id: str
    fields: dict[str, Any]
    label: str | None = None
    arrived_at: str | None = None  # ISO 8601 text, as given
