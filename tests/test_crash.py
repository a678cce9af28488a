"""Crashes: a process killed with SIGKILL in the middle of an import or a correction loses and doubles nothing."""

from __future__ import annotations

import csv
import itertools
import json
import os
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from triage.app import Workspace

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_corpus"
N_ROWS = 1500
BIG_ROWS = 60_000


def demo_rows(n: int) -> list[dict[str, str]]:
    with (DEMO / "voltwren_tickets.csv").open(newline="", encoding="utf-8") as fh:
        return list(itertools.islice(csv.DictReader(fh), n))


def pinned_config() -> str:
    text = (REPO / "configs" / "voltwren.toml").read_text(encoding="utf-8")
    text, n1 = re.subn(r'(?m)^text_model = "auto"', 'text_model = "multinomial"', text)
    text, n2 = re.subn(r'(?m)^alpha_text = "auto"', "alpha_text = 1.0", text)
    assert (n1, n2) == (1, 1), "the demo config changed shape; update pinned_config"
    return text


def run_python(code: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True,
                          timeout=120)


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("crash-ws")
    root = d / "ws"
    root.mkdir()
    (root / "triage.toml").write_text(pinned_config(), encoding="utf-8")
    src = d / "tickets.csv"
    rows = demo_rows(N_ROWS)
    with src.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    with Workspace.open(root) as ws:
        ws.import_file(src)
        ws.train()
    return root


@pytest.fixture
def ws_dir(trained: Path, tmp_path: Path) -> Path:
    dest = tmp_path / "ws"
    shutil.copytree(trained, dest)
    return dest


def integrity(db: Path) -> tuple[str, int, int]:
    """(integrity_check, items, distinct item ids), read with a plain connection."""
    con = sqlite3.connect(db)
    try:
        ok = con.execute("PRAGMA integrity_check").fetchone()[0]
        n, distinct = con.execute("SELECT count(*), count(DISTINCT item_id) FROM items").fetchone()
        return ok, n, distinct
    finally:
        con.close()


# ------------------------------------------------------------------------------------------------ import
def test_sigkill_during_import_leaves_all_or_nothing_and_a_rerun_completes(tmp_path: Path) -> None:
    sys.path.insert(0, str(DEMO))
    try:
        from generate import generate
    finally:
        sys.path.remove(str(DEMO))
    history, _, _ = generate("voltwren", BIG_ROWS)
    big = tmp_path / "big.csv"
    history.to_csv(big, index=False)
    root = tmp_path / "ws"
    root.mkdir()
    shutil.copyfile(REPO / "configs" / "voltwren.toml", root / "triage.toml")
    db = root / "triage.db"
    wal = root / "triage.db-wal"
    Workspace.open(root).close()  # the store exists and is migrated before the import starts

    p = subprocess.Popen([sys.executable, "-m", "triage", "import", str(big), "-w", str(root), "--json"],
                         stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    try:
        # the rows are read and checked first, then written in one transaction: wait until it is writing
        while time.monotonic() < deadline and p.poll() is None:
            if wal.exists() and wal.stat().st_size > 1_000_000:
                break
            time.sleep(0.005)
        assert p.poll() is None, "the import finished before it could be killed; use a bigger file"
        os.kill(p.pid, signal.SIGKILL)
    finally:
        p.wait(timeout=60)
    assert p.returncode == -signal.SIGKILL

    ok, n, distinct = integrity(db)
    assert ok == "ok"
    assert n == distinct and n in (0, BIG_ROWS)  # one transaction: all of the file or none of it

    done = subprocess.run([sys.executable, "-m", "triage", "import", str(big), "-w", str(root), "--json"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    ok, n, distinct = integrity(db)
    assert (ok, n, distinct) == ("ok", BIG_ROWS, BIG_ROWS)
    con = sqlite3.connect(db)
    try:
        (labels,) = con.execute("SELECT count(*) FROM labels").fetchone()
    finally:
        con.close()
    assert labels == BIG_ROWS  # one imported label per item, none doubled


# ------------------------------------------------------------------------------------------------ corrections
def class_counts(ws: Workspace) -> dict[str, float]:
    return dict(zip(ws.model.queues, ws.model.counts.class_count_.tolist(), strict=True))


def test_sigkill_after_the_journal_commit_is_replayed_exactly_once(ws_dir: Path) -> None:
    item = next(r for r in demo_rows(200) if r["queue"] == "installation")["ticket_id"]
    with Workspace.open(ws_dir) as ws:
        v0 = ws.active_version.version
        counts0 = class_counts(ws)
        n_versions = len(ws.models())

    # the crash point: the correction is journaled (committed), the model version is not written yet
    p = run_python(f"""
        import os, signal
        from triage.app import Workspace
        ws = Workspace.open({str(ws_dir)!r})
        ws.store.journal_correction({item!r}, "billing", "dana", ws.active_version.version)
        os.kill(os.getpid(), signal.SIGKILL)
    """)
    assert p.returncode == -signal.SIGKILL, p.stderr
    assert integrity(ws_dir / "triage.db")[0] == "ok"
    con = sqlite3.connect(ws_dir / "triage.db")
    try:
        assert con.execute("SELECT status FROM corrections").fetchall() == [("pending",)]
        assert con.execute("SELECT label FROM items WHERE item_id = ?", (item,)).fetchone() == ("installation",)
    finally:
        con.close()

    expected = dict(counts0)
    expected["installation"] -= 1
    expected["billing"] += 1
    with Workspace.open(ws_dir) as ws:  # the restart replays the journal
        assert ws.store.pending_corrections() == []
        (c,) = ws.store.corrections()
        assert c.status == "applied" and c.applied_version == v0 + 1
        assert ws.active_version.version == v0 + 1 and ws.active_version.kind == "correction"
        assert ws.store.get_item(item).label == "billing"
        assert class_counts(ws) == pytest.approx(expected, abs=1e-12)
        assert len(ws.models()) == n_versions + 1
    with Workspace.open(ws_dir) as ws:  # and a second restart changes nothing: applied once
        assert ws.active_version.version == v0 + 1
        assert len(ws.models()) == n_versions + 1
        assert class_counts(ws) == pytest.approx(expected, abs=1e-12)
        assert [h["queue"] for h in ws.store.label_history(item)] == ["installation", "billing"]


def test_restart_gives_the_same_model_corrections_included(ws_dir: Path) -> None:
    rows = demo_rows(120)
    ids = [r["ticket_id"] for r in rows]
    with Workspace.open(ws_dir) as ws:
        ws.correct(ids[0], "safety", by="dana")
        ws.correct(ids[1], "cancellations", by="dana")
        ws.correct(ids[2], "brand_new_queue", by="dana", new_queue=True)
        version = ws.active_version.version
        fields = [r.fields for r in ws.store.get_items(ids)]
        jll = ws.model.joint_log_likelihood(ws.model.encoder.transform(fields, allow_missing=True))
        queues = list(ws.model.queues)
        decisions = ws.decide_records(ws.store.get_items(ids[:20]))

    p = run_python(f"""
        import json
        from triage.app import Workspace
        ws = Workspace.open({str(ws_dir)!r})
        recs = ws.store.get_items({ids!r})
        jll = ws.model.joint_log_likelihood(ws.model.encoder.transform([r.fields for r in recs], allow_missing=True))
        print(json.dumps({{"version": ws.active_version.version, "queues": ws.model.queues, "jll": jll.tolist()}}))
    """)
    assert p.returncode == 0, p.stderr
    other = json.loads(p.stdout)
    assert other["version"] == version
    col = {q: i for i, q in enumerate(other["queues"])}
    again = np.array(other["jll"])
    assert set(col) == set(queues)
    for i, q in enumerate(queues):
        np.testing.assert_allclose(again[:, col[q]], jll[:, i], rtol=0, atol=1e-9, err_msg=q)

    with Workspace.open(ws_dir) as ws:
        assert ws.active_version.version == version
        assert ws.decide_records(ws.store.get_items(ids[:20])) == decisions
