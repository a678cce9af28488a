"""Every file the tool writes with the items' text is its owner's only: the decisions of a partitioned run and
the rejects files, as the store's database and model files are (tests/test_store_files.py, test_artifacts.py).

Reference: POSIX open(2): with O_CREAT the new file's mode is the mode argument less the umask, O_EXCL fails on
an existing file, O_NOFOLLOW fails on a symbolic link, and O_TRUNC keeps an existing file's mode (so a rewrite
must fchmod). Each test runs under umask 0, where a file created with Python's default 0666 would be readable
by everyone, so a missing mode argument fails the test whatever the machine's umask is.
"""

from __future__ import annotations

import os
import stat
from collections.abc import Iterator
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from tests.helpers import build_demo_workspace, copy_workspace
from triage.app import Workspace
from triage.app.partitioned import parquet_path, route_on_engine
from triage.engine import InProcessEngine
from triage.ingest import Reject, read_items, write_rejects

ROOT = Path(__file__).resolve().parent.parent
INCOMING = ROOT / "demo_corpus" / "voltwren_incoming.csv"


def mode(path: Path) -> int:
    return stat.S_IMODE(os.lstat(path).st_mode)


@pytest.fixture
def open_umask() -> Iterator[None]:
    old = os.umask(0)
    try:
        yield
    finally:
        os.umask(old)


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_workspace(tmp_path_factory.mktemp("private") / "ws", rows=400)


def test_a_partitioned_run_is_written_owner_only(trained: Path, tmp_path: Path, open_umask: None) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    with Workspace.open(ws_dir) as ws:
        records = read_items(INCOMING, ws.config.schema, require_label=False).records[:120]
        decisions, run_id = route_on_engine(ws, records, str(INCOMING), InProcessEngine(), rows=50)
    path = parquet_path(ws_dir, run_id)
    assert mode(path) == 0o600 and mode(path.parent) == 0o700
    assert pq.read_table(path).to_pylist() == decisions  # the file object handed to the writer wrote it all
    assert [p.name for p in path.parent.iterdir()] == [path.name]  # no partial file left behind


def test_an_older_open_runs_folder_is_tightened(trained: Path, tmp_path: Path, open_umask: None) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    (ws_dir / "runs").mkdir(mode=0o755)
    with Workspace.open(ws_dir) as ws:
        records = read_items(INCOMING, ws.config.schema, require_label=False).records[:10]
        _, run_id = route_on_engine(ws, records, str(INCOMING), InProcessEngine())
    assert mode(ws_dir / "runs") == 0o700 and mode(parquet_path(ws_dir, run_id)) == 0o600


def test_the_rejects_file_and_its_folder_are_owner_only(trained: Path, tmp_path: Path, open_umask: None) -> None:
    ws_dir = copy_workspace(trained, tmp_path)
    src = tmp_path / "bad.csv"
    lines = (ROOT / "demo_corpus" / "voltwren_tickets.csv").read_text(encoding="utf-8").splitlines()[:3]
    lines[2] = lines[2].replace(",551,0,", ",many,0,", 1)  # a tenure that is not a number: rejected
    assert lines[2] != (ROOT / "demo_corpus" / "voltwren_tickets.csv").read_text(encoding="utf-8").splitlines()[2]
    src.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with Workspace.open(ws_dir) as ws:
        report = ws.import_file(src)
    path = report.result.rejects_path
    assert len(report.result.rejects) == 1 and path is not None and path.parent == ws_dir / "rejects"
    assert mode(path) == 0o600 and mode(path.parent) == 0o700


def test_rewriting_a_rejects_file_tightens_it_and_refuses_a_link(tmp_path: Path, open_umask: None) -> None:
    rejects = [Reject(row=2, field="body", reason="too long", raw={"body": "my address is ..."})]
    path = tmp_path / "r.csv"
    path.write_text("an older file\n", encoding="utf-8")
    os.chmod(path, 0o644)
    write_rejects(rejects, path)
    assert mode(path) == 0o600 and "my address" in path.read_text(encoding="utf-8")
    target = tmp_path / "elsewhere.txt"
    target.write_text("someone else's file", encoding="utf-8")
    (tmp_path / "link.csv").symlink_to(target)
    with pytest.raises(OSError):
        write_rejects(rejects, tmp_path / "link.csv")
    assert target.read_text(encoding="utf-8") == "someone else's file"
