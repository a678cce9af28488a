"""`/metrics`: the counters in the Prometheus text exposition format, read back with prometheus_client's own
parser (the reference implementation of the format, prometheus.io/docs/instrumenting/exposition_formats/),
against a real uvicorn server on loopback. The expected counts are the decisions the service answered.
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path
from typing import Any

import httpx
from prometheus_client.parser import text_string_to_metric_families

from tests.service_support import TOKEN, serving, store_locked_elsewhere


def _samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    return {(s.name, tuple(sorted(s.labels.items()))): s.value
            for family in text_string_to_metric_families(text) for s in family.samples}


def _scrape(c: httpx.Client) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    r = c.get("/metrics")
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].startswith("text/plain")
    return _samples(r.text)


def test_metrics_count_what_the_service_answered(base_dir: Path, tmp_path: Path,
                                                 items: list[dict[str, Any]], trained_ids: list[str]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root), httpx.Client(base_url=url, timeout=60) as c:
        version = app.state.workspace.active_version.version
        before = _scrape(c)
        assert before[("triage_model_version", ())] == version
        assert before[("triage_corrections_total", ())] == 0
        assert before[("triage_store_errors_total", ())] == 0
        assert not [k for k in before if k[0] in ("triage_items_routed_total", "triage_items_held_total")]

        decisions = [c.post("/v1/route", json=item).json()["decision"] for item in items[:12]]
        batch = c.post("/v1/route", json={"items": items[12:40]}).json()["decisions"]
        decisions += batch
        routed = Counter(d["suggested"] for d in decisions if not d["held"])
        held = Counter(d["suggested"] for d in decisions if d["held"])
        assert routed and held  # both kinds occur on these tickets, so both counters are checked

        r = c.post("/v1/corrections", json={"item_id": trained_ids[3], "queue": "billing"})
        assert r.status_code == 200, r.text
        # a store error: another connection holds the write lock (sqlite.org/lang_transaction.html)
        store = app.state.workspace.store
        # not its own queue (that is refused before the store is written)
        queue = next(q for q in ("billing", "installation") if store.get_item(trained_ids[4]).label != q)
        with store_locked_elsewhere(app, root):
            locked = c.post("/v1/corrections", json={"item_id": trained_ids[4], "queue": queue})
        assert locked.status_code == 503, locked.text

        after = _scrape(c)
        for queue, n in routed.items():
            assert after[("triage_items_routed_total", (("queue", queue),))] == n, queue
        for queue, n in held.items():
            assert after[("triage_items_held_total", (("queue", queue),))] == n, queue
        assert sum(v for k, v in after.items() if k[0] == "triage_items_routed_total") == sum(routed.values())
        assert sum(v for k, v in after.items() if k[0] == "triage_items_held_total") == sum(held.values())
        assert after[("triage_corrections_total", ())] == 1
        assert after[("triage_store_errors_total", ())] == 1
        assert after[("triage_model_version", ())] == r.json()["model_version"] > version
        # latency: one observation per answered request, in cumulative buckets ending at +Inf
        ok_route = (("endpoint", "route"), ("status", "200"))
        assert after[("triage_request_duration_seconds_count", ok_route)] == 13
        inf = after[("triage_request_duration_seconds_bucket", (*ok_route[:1], ("le", "+Inf"), ok_route[1]))]
        assert inf == 13
        assert after[("triage_request_duration_seconds_sum", ok_route)] > 0
        assert after[("triage_request_duration_seconds_count", (("endpoint", "correct"), ("status", "503")))] == 1


def test_metrics_need_the_token_when_the_server_has_one(base_dir: Path, tmp_path: Path) -> None:
    with serving(base_dir, tmp_path, token=TOKEN) as (url, _app, _root), httpx.Client(base_url=url) as c:
        r = c.get("/metrics")
        assert r.status_code == 401 and r.json()["field"] == "Authorization"
        r = c.get("/metrics", headers={"Authorization": f"Bearer {TOKEN}"})
        assert r.status_code == 200
        assert "triage_model_version" in {f.name for f in text_string_to_metric_families(r.text)}
