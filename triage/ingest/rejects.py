"""Rows that could not be imported: the reject record, the one line format every front end prints, and the
rejects file (mode 0600: it holds the export's personal data).
"""

from __future__ import annotations

import csv
import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from triage.ingest.values import is_missing, scalar_text
from triage.records import ItemRecord

FILE_MODE = 0o600  # the rejected rows are the export's personal data


class IngestError(ValueError):
    """A problem with the whole file; the message names the file (and row/field when there is one)."""


@dataclass(frozen=True)
class Reject:
    """One row that could not be imported, and why."""

    row: int
    field: str | None
    reason: str
    raw: dict
    line: int | None = None  # CSV: the physical line the record starts on, when known


@dataclass
class IngestResult:
    """What `read_items` found: the good records, the rejects and the warnings."""

    path: str
    records: list[ItemRecord]
    rejects: list[Reject]
    warnings: list[str]
    rows_read: int
    rejects_path: Path | None
    # rows whose arrival time could not be read (row, value): imported without a time, counted here
    bad_times: list[tuple[int, str]] = field(default_factory=list)
    # the row number of each record (parallel to `records`), so a later check can name the row
    record_rows: list[int] = field(default_factory=list)

    def row_of(self, item_id: str) -> int | None:
        """The row an item came from, None when it is not among the records."""
        for rec, row in zip(self.records, self.record_rows, strict=False):
            if rec.item_id == item_id:
                return row
        return None




def describe_reject(source: str, r: Reject) -> str:
    """`tickets.csv: row 12, field 'tenure_days': 'abc' is not a number` - the one-line form used everywhere."""
    line = f" (line {r.line})" if r.line is not None and r.line != r.row + 1 else ""
    where = f"row {r.row}{line}" + (f", field {r.field!r}" if r.field else "")
    return f"{source}: {where}: {r.reason}"


def rejects_folder(source: Path, rejects_dir: Path | None) -> Path:
    """Where a rejects file goes: the workspace's folder when given (the rejected rows hold personal data,
    so they stay where the rest of the data is), else beside the source file. Never the system's temporary
    folder, which other users of the machine can list."""
    folder = Path(rejects_dir) if rejects_dir is not None else source.resolve().parent
    # the workspace's folder is made owner-only; the folder beside the source is the user's and keeps its mode
    folder.mkdir(mode=0o700 if rejects_dir is not None else 0o777, parents=True, exist_ok=True)
    if not os.access(folder, os.W_OK):
        raise IngestError(f"{source.name}: cannot write the rejects file: {folder} is not writable; no row was "
                          "imported (give a writable workspace)")
    return folder


def write_rejects_file(rejects: list[Reject], folder: Path, stem: str) -> Path:
    """Write rejects into a new file `<stem>.rejects.csv` (then `<stem>.rejects-2.csv`, ...) in `folder`,
    created exclusively with mode 0600: an earlier rejects file is never overwritten, and no one else can
    read the rows. Returns the path written."""
    for n in range(1, 10_000):
        path = folder / (f"{stem}.rejects.csv" if n == 1 else f"{stem}.rejects-{n}.csv")
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, FILE_MODE)
        except FileExistsError:
            continue
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            _write_rejects_to(rejects, fh)
        return path
    raise IngestError(f"{folder}: too many rejects files for {stem}; move the old ones away")


def write_rejects(rejects: list[Reject], path: Path) -> None:
    """Write rejects as CSV (row, field, reason, record) so they can be fixed and imported again; the file is
    0600 even when it existed with a wider mode (O_TRUNC keeps the old mode), never written through a link."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_NOFOLLOW, FILE_MODE)
    os.fchmod(fd, FILE_MODE)
    with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
        _write_rejects_to(rejects, fh)


def _write_rejects_to(rejects: list[Reject], fh: Any) -> None:
    w = csv.writer(fh)
    w.writerow(["row", "line", "field", "reason", "record"])
    for r in rejects:
        w.writerow([r.row, r.line if r.line is not None else "", r.field or "", r.reason,
                    json.dumps(r.raw, ensure_ascii=False, default=_json_default)])


def _json_default(v: Any) -> Any:
    if is_missing(v):
        return None
    return scalar_text(v)
