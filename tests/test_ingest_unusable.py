"""A row holding a value no store can hold is rejected, naming its field; the rest of the file or stream goes on.

The values are valid JSON (RFC 8259 section 6 puts no bound on a number's digits; section 7 allows any
`\\uXXXX` escape) but not storable: Unicode definition D76 excludes the surrogates U+D800..U+DFFF from scalar
values, so `\\ud800` alone cannot be encoded as UTF-8 (RFC 3629 section 3), and Python refuses to turn an
integer of more than 4,300 digits into text (sys.int_info.default_max_str_digits).
"""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import pytest

from tests.helpers import build_demo_workspace, copy_workspace
from triage.app import Workspace
from triage.ingest import Reject, read_jsonl_stream

GOOD = ('{"ticket_id": "G-1", "subject": "Invoice wrong", "body": "charged twice", "queue": "billing", '
        '"channel": "email", "product_line": null, "plan": null, "region": null, "tenure_days": 3, '
        '"open_orders": 0}')
LINES = [
    GOOD,
    '{"ticket_id": ' + "9" * 5000 + ', "subject": "x", "queue": "billing"}',
    '{"ticket_id": "B-2", "subject": "smoke \\ud800", "queue": "safety"}',
    '{"ticket_id": "B-3", "subject": "x", "tenure_days": ' + "7" * 400 + ', "queue": "billing"}',
    '{"ticket_id": "B-4", "subject": "x", "queue": "bill\\udfffing"}',
    GOOD.replace("G-1", "G-2"),
]
EXPECTED_FIELDS = ["ticket_id", "subject", "tenure_days", "queue"]


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_workspace(tmp_path_factory.mktemp("unusable") / "ws", rows=400)


def test_the_stream_rejects_each_bad_line_and_goes_on(trained: Path) -> None:
    with Workspace.open(trained) as ws:
        results = list(read_jsonl_stream(LINES, ws.config.schema, require_label=True))
    assert [r.item_id for r in results if not isinstance(r, Reject)] == ["G-1", "G-2"]
    rejects = [r for r in results if isinstance(r, Reject)]
    assert [r.row for r in rejects] == [2, 3, 4, 5]
    assert [r.field for r in rejects] == EXPECTED_FIELDS
    json.dumps([r.raw for r in rejects], ensure_ascii=False).encode("utf-8")  # printable: nothing fails later


def test_import_keeps_the_good_rows_and_writes_the_rejects(trained: Path, tmp_path: Path) -> None:
    root = copy_workspace(trained, tmp_path)
    src = tmp_path / "new.jsonl"
    src.write_text("\n".join(LINES) + "\n", encoding="utf-8")
    with Workspace.open(root) as ws:
        report = ws.import_file(src)
        assert report.added == 2
        assert ws.store.get_item("G-1") is not None and ws.store.get_item("G-2") is not None
        rejects_path = report.result.rejects_path
    assert rejects_path is not None
    with rejects_path.open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["field"] for r in rows] == EXPECTED_FIELDS


def test_route_follow_rejects_a_bad_line_and_goes_on(trained: Path, tmp_path: Path) -> None:
    root = copy_workspace(trained, tmp_path)
    r = subprocess.run([sys.executable, "-m", "triage", "route", "--follow", "-", "-w", str(root)],
                       input="\n".join(LINES) + "\n", capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    decided = [json.loads(line)["id"] for line in r.stdout.splitlines() if line.strip()]
    assert decided == ["G-1", "G-2"]
    errors = [json.loads(line) for line in r.stderr.splitlines() if line.startswith("{")]
    assert [e["line"] for e in errors] == [2, 3, 4, 5]
    assert "Traceback" not in r.stderr
