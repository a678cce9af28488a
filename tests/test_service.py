"""The HTTP service against a live uvicorn server on a free loopback port, with a real httpx client.

One small demo workspace (the first 1500 Voltwren tickets) is trained once per session; every test that changes
state serves its own copy of that folder.
"""

from __future__ import annotations

import json
import random
import shutil
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from starlette.routing import Route

from tests.service_support import CONFIG, TOKEN, running, serving
from triage.app import Workspace
from triage.service import OPENAPI, check_bind, create_app, is_loopback, serve
from triage.store import Store


@pytest.fixture(scope="module")
def live(base_dir: Path, tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Any, Path]]:
    with serving(base_dir, tmp_path_factory.mktemp("live")) as served:
        yield served


@pytest.fixture(scope="module")
def client(live: tuple[str, Any, Path]) -> Iterator[httpx.Client]:
    with httpx.Client(base_url=live[0], timeout=30) as c:
        yield c


# ----------------------------------------------------------------------------------------------------------
# a small checker for the subset of JSON Schema the OpenAPI document uses, to hold answers to the document


def conforms(value: Any, schema: dict[str, Any], doc: dict[str, Any] = OPENAPI, where: str = "$") -> list[str]:
    if "$ref" in schema:
        name = schema["$ref"].rsplit("/", 1)[1]
        return conforms(value, doc["components"]["schemas"][name], doc, where)
    if "oneOf" in schema:
        fits = [s for s in schema["oneOf"] if not conforms(value, s, doc, where)]
        return [] if len(fits) == 1 else [f"{where}: matches {len(fits)} of oneOf"]
    problems: list[str] = []
    types = schema.get("type")
    if types is not None:
        types = [types] if isinstance(types, str) else types
        checks = {"string": lambda v: isinstance(v, str), "integer": lambda v: isinstance(v, int)
                  and not isinstance(v, bool), "number": lambda v: isinstance(v, int | float)
                  and not isinstance(v, bool), "boolean": lambda v: isinstance(v, bool),
                  "null": lambda v: v is None, "object": lambda v: isinstance(v, dict),
                  "array": lambda v: isinstance(v, list)}
        if not any(checks[t](value) for t in types):
            return [f"{where}: {value!r} is not {types}"]
    if isinstance(value, dict):
        for key in schema.get("required", []):
            if key not in value:
                problems.append(f"{where}: no {key!r}")
        props = schema.get("properties", {})
        for key, v in value.items():
            if key in props:
                problems += conforms(v, props[key], doc, f"{where}.{key}")
            elif schema.get("additionalProperties") is False:
                problems.append(f"{where}: unexpected {key!r}")
            elif isinstance(schema.get("additionalProperties"), dict):
                problems += conforms(v, schema["additionalProperties"], doc, f"{where}.{key}")
    if isinstance(value, list) and "items" in schema:
        for i, v in enumerate(value):
            problems += conforms(v, schema["items"], doc, f"{where}[{i}]")
    if "enum" in schema and value not in schema["enum"]:
        problems.append(f"{where}: {value!r} is not one of {schema['enum']}")
    if isinstance(value, int | float) and not isinstance(value, bool):
        if "minimum" in schema and value < schema["minimum"]:
            problems.append(f"{where}: {value} < {schema['minimum']}")
        if "maximum" in schema and value > schema["maximum"]:
            problems.append(f"{where}: {value} > {schema['maximum']}")
    return problems


def response_schema(path: str, method: str, status: int) -> dict[str, Any]:
    return OPENAPI["paths"][path][method]["responses"][str(status)]["content"]["application/json"]["schema"]


def test_the_checker_finds_problems() -> None:
    decision = response_schema("/v1/route", "post", 200)
    assert conforms({"decision": {"id": "x"}}, decision)
    assert conforms({"error": 1, "field": None}, {"$ref": "#/components/schemas/Error"})
    assert not conforms({"error": "bad", "field": None}, {"$ref": "#/components/schemas/Error"})


# ----------------------------------------------------------------------------------------------------------
# the endpoints


def test_health_and_model(client: httpx.Client, live: tuple[str, Any, Path]) -> None:
    ws = live[1].state.workspace
    h = client.get("/v1/health")
    assert h.status_code == 200
    assert h.json() == {"ok": True, "status": "ok", "model_version": ws.active_version.version, "problems": []}
    m = client.get("/v1/model")
    assert m.status_code == 200
    body = m.json()
    assert not conforms(body, response_schema("/v1/model", "get", 200))
    assert body["model_version"] == ws.active_version.version
    assert body["queues"] == ws.model.queues
    assert "safety" in body["never_auto"]
    assert body["cutoffs"]["safety"] is None
    assert body["temperature"] == pytest.approx(ws.policy.temperature)
    assert body["watch_probability"] == pytest.approx(ws.config.watch_probability)
    assert body["text_model"] == ws.model.spec.text_model
    assert [f["name"] for f in body["fields"]] == [f.name for f in ws.config.schema.fields]


def test_openapi_describes_every_route(client: httpx.Client, live: tuple[str, Any, Path]) -> None:
    r = client.get("/openapi.json")
    assert r.status_code == 200
    doc = r.json()
    assert doc["openapi"].startswith("3.1")
    served = [route for route in live[1].routes if isinstance(route, Route)]
    assert len(served) == 6
    for route in served:
        assert route.path in doc["paths"], route.path
        for method in route.methods - {"HEAD"}:
            assert method.lower() in doc["paths"][route.path], (route.path, method)
    for path, ops in doc["paths"].items():
        assert any(route.path == path for route in served), path
        for op in ops.values():
            assert "200" in op["responses"]
    # the served document names this workspace's fields
    assert set(doc["components"]["schemas"]["Item"]["properties"]["fields"]["properties"]) == {
        f.name for f in live[1].state.workspace.config.schema.fields}


def test_route_one_item_answers_what_the_workspace_decides(
        client: httpx.Client, live: tuple[str, Any, Path], items: list[dict[str, Any]]) -> None:
    item = items[0]
    r = client.post("/v1/route", json=item)
    assert r.status_code == 200, r.text
    body = r.json()
    assert not conforms(body, response_schema("/v1/route", "post", 200))
    d = body["decision"]
    assert d["id"] == item["id"]
    assert (d["queue"] is None) == d["held"]
    assert d["suggested"] != d["runner_up"]
    assert d["evidence"] and {e["kind"] for e in d["evidence"]} <= {"token", "field", "prior", "absent", "layer"}
    # the same answer as the application layer gives in-process, on a second workspace object
    with Workspace.open(live[2]) as other:
        stored = other.store.get_item(item["id"])
        assert stored is not None and stored.arrived_at == item["arrived_at"]
        assert stored.label is None
        expected = other.decide_records([stored])[0]
        latest = other.store.latest_decision(item["id"])
    for key in ("queue", "suggested", "held", "reason", "runner_up", "model_version", "evidence"):
        assert d[key] == expected[key], key
    assert d["confidence"] == pytest.approx(expected["confidence"], abs=1e-9)
    assert latest is not None and latest.suggested == d["suggested"] and latest.model_version == d["model_version"]


def test_route_a_batch_keeps_order_and_stores_every_item(
        client: httpx.Client, live: tuple[str, Any, Path], items: list[dict[str, Any]]) -> None:
    batch = items[10:40]
    r = client.post("/v1/route", json={"items": batch})
    assert r.status_code == 200, r.text
    body = r.json()
    assert not conforms(body, response_schema("/v1/route", "post", 200))
    assert [d["id"] for d in body["decisions"]] == [i["id"] for i in batch]
    store = live[1].state.workspace.store
    assert len(store.get_items([i["id"] for i in batch])) == len(batch)
    batch_rows = store.decisions(batch_id=store.latest_batch().id)
    assert [d.item_id for d in batch_rows] == [i["id"] for i in batch]


def test_missing_field_values_are_allowed(client: httpx.Client) -> None:
    r = client.post("/v1/route", json={"id": "bare-1", "fields": {}})
    assert r.status_code == 200, r.text
    r = client.post("/v1/route", json={"id": 77, "fields": {"subject": "inverter fault light", "tenure_days": None,
                                                             "open_orders": "2"}})
    assert r.status_code == 200, r.text
    assert r.json()["decision"]["id"] == "77"


def test_resending_an_item_is_fine_but_changing_it_is_a_conflict(
        client: httpx.Client, items: list[dict[str, Any]]) -> None:
    item = items[50]
    assert client.post("/v1/route", json=item).status_code == 200
    assert client.post("/v1/route", json=item).status_code == 200
    changed = {**item, "fields": {**item["fields"], "subject": "something else entirely"}}
    r = client.post("/v1/route", json=changed)
    assert r.status_code == 409
    assert r.json()["field"] == "id"


def test_correction_is_learned_and_used_by_the_next_route(base_dir: Path, tmp_path: Path,
                                                          items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root), httpx.Client(base_url=url, timeout=30) as c:
        item = items[100]
        first = c.post("/v1/route", json=item).json()["decision"]
        target = first["runner_up"]
        r = c.post("/v1/corrections", json={"item_id": item["id"], "queue": target, "by": "tester"})
        assert r.status_code == 200, r.text
        body = r.json()
        assert not conforms(body, response_schema("/v1/corrections", "post", 200))
        assert body["before"] is None and body["after"] == target and body["by"] == "tester"
        assert body["model_version"] > first["model_version"]
        assert body["decision"]["model_version"] == body["model_version"]
        assert body["decision"]["id"] == item["id"]
        # learned: the corrected queue gained probability for this very item
        again = c.post("/v1/route", json=item).json()["decision"]
        assert again["model_version"] == body["model_version"]
        assert c.get("/v1/health").json()["model_version"] == body["model_version"]
        assert again["suggested"] == target or again["runner_up"] == target
        journal = Store.open(root / "triage.db")
        try:
            [cor] = journal.corrections()
            assert (cor.id, cor.item_id, cor.to_queue, cor.status, cor.by) == (
                body["correction_id"], item["id"], target, "applied", "tester")
            assert journal.get_item(item["id"]).label == target
        finally:
            journal.close()
        # a valid new queue name adds a queue, when asked for explicitly
        new = {"item_id": items[101]["id"], "queue": "warranty_claims", "new_queue": True}
        r = c.post("/v1/corrections", json=new)
        assert r.status_code == 404  # not routed yet
        assert c.post("/v1/route", json=items[101]).status_code == 200
        r = c.post("/v1/corrections", json={**new, "new_queue": False})
        assert (r.status_code, r.json()["field"]) == (422, "queue")
        assert "new_queue" in r.json()["error"]
        assert "warranty_claims" not in c.get("/v1/model").json()["queues"]
        r = c.post("/v1/corrections", json=new)
        assert r.status_code == 200, r.text
        assert "warranty_claims" in c.get("/v1/model").json()["queues"]


# ----------------------------------------------------------------------------------------------------------
# bad requests: status and the field named


ROUTE_BAD = [
    (b"not json", 400, None),
    (b"\xff\xfe{}", 400, None),
    (b"", 400, None),
    (b'{"id": "x", "fields": {"tenure_days": NaN}}', 400, None),
    (b"[1, 2]", 422, None),
    (b'"text"', 422, None),
    (b'{"fields": {}}', 422, "id"),
    (b'{"id": null, "fields": {}}', 422, "id"),
    (b'{"id": "  ", "fields": {}}', 422, "id"),
    (b'{"id": true, "fields": {}}', 422, "id"),
    (b'{"id": {"a": 1}, "fields": {}}', 422, "id"),
    (b'{"id": "x"}', 422, "fields"),
    (b'{"id": "x", "fields": "subject"}', 422, "fields"),
    (b'{"id": "x", "fields": {"tenure_days": "many"}}', 422, "fields.tenure_days"),
    (b'{"id": "x", "fields": {"tenure_days": true}}', 422, "fields.tenure_days"),
    (b'{"id": "x", "fields": {"subject": ["a", "b"]}}', 422, "fields.subject"),
    (b'{"id": "x", "fields": {"channel": {"a": 1}}}', 422, "fields.channel"),
    (b'{"id": "x", "fields": {"colour": "red"}}', 422, "fields.colour"),
    (b'{"id": "x", "fields": {}, "label": "billing"}', 422, "label"),
    (b'{"id": "x", "fields": {}, "arrived_at": 5}', 422, "arrived_at"),
    (b'{"id": "x", "fields": {}, "arrived_at": "yesterday"}', 422, "arrived_at"),
    (b'{"items": {"id": "x"}}', 422, "items"),
    (b'{"items": []}', 422, "items"),
    (b'{"items": [], "extra": 1}', 422, "extra"),
    (b'{"items": [{"id": "a", "fields": {}}, 3]}', 422, "items[1]"),
    (b'{"items": [{"id": "a", "fields": {}}, {"id": "b", "fields": {"open_orders": "x"}}]}', 422,
     "items[1].fields.open_orders"),
    (b'{"items": [{"id": "a", "fields": {}}, {"id": "a", "fields": {}}]}', 422, "items[1].id"),
]


@pytest.mark.parametrize(("body", "status", "field"), ROUTE_BAD)
def test_bad_route_requests(client: httpx.Client, body: bytes, status: int, field: str | None) -> None:
    r = client.post("/v1/route", content=body, headers={"Content-Type": "application/json"})
    assert r.status_code == status, r.text
    answer = r.json()
    assert not conforms(answer, {"$ref": "#/components/schemas/Error"})
    assert answer["field"] == field
    assert answer["error"]


CORRECTION_BAD = [
    (b"{", 400, None),
    (b"{}", 422, "item_id"),
    (b'{"item_id": "", "queue": "billing"}', 422, "item_id"),
    (b'{"item_id": 5, "queue": "billing"}', 422, "item_id"),
    (b'{"item_id": "VW-100002"}', 422, "queue"),
    (b'{"item_id": "VW-100002", "queue": "   "}', 422, "queue"),
    (b'{"item_id": "VW-100002", "queue": ["billing"]}', 422, "queue"),
    (b'{"item_id": "VW-100002", "queue": "not a name!"}', 422, "queue"),
    (b'{"item_id": "VW-100002", "queue": "billing", "by": 3}', 422, "by"),
    (b'{"item_id": "VW-100002", "queue": "billing", "why": "x"}', 422, "why"),
    (b'{"item_id": "no-such-item", "queue": "billing"}', 404, "item_id"),
]


@pytest.mark.parametrize(("body", "status", "field"), CORRECTION_BAD)
def test_bad_corrections(client: httpx.Client, live: tuple[str, Any, Path], body: bytes, status: int,
                         field: str | None) -> None:
    store = live[1].state.workspace.store
    before = len(store.corrections())
    r = client.post("/v1/corrections", content=body, headers={"Content-Type": "application/json"})
    assert r.status_code == status, r.text
    assert r.json()["field"] == field
    assert len(store.corrections()) == before


def test_unknown_paths_and_methods_answer_json(client: httpx.Client) -> None:
    r = client.get("/v1/nothing-here")
    assert (r.status_code, r.json()["field"]) == (404, None)
    r = client.get("/v1/route")
    assert r.status_code == 405
    assert "error" in r.json()


def test_body_limits(base_dir: Path, tmp_path: Path, items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path, max_body_bytes=3000, max_batch=3) as (url, _app, _root), \
            httpx.Client(base_url=url, timeout=30) as c:
        big = {"id": "big", "fields": {"body": "x" * 4000}}
        r = c.post("/v1/route", json=big)  # Content-Length says too much
        assert r.status_code == 413 and "3000" in r.json()["error"]

        def chunks() -> Iterator[bytes]:  # no Content-Length: the streamed size is counted
            payload = json.dumps(big).encode()
            for i in range(0, len(payload), 500):
                yield payload[i:i + 500]

        r = c.post("/v1/route", content=chunks(), headers={"Content-Type": "application/json"})
        assert "content-length" not in {k.lower() for k in r.request.headers}
        assert r.status_code == 413
        small = [{"id": i["id"], "fields": {"subject": i["fields"]["subject"]}} for i in items[:4]]
        r = c.post("/v1/route", json={"items": small})
        assert (r.status_code, r.json()["field"]) == (413, "items")
        r = c.post("/v1/route", json={"items": small[:3]})
        assert r.status_code == 200, r.text


def test_a_request_that_cannot_start_in_its_time_gets_503_and_nothing_is_done(
        base_dir: Path, tmp_path: Path, items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path, request_timeout_s=2.0) as (url, app, _root), \
            httpx.Client(base_url=url, timeout=60) as c:
        ws = app.state.workspace
        batch = {"items": items[:5]}
        ids = [i["id"] for i in batch["items"]]
        before = ws.store.count_items(), ws.store.latest_batch()
        ws.lock.acquire()  # the workspace is busy (an import, a training): the request cannot start its work
        try:
            # answered while the workspace is still held, so at its limit, not once the work could be done
            r = c.post("/v1/route", json=batch)
            assert r.status_code == 503, r.text
            assert "nothing was done" in r.json()["error"] and r.headers["retry-after"]
        finally:
            ws.lock.release()
        assert ws.store.get_items_if_any(ids) == [] and (ws.store.count_items(), ws.store.latest_batch()) == before
        r = c.post("/v1/route", json=batch)  # the same request, sent again when the workspace is free: done
        assert r.status_code == 200, r.text
        assert [d["id"] for d in r.json()["decisions"]] == ids
        assert sorted(i.item_id for i in ws.store.get_items_if_any(ids)) == sorted(ids)


def test_no_model_yet_is_409(tmp_path: Path) -> None:
    root = tmp_path / "empty"
    root.mkdir()
    shutil.copy(CONFIG, root / "triage.toml")
    with running(create_app(root)) as url, httpx.Client(base_url=url, timeout=30) as c:
        assert c.get("/v1/health").json() == {"ok": True, "status": "ok", "model_version": None, "problems": []}
        for method, path, body in [("GET", "/v1/model", None),
                                   ("POST", "/v1/route", {"id": "a", "fields": {}}),
                                   ("POST", "/v1/corrections", {"item_id": "a", "queue": "billing"})]:
            r = c.request(method, path, json=body)
            assert r.status_code == 409, (path, r.text)
            assert "train" in r.json()["error"]


# ----------------------------------------------------------------------------------------------------------
# the token


def test_bearer_token(base_dir: Path, tmp_path: Path, items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path, token=TOKEN) as (url, _app, _root), httpx.Client(base_url=url) as c:
        assert c.get("/v1/health").status_code == 200
        assert c.get("/openapi.json").status_code == 200
        good = {"Authorization": f"Bearer {TOKEN}"}
        for headers in [{}, {"Authorization": "Bearer wrong"}, {"Authorization": TOKEN},
                        {"Authorization": f"Basic {TOKEN}"}, {"Authorization": f"Bearer {TOKEN}x"},
                        {"Authorization": b"Bearer \xe9"}]:
            for method, path, body in [("GET", "/v1/model", None), ("POST", "/v1/route", items[0]),
                                       ("POST", "/v1/corrections", {"item_id": "x", "queue": "billing"}),
                                       ("GET", "/v1/no-such-path", None)]:
                r = c.request(method, path, json=body, headers=headers)
                assert r.status_code == 401, (headers, path)
                assert r.json()["field"] == "Authorization"
                assert r.headers["www-authenticate"].startswith("Bearer")
        assert c.get("/v1/model", headers=good).status_code == 200
        assert c.post("/v1/route", json=items[0], headers=good).status_code == 200
        assert c.post("/v1/route", json=items[0], headers={"authorization": f"bearer {TOKEN}"}).status_code == 200


def test_listening_beyond_loopback_needs_a_token(base_dir: Path) -> None:
    for host in ("127.0.0.1", "127.8.9.10", "::1", "[::1]", "localhost", "LOCALHOST"):
        assert is_loopback(host), host
        check_bind(host, None)
    for host in ("0.0.0.0", "::", "10.1.2.3", "192.168.0.7", "example.org", ""):
        assert not is_loopback(host), host
        with pytest.raises(ValueError, match="without a token"):
            check_bind(host, None)
        check_bind(host, TOKEN)
        with pytest.raises(ValueError, match="without a token"):
            serve(base_dir, host=host, port=1, token=None)
    with pytest.raises(ValueError, match="empty"):
        create_app(base_dir, token="  ")
    with pytest.raises(ValueError, match="empty"):
        serve(base_dir, host="0.0.0.0", token="")


# ----------------------------------------------------------------------------------------------------------
# load: concurrent routes and corrections, and a model swap while clients route


def test_concurrent_routes_and_corrections_lose_nothing(base_dir: Path, tmp_path: Path,
                                                        items: list[dict[str, Any]],
                                                        trained_ids: list[str]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root):
        ws = app.state.workspace
        queues = list(ws.model.queues)
        pool = trained_ids[:40]  # shared by every client, so corrections of one item race each other
        answers: list[list[tuple[str, int, dict[str, Any]]]] = [[] for _ in range(4)]

        def run(k: int) -> None:
            rnd = random.Random(k)
            with httpx.Client(base_url=url, timeout=60) as c:
                for i in range(50):
                    if i % 3 == 0:
                        body = {"item_id": rnd.choice(pool), "queue": rnd.choice(queues), "by": f"client{k}"}
                        r = c.post("/v1/corrections", json=body)
                        answers[k].append(("correct", r.status_code, r.json()))
                    else:
                        r = c.post("/v1/route", json=items[k * 50 + i])
                        answers[k].append(("route", r.status_code, r.json()))

        threads = [threading.Thread(target=run, args=(k,)) for k in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=300)
        flat = [a for per in answers for a in per]
        assert len(flat) == 200
        # a correction to the queue the item has by then (another client's got there first) is refused, 409
        same = [a for a in flat if a[0] == "correct" and a[1] == 409 and "is already in" in a[2]["error"]]
        assert all(a[1] == 200 for a in flat if a not in same), [a for a in flat if a[1] != 200][:3]
        done = [body for kind, status, body in flat if kind == "correct" and status == 200]
        assert len(done) + len(same) == 68

        journal = Store.open(root / "triage.db")
        try:
            entries = journal.corrections()
            labels = journal.queue_counts()
            current = {i: journal.get_item(i).label for i in pool}
        finally:
            journal.close()
        assert sorted(c.id for c in entries) == sorted(b["correction_id"] for b in done)
        assert all(c.status == "applied" for c in entries)
        assert len({b["model_version"] for b in done}) == len(done)  # one new version per correction
        last = {}
        for c in entries:
            last[c.item_id] = c.to_queue
        assert all(current[i] == q for i, q in last.items())
        # every correction is in the served model: its per-queue item counts are the stored labels
        counts = dict(zip(ws.model.queues, ws.model.counts.class_count_.tolist(), strict=True))
        assert {q: int(n) for q, n in counts.items() if n} == labels
        # and a fresh load (replaying the journal) serves the same version with the same counts
        with Workspace.open(root) as fresh:
            assert fresh.active_version.version == ws.active_version.version
            again = dict(zip(fresh.model.queues, fresh.model.counts.class_count_.tolist(), strict=True))
            assert again == counts


def test_concurrent_routes_are_grouped_and_each_gets_its_own_decisions(
        base_dir: Path, tmp_path: Path, items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root):
        store = app.state.workspace.store
        batches_before = len(store.batches())
        answers: dict[str, dict[str, Any]] = {}
        sent: list[tuple[str, ...]] = []
        lock = threading.Lock()

        def run(k: int) -> None:
            with httpx.Client(base_url=url, timeout=60) as c:
                for i in range(15):
                    n = k * 15 + i
                    if i % 5 == 4:  # now and then a small batch
                        batch = items[600 + n * 3: 600 + n * 3 + 3]
                        r = c.post("/v1/route", json={"items": batch})
                        got = r.json()["decisions"]
                        ids = tuple(b["id"] for b in batch)
                    else:
                        r = c.post("/v1/route", json=items[600 + n * 3])
                        got = [r.json()["decision"]]
                        ids = (items[600 + n * 3]["id"],)
                    assert r.status_code == 200
                    with lock:
                        sent.append(ids)
                        assert tuple(d["id"] for d in got) == ids
                        answers.update({d["id"]: d for d in got})

        threads = [threading.Thread(target=run, args=(k,)) for k in range(16)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=300)
        assert len(sent) == 240
        ids = [i for group in sent for i in group]
        assert len(answers) == len(ids) == len(set(ids))
        # fewer stored batches than requests: requests that arrived together were stored together
        stored_batches = store.batches()[batches_before:]
        assert sum(b.n_items for b in stored_batches) == len(ids)
        assert len(stored_batches) < len(sent)
        # and grouping changed no decision: the same as deciding each item alone in-process
        with Workspace.open(root) as other:
            for rec in other.store.get_items(ids):
                alone = other.decide_records([rec])[0]
                got = answers[rec.item_id]
                assert (got["suggested"], got["queue"], got["evidence"]) == (
                    alone["suggested"], alone["queue"], alone["evidence"])
                assert got["confidence"] == pytest.approx(alone["confidence"], abs=1e-9)


def test_model_swap_while_clients_route(base_dir: Path, tmp_path: Path, items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root):
        first = app.state.workspace.active_version.version
        stop = threading.Event()
        seen: list[list[tuple[int, int | None]]] = [[] for _ in range(4)]

        def run(k: int) -> None:
            with httpx.Client(base_url=url, timeout=60) as c:
                for i in range(300):
                    if stop.is_set() and i > 10:
                        break
                    r = c.post("/v1/route", json=items[(k * 300 + i) % len(items)])
                    version = r.json()["decision"]["model_version"] if r.status_code == 200 else None
                    seen[k].append((r.status_code, version))

        threads = [threading.Thread(target=run, args=(k,)) for k in range(4)]
        for t in threads:
            t.start()
        with Workspace.open(root) as other:  # another workspace object on the same folder: another "process"
            trained = other.train(note="retrained while serving").version.version
            time.sleep(0.3)
            other.activate(first)  # roll back
            time.sleep(0.3)
            other.activate(trained)
            time.sleep(0.3)
        stop.set()
        for t in threads:
            t.join(timeout=300)
        flat = [s for per in seen for s in per]
        assert flat and all(status == 200 for status, _ in flat), [s for s in flat if s[0] != 200][:3]
        versions = {v for _, v in flat}
        assert {first, trained} <= versions
        with httpx.Client(base_url=url) as c:
            assert c.get("/v1/health").json()["model_version"] == trained
            r = c.post("/v1/route", json=items[-1])
            assert r.json()["decision"]["model_version"] == trained


# ----------------------------------------------------------------------------------------------------------
# property: bodies shaped after the OpenAPI document, plus junk, never get a 5xx


WORDS = ["billing", "safety", "installation", "VW-100002", "VW-100004", "VW-100007", "battery swelling",
         "12", "", " ", "new_queue"]
TIMES = ["2026-03-01T09:00:00", "2026-03-01T09:00:00Z", "2026-03-01", "2026-03-01T09:00:00+02:00"]


def from_schema(schema: dict[str, Any], doc: dict[str, Any]) -> st.SearchStrategy[Any]:
    """Values for the subset of JSON Schema in the OpenAPI document (small: arrays of at most 4)."""
    if "$ref" in schema:
        name = schema["$ref"].rsplit("/", 1)[1]
        return st.deferred(lambda: from_schema(doc["components"]["schemas"][name], doc))
    if "oneOf" in schema:
        return st.one_of([from_schema(s, doc) for s in schema["oneOf"]])
    if "enum" in schema:
        return st.sampled_from(schema["enum"])
    types = schema.get("type", "object")
    types = [types] if isinstance(types, str) else types
    options: list[st.SearchStrategy[Any]] = []
    for t in types:
        if t == "string":
            limit = min(schema.get("maxLength", 40), 40)
            likely = TIMES if schema.get("format") == "date-time" else WORDS
            options.append(st.one_of(st.text(max_size=limit), st.sampled_from(likely), st.sampled_from(likely)))
        elif t == "integer":
            options.append(st.integers(-5, 10**6))
        elif t == "number":
            options.append(st.one_of(st.integers(-10, 10**6), st.floats(allow_nan=False, allow_infinity=False)))
        elif t == "boolean":
            options.append(st.booleans())
        elif t == "null":
            options.append(st.none())
        elif t == "array":
            options.append(st.lists(from_schema(schema.get("items", {}), doc), min_size=0, max_size=4))
        elif t == "object":
            props = schema.get("properties", {})
            required = schema.get("required", [])
            options.append(st.fixed_dictionaries(
                {k: from_schema(v, doc) for k, v in props.items() if k in required},
                optional={k: from_schema(v, doc) for k, v in props.items() if k not in required}))
    return st.one_of(options)


JUNK = st.recursive(st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=20),
                    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner,
                                                                                max_size=3), max_leaves=10)


def _mutated(value: Any) -> st.SearchStrategy[Any]:
    """The value, or the value with one key dropped or set to junk."""
    if not isinstance(value, dict) or not value:
        return st.just(value)
    keys = sorted(value)
    drop = st.sampled_from(keys).map(lambda k: {kk: vv for kk, vv in value.items() if kk != k})
    swap = st.tuples(st.sampled_from(keys + ["extra", "items", "fields"]), JUNK).map(
        lambda kv: {**value, kv[0]: kv[1]})
    return st.one_of(st.just(value), drop, swap)


def bodies(path: str, doc: dict[str, Any]) -> st.SearchStrategy[bytes]:
    request = doc["paths"][path]["post"]["requestBody"]["content"]["application/json"]["schema"]
    shaped = from_schema(request, doc).flatmap(_mutated)
    as_json = st.one_of(shaped, JUNK).map(lambda v: json.dumps(v).encode())
    return st.one_of(as_json, as_json, st.binary(max_size=60))


@pytest.fixture(scope="module")
def fuzzed(base_dir: Path, tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[httpx.Client, dict]]:
    with serving(base_dir, tmp_path_factory.mktemp("fuzz")) as (url, _app, _root):
        with httpx.Client(base_url=url, timeout=30) as c:
            doc = c.get("/openapi.json").json()  # as served: it names this workspace's fields and their types
            assert doc["components"]["schemas"]["Item"]["properties"]["fields"]["properties"]
            yield c, doc


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_no_5xx_for_any_body(fuzzed: tuple[httpx.Client, dict], data: st.DataObject) -> None:
    client, doc = fuzzed
    path = data.draw(st.sampled_from(["/v1/route", "/v1/corrections"]))
    body = data.draw(bodies(path, doc))
    r = client.post(path, content=body, headers={"Content-Type": "application/json"})
    assert r.status_code < 500, (path, body, r.text)
    answer = r.json()
    if r.status_code == 200:
        assert not conforms(answer, response_schema(path, "post", 200), doc), (body, answer)
    else:
        assert r.status_code in (400, 404, 409, 413, 422), (body, r.text)
        assert not conforms(answer, {"$ref": "#/components/schemas/Error"}, doc)
