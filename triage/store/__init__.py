"""SQLite store: items, label history, the corrections journal, decisions and model versions."""

from triage.store.db import (
    Batch,
    Correction,
    Decision,
    DuplicateRequestError,
    ImportSummary,
    LabelConflict,
    ModelVersion,
    Store,
    StoreBusyError,
    StoreError,
    StoreFullError,
    UnknownCorrectionError,
    UnknownItemError,
    UnknownVersionError,
    utc_now,
)
from triage.store.migrations import LATEST_VERSION, MIGRATIONS

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
