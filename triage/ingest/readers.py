"""File readers: each yields (row number, raw dict) or a Reject for a row that cannot even be parsed, in
chunks, so a file larger than memory streams through.
"""

from __future__ import annotations

import codecs
import csv
import json
import re
from collections import deque
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from triage.ingest.rejects import IngestError, Reject
from triage.ingest.values import kind_of, parse_int

CSV_SUFFIXES = {".csv": ",", ".tsv": "\t"}


JSONL_SUFFIXES = (".jsonl", ".ndjson")


SUFFIXES = (*CSV_SUFFIXES, *JSONL_SUFFIXES, ".json", ".parquet")


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



def decode_line(raw: bytes, name: str, lineno: int, offset: int) -> str:
    """One line of a file as text: UTF-8 (a byte-order mark on the first line dropped), or an error naming the
    file, the line and the byte offset of the first byte that is not UTF-8 (`offset`: the line's own)."""
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        bad = raw[exc.start : exc.start + 1].hex()
        raise IngestError(f"{name}: line {lineno}: the file is not UTF-8 (byte 0x{bad} at byte offset "
                          f"{offset + exc.start}); re-export it as UTF-8") from None
    return text.removeprefix("\ufeff") if lineno == 1 else text

class Reader:
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
                text = decode_line(raw, self.name, lineno, offset)
                offset += len(raw)
                self.done = offset
                parsed = parse_json_line(text, lineno)
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
            data = json.loads(text, parse_int=parse_int)
        except json.JSONDecodeError as exc:
            raise IngestError(
                f"{self.name}: line {exc.lineno}, column {exc.colno}: not valid JSON: {exc.msg}"
            ) from None
        if not isinstance(data, list):
            raise IngestError(f"{self.name}: expected a JSON list of objects, found {kind_of(data)}")
        self.done = self.total
        for i, obj in enumerate(data, start=1):
            if isinstance(obj, dict):
                yield i, obj
            else:
                yield Reject(
                    row=i, field=None, reason=f"is {kind_of(obj)}, expected an object", raw={"value": obj}
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

    def __init__(self, fh: Any, reader: Reader) -> None:
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
            text = decode_line(raw, self.reader.name, self.lineno, self.offset)
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


def parse_json_line(text: str, lineno: int) -> tuple[int, dict[str, Any]] | Reject | None:
    """One JSON line: (line, object), a Reject naming the line, or None for a blank line."""
    if not text.strip():
        return None
    try:
        obj = json.loads(text, object_pairs_hook=_no_repeated_keys, parse_int=parse_int)
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
            reason=f"is {kind_of(obj)}, expected a JSON object",
            raw={"line": text.rstrip("\r\n")},
        )
    return lineno, obj


def open_reader(path: Path | str, chunk_rows: int) -> Reader:
    p = Path(path)
    if p.suffix.lower() not in SUFFIXES:
        raise IngestError(
            f"{p.name}: unknown file type {p.suffix or '(no suffix)'!r}; use one of {', '.join(SUFFIXES)}"
        )
    if not p.exists():
        raise IngestError(f"{p}: file not found")
    if not p.is_file():
        raise IngestError(f"{p}: not a file")
    return Reader(p, chunk_rows)


def read_raw_sample(path: Path | str, limit: int) -> tuple[list[str], list[dict[str, Any]]]:
    """The column names and the first `limit` parseable raw rows, unvalidated; used to infer a config."""
    reader = open_reader(path, chunk_rows=min(max(limit, 1), 20_000))
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
