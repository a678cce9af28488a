"""Typed store errors: each names the file and what is wrong; full and busy are told apart by SQLite's result code."""

from __future__ import annotations

import sqlite3
from pathlib import Path


class StoreError(Exception):
    """Something is wrong with the store; the message names the file and what is wrong."""


class StoreFullError(StoreError):
    """The disk (or the file system quota) is full: nothing of the failed write was kept."""


class StoreBusyError(StoreError):
    """Another process held the write lock past the busy timeout: nothing was done, trying again may work."""


# SQLite primary result codes (https://www.sqlite.org/rescode.html)
_SQLITE_BUSY, _SQLITE_LOCKED, _SQLITE_FULL = 5, 6, 13


def store_error(path: Path, exc: sqlite3.Error, what: str = "") -> StoreError:
    """The StoreError for a sqlite3 error, typed by its result code so callers can tell full from busy."""
    code = getattr(exc, "sqlite_errorcode", None)
    primary = code & 0xFF if isinstance(code, int) else None
    text = f"{path}: {what}{exc}"
    if primary == _SQLITE_FULL or "disk is full" in str(exc):
        return StoreFullError(text)
    if primary in (_SQLITE_BUSY, _SQLITE_LOCKED) or "database is locked" in str(exc):
        return StoreBusyError(text)
    return StoreError(text)


class UnknownItemError(StoreError):
    """No item with that id is stored."""


class UnknownVersionError(StoreError):
    """No model version with that number is stored."""


class UnknownCorrectionError(StoreError):
    """No correction with that id is journaled."""


class DuplicateRequestError(StoreError):
    """A correction with this idempotency key is journaled already (`correction_id`)."""

    def __init__(self, message: str, correction_id: int) -> None:
        super().__init__(message)
        self.correction_id = correction_id
