"""The workspace's files: private, never written through a link, shared model parts stored once, and a full
disk reported in one line.

File modes as POSIX open(2) defines O_CREAT|O_EXCL|O_NOFOLLOW and the mode argument; SQLite creates the -wal
and -shm files with the database file's permissions (sqlite.org/tempfiles.html, "the WAL file ... same
permissions"; unix VFS robust_open). The file size limit is POSIX setrlimit(RLIMIT_FSIZE): a write past it fails
with EFBIG (Python ignores SIGXFSZ, as its signal module documentation says).
"""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
from pathlib import Path

import pytest

from tests.helpers import build_demo_workspace, copy_workspace
from triage.app import Workspace
from triage.store import Store, StoreError, StoreFullError


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_workspace(tmp_path_factory.mktemp("files") / "ws", rows=400)


def test_the_database_is_created_private(tmp_path: Path) -> None:
    old = os.umask(0o022)
    try:
        with Store.open(tmp_path / "triage.db") as store:
            with store.transaction():
                store._write("INSERT INTO batches(source, at, n_items, summary_json) VALUES ('t', 'now', 0, '{}')")
    finally:
        os.umask(old)
    for name in ("triage.db", "triage.db-wal", "triage.db-shm"):
        p = tmp_path / name
        if p.exists():
            assert (p.stat().st_mode & 0o777) == 0o600, name


def test_an_existing_open_database_is_tightened(tmp_path: Path) -> None:
    Store.open(tmp_path / "triage.db").close()
    os.chmod(tmp_path / "triage.db", 0o644)
    Store.open(tmp_path / "triage.db").close()
    assert (os.stat(tmp_path / "triage.db").st_mode & 0o777) == 0o600


def test_a_database_behind_a_symbolic_link_is_refused(tmp_path: Path) -> None:
    target = tmp_path / "elsewhere.db"
    target.write_bytes(b"someone else's file")
    (tmp_path / "triage.db").symlink_to(target)
    with pytest.raises(StoreError, match="symbolic link"):
        Store.open(tmp_path / "triage.db")
    assert target.read_bytes() == b"someone else's file"


def test_a_correction_version_does_not_copy_the_calibration(trained: Path, tmp_path: Path) -> None:
    """The train version's calibration and routing policy are kilobytes; each correction version refers to
    them instead of copying them (the store grew by about 9 KB per correction before)."""
    root = copy_workspace(trained, tmp_path)
    with Workspace.open(root) as ws:
        queues = list(ws.model.queues)
        for i, rec in enumerate(ws.store.labelled_items()[:30]):
            others = [q for q in queues if q != rec.label]  # its own queue is refused: nothing to correct
            ws.correct(rec.item_id, others[i % len(others)], "tester")
        versions = ws.models()
        rows = ws.store._all("SELECT kind, length(config_json) FROM model_versions ORDER BY version")
        parts = ws.store._all("SELECT count(*) FROM shared_parts")[0][0]
        # the versions still read back whole, the calibration included
        first, last = versions[0], versions[-1]
        assert last.config["calibration"] == first.config["calibration"]
        assert last.config["policy"] == first.config["policy"]
    correction_sizes = [n for kind, n in rows if kind == "correction"]
    assert len(correction_sizes) == 30
    assert parts <= 4  # calibration, policy, split, spec: each stored once
    # a correction version's own config is its list of corrections and a few references, a small part of the
    # whole config it reads back
    whole = len(json.dumps(last.config))
    assert max(correction_sizes) < 1500
    assert whole > 3 * max(correction_sizes)
    with Workspace.open(root) as again:  # and a fresh open replays the corrected version from those parts
        assert again.active_version.version == last.version


def _limit_file_size(limit: int) -> None:
    resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))


def test_train_with_no_room_for_the_model_says_so_in_one_line(trained: Path, tmp_path: Path) -> None:
    root = copy_workspace(trained, tmp_path)
    models_before = sorted(p.name for p in (root / "models").iterdir())
    with Workspace.open(root) as ws:
        active_before = ws.active_version.version
    arrays = max(p.stat().st_size for p in (root / "models").glob("*/arrays.npz"))
    # no room for the model's count tables (training writes nothing else before them)
    r = subprocess.run([sys.executable, "-m", "triage", "train", "-w", str(root)], capture_output=True,
                       text=True, timeout=300, preexec_fn=lambda: _limit_file_size(arrays // 2))
    assert r.returncode == 2, (r.stdout, r.stderr)
    lines = [line for line in r.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert "no room to write the model" in lines[0]
    assert sorted(p.name for p in (root / "models").iterdir()) == models_before  # nothing half-written
    with Workspace.open(root) as ws:
        assert ws.active_version.version == active_before


def test_a_full_store_is_a_typed_error(tmp_path: Path) -> None:
    with Store.open(tmp_path / "triage.db") as store:
        pages = store.pragma("page_count")
        store._conn.execute(f"PRAGMA max_page_count = {pages}")
        with pytest.raises(StoreFullError, match="full"):
            with store.transaction():
                for i in range(2000):
                    store._write("INSERT INTO batches(source, at, n_items, summary_json) VALUES (?, 'now', 0, ?)",
                                 (f"s{i}", "x" * 500))
