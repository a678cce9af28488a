"""Input no store or answer can hold is a 4xx naming the field, and never fails another request.

The values come from the JSON and Unicode specifications themselves: RFC 8259 section 6 lets a number have any
number of digits and any exponent (so `1e400`, past IEEE 754 double range, is valid JSON), and Unicode's
definition D76 (a Unicode scalar value excludes the surrogates U+D800..U+DFFF) makes a lone `\\ud800` escape
valid JSON text that is not a character and cannot be written as UTF-8 (RFC 3629 section 3). Python refuses to
turn an integer of more than 4,300 digits into text (sys.int_info.default_max_str_digits, documented under
"Integer string conversion length limitation").
"""

from __future__ import annotations

import random
import threading
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.service_support import serving
from triage.store import Store

JSON_HEADERS = {"Content-Type": "application/json"}
HUGE = "9" * 5000
LONG_NUMBER = "7" * 400

ROUTE_CASES = [
    (f'{{"id": {HUGE}, "fields": {{}}}}', "id"),
    ('{"id": "\\ud800", "fields": {}}', "id"),
    ('{"id": "s1", "fields": {"subject": "battery \\ud800 swelling"}}', "fields.subject"),
    ('{"id": "s2", "fields": {"\\ud800": "x"}}', "fields.\\ud800"),
    ('{"id": "s3", "fields": {"body": 1e400}}', "fields.body"),
    ('{"id": "s4", "fields": {"channel": -1e400}}', "fields.channel"),
    ('{"id": "s5", "fields": {"tenure_days": 1e400}}', "fields.tenure_days"),
    (f'{{"id": "s6", "fields": {{"open_orders": {LONG_NUMBER}}}}}', "fields.open_orders"),
    (f'{{"items": [{{"id": "ok", "fields": {{}}}}, {{"id": "s7", "fields": {{"tenure_days": {LONG_NUMBER}}}}}]}}',
     "items[1].fields.tenure_days"),
]


@pytest.fixture(scope="module")
def served(base_dir: Path, tmp_path_factory: pytest.TempPathFactory):
    with serving(base_dir, tmp_path_factory.mktemp("input")) as s:
        yield s


@pytest.mark.parametrize(("body", "field"), ROUTE_CASES)
def test_unusable_values_in_a_route_are_422_naming_the_field(served: tuple[str, Any, Path], body: str,
                                                             field: str) -> None:
    url, app, _root = served
    store = app.state.workspace.store
    before = store.count_items()
    with httpx.Client(base_url=url, timeout=30) as c:
        r = c.post("/v1/route", content=body.encode("utf-8"), headers=JSON_HEADERS)
    assert r.status_code == 422, r.text
    assert r.json()["field"] == field
    assert store.count_items() == before  # nothing of the request was stored, its good item neither


@pytest.mark.parametrize(("body", "field"), [
    ('{"item_id": "VW-100002", "queue": "billing", "by": "dana \\ud800"}', "by"),
    ('{"item_id": "VW-1000\\ud800", "queue": "billing"}', "item_id"),
    ('{"item_id": "VW-100002", "queue": "bill\\udfffing"}', "queue"),
    (f'{{"item_id": {HUGE}, "queue": "billing"}}', "item_id"),
])
def test_unusable_values_in_a_correction_are_422_naming_the_field(served: tuple[str, Any, Path], body: str,
                                                                  field: str) -> None:
    url, app, _root = served
    store = app.state.workspace.store
    before = len(store.corrections())
    with httpx.Client(base_url=url, timeout=30) as c:
        r = c.post("/v1/corrections", content=body.encode("utf-8"), headers=JSON_HEADERS)
    assert r.status_code == 422, r.text
    assert r.json()["field"] == field
    assert len(store.corrections()) == before


def test_a_bad_request_never_fails_its_neighbours(base_dir: Path, tmp_path: Path,
                                                  items: list[dict[str, Any]]) -> None:
    """Good and bad requests at once, so that they meet in the same group commit: every good one is answered
    200 with its own decision and stored; every bad one is a 422."""
    bad_bodies = [body for body, _ in ROUTE_CASES]
    good = items[:120]
    results: list[tuple[str, int, str | None]] = []
    lock = threading.Lock()
    with serving(base_dir, tmp_path) as (url, app, root):
        def run(k: int) -> None:
            rnd = random.Random(k)
            with httpx.Client(base_url=url, timeout=60) as c:
                for i in range(k, len(good), 6):
                    if rnd.random() < 0.5:
                        b = rnd.choice(bad_bodies)
                        r = c.post("/v1/route", content=b.encode("utf-8"), headers=JSON_HEADERS)
                        with lock:
                            results.append(("bad", r.status_code, None))
                    r = c.post("/v1/route", json=good[i])
                    with lock:
                        ok = r.status_code == 200 and r.json()["decision"]["id"] == good[i]["id"]
                        results.append(("good", 200 if ok else r.status_code, good[i]["id"]))

        threads = [threading.Thread(target=run, args=(k,)) for k in range(6)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=300)
    assert sum(1 for kind, _, _ in results if kind == "good") == len(good)
    assert all(status == 200 for kind, status, _ in results if kind == "good"), results
    assert all(status == 422 for kind, status, _ in results if kind == "bad"), results
    assert any(kind == "bad" for kind, _, _ in results)
    with Store.open(root / "triage.db") as store:
        assert {r.item_id for r in store.get_items_if_any([g["id"] for g in good])} == {g["id"] for g in good}
