"""Reading and validating item files: same records from every format, clear errors, nothing good lost."""

from __future__ import annotations

import csv
import json
import logging
import re
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.ingest import (
    IngestError,
    Reject,
    read_items,
    read_jsonl_stream,
    read_raw_sample,
    write_rejects,
)
from triage.records import ItemRecord

SCHEMA = Schema(
    fields=(
        FieldSpec("subject", FieldRole.TEXT, weight=2.0),
        FieldSpec("body", FieldRole.TEXT),
        FieldSpec("channel", FieldRole.CATEGORY),
        FieldSpec("tenure_days", FieldRole.NUMBER),
    ),
    id="ticket_id",
    label="queue",
    time="received_at",
)

ROWS = [
    {
        "ticket_id": "T1",
        "subject": "Invoice twice",
        "body": "I was charged twice for the Brightcell plan.",
        "channel": "email",
        "tenure_days": "120",
        "queue": "billing",
        "received_at": "2024-03-01T09:00:00",
    },
    {
        "ticket_id": "T2",
        "subject": "App offline",
        "body": "The app says the inverter is offline since Monday.",
        "channel": " chat ",
        "tenure_days": "7.5",
        "queue": "app",
        "received_at": "2024-03-02T10:30:00",
    },
    {
        "ticket_id": "T3",
        "subject": "Burning smell",
        "body": "",
        "channel": "",
        "tenure_days": "",
        "queue": "safety",
        "received_at": "",
    },
]

EXPECTED = [
    ItemRecord(
        item_id="T1",
        fields={
            "subject": "Invoice twice",
            "body": "I was charged twice for the Brightcell plan.",
            "channel": "email",
            "tenure_days": 120.0,
        },
        label="billing",
        arrived_at="2024-03-01T09:00:00",
    ),
    ItemRecord(
        item_id="T2",
        fields={
            "subject": "App offline",
            "body": "The app says the inverter is offline since Monday.",
            "channel": "chat",
            "tenure_days": 7.5,
        },
        label="app",
        arrived_at="2024-03-02T10:30:00",
    ),
    ItemRecord(
        item_id="T3",
        fields={"subject": "Burning smell", "body": "", "channel": None, "tenure_days": None},
        label="safety",
        arrived_at=None,
    ),
]


def write_csv(path: Path, rows: list[dict], sep: str = ",") -> Path:
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]), delimiter=sep)
        w.writeheader()
        w.writerows(rows)
    return path


def write_jsonl(path: Path, rows: list[dict]) -> Path:
    path.write_text("".join(json.dumps(r) + "\n" for r in rows), encoding="utf-8")
    return path


def typed(row: dict) -> dict:
    """The same row as a JSON/Parquet producer would write it: numbers as numbers, empties as null."""
    out: dict = {}
    for k, v in row.items():
        if k == "tenure_days":
            out[k] = float(v) if v else None
        elif k in ("channel", "received_at"):
            out[k] = v or None
        else:
            out[k] = v
    return out


# ---------------------------------------------------------------------------------------------- formats


def test_csv_tsv_jsonl_json_parquet_give_the_same_records(tmp_path: Path) -> None:
    paths = [
        write_csv(tmp_path / "a.csv", ROWS),
        write_csv(tmp_path / "a.tsv", ROWS, sep="\t"),
        write_jsonl(tmp_path / "a.jsonl", [typed(r) for r in ROWS]),
        write_jsonl(tmp_path / "b.ndjson", ROWS),
    ]
    (tmp_path / "a.json").write_text(json.dumps([typed(r) for r in ROWS]), encoding="utf-8")
    paths.append(tmp_path / "a.json")
    pq.write_table(pa.Table.from_pylist([typed(r) for r in ROWS]), tmp_path / "a.parquet")
    paths.append(tmp_path / "a.parquet")
    for p in paths:
        res = read_items(p, SCHEMA)
        assert res.records == EXPECTED, p.name
        assert res.rejects == [] and res.rejects_path is None
        assert res.rows_read == 3
        assert res.warnings == []


def test_ids_stay_strings_and_integer_ids_are_converted(tmp_path: Path) -> None:
    rows = [dict(ROWS[0], ticket_id="00123"), dict(ROWS[1], ticket_id="  77 ")]
    res = read_items(write_csv(tmp_path / "ids.csv", rows), SCHEMA)
    assert [r.item_id for r in res.records] == ["00123", "77"]
    jrows = [dict(typed(ROWS[0]), ticket_id=123), dict(typed(ROWS[1]), ticket_id=77)]
    res = read_items(write_jsonl(tmp_path / "ids.jsonl", jrows), SCHEMA)
    assert [r.item_id for r in res.records] == ["123", "77"]
    pq.write_table(pa.Table.from_pylist(jrows), tmp_path / "ids.parquet")
    assert [r.item_id for r in read_items(tmp_path / "ids.parquet", SCHEMA).records] == ["123", "77"]


def test_parquet_timestamps_become_iso_text(tmp_path: Path) -> None:
    df = pd.DataFrame([typed(r) for r in ROWS[:2]])
    df["received_at"] = pd.to_datetime(df["received_at"])
    df.to_parquet(tmp_path / "t.parquet")
    res = read_items(tmp_path / "t.parquet", SCHEMA)
    assert [r.arrived_at for r in res.records] == ["2024-03-01T09:00:00", "2024-03-02T10:30:00"]


def test_utf8_bom_is_accepted(tmp_path: Path) -> None:
    p = write_csv(tmp_path / "bom.csv", ROWS)
    p.write_bytes(b"\xef\xbb\xbf" + p.read_bytes())
    assert read_items(p, SCHEMA).records == EXPECTED


# ------------------------------------------------------------------------------------ file-level errors


def test_missing_file_and_unknown_suffix(tmp_path: Path) -> None:
    with pytest.raises(IngestError, match=r"nothere\.csv: file not found"):
        read_items(tmp_path / "nothere.csv", SCHEMA)
    (tmp_path / "a.xlsx").write_text("x")
    with pytest.raises(IngestError, match=r"a\.xlsx: unknown file type '\.xlsx'"):
        read_items(tmp_path / "a.xlsx", SCHEMA)


@pytest.mark.parametrize("name", ["empty.csv", "empty.jsonl", "empty.parquet", "empty.json"])
def test_empty_file(tmp_path: Path, name: str) -> None:
    (tmp_path / name).write_bytes(b"")
    with pytest.raises(IngestError, match=re.escape(name) + ": the file (is empty|has no rows)"):
        read_items(tmp_path / name, SCHEMA)


def test_header_without_rows(tmp_path: Path) -> None:
    p = tmp_path / "head.csv"
    p.write_text("ticket_id,subject,body,channel,tenure_days,queue\n", encoding="utf-8")
    with pytest.raises(IngestError, match=r"head\.csv: the file has a header but no rows"):
        read_items(p, SCHEMA)
    q = tmp_path / "blank.jsonl"
    q.write_text("\n\n", encoding="utf-8")
    with pytest.raises(IngestError, match=r"blank\.jsonl: the file has no rows"):
        read_items(q, SCHEMA)


def test_latin1_file_gives_a_clear_utf8_error(tmp_path: Path) -> None:
    text = "ticket_id,subject,body,channel,tenure_days,queue\nT1,Facture,Déjà payé à Zürich,email,3,billing\n"
    p = tmp_path / "latin.csv"
    p.write_bytes(text.encode("latin-1"))
    offset = text.encode("latin-1").index("é".encode("latin-1"))
    with pytest.raises(IngestError) as err:
        read_items(p, SCHEMA)
    msg = str(err.value)
    assert msg.startswith("latin.csv: line 2: the file is not UTF-8")
    assert f"byte 0xe9 at byte offset {offset}" in msg
    assert "re-export it as UTF-8" in msg

    j = tmp_path / "latin.jsonl"
    j.write_bytes((json.dumps(typed(ROWS[0])) + "\n").encode() + '{"ticket_id": "Zé"}\n'.encode("latin-1"))
    with pytest.raises(IngestError, match=r"latin\.jsonl: line 2: the file is not UTF-8 \(byte 0xe9"):
        read_items(j, SCHEMA)


def test_missing_id_or_label_column(tmp_path: Path) -> None:
    no_id = [{k: v for k, v in r.items() if k != "ticket_id"} for r in ROWS]
    with pytest.raises(IngestError, match=r"noid\.csv: no id column 'ticket_id'"):
        read_items(write_csv(tmp_path / "noid.csv", no_id), SCHEMA)
    no_label = [{k: v for k, v in r.items() if k != "queue"} for r in ROWS]
    with pytest.raises(IngestError, match=r"nolabel\.jsonl: no label column 'queue'"):
        read_items(write_jsonl(tmp_path / "nolabel.jsonl", no_label), SCHEMA)
    # for routing the label is not needed
    res = read_items(tmp_path / "nolabel.jsonl", SCHEMA, require_label=False)
    assert [r.label for r in res.records] == [None, None, None]
    assert [r.item_id for r in res.records] == ["T1", "T2", "T3"]


def test_missing_field_column_is_an_error_for_training_and_a_warning_for_routing(tmp_path: Path) -> None:
    rows = [{k: v for k, v in r.items() if k != "tenure_days"} for r in ROWS]
    p = write_csv(tmp_path / "nofield.csv", rows)
    with pytest.raises(IngestError, match=r"nofield\.csv: configured field column\(s\) 'tenure_days' not in"):
        read_items(p, SCHEMA)
    res = read_items(p, SCHEMA, require_label=False)
    assert len(res.records) == 3
    assert all(r.fields["tenure_days"] is None for r in res.records)
    assert res.warnings == [
        "nofield.csv: field 'tenure_days' is not in the file; treated as missing on every row"
    ]


def test_ragged_csv_rows_are_rejected_and_the_rest_imported(tmp_path: Path) -> None:
    p = tmp_path / "ragged.csv"
    p.write_text("ticket_id,subject,body,channel,tenure_days,queue\nT1,a,b,c,1,q\nT2,a,b,c,1,q,extra\n"
                 "T3,a,b\nT4,a,b,c,1,q\n")
    res = read_items(p, SCHEMA)
    assert [r.item_id for r in res.records] == ["T1", "T4"]
    assert [(r.row, r.reason) for r in res.rejects] == [(2, "expected 6 fields, found 7"),
                                                      (3, "expected 6 fields, found 3")]
    assert "ragged.csv: row 2: expected 6 fields, found 7" in res.warnings


def test_broken_parquet(tmp_path: Path) -> None:
    p = tmp_path / "broken.parquet"
    p.write_bytes(b"PAR1 this is not really parquet")
    with pytest.raises(IngestError, match=r"broken\.parquet: cannot be read as Parquet"):
        read_items(p, SCHEMA)


# ------------------------------------------------------------------------------------------ row rejects


def test_bad_rows_are_rejected_and_good_rows_kept(tmp_path: Path) -> None:
    rows = [
        ROWS[0],
        dict(ROWS[1], ticket_id="T2", tenure_days="abc"),
        dict(ROWS[1], ticket_id="", subject="no id"),
        dict(ROWS[1], ticket_id="T4", queue="  "),
        dict(ROWS[1], ticket_id="T1", subject="again"),
        dict(ROWS[1], ticket_id="T6", tenure_days="1,234"),
        dict(ROWS[1], ticket_id="T7", tenure_days="inf"),
        ROWS[2],
    ]
    p = write_csv(tmp_path / "tickets.csv", rows)
    res = read_items(p, SCHEMA)
    assert [r.item_id for r in res.records] == ["T1", "T3"]
    assert res.rows_read == 8
    got = [(r.row, r.field, r.reason) for r in res.rejects]
    assert got == [
        (2, "tenure_days", "'abc' is not a number"),
        (3, "ticket_id", "the id is empty"),
        (4, "queue", "the label (queue) is empty"),
        (5, "ticket_id", "duplicate of row 1"),
        (6, "tenure_days", "'1,234' is not a number (set thousands = \",\" for this field in triage.toml to "
                           "read 1,200 as 1200)"),
        (7, "tenure_days", "'inf' is not a finite number"),
    ]
    assert "tickets.csv: row 2, field 'tenure_days': 'abc' is not a number" in res.warnings
    assert "tickets.csv: row 5, field 'ticket_id': duplicate of row 1" in res.warnings
    assert res.rejects_path == tmp_path / "tickets.rejects.csv"
    with res.rejects_path.open(encoding="utf-8", newline="") as fh:
        written = list(csv.DictReader(fh))
    assert [int(w["row"]) for w in written] == [2, 3, 4, 5, 6, 7]
    assert written[0]["field"] == "tenure_days"
    assert json.loads(written[0]["record"])["tenure_days"] == "abc"
    assert json.loads(written[3]["record"])["subject"] == "again"


def test_unlabelled_rows_are_fine_when_routing(tmp_path: Path) -> None:
    rows = [ROWS[0], dict(ROWS[1], queue="")]
    res = read_items(write_csv(tmp_path / "route.csv", rows), SCHEMA, require_label=False)
    assert [r.label for r in res.records] == ["billing", None]
    assert res.rejects == []


def test_json_values_of_the_wrong_type_are_rejected(tmp_path: Path) -> None:
    rows = [
        typed(ROWS[0]),
        dict(typed(ROWS[1]), body={"text": "nested"}),
        dict(typed(ROWS[1]), ticket_id="T5", channel=["a", "b"]),
        dict(typed(ROWS[1]), ticket_id="T6", tenure_days=True),
        dict(typed(ROWS[1]), ticket_id="T7", tenure_days="12"),
        typed(ROWS[2]),
    ]
    p = write_jsonl(tmp_path / "types.jsonl", rows)
    res = read_items(p, SCHEMA)
    assert [r.item_id for r in res.records] == ["T1", "T7", "T3"]
    assert res.records[1].fields["tenure_days"] == 12.0
    assert [(r.row, r.field, r.reason) for r in res.rejects] == [
        (2, "body", "is an object, expected text"),
        (3, "channel", "is a list, expected a single value"),
        (4, "tenure_days", "is a boolean, expected a number"),
    ]


def test_bad_json_lines_are_rejected_with_their_line_number(tmp_path: Path) -> None:
    p = tmp_path / "lines.jsonl"
    p.write_text(
        json.dumps(typed(ROWS[0]))
        + "\n\n"
        + '{"ticket_id": "T9", "subject": \n'
        + "[1, 2]\n"
        + json.dumps(typed(ROWS[1]))
        + "\n",
        encoding="utf-8",
    )
    res = read_items(p, SCHEMA)
    assert [r.item_id for r in res.records] == ["T1", "T2"]
    assert [(r.row, r.field) for r in res.rejects] == [(3, None), (4, None)]
    assert res.rejects[0].reason.startswith("not valid JSON")
    assert res.rejects[1].reason == "is a list, expected a JSON object"
    assert res.rejects[0].raw == {"line": '{"ticket_id": "T9", "subject": '}
    assert (tmp_path / "lines.rejects.csv").exists()


def test_rejects_go_to_rejects_dir_when_given(tmp_path: Path) -> None:
    src = tmp_path / "in"
    src.mkdir()
    out = tmp_path / "out"
    p = write_csv(src / "leads.csv", [ROWS[0], dict(ROWS[1], ticket_id="T1")])
    res = read_items(p, SCHEMA, rejects_dir=out)
    assert res.rejects_path == out / "leads.rejects.csv"
    assert res.rejects_path.exists()
    assert not (src / "leads.rejects.csv").exists()


def test_write_rejects_round_trips(tmp_path: Path) -> None:
    rejects = [Reject(row=4, field="x", reason='bad, "quoted"', raw={"x": "é", "n": None})]
    write_rejects(rejects, tmp_path / "sub" / "r.csv")
    with (tmp_path / "sub" / "r.csv").open(encoding="utf-8", newline="") as fh:
        (got,) = list(csv.DictReader(fh))
    assert got["row"] == "4" and got["reason"] == 'bad, "quoted"'
    assert json.loads(got["record"]) == {"x": "é", "n": None}


def test_overlong_text_is_truncated_with_a_warning(tmp_path: Path) -> None:
    rows = [dict(ROWS[0], body="x" * 500), ROWS[1]]
    res = read_items(write_csv(tmp_path / "long.csv", rows), SCHEMA, max_text_chars=100)
    assert res.records[0].fields["body"] == "x" * 100
    assert res.records[1].fields["body"] == ROWS[1]["body"]
    assert res.rejects == []
    assert res.warnings == ["long.csv: row 1, field 'body': text of 500 characters cut to 100"]


def test_many_row_warnings_are_summarised(tmp_path: Path) -> None:
    rows = [dict(ROWS[0], ticket_id=f"T{i}", body="y" * 50) for i in range(30)]
    rows += [dict(ROWS[0], ticket_id=f"T{i}", tenure_days="unknown") for i in range(30, 55)]
    res = read_items(write_csv(tmp_path / "many.csv", rows), SCHEMA, max_text_chars=20)
    assert len(res.records) == 30 and len(res.rejects) == 25
    assert res.warnings[:2] == [
        "many.csv: row 1, field 'body': text of 50 characters cut to 20",
        "many.csv: row 2, field 'body': text of 50 characters cut to 20",
    ]
    assert res.warnings[20] == "many.csv: row 31, field 'tenure_days': 'unknown' is not a number"
    assert res.warnings[-3:] == [
        "many.csv: 25 of 55 rows rejected; see " + str(tmp_path / "many.rejects.csv"),
        "many.csv: 10 more cells of over-long text, not listed",
        "many.csv: 5 more rejected rows, not listed",
    ]
    assert len(res.warnings) == 43


# ---------------------------------------------------------------------------------------------- stream


def test_stream_yields_one_result_per_line_and_goes_on() -> None:
    lines = [
        json.dumps(typed(ROWS[0])) + "\n",
        "not json at all\n",
        "\n",
        json.dumps(dict(typed(ROWS[1]), tenure_days="lots")) + "\n",
        json.dumps({"ticket_id": "T8", "subject": "no label here"}) + "\n",
    ]
    out = list(read_jsonl_stream(lines, SCHEMA, source="<test>"))
    assert len(out) == 4
    assert out[0] == EXPECTED[0]
    assert isinstance(out[1], Reject) and out[1].row == 2 and out[1].reason.startswith("not valid JSON")
    assert isinstance(out[2], Reject) and (out[2].row, out[2].field) == (4, "tenure_days")
    assert out[3] == ItemRecord(
        item_id="T8",
        fields={"subject": "no label here", "body": "", "channel": None, "tenure_days": None},
        label=None,
        arrived_at=None,
    )


def test_stream_is_lazy() -> None:
    consumed: list[int] = []

    def gen():
        for i in range(3):
            consumed.append(i)
            yield json.dumps({"ticket_id": f"S{i}", "subject": "hi"})

    it = read_jsonl_stream(gen(), SCHEMA)
    first = next(it)
    assert isinstance(first, ItemRecord) and first.item_id == "S0"
    assert consumed == [0]


def test_stream_truncates_and_logs(caplog: pytest.LogCaptureFixture) -> None:
    with caplog.at_level(logging.WARNING, logger="triage.ingest"):
        (rec,) = list(
            read_jsonl_stream([json.dumps({"ticket_id": "L", "body": "z" * 50})], SCHEMA, max_text_chars=5)
        )
    assert isinstance(rec, ItemRecord) and rec.fields["body"] == "zzzzz"
    assert "<stdin>: line 1, field 'body': text of 50 characters cut to 5" in caplog.text


# ----------------------------------------------------------------------------------------------- scale


def test_large_csv_streams_in_chunks(tmp_path: Path) -> None:
    n = 200_000
    p = tmp_path / "big.csv"
    with p.open("w", encoding="utf-8") as fh:
        fh.write("ticket_id,subject,body,channel,tenure_days,queue\n")
        for i in range(n):
            fh.write(
                f"B{i},subject {i % 97},body text {i},{'email' if i % 2 else 'chat'},{i % 365},q{i % 5}\n"
            )
        fh.write("B5,duplicate,row,chat,1,q1\n")
    res = read_items(p, SCHEMA, chunk_rows=7_000, progress=True)
    assert res.rows_read == n + 1
    assert len(res.records) == n
    assert res.records[-1].item_id == f"B{n - 1}"
    assert res.records[123_456].fields["tenure_days"] == float(123_456 % 365)
    assert [(r.row, r.reason) for r in res.rejects] == [(n + 1, "duplicate of row 6")]


def test_raw_sample_reads_only_the_head(tmp_path: Path) -> None:
    p = write_csv(tmp_path / "s.csv", [dict(ROWS[0], ticket_id=f"T{i}") for i in range(50)])
    cols, rows = read_raw_sample(p, 10)
    assert cols == list(ROWS[0])
    assert [r["ticket_id"] for r in rows] == [f"T{i}" for i in range(10)]


def test_a_quoted_multi_line_text_with_commas_stays_one_item(tmp_path: Path) -> None:
    """RFC 4180 section 2, rules 6 and 7: a field in double quotes may hold line breaks and commas. A ticket body
    whose second line has as many commas as the file has columns is still one cell, not a swallowed row."""
    from triage.ingest import read_raw_sample

    path = tmp_path / "multi.csv"
    path.write_text('id,queue,body\n1,billing,"Hello,\nI paid twice, see below, thanks"\n2,safety,smoke\n',
                    encoding="utf-8")
    _columns, rows = read_raw_sample(path, 10)
    assert [r["id"] for r in rows] == ["1", "2"]
    assert rows[0]["body"] == "Hello,\nI paid twice, see below, thanks" and rows[0]["queue"] == "billing"
