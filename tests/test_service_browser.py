"""A web page open in the operator's browser cannot drive the loopback service.

The attacks are the ones the Fetch standard allows a page without asking (fetch.spec.whatwg.org, "CORS-safelisted
request-header": a cross-origin POST with Content-Type text/plain, application/x-www-form-urlencoded or
multipart/form-data needs no preflight, and the browser then sends an Origin header) and DNS rebinding (the page's
own name resolved to 127.0.0.1, so the browser sends `Host: <that name>`; RFC 9110 section 7.2 makes Host the
name the client meant).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.service_support import serving


@pytest.fixture(scope="module")
def served(base_dir: Path, tmp_path_factory: pytest.TempPathFactory):
    with serving(base_dir, tmp_path_factory.mktemp("browser"), allowed_hosts=["triage.internal"]) as s:
        yield s


@pytest.mark.parametrize("ctype", ["text/plain", "application/x-www-form-urlencoded", "multipart/form-data",
                                   None])
def test_a_post_must_be_sent_as_json(served: tuple[str, Any, Path], trained_ids: list[str],
                                     ctype: str | None) -> None:
    url, app, _root = served
    store = app.state.workspace.store
    before = len(store.corrections())
    body = f'{{"item_id": "{trained_ids[0]}", "queue": "billing"}}'.encode()
    headers = {} if ctype is None else {"Content-Type": ctype}
    with httpx.Client(base_url=url, timeout=30) as c:
        r = c.post("/v1/corrections", content=body, headers=headers)
        assert (r.status_code, r.json()["field"]) == (415, "Content-Type")
        r = c.post("/v1/route", content=b'{"id": "page-1", "fields": {}}', headers=headers)
        assert r.status_code == 415
    assert len(store.corrections()) == before
    assert store.get_item("page-1") is None


@pytest.mark.parametrize("host", ["evil.example", "evil.example:8477", "127.0.0.1.evil.example", "", "10.0.0.5"])
def test_an_unexpected_host_is_refused(served: tuple[str, Any, Path], host: str) -> None:
    url, _app, _root = served
    with httpx.Client(base_url=url, timeout=30) as c:
        for method, path in [("GET", "/v1/health"), ("GET", "/v1/model"), ("POST", "/v1/route")]:
            r = c.request(method, path, json={"id": "h", "fields": {}}, headers={"Host": host})
            assert (r.status_code, r.json()["field"]) == (400, "Host"), (host, path, r.text)


@pytest.mark.parametrize("host", ["localhost", "LOCALHOST:9", "127.0.0.1", "[::1]:8477", "triage.internal:80"])
def test_loopback_and_configured_hosts_are_served(served: tuple[str, Any, Path], host: str) -> None:
    url, _app, _root = served
    with httpx.Client(base_url=url, timeout=30) as c:
        assert c.get("/v1/model", headers={"Host": host}).status_code == 200


@pytest.mark.parametrize(("origin", "status"), [
    ("https://evil.example", 403), ("null", 403), ("http://127.0.0.1.evil.example:8477", 403),
    ("http://localhost:8477", 200), ("http://127.0.0.1:3000", 200),
])
def test_cross_origin_requests_are_refused(served: tuple[str, Any, Path], origin: str, status: int) -> None:
    url, app, _root = served
    with httpx.Client(base_url=url, timeout=30) as c:
        r = c.post("/v1/route", json={"id": f"origin-{status}-{len(origin)}", "fields": {}},
                   headers={"Origin": origin})
        assert r.status_code == status, r.text
        if status == 403:
            assert r.json()["field"] == "Origin"
            assert app.state.workspace.store.get_item(f"origin-{status}-{len(origin)}") is None
        r = c.get("/v1/model", headers={"Sec-Fetch-Site": "cross-site"})
        assert (r.status_code, r.json()["field"]) == (403, "Sec-Fetch-Site")
