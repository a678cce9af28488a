"""SQLite store: items, label history, the corrections journal, decisions and model versions."""

from triage.store.db import Store
from triage.store.errors import (
    DuplicateRequestError,
    StoreBusyError,
    StoreError,
    StoreFullError,
    UnknownCorrectionError,
    UnknownItemError,
    UnknownVersionError,
)
from triage.store.migrations import LATEST_VERSION, MIGRATIONS
from triage.store.rows import Batch, Correction, Decision, ImportSummary, LabelConflict, ModelVersion, utc_now

__all__ = [
    "LATEST_VERSION",
    "MIGRATIONS",
    "Batch",
    "Correction",
    "Decision",
    "DuplicateRequestError",
    "ImportSummary",
    "LabelConflict",
    "ModelVersion",
    "Store",
    "StoreBusyError",
    "StoreError",
    "StoreFullError",
    "UnknownCorrectionError",
    "UnknownItemError",
    "UnknownVersionError",
    "utc_now",
]
