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


The package: `values` (one cell), `rows` (one row against the schema), `readers` (files into raw rows),
`items` (the public readers), `rejects` (what could not be imported, and where it is kept).
"""

from triage.ingest.items import read_items, read_jsonl_stream
from triage.ingest.readers import SUFFIXES, read_raw_sample
from triage.ingest.rejects import (
    IngestError,
    IngestResult,
    Reject,
    describe_reject,
    write_rejects,
    write_rejects_file,
)
from triage.ingest.values import describe_similar, label_key, parse_time, similar_labels

__all__ = [
    "SUFFIXES", "IngestError", "IngestResult", "Reject", "describe_reject", "describe_similar", "label_key",
    "parse_time", "read_items", "read_jsonl_stream", "read_raw_sample", "similar_labels", "write_rejects",
    "write_rejects_file",
]
