"""Read item files (CSV, TSV, JSON lines, JSON, Parquet), validate every row against the schema, keep rejects.

Problems with the whole file (missing, empty, not UTF-8, no id column, ...) raise `IngestError`. Problems with
one row (empty or duplicate id, a number field holding text, ...) reject that row only: the other rows are
imported and the rejects are written to `<stem>.rejects.csv` (in the workspace, created afresh with mode 0600:
they hold the same personal data as the export) so nothing is lost silently. Every message names the file, the
row and the field, so an operator can find the cell without guessing.

Row numbers are 1-based data rows: for CSV/TSV/Parquet row 1 is the first record after the header; for JSON
lines the row is the line number (blank lines are skipped but still counted, so the number matches an editor).
A CSV record that does not start on line row + 1 (a quoted field holding a line break came before it) also
names its line. Files are read in chunks, so a file larger than memory streams through.
"""

from __future__ import annotations

import codecs
import csv
import json
import logging
import math
import os
import re
import unicodedata
import warnings
from collections import Counter, deque
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import UTC, date, datetime
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


class _BadValue(Exception):
    """Raised inside row checks; becomes a Reject for that row and field."""

    def __init__(self, field_name: str | None, reason: str) -> None:
        super().__init__(reason)
        self.field_name = field_name
        self.reason = reason


# ----------------------------------------------------------------------------------------------------------
# values no store can hold: one row with them is rejected, the rest of the file goes on

MAX_DIGITS = 200  # a JSON integer longer than this is no id, count or measurement (Python will not print past 4300)


class _TooManyDigits(str):
    """A JSON integer of more than MAX_DIGITS digits, kept as its text so that only the row check touches it."""


def _parse_int(text: str) -> int | str:
    return int(text) if len(text.lstrip("-")) <= MAX_DIGITS else _TooManyDigits(text)


def _unusable(v: Any) -> str | None:
    """Why no store, JSON answer or rejects file can hold `v`, or None."""
    if isinstance(v, _TooManyDigits) or (isinstance(v, int) and v.bit_length() > 3.33 * MAX_DIGITS):
        return f"is an integer of more than {MAX_DIGITS} digits"
    if isinstance(v, str):
        try:
            v.encode("utf-8")
        except UnicodeEncodeError:
            return "holds a lone surrogate (such as \\ud800), which is not a character; send valid Unicode"
    return None


def _printable(v: Any) -> Any:
    """`v` with what cannot be written as UTF-8 JSON made visible (for the rejects file and error records)."""
    if isinstance(v, dict):
        return {_printable(k): _printable(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_printable(x) for x in v]
    if isinstance(v, _TooManyDigits) or (isinstance(v, int) and v.bit_length() > 3.33 * MAX_DIGITS):
        return f"<an integer of more than {MAX_DIGITS} digits>"
    if isinstance(v, str):
        return v.encode("utf-8", "backslashreplace").decode("utf-8")
    return v


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


# what exports write for "no value" in a number column; read as missing (the field's missing bin), not as text.
# Compared case-folded. Common practice (pandas' default NA strings overlap), no single source.
MISSING_MARKERS = frozenset({"", "n/a", "na", "nan", "-", "--", "null", "none", "#n/a"})


def _grouped(s: str, thousands: str) -> str | None:
    """'1,200.50' with thousands=',' -> '1200.50' (with '.', the decimal mark is ','); None when the grouping
    is not well formed, so '1,2,3' stays an error instead of becoming 123."""
    decimal = "," if thousands == "." else "."
    sep, dec = re.escape(thousands), re.escape(decimal)
    if not re.fullmatch(rf"[+-]?\d{{1,3}}({sep}\d{{3}})+({dec}\d+)?", s):
        return None
    return s.replace(thousands, "").replace(decimal, ".")


def _as_number(v: Any, name: str, thousands: str | None = None) -> float | None:
    if _is_missing(v):
        return None
    if isinstance(v, bool) or isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected a number")
    if isinstance(v, int | float):
        if isinstance(v, float) and math.isnan(v):
            return None
        x = float(v)
    else:
        s = str(v).strip()
        if s.casefold() in MISSING_MARKERS:
            return None
        try:
            x = float(s)
        except ValueError:
            plain = _grouped(s, thousands) if thousands else None
            if plain is None:
                hint = "" if thousands or not re.fullmatch(r"[+-]?\d{1,3}(,\d{3})+(\.\d+)?", s) else \
                    " (set thousands = \",\" for this field in triage.toml to read 1,200 as 1200)"
                raise _BadValue(name, f"{s!r} is not a number{hint}") from None
            x = float(plain)
        if math.isnan(x):
            return None  # "NaN" is how some exports write a missing value
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


def _as_label(v: Any, name: str) -> str | None:
    """A queue name; a control character (a NUL or a tab from a broken export) is refused, since such a
    name would make a queue of its own that no person can tell from the real one."""
    label = _as_key(v, name, "a queue name")
    if label is not None:
        bad = next((c for c in label if unicodedata.category(c) == "Cc"), None)
        if bad is not None:
            raise _BadValue(name, f"the queue name {label!r} holds a control character (U+{ord(bad):04X})")
    return label


class _BadTime(Exception):
    """A time cell that is not a date and time; the row is kept without an arrival time."""


def parse_time(s: str) -> str | None:
    """An arrival time as ISO 8601 text, or None when it is not a date and time.

    ISO text is kept as written; anything else pandas can read ("03/01/2024 09:00", "1 Mar 2024") is
    rewritten as ISO so times sort correctly as text. Words ("yesterday", "now") are refused, not read
    relative to today."""
    try:
        datetime.fromisoformat(s)
        return s
    except ValueError:
        pass
    if not any(ch.isdigit() for ch in s):
        return None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ts = pd.to_datetime(s)
    except (ValueError, TypeError, OverflowError):
        return None
    if ts is pd.NaT or pd.isna(ts):
        return None
    dt = ts.to_pydatetime()
    if dt.tzinfo is not None:
        dt = dt.astimezone(UTC)
    return dt.isoformat()


def _as_time(v: Any, name: str) -> str | None:
    if _is_missing(v):
        return None
    if isinstance(v, datetime | date):
        return v.isoformat()
    if isinstance(v, dict | list | tuple):
        raise _BadValue(name, f"is {_kind(v)}, expected a date and time")
    s = (v if isinstance(v, str) else _scalar_text(v)).strip()
    if not s:
        return None
    parsed = parse_time(s)
    if parsed is None:
        raise _BadTime(s)
    return parsed


def label_key(label: str) -> str:
    """What two queue names share when they differ only by case, spacing or number format."""
    try:
        x = float(label)
        if math.isfinite(x):
            return repr(x)
    except ValueError:
        pass
    return re.sub(r"\s+", "", label.casefold())


def similar_labels(counts: dict[str, int]) -> list[list[tuple[str, int]]]:
    """Groups of queue names that differ only by case, spacing or number format ('Network', 'NETWORK';
    '1', '1.0'), each name with its count, most frequent first."""
    groups: dict[str, list[tuple[str, int]]] = {}
    for name, n in counts.items():
        groups.setdefault(label_key(name), []).append((name, n))
    return [sorted(g, key=lambda t: (-t[1], t[0])) for g in groups.values() if len(g) > 1]


def describe_similar(source: str, group: list[tuple[str, int]]) -> str:
    """The warning for one group of look-alike queue names, with a [labels] line that would merge them."""
    names = ", ".join(f"{name!r} ({n})" for name, n in group)
    keep = group[0][0]
    example = "; ".join(f'"{name}" = "{keep}"' for name, _ in group[1:])
    return (f"{source}: queue names that differ only by case, spacing or number format: {names}; they stay "
            f"separate queues unless [labels] in triage.toml maps them, e.g. {example}")


class _RowChecker:
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
            why = _unusable(raw.get(name)) if name else None
            if why is not None:
                return Reject(row=row, field=name, reason=why, raw=_printable(raw))
        try:
            item_id = _as_key(raw.get(s.id), s.id, "an id")
            if item_id is None:
                raise _BadValue(s.id, "the id is empty")
            label = _as_label(raw.get(s.label), s.label)
            if label is not None:
                label = self.labels.get(label, label)
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
                    values[spec.name] = _as_number(v, spec.name, spec.thousands)
                else:
                    values[spec.name] = _as_category(v, spec.name)
            bad_time: str | None = None
            try:
                arrived = _as_time(raw.get(s.time), s.time) if s.time else None
            except _BadTime as t:
                arrived, bad_time = None, str(t)
        except _BadValue as bad:
            return Reject(row=row, field=bad.field_name, reason=bad.reason, raw=_printable(raw))
        if bad_time is not None:
            self.bad_times.append((row, bad_time))
        self.truncated.extend(cut)  # only for rows kept: a rejected row is in the rejects file whole
        return ItemRecord(item_id=item_id, fields=values, label=label, arrived_at=arrived)


def describe_reject(source: str, r: Reject) -> str:
    """`tickets.csv: row 12, field 'tenure_days': 'abc' is not a number` - the one-line form used everywhere."""
    line = f" (line {r.line})" if r.line is not None and r.line != r.row + 1 else ""
    where = f"row {r.row}{line}" + (f", field {r.field!r}" if r.field else "")
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
        self.line_of: dict[int, int] = {}  # CSV rows that do not start on line row + 1

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
        # Parsed with the csv module in strict mode over physical lines we hand it, rather than with pandas:
        # pandas refuses a whole file for one ragged row and lets a stray quote swallow the rows after it
        # without a word. Here every record knows the lines it came from, so a damaged one is rejected with
        # its line number and parsing starts again on the next line; the good rows still import.
        self.total = self.path.stat().st_size
        if self.total == 0:
            raise IngestError(f"{self.name}: the file is empty (no header, no rows)")
        sep = CSV_SUFFIXES[self.suffix]
        kind = self.suffix[1:].upper()
        with self.path.open("rb") as fh:
            lines = _Lines(fh, self)
            reader = csv.reader(lines, delimiter=sep, strict=True)
            try:
                header = next(reader)
                while not header:  # blank lines before the header
                    header = next(reader)
            except StopIteration:
                raise IngestError(f"{self.name}: the file is empty (no header, no rows)") from None
            except csv.Error as exc:
                raise IngestError(f"{self.name}: line {lines.taken[0][0]}: the header cannot be read as {kind}: "
                                  f"{exc} (check quoting and the delimiter)") from None
            header = [h.strip() for h in header]
            _refuse_duplicate_columns(self.name, header)
            self.columns = header
            width = len(header)
            row = 0
            while True:
                lines.taken = []
                try:
                    fields = next(reader)
                except StopIteration:
                    break
                except csv.Error as exc:
                    row += 1
                    yield lines.reject_first(row, f"the quoting is broken ({exc}){lines.span_note()}")
                    continue
                if not fields:
                    continue  # a blank line
                if len(lines.taken) > 1 and lines.swallowed(sep, width):
                    row += 1
                    yield lines.reject_first(
                        row, f"a quote opened here runs over {len(lines.taken) - 1} more line(s) that look like "
                        "rows of their own (a stray quote?); those lines are read again as rows")
                    continue
                row += 1
                if len(fields) != width:
                    if len(lines.taken) > 1:
                        yield lines.reject_first(row, f"expected {width} fields, found {len(fields)}"
                                                 f"{lines.span_note()}")
                    else:
                        yield Reject(row=row, field=None, reason=f"expected {width} fields, found {len(fields)}",
                                     raw={"line": lines.taken[0][1].rstrip("\r\n")}, line=lines.taken[0][0])
                    continue
                first = lines.taken[0][0]
                if first != row + 1:
                    self.line_of[row] = first
                yield row, dict(zip(header, fields, strict=True))
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
            data = json.loads(text, parse_int=_parse_int)
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
        _refuse_duplicate_columns(self.name, self.columns)
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


class _RepeatedKey(Exception):
    def __init__(self, key: str) -> None:
        super().__init__(key)
        self.key = key


def _no_repeated_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    """json's object hook: a key given twice is an error (json.loads would keep the last one silently)."""
    out: dict[str, Any] = {}
    for k, v in pairs:
        if k in out:
            raise _RepeatedKey(k)
        out[k] = v
    return out


class _Lines:
    """The physical lines of a CSV file, decoded one by one (so a bad byte names its line), with the lines
    the current record took; lines can be handed back so parsing starts again after a damaged record."""

    def __init__(self, fh: Any, reader: _Reader) -> None:
        self.fh = fh
        self.reader = reader
        self.lineno = 0
        self.offset = 0
        self.back: deque[tuple[int, str]] = deque()
        self.taken: list[tuple[int, str]] = []

    def __iter__(self) -> _Lines:
        return self

    def __next__(self) -> str:
        if self.back:
            item = self.back.popleft()
        else:
            raw = self.fh.readline()
            if not raw:
                raise StopIteration
            self.lineno += 1
            try:
                text = raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                bad = raw[exc.start : exc.start + 1].hex()
                raise IngestError(
                    f"{self.reader.name}: line {self.lineno}: the file is not UTF-8 (byte 0x{bad} at byte offset "
                    f"{self.offset + exc.start}); re-export it as UTF-8"
                ) from None
            if self.lineno == 1:
                text = text.removeprefix("\ufeff")
            self.offset += len(raw)
            self.reader.done = self.offset
            item = (self.lineno, text)
        self.taken.append(item)
        return item[1]

    def reject_first(self, row: int, reason: str) -> Reject:
        """Reject the record's first line and hand the others back to be parsed as rows of their own."""
        (first, text), rest = self.taken[0], self.taken[1:]
        self.back.extendleft(reversed(rest))
        return Reject(row=row, field=None, reason=f"line {first}: {reason}", raw={"line": text.rstrip("\r\n")},
                      line=first)

    def span_note(self) -> str:
        if len(self.taken) < 2:
            return ""
        return f"; a quote opened here runs to line {self.taken[-1][0]}, those lines are read again as rows"

    def swallowed(self, sep: str, width: int) -> bool:
        """True when a later line of this multi-line record has a full row's worth of delimiters and a first
        cell shaped like the record's own first cell (an id: "VW-1042" and "VW-1043" share the shape "A-9"): a
        quoted text with a line break rarely starts so ("Hello,\nI paid twice, see below, thanks" does not), a
        row swallowed by a stray quote does."""
        own = _cell_shape(self.taken[0][1].split(sep, 1)[0])
        for _n, text in self.taken[1:]:
            body = text.rstrip("\r\n")
            first = body.split(sep, 1)[0]
            if body.count(sep) >= width - 1 and first.strip() and _cell_shape(first) == own:
                return True
        return False


def _cell_shape(cell: str) -> str:
    """The shape of a cell: runs of digits -> 9, runs of letters -> A, quotes and outer spaces dropped."""
    text = cell.strip().strip('"').strip()
    return re.sub(r"[^\W\d_]+", "A", re.sub(r"\d+", "9", text))


def _refuse_duplicate_columns(source: str, columns: list[str]) -> None:
    """Two columns with one name: one of them would be dropped without a word, so the file is refused."""
    seen: dict[str, list[int]] = {}
    for i, c in enumerate(columns, start=1):
        seen.setdefault(c, []).append(i)
    dup = {c: pos for c, pos in seen.items() if len(pos) > 1}
    if dup:
        name, pos = next(iter(dup.items()))
        raise IngestError(f"{source}: column {name!r} appears {len(pos)} times (columns "
                          f"{', '.join(map(str, pos))}); rename or drop one, so no values are lost")


def _parse_json_line(text: str, lineno: int) -> tuple[int, dict[str, Any]] | Reject | None:
    """One JSON line: (line, object), a Reject naming the line, or None for a blank line."""
    if not text.strip():
        return None
    try:
        obj = json.loads(text, object_pairs_hook=_no_repeated_keys, parse_int=_parse_int)
    except _RepeatedKey as rep:
        return Reject(row=lineno, field=rep.key, reason=f"the key {rep.key!r} appears twice in this object; "
                      "one value would be dropped", raw={"line": text.rstrip("\r\n")})
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
    labels: dict[str, str] | None = None,
    warn_similar: bool = True,
) -> IngestResult:
    """Read and validate a whole file.

    `require_label=True` is for training data: the label column and every configured field must exist.
    For routing (False) a missing field column is filled with missing values and a warning.
    Rejected rows are written to `<stem>.rejects.csv` in `rejects_dir` (the workspace; without one, beside
    the file) and counted in the result. `labels` maps queue names in the file to the queue they mean.
    Arrival times that are not dates are left empty, counted in `bad_times` and warned about.
    """
    reader = _open_reader(path, chunk_rows)
    src = reader.name
    checker = _RowChecker(schema, require_label=require_label, max_text_chars=max_text_chars, labels=labels)
    warn = _Warnings()
    records: list[ItemRecord] = []
    record_rows: list[int] = []
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
                if row in reader.line_of:
                    result = Reject(result.row, result.field, result.reason, result.raw, reader.line_of[row])
                rejects.append(result)
                continue
            first = first_row_of.setdefault(result.item_id, row)
            if first != row:
                while checker.truncated and checker.truncated[-1][0] == row:
                    checker.truncated.pop()  # this row is rejected whole, so no note about cutting it
                while checker.bad_times and checker.bad_times[-1][0] == row:
                    checker.bad_times.pop()
                rejects.append(
                    Reject(row=row, field=schema.id, reason=f"duplicate of row {first}", raw=dict(raw),
                           line=reader.line_of.get(row))
                )
                continue
            records.append(result)
            record_rows.append(row)
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

    if checker.bad_times:
        shown = ", ".join(f"row {r} {v!r}" for r, v in checker.bad_times[:5])
        more = " ..." if len(checker.bad_times) > 5 else ""
        warn.add(f"{src}: {len(checker.bad_times)} of {rows_read} rows have a time {schema.time!r} that is not a "
                 f"date and time ({shown}{more}); they are kept without an arrival time, so they are never "
                 "scored as the newest items")
    if require_label and warn_similar:
        for group in similar_labels(Counter(r.label for r in records if r.label)):
            warn.add(describe_similar(src, group))

    rejects_path = None
    if rejects:
        rejects_path = write_rejects_file(rejects, _rejects_folder(reader.path, rejects_dir), reader.path.stem)
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
        bad_times=list(checker.bad_times),
        record_rows=record_rows,
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


def _rejects_folder(source: Path, rejects_dir: Path | None) -> Path:
    """Where a rejects file goes: the workspace's folder when given (the rejected rows hold personal data,
    so they stay where the rest of the data is), else beside the source file. Never the system's temporary
    folder, which other users of the machine can list."""
    folder = Path(rejects_dir) if rejects_dir is not None else source.resolve().parent
    folder.mkdir(parents=True, exist_ok=True)
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
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        except FileExistsError:
            continue
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            _write_rejects_to(rejects, fh)
        return path
    raise IngestError(f"{folder}: too many rejects files for {stem}; move the old ones away")


def write_rejects(rejects: list[Reject], path: Path) -> None:
    """Write rejects as CSV (row, field, reason, record) so they can be fixed and imported again."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
        _write_rejects_to(rejects, fh)


def _write_rejects_to(rejects: list[Reject], fh: Any) -> None:
    w = csv.writer(fh)
    w.writerow(["row", "line", "field", "reason", "record"])
    for r in rejects:
        w.writerow([r.row, r.line if r.line is not None else "", r.field or "", r.reason,
                    json.dumps(r.raw, ensure_ascii=False, default=_json_default)])


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
    labels: dict[str, str] | None = None,
) -> Iterator[ItemRecord | Reject]:
    """One result per non-blank input line, lazily, so a follower can decide each item as soon as it arrives.

    A bad line (not JSON, not an object, a bad field) yields a Reject whose row is the line number and the
    stream goes on. Repeated ids are not rejected here: a live stream has no end to compare against, and the
    store decides what a re-sent item means. Over-long text is cut and logged (there is no result to warn in).
    `source` names the stream in log messages.
    """
    checker = _RowChecker(schema, require_label=require_label, max_text_chars=max_text_chars, labels=labels)
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
