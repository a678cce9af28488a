"""Safeguards around corrections, training and never-auto queues that span processes and config changes.

The reference for "exact" is the project's own fresh fit with the same encoder, which tests/test_model_sklearn.py
ties to scikit-learn; the safety rules are the README's promises.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tests.helpers import build_demo_workspace, copy_workspace
from triage.app import Workspace
from triage.app.active import commit_correction
from triage.config import ConfigError, config_from_dict
from triage.records import ItemRecord

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def trained(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_workspace(tmp_path_factory.mktemp("guards") / "ws", rows=1000)


_copy = copy_workspace


def _model_agrees_with_store(ws: Workspace) -> None:
    recs = ws.store.labelled_items()
    counts = ws.model.counts.class_count_
    for q, n in ws.store.queue_counts().items():
        assert counts[ws.model.queues.index(q)] == n, q
    assert all(ws._active.labels[r.item_id] == r.label for r in recs)


def test_a_correction_made_while_training_is_kept(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    with Workspace.open(root) as ws:
        item = ws.store.labelled_items()[5]
        target = "cancellations" if item.label != "cancellations" else "billing"
        done = []

        def progress(stage: str, _f: float) -> None:
            if stage.startswith("fitting the final model") and not done:
                done.append(ws.correct(item.item_id, target, by="other desk"))

        ws.train(progress=progress)
        assert done, "the correction ran during training"
        assert ws.store.get_item(item.item_id).label == target
        _model_agrees_with_store(ws)
        assert ws.active_version.config["corrections"] == [done[0].correction.id]
        jll = ws.model.joint_log_likelihood(ws.model.encoder.transform([item.fields], allow_missing=True))
    with Workspace.open(root) as again:
        _model_agrees_with_store(again)
        jll2 = again.model.joint_log_likelihood(again.model.encoder.transform([item.fields], allow_missing=True))
        assert np.allclose(jll, jll2, atol=1e-9)


def test_a_correction_journaled_by_one_process_is_applied_once(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    a = Workspace.open(root)
    item = a.store.labelled_items()[7]
    target = "installation" if item.label != "installation" else "billing"
    c = a.store.journal_correction(item.item_id, target, "dana", a.active_version.version)
    b = Workspace.open(root)  # opening replays the pending correction, as after a crash
    assert b.store.get_correction(c.id).status == "applied"
    commit_correction(a, c)  # the first process finishing late takes the version the other made
    assert a.active_version.version == b.active_version.version
    assert len([x for x in a.store.corrections() if x.status == "applied"]) == 1
    _model_agrees_with_store(a)
    _model_agrees_with_store(b)
    a.close()
    b.close()


def test_a_correction_against_a_stale_version_is_learned_on_the_newest(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    a, b = Workspace.open(root), Workspace.open(root)
    first, second = a.store.labelled_items()[10:12]
    b.correct(first.item_id, "safety" if first.label != "safety" else "billing", by="b")
    c = a.store.journal_correction(second.item_id, "cancellations" if second.label != "cancellations"
                                   else "billing", "a", a.active_version.version)
    commit_correction(a, c)  # a still holds the old version in memory: it must reload, then learn
    _model_agrees_with_store(a)
    with Workspace.open(root) as fresh:
        _model_agrees_with_store(fresh)
        assert fresh.active_version.version == a.active_version.version
    a.close()
    b.close()


def test_a_queue_marked_never_auto_after_training_is_never_auto_routed(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    cfg = root / "triage.toml"
    cfg.write_text(cfg.read_text(encoding="utf-8") + "\n[queues.billing]\nnever_auto = true\n", encoding="utf-8")
    with Workspace.open(root) as ws:
        decisions = ws.decide_records(ws.store.labelled_items()[:200])
        billing = [d for d in decisions if d["suggested"] == "billing"]
        assert billing and all(d["held"] and d["flag"] == "never_auto" for d in billing)
        with pytest.raises(Exception, match="never-auto"):
            ws.set_cutoffs({"billing": 0.5})


def test_watch_words_of_several_parts_hold_the_item(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    cfg = root / "triage.toml"
    text = cfg.read_text(encoding="utf-8").replace('watch_words = ["burn"', 'watch_words = ["self-harm", "carbon monox", "burn"')
    cfg.write_text(text, encoding="utf-8")
    with Workspace.open(root) as ws:
        rec = ItemRecord("W-1", {"subject": "Invoice question", "body": "my invoice is wrong and I think about "
                                 "self-harm", "channel": "email"})
        d = ws.decide_records([rec])[0]
        assert d["held"] and d["flag"] == "watch" and "self-harm" in d["reason"]
        rec2 = ItemRecord("W-2", {"subject": "Refund", "body": "charged twice on my invoice, refund please. "
                                  "Also the carbon monoxide alarm beeps", "channel": "email"})
        d2 = ws.decide_records([rec2])[0]
        assert d2["held"] and d2["flag"] is not None
        if d2["suggested"] != "safety":  # the rule, not the model, held it
            assert "carbon monox" in d2["reason"]


def test_routing_an_id_stored_with_other_fields_is_refused_with_a_warning(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    with Workspace.open(root) as ws:
        stored = ws.store.labelled_items()[0]
        path = tmp_path / "again.csv"
        pd.DataFrame([{"ticket_id": stored.item_id, "subject": "smoke", "body": "it smells of burning"},
                      {"ticket_id": "NEW-1", "subject": "refund", "body": "charged twice"}]).to_csv(path, index=False)
        decisions, result, _ = ws.route_file(path)
        assert [d["id"] for d in decisions] == ["NEW-1"]
        assert any(stored.item_id in w and "other field values" in w for w in result.warnings)
        assert ws.store.get_item(stored.item_id).fields == stored.fields


BASE = {"data": {"id": "id", "label": "q"}, "fields": {"body": {"role": "text"}}}


@pytest.mark.parametrize("patch, key", [
    ({"routing": {"target_precision": "high"}}, "routing.target_precision"),
    ({"routing": {"target_precision": 1.5}}, "routing.target_precision"),
    ({"queues": {"safety": {"cutoff": -1}}}, "queues.safety.cutoff"),
    ({"queues": {"safety": {"cutoff": "x"}}}, "queues.safety.cutoff"),
    ({"queues": {"safety": {"never_auto": "no"}}}, "queues.safety.never_auto"),
    ({"queues": {"safety": {"target_precision": -1}}}, "queues.safety.target_precision"),
    ({"model": {"alpha_text": 0}}, "model.alpha_text"),
    ({"model": {"min_count": "two"}}, "model.min_count"),
    ({"data": {"id": "id", "label": "q", "max_text_chars": "x"}}, "data.max_text_chars"),
])
def test_config_values_are_checked_with_the_key_named(patch: dict, key: str) -> None:
    data = {**BASE, **patch}
    with pytest.raises(ConfigError, match=rf"\[{key}\]"):
        config_from_dict(tomllib.loads(_toml(data)), "triage.toml")


def _toml(d: dict, prefix: str = "") -> str:
    """A tiny TOML writer for the nested dicts above (tables of scalars)."""
    lines, tables = [], []
    for k, v in d.items():
        if isinstance(v, dict):
            tables.append((f"{prefix}{k}", v))
        else:
            lines.append(f"{k} = {_val(v)}")
    out = "\n".join(lines) + "\n"
    for name, sub in tables:
        out += f"[{name}]\n" + _toml(sub, f"{name}.")
    return out


def _val(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return f'"{v}"'
    return repr(v)


def test_watch_words_see_words_inside_identifiers_and_apostrophes(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    cfg = root / "triage.toml"
    cfg.write_text(cfg.read_text(encoding="utf-8").replace('watch_words = ["burn"', 'watch_words = ["can\'t breathe", "burn"'),
                   encoding="utf-8")
    with Workspace.open(root) as ws:
        for body, entry in (("unit SN-48213-smoking since the update", "smok"),
                            ("order VW-104233/burnt cable", "burn"),
                            ("I can't breathe near the inverter", "can't breathe")):
            d = ws.decide_records([ItemRecord("X", {"subject": "Invoice", "body": body})])[0]
            assert d["held"], body
            if d["suggested"] != "safety":
                assert entry in d["reason"], (body, d["reason"])


def test_a_running_workspace_picks_up_a_queue_marked_never_auto(trained: Path, tmp_path: Path) -> None:
    """A service keeps its workspace open; marking a queue never-auto in triage.toml must apply without a
    restart (the README's promise)."""
    import os
    import time

    root = _copy(trained, tmp_path)
    with Workspace.open(root) as ws:
        recs = ws.store.labelled_items()[:400]
        queue = "billing"
        ws.set_cutoffs({queue: 0.0})  # so that billing auto-routes before the rule changes
        assert any(not d["held"] and d["queue"] == queue for d in ws.decide_records(recs))
        cfg = root / "triage.toml"
        cfg.write_text(cfg.read_text(encoding="utf-8") + f"\n[queues.{queue}]\nnever_auto = true\n", encoding="utf-8")
        later = time.time() + 5
        os.utime(cfg, (later, later))  # a different modification time, whatever the file system's resolution
        ws.refresh_if_changed()
        now = [d for d in ws.decide_records(recs) if d["suggested"] == queue]
        assert now and all(d["held"] and d["flag"] == "never_auto" for d in now)


def test_training_warns_about_a_queue_rule_that_matches_no_queue(trained: Path, tmp_path: Path) -> None:
    root = _copy(trained, tmp_path)
    cfg = root / "triage.toml"
    cfg.write_text(cfg.read_text(encoding="utf-8") + "\n[queues.Safety]\nnever_auto = true\n", encoding="utf-8")
    with Workspace.open(root) as ws:
        report = ws.train()
    assert any("[queues.Safety]" in w and "spelling" in w for w in report.warnings)


def test_config_edits_find_quoted_headers_and_keep_comments_and_mode(tmp_path: Path) -> None:
    from triage.config import update_config_text, write_config_atomically

    text = ('[data]\nid = "id"\nlabel = "q"\n\n[fields."Job Title"]   # from the export\nrole = "text"\n'
            'weight = 2.0\n\n[model]  # chosen by tune\ntext_model = "auto"\n')
    path = tmp_path / "triage.toml"
    path.write_text(text, encoding="utf-8")
    path.chmod(0o644)
    new = update_config_text(text, {("fields.Job Title", "weight"): 3.0, ("model", "text_model"): "bernoulli"})
    write_config_atomically(path, new)
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    assert data["fields"]["Job Title"]["weight"] == 3.0 and data["model"]["text_model"] == "bernoulli"
    assert "# from the export" in new and "# chosen by tune" in new
    assert path.stat().st_mode & 0o777 == 0o644
