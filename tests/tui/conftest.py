"""A small real workspace for the terminal UI tests, built once per session from the demo data and copied
into each test's tmp_path (tests change it: corrections, training, activation)."""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

import pytest

from triage.app import Workspace

ROOT = Path(__file__).resolve().parents[2]
CORPUS = ROOT / "demo_corpus"
TICKETS = 1500
INCOMING = 300


def _head(src: Path, dst: Path, n: int) -> None:
    with src.open(newline="", encoding="utf-8") as fin, dst.open("w", newline="", encoding="utf-8") as fout:
        reader = csv.reader(fin)
        writer = csv.writer(fout)
        writer.writerow(next(reader))
        for i, row in enumerate(reader):
            if i >= n:
                break
            writer.writerow(row)


@pytest.fixture(scope="session")
def template_workspace(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A trained workspace with one routed batch: the first 1500 demo tickets, the first 300 incoming items."""
    base = tmp_path_factory.mktemp("tui-template")
    root = base / "ws"
    root.mkdir()
    shutil.copy(ROOT / "configs" / "voltwren.toml", root / "triage.toml")
    _head(CORPUS / "voltwren_tickets.csv", base / "tickets.csv", TICKETS)
    _head(CORPUS / "voltwren_incoming.csv", base / "incoming.csv", INCOMING)
    with Workspace.open(root) as ws:
        ws.import_file(base / "tickets.csv")
        ws.train()
        ws.route_file(base / "incoming.csv")
    return root


@pytest.fixture(autouse=True)
def reviewer_name(monkeypatch: pytest.MonkeyPatch) -> str:
    """Who decides in these tests (the UI asks when TRIAGE_REVIEWER is not set; one test checks that)."""
    monkeypatch.setenv("TRIAGE_REVIEWER", "Ada Tester")
    return "Ada Tester"


@pytest.fixture
def workspace_path(template_workspace: Path, tmp_path: Path) -> Path:
    """A fresh copy of the template workspace for one test."""
    dst = tmp_path / "ws"
    shutil.copytree(template_workspace, dst)
    return dst
