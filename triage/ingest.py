"""Read item files (CSV, TSV, JSON lines, JSON, Parquet), validate every row against the schema, keep rejects.

Problems with the whole file (missing, empty, not UTF-8, no id column, ...) raise `IngestError`. Problems with
one row (empty or duplicate id, a number field holding text, ...) reject that row only: the other rows are
imported and the rejects are written to `<stem>.rejects.csv` so nothing is lost silently. Every message names
the file, the row and the field, so an operator can find the cell without guessing.

Row numbers are 1-based data rows: for CSV/TSV/Parquet row 1 is the first record after the header; for JSON
lines the row is the line number (blank lines are skipped but still counted, so the number matches an editor).
Files are read in chunks, so a file larger than memory streams through.
"""

from __future__ import annotations

import codecs
import csv
import json
import logging
import math
import os
import tempfile
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from typing import Any

import pandas as pd

from triage.core.schema import FieldRole, Schema
from triage.records import ItemRecord

log = logging.getLogger(__name__)

CSV_SUFFIXES = {".csv": ",", ".tsv": "\t"}
JSONL_SUFFIXES = (".jsonl", ".ndjson")
SUFFIXES = (*CSV_SUFFIXES, *JSONL_SUFFIXES, ".json", ".parquet")
PROGRESS_MIN_BYTES = 5_000_000  # smaller files read too fast for a bar to help
MAX_ROW_WARNINGS = 20  # per kind; after that one summary line, so a bad export does not bury the output


class IngestError(ValueError):
    """A problem with the whole file; the message names the file (and row/field when there is one)."""


@dataclass(frozen=True)
class Reject:
    """One row that could not be imported, and why."""

    row: int
    field: str | None
    reason: str
    raw: dict


@dataclass
class IngestResult:
    """What `read_items` found: the good records, the rejects and the warnings."""

    path: str
    records: list[ItemRecord]
    rejects: list[Reject]
    warnings: list[str]
    rows_read: int
    rejects_path: Path | None


class _BadValue(Exception):
    """Raised inside row checks; becomes a Reject for that row and field."""

    def __init__(self, field_name: str | None, reason: str) -> None:
        super().__init__(reason)
        self.field_name = field_name
        self.reason = reason


# ----------------------------------------------------------------------------------------------------------
# value normalisation


def _is_missing(v: Any) -> bool:
    if v is None:
        return True
    if isinstance(v, float) and math.isnan(v):
        return True
    return v is pd.NA or v is pd.NaT


def _kind(v: Any) -> str:
    """A user-facing name for a JSON value's type."""
    if isinstance(v, dict):
        return "an object"
    if isinstance(v, list | tuple):
        return "a list"
    if isinstance(v, bool):
        return "a boolean"
    return type(v).__name__


def _scalar_text(v: Any) -> str:
    """Scalars from JSON/Parquet as the text a CSV export would hold."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and v.is_integer():
        return str(int(v)) if abs(v) < 2**53 else repr(v)
    if isinstance(v, datetime | date):
        return v.isoformat()
    if isinstance(v, bytes):
        return v.decode("utf-8", errors="replace")
    return str(v)


def _as_text(v: Any, name: str) -> str:
    if _is_missing(v):
        return ""
    if isinstance(v, str):
        return v
    if isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected text")
    return _scalar_text(v)


def _as_category(v: Any, name: str) -> str | None:
    if _is_missing(v):
        return None
    if isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected a single value")
    s = (v if isinstance(v, str) else _scalar_text(v)).strip()
    return s or None


def _as_number(v: Any, name: str) -> float | None:
    if _is_missing(v):
        return None
    if isinstance(v, bool) or isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected a number")
    if isinstance(v, int | float):
        x = float(v)
    else:
        s = str(v).strip()
        if not s:
            return None
        try:
            x = float(s)
        except ValueError:
            raise _BadValue(name, f"{s!r} is not a number") from None
    if not math.isfinite(x):
        raise _BadValue(name, f"{v!r} is not a finite number")
    return x


def _as_key(v: Any, name: str, what: str) -> str | None:
    """An id or label: a stripped string, None when empty."""
    if _is_missing(v):
        return None
    if isinstance(v, bool) or isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected {what}")
    s = (v if isinstance(v, str) else _scalar_text(v)).strip()
    return s or None


def _as_time(v: Any, name: str) -> str | None:
    if _is_missing(v):
        return None
    if isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected a date and time")
    s = (v if isinstance(v, str) else _scalar_text(v)).strip()
    return s or None


class _RowChecker:
    """Turns one raw row (a dict from any reader) into an ItemRecord, or explains why not."""

    def __init__(self, schema: Schema, *, require_label: bool, max_text_chars: int) -> None:
        self.schema = schema
        self.require_label = require_label
        self.max_text_chars = max_text_chars
        self.truncated: list[tuple[int, str, int]] = []  # (row, field, original length)

    def check(self, raw: dict[str, Any], row: int) -> ItemRecord | Reject:
        s = self.schema
        try:
            item_id = _as_key(raw.get(s.id), s.id, "an id")
            if item_id is None:
                raise _BadValue(s.id, "the id is empty")
            label = _as_key(raw.get(s.label), s.label, "a queue name")
            if label is None and self.require_label:
                raise _BadValue(s.label, "the label (queue) is empty")
            values: dict[str, Any] = {}
            cut: list[tuple[int, str, int]] = []
            for spec in s.fields:
                v = raw.get(spec.name)
                if spec.role is FieldRole.TEXT:
                    text = _as_text(v, spec.name)
                    if len(text) > self.max_text_chars:
                        cut.append((row, spec.name, len(text)))
                        text = text[: self.max_text_chars]
                    values[spec.name] = text
                elif spec.role is FieldRole.NUMBER:
                    values[spec.name] = _as_number(v, spec.name)
                else:
                    values[spec.name] = _as_category(v, spec.name)
            arrived = _as_time(raw.get(s.time), s.time) if s.time else None
        except _BadValue as bad:
            return Reject(row=row, field=bad.field_name, reason=bad.reason, raw=dict(raw))
        self.truncated.extend(cut)  # only for rows kept: a rejected row is in the rejects file whole
        return ItemRecord(item_id=item_id, fields=values, label=label, arrived_at=arrived)


def describe_reject(source: str, r: Reject) -> str:
    """`tickets.csv: row 12, field 'tenure_days': 'abc' is not a number` - the one-line form used everywhere."""
    where = f"row {r.row}" + (f", field {r.field!r}" if r.field else "")
    return f"{source}: {where}: {r.reason}"


# ----------------------------------------------------------------------------------------------------------
# readers: each yields (row number, raw dict) or a Reject for a row that cannot even be parsed


def _utf8_failure(path: Path) -> IngestError:
    """Find the first byte that is not UTF-8, so the message can point at it."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset = 0
    line = 1
    with path.open("rb") as fh:
        while chunk := fh.read(1 << 20):
            try:
                decoder.decode(chunk)
            except UnicodeDecodeError as exc:
                pos = offset + exc.start
                line += chunk[: exc.start].count(b"\n")
                bad = chunk[exc.start : exc.start + 1].hex()
                return IngestError(
                    f"{path.name}: line {line}: the file is not UTF-8 (byte 0x{bad} at byte offset {pos}); "
                    "re-export it as UTF-8"
                )
            offset += len(chunk)
            line += chunk.count(b"\n")
    return IngestError(f"{path.name}: the file is not UTF-8; re-export it as UTF-8")


class _Reader:
    """Streams raw rows from one file. `columns` is known after `open()` for tabular formats, else None."""

    def __init__(self, path: Path, chunk_rows: int) -> None:
        self.path = path
        self.name = path.name
        self.chunk_rows = max(1, chunk_rows)
        self.suffix = path.suffix.lower()
        self.columns: list[str] | None = None
        self.total = 0  # progress units: bytes, or rows for parquet
        self.done = 0

    def rows(self) -> Iterator[tuple[int, dict[str, Any]] | Reject]:
        if self.suffix in CSV_SUFFIXES:
            return self._csv()
        if self.suffix in JSONL_SUFFIXES:
            return self._jsonl()
        if self.suffix == ".json":
            return self._json()
        return self._parquet()

    # CSV / TSV ------------------------------------------------------------------------------------------
    def _csv(self) -> Iterator[tuple[int, dict[str, Any]] | Reject]:
        self.total = self.path.stat().st_size
        if self.total == 0:
            raise IngestError(f"{self.name}: the file is empty (no header, no rows)")
        row = 0
        with self.path.open("rb") as fh:
            try:
                reader = pd.read_csv(
                    fh,
                    sep=CSV_SUFFIXES[self.suffix],
                    dtype=str,
                    keep_default_na=False,
                    chunksize=self.chunk_rows,
                    encoding="utf-8-sig",
                )
                for chunk in reader:
                    if self.columns is None:
                        self.columns = [str(c) for c in chunk.columns]
                    self.done = fh.tell() if not fh.closed else self.total
                    for rec in chunk.to_dict("records"):
                        row += 1
                        yield row, rec
            except UnicodeDecodeError:
                raise _utf8_failure(self.path) from None
            except pd.errors.EmptyDataError:
                raise IngestError(f"{self.name}: the file is empty (no header, no rows)") from None
            except pd.errors.ParserError as exc:
                raise IngestError(
                    f"{self.name}: cannot be read as {self.suffix[1:].upper()} after row {row}: {exc} "
                    "(check quoting and the delimiter)"
                ) from None
        self.done = self.total

    # JSON lines -----------------------------------------------------------------------------------------
    def _jsonl(self) -> Iterator[tuple[int, dict[str, Any]] | Reject]:
        # Parsed line by line with the json module rather than pandas: exact line numbers for every error,
        # and no type guessing (pandas turns an int column with gaps into floats and guesses dates).
        self.total = self.path.stat().st_size
        offset = 0
        with self.path.open("rb") as fh:
            for lineno, raw in enumerate(fh, start=1):
                try:
                    text = raw.decode("utf-8")
                except UnicodeDecodeError as exc:
                    bad = raw[exc.start : exc.start + 1].hex()
                    raise IngestError(
                        f"{self.name}: line {lineno}: the file is not UTF-8 (byte 0x{bad} at byte offset "
                        f"{offset + exc.start}); re-export it as UTF-8"
                    ) from None
                offset += len(raw)
                self.done = offset
                if lineno == 1:
                    text = text.removeprefix("\ufeff")
                parsed = _parse_json_line(text, lineno)
                if parsed is not None:
                    yield parsed

    def _json(self) -> Iterator[tuple[int, dict[str, Any]] | Reject]:
        self.total = self.path.stat().st_size
        try:
            text = self.path.read_text(encoding="utf-8-sig")
        except UnicodeDecodeError:
            raise _utf8_failure(self.path) from None
        if not text.strip():
            raise IngestError(f"{self.name}: the file is empty (no rows)")
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise IngestError(
                f"{self.name}: line {exc.lineno}, column {exc.colno}: not valid JSON: {exc.msg}"
            ) from None
        if not isinstance(data, list):
            raise IngestError(f"{self.name}: expected a JSON list of objects, found {_kind(data)}")
        self.done = self.total
        for i, obj in enumerate(data, start=1):
            if isinstance(obj, dict):
                yield i, obj
            else:
                yield Reject(
                    row=i, field=None, reason=f"is {_kind(obj)}, expected an object", raw={"value": obj}
                )

    # Parquet --------------------------------------------------------------------------------------------
    def _parquet(self) -> Iterator[tuple[int, dict[str, Any]] | Reject]:
        import pyarrow as pa
        import pyarrow.parquet as pq

        if self.path.stat().st_size == 0:
            raise IngestError(f"{self.name}: the file is empty (no header, no rows)")
        try:
            pf = pq.ParquetFile(self.path)
        except (pa.ArrowException, OSError) as exc:
            raise IngestError(f"{self.name}: cannot be read as Parquet: {exc}") from None
        self.columns = list(pf.schema_arrow.names)
        self.total = pf.metadata.num_rows
        row = 0
        batches = pf.iter_batches(batch_size=self.chunk_rows)
        while True:
            try:
                batch = next(batches)
            except StopIteration:
                break
            except (pa.ArrowException, OSError) as exc:
                raise IngestError(f"{self.name}: cannot read rows after row {row}: {exc}") from None
            for rec in batch.to_pylist():
                row += 1
                yield row, rec
            self.done = row


def _parse_json_line(text: str, lineno: int) -> tuple[int, dict[str, Any]] | Reject | None:
    """One JSON line: (line, object), a Reject naming the line, or None for a blank line."""
    if not text.strip():
        return None
    try:
        obj = json.loads(text)
    except json.JSONDecodeError as exc:
        return Reject(
            row=lineno,
            field=None,
            reason=f"not valid JSON: {exc.msg} (column {exc.colno})",
            raw={"line": text.rstrip("\r\n")},
        )
    if not isinstance(obj, dict):
        return Reject(
            row=lineno,
            field=None,
            reason=f"is {_kind(obj)}, expected a JSON object",
            raw={"line": text.rstrip("\r\n")},
        )
    return lineno, obj


def _open_reader(path: Path | str, chunk_rows: int) -> _Reader:
    p = Path(path)
    if p.suffix.lower() not in SUFFIXES:
        raise IngestError(
            f"{p.name}: unknown file type {p.suffix or '(no suffix)'!r}; use one of {', '.join(SUFFIXES)}"
        )
    if not p.exists():
        raise IngestError(f"{p}: file not found")
    if not p.is_file():
        raise IngestError(f"{p}: not a file")
    return _Reader(p, chunk_rows)


def read_raw_sample(path: Path | str, limit: int) -> tuple[list[str], list[dict[str, Any]]]:
    """The column names and the first `limit` parseable raw rows, unvalidated; used to infer a config."""
    reader = _open_reader(path, chunk_rows=min(max(limit, 1), 20_000))
    rows: list[dict[str, Any]] = []
    seen: dict[str, None] = {}
    for item in reader.rows():
        if isinstance(item, Reject):
            continue
        rows.append(item[1])
        for k in item[1]:
            seen.setdefault(str(k), None)
        if len(rows) >= limit:
            break
    columns = reader.columns if reader.columns is not None else list(seen)
    if not rows:
        raise IngestError(f"{reader.name}: the file has no rows")
    return columns, rows


# ----------------------------------------------------------------------------------------------------------
# the public readers


class _Warnings:
    """Collects warnings; per-row kinds are capped so one bad export gives a readable list."""

    def __init__(self) -> None:
        self.lines: list[str] = []
        self.overflow: dict[str, int] = {}

    def add(self, text: str) -> None:
        self.lines.append(text)

    def add_row(self, kind: str, text: str) -> None:
        n = self.overflow.get(kind, 0)
        if n < MAX_ROW_WARNINGS:
            self.lines.append(text)
        self.overflow[kind] = n + 1

    def finish(self, source: str) -> list[str]:
        out = list(self.lines)
        for kind, n in self.overflow.items():
            if n > MAX_ROW_WARNINGS:
                out.append(f"{source}: {n - MAX_ROW_WARNINGS} more {kind}, not listed")
        return out


def _progress_bar(reader: _Reader, enabled: bool) -> tuple[Callable[[], None], Callable[[], None]]:
    """(update, close) for a rich progress bar on stderr; no-ops when not wanted or the file is small."""
    big = reader.path.stat().st_size >= PROGRESS_MIN_BYTES
    if not (enabled and big):
        return (lambda: None), (lambda: None)
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    bar = Progress(
        TextColumn("reading {task.description}"),
        BarColumn(),
        TextColumn("{task.percentage:>3.0f}%"),
        TimeRemainingColumn(),
        console=Console(stderr=True),
        transient=True,
    )
    task = bar.add_task(reader.name, total=None)
    bar.start()

    def update() -> None:
        bar.update(task, total=reader.total or None, completed=reader.done)

    return update, bar.stop


def read_items(
    path: Path | str,
    schema: Schema,
    *,
    require_label: bool = True,
    max_text_chars: int = 20_000,
    chunk_rows: int = 20_000,
    progress: bool = False,
    rejects_dir: Path | None = None,
) -> IngestResult:
    """Read and validate a whole file.

    `require_label=True` is for training data: the label column and every configured field must exist.
    For routing (False) a missing field column is filled with missing values and a warning.
    Rejected rows are written to `<stem>.rejects.csv` (see `write_rejects`) and counted in the result.
    """
    reader = _open_reader(path, chunk_rows)
    src = reader.name
    checker = _RowChecker(schema, require_label=require_label, max_text_chars=max_text_chars)
    warn = _Warnings()
    records: list[ItemRecord] = []
    rejects: list[Reject] = []
    first_row_of: dict[str, int] = {}
    rows_read = 0
    columns_checked = False
    keys_seen: set[str] = set()
    update, close = _progress_bar(reader, progress)
    try:
        for n, item in enumerate(reader.rows()):
            if not columns_checked and reader.columns is not None:
                _check_columns(src, set(reader.columns), schema, require_label, warn)
                columns_checked = True
            rows_read += 1
            if n % 5000 == 0:
                update()
            if isinstance(item, Reject):
                rejects.append(item)
                continue
            row, raw = item
            if reader.columns is None:
                keys_seen.update(raw)
            result = checker.check(raw, row)
            if isinstance(result, Reject):
                rejects.append(result)
                continue
            first = first_row_of.setdefault(result.item_id, row)
            if first != row:
                while checker.truncated and checker.truncated[-1][0] == row:
                    checker.truncated.pop()  # this row is rejected whole, so no note about cutting it
                rejects.append(
                    Reject(row=row, field=schema.id, reason=f"duplicate of row {first}", raw=dict(raw))
                )
                continue
            records.append(result)
    finally:
        close()

    if rows_read == 0:
        raise IngestError(
            f"{src}: the file has a header but no rows" if reader.columns else f"{src}: the file has no rows"
        )
    if reader.columns is None:
        if not keys_seen and rejects:
            raise IngestError(
                f"{src}: no line holds a JSON object; first problem: {describe_reject(src, rejects[0])}"
            )
        _check_columns(src, keys_seen, schema, require_label, warn)
    for row, name, length in checker.truncated:
        warn.add_row(
            "cells of over-long text",
            f"{src}: row {row}, field {name!r}: text of {length} characters cut to {max_text_chars}",
        )

    rejects_path = None
    if rejects:
        rejects_path = _rejects_target(reader.path, rejects_dir)
        try:
            write_rejects(rejects, rejects_path)
        except OSError:
            rejects_path = Path(tempfile.gettempdir()) / rejects_path.name
            write_rejects(rejects, rejects_path)
        for r in rejects:
            warn.add_row("rejected rows", describe_reject(src, r))
        warn.add(f"{src}: {len(rejects)} of {rows_read} rows rejected; see {rejects_path}")
    return IngestResult(
        path=str(path),
        records=records,
        rejects=rejects,
        warnings=warn.finish(src),
        rows_read=rows_read,
        rejects_path=rejects_path,
    )


def _check_columns(src: str, present: set[str], schema: Schema, require_label: bool, warn: _Warnings) -> None:
    """File-level column checks; `present` is the header (or, for JSON, every key seen)."""
    have = ", ".join(sorted(present)) or "none"
    if schema.id not in present:
        raise IngestError(f"{src}: no id column {schema.id!r} (columns: {have})")
    if require_label and schema.label not in present:
        raise IngestError(
            f"{src}: no label column {schema.label!r}; training data needs the queue (columns: {have})"
        )
    missing = [f.name for f in schema.fields if f.name not in present]
    if missing and require_label:
        names = ", ".join(repr(m) for m in missing)
        raise IngestError(f"{src}: configured field column(s) {names} not in the file (columns: {have})")
    for name in missing:
        warn.add(f"{src}: field {name!r} is not in the file; treated as missing on every row")
    if schema.time and schema.time not in present:
        warn.add(f"{src}: time column {schema.time!r} is not in the file; arrival times left empty")


def _rejects_target(source: Path, rejects_dir: Path | None) -> Path:
    name = f"{source.stem}.rejects.csv"
    if rejects_dir is not None:
        return Path(rejects_dir) / name
    folder = source.resolve().parent
    if os.access(folder, os.W_OK):
        return folder / name
    return Path(tempfile.gettempdir()) / name


def write_rejects(rejects: list[Reject], path: Path) -> None:
    """Write rejects as CSV (row, field, reason, record) so they can be fixed and imported again."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["row", "field", "reason", "record"])
        for r in rejects:
            w.writerow(
                [r.row, r.field or "", r.reason, json.dumps(r.raw, ensure_ascii=False, default=_json_default)]
            )


def _json_default(v: Any) -> Any:
    if _is_missing(v):
        return None
    return _scalar_text(v)


def read_jsonl_stream(
    lines: Iterable[str],
    schema: Schema,
    *,
    source: str = "<stdin>",
    require_label: bool = False,
    max_text_chars: int = 20_000,
) -> Iterator[ItemRecord | Reject]:
    """One result per non-blank input line, lazily, so a follower can decide each item as soon as it arrives.

    A bad line (not JSON, not an object, a bad field) yields a Reject whose row is the line number and the
    stream goes on. Repeated ids are not rejected here: a live stream has no end to compare against, and the
    store decides what a re-sent item means. Over-long text is cut and logged (there is no result to warn in).
    `source` names the stream in log messages.
    """
    checker = _RowChecker(schema, require_label=require_label, max_text_chars=max_text_chars)
    for lineno, text in enumerate(lines, start=1):
        if lineno == 1:
            text = text.removeprefix("\ufeff")
        parsed = _parse_json_line(text, lineno)
        if parsed is None:
            continue
        if isinstance(parsed, Reject):
            yield parsed
            continue
        result = checker.check(parsed[1], lineno)
        for row, name, length in checker.truncated:
            log.warning(
                "%s: line %d, field %r: text of %d characters cut to %d",
                source,
                row,
                name,
                length,
                max_text_chars,
            )
        checker.truncated.clear()
        yield result
