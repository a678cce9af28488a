"""A bounded soak on loopback: several clients route and correct while `triage train` runs in another process
and the service process is SIGKILLed and restarted. Every acknowledged correction must be in the journal and
in the model that is active at the end, and no valid request may get a 5xx.

"In the model" is checked against the count tables' own definition (DESIGN: after any sequence of learns,
forgets and relabels the model equals a fresh fit on the final labels): the active model's per-queue item
counts equal the stored labels' counts. Clients resend after a dropped connection with the same
Idempotency-Key, as a client of a service that may restart must.
"""

from __future__ import annotations

import os
import random
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.helpers import build_demo_workspace
from triage.app import Workspace
from triage.store import Store

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs POSIX signals")

CLIENTS = 3
KILLS = 1
RUN_S = 1.5  # between kills: long enough for a few hundred requests, short enough for the suite


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _start(root: Path, port: int) -> subprocess.Popen[bytes]:
    proc = subprocess.Popen([sys.executable, "-m", "triage", "serve", "-w", str(root), "--port", str(port)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=1).status_code == 200:
                return proc
        except httpx.HTTPError:
            time.sleep(0.05)
    proc.kill()
    raise RuntimeError("the service did not start")


def test_acknowledged_corrections_survive_kills_and_training(tmp_path: Path) -> None:
    root = build_demo_workspace(tmp_path / "ws", rows=600)
    with Store.open(root / "triage.db") as store:
        pool = [r.item_id for r in store.labelled_items()[:60]]
        incoming = [{"id": f"soak-{i}", "fields": r.fields} for i, r in enumerate(store.labelled_items()[-600:])]
    with Workspace.open(root) as ws:
        queues = list(ws.model.queues)
    port = _free_port()
    url = f"http://127.0.0.1:{port}"
    proc = _start(root, port)
    stop = threading.Event()
    acked: list[dict[str, Any]] = []
    server_errors: list[tuple[str, int, str]] = []
    lock = threading.Lock()

    def send(c: httpx.Client, path: str, body: dict[str, Any], headers: dict[str, str]) -> httpx.Response | None:
        """Send until answered (the service may be down for a moment); None when the run ends first."""
        while not stop.is_set():
            try:
                r = c.post(path, json=body, headers=headers)
            except httpx.HTTPError:
                time.sleep(0.05)
                continue
            if r.status_code == 503:  # busy or locked: not done, send again
                time.sleep(0.05)
                continue
            return r
        return None

    def client(k: int) -> None:
        rnd = random.Random(k)
        with httpx.Client(base_url=url, timeout=30) as c:
            i = 0
            while not stop.is_set():
                i += 1
                if i % 3 == 0:
                    body = {"item_id": rnd.choice(pool), "queue": rnd.choice(queues), "by": f"client{k}"}
                    r = send(c, "/v1/corrections", body, {"Idempotency-Key": f"c{k}-{i}"})
                    kind = "correct"
                else:
                    r = send(c, "/v1/route", incoming[(k * 200 + i) % len(incoming)], {})
                    kind = "route"
                if r is None:
                    continue
                with lock:
                    if r.status_code >= 500:
                        server_errors.append((kind, r.status_code, r.text))
                    elif kind == "correct" and r.status_code == 200:
                        acked.append(r.json())

    def trainer() -> None:  # one training run, racing the clients and the kills
        subprocess.run([sys.executable, "-m", "triage", "train", "-w", str(root)], capture_output=True,
                       timeout=300)

    threads = [threading.Thread(target=client, args=(k,)) for k in range(CLIENTS)]
    threads.append(threading.Thread(target=trainer))
    for t in threads:
        t.start()
    try:
        for _ in range(KILLS):
            time.sleep(RUN_S)
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait()
            proc = _start(root, port)
        time.sleep(RUN_S)
    finally:
        stop.set()
        for t in threads:
            t.join(timeout=300)
        proc.terminate()
        proc.wait(timeout=60)

    assert not server_errors, server_errors[:3]
    assert len(acked) >= 10  # the run did real work
    with Store.open(root / "triage.db") as store:
        journal = {c.id: c for c in store.corrections()}
        labels = store.queue_counts()
    for a in acked:
        c = journal.get(a["correction_id"])
        assert c is not None and (c.item_id, c.to_queue) == (a["item_id"], a["after"]), a
        assert c.status == "applied", c
    with Workspace.open(root) as ws:  # the active model, with every journaled correction replayed
        counts = dict(zip(ws.model.queues, ws.model.counts.class_count_.tolist(), strict=True))
        assert {q: int(n) for q, n in counts.items() if n} == labels
        assert all(c.status == "applied" for c in ws.store.corrections())
