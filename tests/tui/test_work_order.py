"""The review desk's work order as a plain function of the application layer (triage.app.work_order), on the
terminal UI tests' demo workspace. Each check reads its reference outside the function: the SQLite file with
plain SQL (Python's sqlite3 module) and the watch words from triage.toml with tomllib and a regular
expression of our own; no published reference applies to an ordering rule, so these are the outside checks."""

from __future__ import annotations

import re
import sqlite3
import tomllib
from pathlib import Path

from triage.app import Workspace
from triage.app.work_order import Group, work_order

OPEN_HELD = """
SELECT d.item_id, d.held_by, d.suggested, d.confidence FROM decisions d JOIN items i ON i.item_id = d.item_id
WHERE i.label IS NULL AND d.id = (SELECT MAX(e.id) FROM decisions e WHERE e.item_id = d.item_id) AND d.held = 1
"""


def _sql(root: Path, query: str) -> list[tuple]:
    conn = sqlite3.connect(root / "triage.db")
    try:
        return conn.execute(query).fetchall()
    finally:
        conn.close()


def test_the_work_order_puts_safety_first_then_held_by_closeness(workspace_path: Path) -> None:
    rows = {r[0]: r for r in _sql(workspace_path, OPEN_HELD)}
    config = tomllib.loads((workspace_path / "triage.toml").read_text(encoding="utf-8"))
    watch = [w.lower() for w in config["queues"]["safety"]["watch_words"]]
    texts = {}
    for item_id, fields in _sql(workspace_path, "SELECT item_id, fields_json FROM items WHERE label IS NULL"):
        texts[item_id] = fields.lower()
    with Workspace.open(workspace_path) as ws:
        order = work_order(ws)
        ids = [e.item.item_id for e in order.entries]
        # every open held item exactly once, and nothing else; no stored label on the list without the toggle
        assert sorted(ids) == sorted(rows) and order.to_review == len(rows)
        groups = [e.group for e in order.entries]
        n_safety = groups.count(Group.SAFETY)
        assert order.safety == n_safety > 0
        assert groups == [Group.SAFETY] * n_safety + [Group.HELD] * (len(groups) - n_safety)
        safety_ids = set(ids[:n_safety])
        # held by a safeguard, or suggested for the never-auto queue: in the safety group
        for item_id, held_by, suggested, _conf in rows.values():
            if held_by in ("never_auto", "watch_word", "watch_probability") or suggested == "safety":
                assert item_id in safety_ids, (item_id, held_by)
        # an item whose words start with a watch word is in the safety group, and its reason says so
        for e in order.entries[:n_safety]:
            words = set(re.findall(r"\w+", texts[e.item.item_id]))
            hit = [w for w in watch if any(x.startswith(w) for x in words)]
            if hit:
                assert "mentions '" in e.why, e.why
            else:
                assert "safety" in e.why, e.why
        # within safety: the never-auto queue's probability, highest first; it is printed in the reason
        chances = [e.never_auto["safety"] for e in order.entries[:n_safety]]
        assert chances == sorted(chances, reverse=True)
        # the rest: closest to its cutoff first, the distance from the stored confidence
        gaps = []
        for e in order.entries[n_safety:]:
            _id, _held_by, suggested, conf = rows[e.item.item_id]
            cut = ws.policy.cutoff(suggested)
            gaps.append(1.0 - conf if cut is None else max(0.0, cut - conf))
            assert abs(gaps[-1] - e.key) < 1e-9
            assert ("points below" in e.why) == (cut is not None)
        assert gaps == sorted(gaps)
        # stored labels the model disagrees with: only behind the toggle, after the held items, all labelled
        both = work_order(ws, disagreements=True)
        extra = [e for e in both.entries if e.group is Group.DISAGREES]
        assert extra and [e.item.item_id for e in both.entries[: len(ids)]] == ids
        labels = dict(_sql(workspace_path, "SELECT item_id, label FROM items WHERE label IS NOT NULL"))
        for e in extra:
            assert labels[e.item.item_id] not in (None, e.item.suggested)
            assert f"labelled {labels[e.item.item_id]}" in e.why
        assert both.to_review == order.to_review  # counts are of held items only



def test_a_score_layer_cannot_talk_a_safety_item_out_of_the_safety_group(workspace_path: Path) -> None:
    """The README's rule: a never-auto queue with a chance of at least watch_probability puts the item before a
    person, and with a score layer the chance is the larger of the layer's and the model's own. Held items that
    were held for another reason (below a cutoff) are re-read with the current policy; a layer that all but rules
    the never-auto queue out must not keep such an item out of the safety group."""
    from dataclasses import replace

    import numpy as np

    from triage.app.active import require_model
    from triage.core.model import log_posterior
    from triage.core.stack import ScoreLayer

    with Workspace.open(workspace_path) as ws:
        active = require_model(ws)
        model = active.model
        never = sorted(set(ws.config.never_auto()) & set(model.queues))
        assert never, "the demo workspace has a never-auto queue"
        rows = [r for r in _sql(workspace_path, OPEN_HELD)
                if r[1] not in ("never_auto", "watch_word", "watch_probability") and r[2] not in never]
        items = {r.item_id: r for r in ws.store.get_items([r[0] for r in rows])}
        ids = [r[0] for r in rows]
        batch = model.encoder.transform([items[i].fields for i in ids], allow_missing=True)
        cols = [model.queues.index(q) for q in never]
        own = np.exp(log_posterior(model.base_scores(batch)))[:, cols].max(axis=1)  # the model's own chance
        low = float(np.quantile(own, 0.9))  # a watch probability that a tenth of these items reach
        assert low > 0
        active.policy = replace(active.policy, watch_probability=low)
        must = {i for i, p in zip(ids, own, strict=True) if p >= low}
        assert must
        down = np.zeros(len(model.queues))
        down[cols] = -30.0  # the layer all but rules the never-auto queues out
        model.layer_ = ScoreLayer(tuple(model.queues), np.eye(len(model.queues)), down, 1.0)
        assert model.layer_active
        safety = {e.item.item_id for e in work_order(ws).entries if e.group is Group.SAFETY}
    assert must <= safety
