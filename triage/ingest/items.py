"""The public readers: a whole file (`read_items`) or a stream of JSON lines (`read_jsonl_stream`) made into
checked items, rejects and warnings.
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path

from triage.core.schema import Schema
from triage.ingest.readers import Reader, open_reader, parse_json_line
from triage.ingest.rejects import (
    IngestError,
    IngestResult,
    Reject,
    describe_reject,
    rejects_folder,
    write_rejects_file,
)
from triage.ingest.rows import RowChecker
from triage.ingest.values import describe_similar, similar_labels
from triage.records import ItemRecord

log = logging.getLogger("triage.ingest")  # one logger for the package, as before the split


PROGRESS_MIN_BYTES = 5_000_000  # smaller files read too fast for a bar to help


MAX_ROW_WARNINGS = 20  # per kind; after that one summary line, so a bad export does not bury the output


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


def _progress_bar(reader: Reader, enabled: bool) -> tuple[Callable[[], None], Callable[[], None]]:
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
    reader = open_reader(path, chunk_rows)
    src = reader.name
    checker = RowChecker(schema, require_label=require_label, max_text_chars=max_text_chars, labels=labels)
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
        rejects_path = write_rejects_file(rejects, rejects_folder(reader.path, rejects_dir), reader.path.stem)
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
    checker = RowChecker(schema, require_label=require_label, max_text_chars=max_text_chars, labels=labels)
    for lineno, text in enumerate(lines, start=1):
        if lineno == 1:
            text = text.removeprefix("\ufeff")
        parsed = parse_json_line(text, lineno)
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
