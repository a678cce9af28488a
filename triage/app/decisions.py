"""Typed records the application layer hands to front ends (reports of a run; decisions follow)."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from triage.core.measure import Measurement
from triage.ingest import IngestResult
from triage.store import Correction, ModelVersion


@dataclass
class TrainReport:
    """What one training run made: the activated version, its measurement and the settings compared."""

    version: ModelVersion
    measurement: Measurement
    selection: list[dict[str, Any]]
    n_items: int
    seconds: float
    warnings: list[str] = field(default_factory=list)


@dataclass
class ImportReport:
    """One import of a labelled export: the reader's result and what the store kept."""

    result: IngestResult
    added: int
    unchanged: int
    conflicts: list[Any]


@dataclass
class CorrectionReport:
    """One correction (or undo): the journal entry, the version it made and the item's queue before/after."""

    correction: Correction
    version: ModelVersion
    before: str | None
    after: str | None
    decision: dict[str, Any] | None = None
