"""Resource hygiene: idle and slow connections are closed, worker threads stay within the pool, health never
waits on the workspace, a short token is refused off loopback.

Slow headers are the "Slowloris" pattern (a client sending a request head a few bytes at a time so a server
keeps the connection forever; CVE-2007-6750 describes it against Apache); RFC 9112 section 9.8 lets a server
close an idle connection at any time.
"""

from __future__ import annotations

import socket
import threading
import time
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import httpx
import pytest

from tests.service_support import TOKEN, serving
from triage.service import MIN_TOKEN_CHARS, check_bind


def _closed_by_server(sock: socket.socket, trickle: bytes = b"") -> bool:
    """Send `trickle` a byte at a time (or nothing) until the server closes; True when it did."""
    sock.settimeout(0.2)
    for i in range(200):  # at most 40 s of waiting; the server's timers are a second or less here
        if trickle:
            try:
                sock.sendall(trickle[i % len(trickle): i % len(trickle) + 1])
            except OSError:
                return True
        try:
            if sock.recv(1024) == b"":
                return True
        except TimeoutError:
            continue
        except OSError:
            return True
    return False


@pytest.fixture(scope="module")
def served(base_dir: Path, tmp_path_factory: pytest.TempPathFactory):
    with serving(base_dir, tmp_path_factory.mktemp("resources"), workers=3,
                 server_options={"head_timeout_s": 0.5, "timeout_keep_alive": 1}) as s:
        yield s


def test_idle_and_slow_connections_are_closed(served: tuple[str, Any, Path]) -> None:
    url, _app, _root = served
    addr = urlsplit(url)
    with socket.create_connection((addr.hostname, addr.port)) as idle:
        assert _closed_by_server(idle)  # connected, never sent a byte
    with socket.create_connection((addr.hostname, addr.port)) as slow:
        assert _closed_by_server(slow, b"GET /v1/health HTTP/1.1\r\nHost: 127.0.0.1\r\nX-Pad: " + b"a" * 400)
    with socket.create_connection((addr.hostname, addr.port)) as kept:  # after a full answer, idle again
        kept.sendall(b"GET /v1/health HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n")
        kept.settimeout(10)
        assert kept.recv(65536).startswith(b"HTTP/1.1 200")
        assert _closed_by_server(kept)


def _workers() -> int:
    return sum(1 for t in threading.enumerate() if "AnyIO worker" in t.name)


def test_worker_threads_stay_within_the_pool(served: tuple[str, Any, Path], items: list[dict[str, Any]]) -> None:
    """Requests that wait for a busy workspace and give up never leave threads behind past the pool's size."""
    url, app, _root = served
    before = _workers()
    ws = app.state.workspace
    answers: list[int] = []
    lock = threading.Lock()

    def run(k: int) -> None:
        with httpx.Client(base_url=url, timeout=60) as c:
            r = c.post("/v1/route", json=items[k])
            with lock:
                answers.append(r.status_code)

    app.state.service.request_timeout_s = 0.3
    ws.lock.acquire()
    try:
        threads = [threading.Thread(target=run, args=(k,)) for k in range(30)]
        for t in threads:
            t.start()
        peak = 0
        while any(t.is_alive() for t in threads):
            peak = max(peak, _workers())
            time.sleep(0.01)
    finally:
        ws.lock.release()
        app.state.service.request_timeout_s = 10.0
    # each waited past its time and was told so (503; 408 when even its body arrived too late): none done
    assert len(answers) == 30 and set(answers) <= {408, 503}
    assert peak - before <= 3
    assert max(before, _workers()) <= before + 3


def test_health_answers_while_the_workspace_is_busy(served: tuple[str, Any, Path]) -> None:
    url, app, _root = served
    ws = app.state.workspace
    ws.lock.acquire()  # e.g. an import or a long correction holds it
    try:
        with httpx.Client(base_url=url, timeout=30) as c:
            r = c.get("/v1/health")
    finally:
        ws.lock.release()
    assert r.status_code == 200
    assert r.json()["model_version"] == ws.active_version.version


def test_health_is_degraded_when_the_disk_is_nearly_full(base_dir: Path, tmp_path: Path) -> None:
    with serving(base_dir, tmp_path, min_free_bytes=1 << 62) as (url, _app, _root), \
            httpx.Client(base_url=url, timeout=30) as c:
        h = c.get("/v1/health").json()
        assert (h["ok"], h["status"]) == (False, "degraded")
        assert any("MiB free" in p for p in h["problems"])


def test_a_short_token_is_refused_off_loopback() -> None:
    short = "x" * (MIN_TOKEN_CHARS - 1)
    with pytest.raises(ValueError, match=f"at least {MIN_TOKEN_CHARS}"):
        check_bind("0.0.0.0", short)
    with pytest.raises(ValueError, match="at least"):
        check_bind("10.1.2.3", "k")
    check_bind("0.0.0.0", TOKEN)
    check_bind("127.0.0.1", short)  # on loopback a token is extra; any non-empty one will do
