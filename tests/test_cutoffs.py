"""Cutoffs set by hand: a new model version, used at once, kept across a restart, undone by rollback."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.helpers import copy_workspace
from triage.app import Workspace, WorkspaceError

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def trained(demo_1200: Path) -> Path:
    return demo_1200  # the shared session workspace: every test here copies it before changing it


def test_a_hand_set_cutoff_routes_at_once_and_survives_a_restart(trained: Path, tmp_path: Path) -> None:
    root = copy_workspace(trained, tmp_path)
    with Workspace.open(root) as ws:
        before = ws.active_version.version
        recs = ws.store.labelled_items()[:300]
        held_before = sum(d["held"] for d in ws.decide_records(recs))
        mv = ws.set_cutoffs({q: 0.0 for q in ws.model.queues if q != "safety"}, by="dana")
        assert mv.version == before + 1 and mv.kind == "adopt" and "dana" in mv.note
        decisions = ws.decide_records(recs)
        # with a zero cutoff only the safeguards hold an item: the never-auto queue and the watch rules
        assert all(d["flag"] is not None for d in decisions if d["held"])
        assert sum(d["held"] for d in decisions) < held_before
    with Workspace.open(root) as ws:
        assert ws.active_version.version == before + 1
        assert ws.decide_records(recs) == decisions
        ws.activate(before)
        assert sum(d["held"] for d in ws.decide_records(recs)) == held_before


def test_a_never_auto_queue_takes_no_cutoff_and_values_are_checked(trained: Path, tmp_path: Path) -> None:
    root = copy_workspace(trained, tmp_path)
    with Workspace.open(root) as ws:
        with pytest.raises(WorkspaceError, match="never-auto"):
            ws.set_cutoffs({"safety": 0.5})
        with pytest.raises(WorkspaceError, match="between 0 and 1"):
            ws.set_cutoffs({"billing": 1.5})
        with pytest.raises(WorkspaceError, match="unknown queue"):
            ws.set_cutoffs({"nowhere": 0.5})


def test_the_adopted_version_carries_the_scorecard_at_its_cutoffs(trained: Path, tmp_path: Path) -> None:
    root = copy_workspace(trained, tmp_path)
    with Workspace.open(root) as ws:
        mv = ws.set_cutoffs({"billing": 0.5})
        meas = ws.evaluate()
        # the stored scorecard is the held-out rows scored at the adopted cutoffs, as evaluate shows them
        assert meas.at_active is not None and meas.active_cutoffs["billing"] == 0.5
        assert mv.scorecard == meas.at_active.to_dict()


def test_adopting_a_grid_row_keeps_the_comments_of_the_config(trained: Path, tmp_path: Path) -> None:
    from triage.app import tuning
    from triage.config import load_config

    root = copy_workspace(trained, tmp_path)
    path = root / "triage.toml"
    before = path.read_text(encoding="utf-8")
    with Workspace.open(root) as ws:
        row = tuning.GridRow("bernoulli", 0.5, True, True, {"subject": 3.0, "body": 1.0}, False, 0.9, 0.9, 0.3, 0.5)
        tuning.adopt(ws, row)
    after = path.read_text(encoding="utf-8")
    comments = [ln for ln in before.splitlines() if ln.lstrip().startswith("#")]
    assert comments and all(c in after.splitlines() for c in comments)
    cfg = load_config(path)
    assert (cfg.model.text_model, cfg.model.alpha_text, cfg.model.bigrams) == ("bernoulli", 0.5, True)
    assert cfg.schema.field("subject").weight == 3.0
