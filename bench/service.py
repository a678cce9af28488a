"""Benchmark of the HTTP service: latency and throughput of single-item routes, against the in-process call.

Run:  python bench/service.py [--requests 2000] [--level-seconds 30] [--paced 1000]

Everything stays on this machine: the demo workspace (Voltwren tickets) is built and trained in a temporary
folder, the server (`triage serve`) runs in a process of its own on a free 127.0.0.1 port, and the clients are
httpx clients in threads of this process. On a 2-core machine clients and server still share the CPU, and the
client's own cost (httpx, about half a millisecond a request) is inside every HTTP figure.

Measured in the same run:
  in-process  ws.decide_records([item])       the model's decision alone (what a library caller pays)
  in-process  ws.route_records([item], ...)   decision + storing item and decision (the service's work)
  HTTP        POST /v1/route at 1, 8 and 32 concurrent clients (closed loop, keep-alive connections)
  HTTP        POST /v1/route paced at 200 requests/s (open loop; latency counted from the scheduled send time,
              so a slow answer also delays the ones queued behind it)

Targets: p99 <= 10 ms at 200 requests/s; HTTP overhead per request <= 1 ms at p50 (HTTP p50 at one client
minus the in-process route_records p50).
"""

from __future__ import annotations

import argparse
import csv
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

import httpx  # noqa: E402

from triage.app import Workspace, records_from_dicts  # noqa: E402

TICKETS = REPO / "demo_corpus" / "voltwren_tickets.csv"
INCOMING = REPO / "demo_corpus" / "voltwren_incoming.csv"
CONFIG = REPO / "configs" / "voltwren.toml"
HOST = "127.0.0.1"  # loopback only, always
LEVELS = (1, 8, 32)
P99_TARGET_MS = 10.0
PACED_RATE = 200.0
OVERHEAD_TARGET_MS = 1.0


def incoming_items() -> list[dict[str, Any]]:
    with INCOMING.open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    out = []
    for r in rows:
        fields: dict[str, Any] = {k: r[k] for k in ("subject", "body", "channel", "product_line", "plan", "region")}
        for k in ("tenure_days", "open_orders"):
            fields[k] = float(r[k]) if r[k] else None
        out.append({"fields": fields, "arrived_at": r["received_at"]})
    return out


def quantile(values: list[float], q: float) -> float:
    s = sorted(values)
    if not s:
        return float("nan")
    return s[min(len(s) - 1, max(0, int(round(q * (len(s) - 1)))))]


@contextmanager
def running(root: Path) -> Iterator[str]:
    """`triage serve` in a process of its own, so the benchmark's client threads do not share its interpreter
    lock (in one process the clients' own work would be counted as server latency)."""
    with socket.socket() as sock:
        sock.bind((HOST, 0))
        port = sock.getsockname()[1]
    proc = subprocess.Popen([sys.executable, "-m", "triage", "serve", "-w", str(root), "--port", str(port)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    url = f"http://{HOST}:{port}"
    deadline = time.monotonic() + 60
    try:
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"the server did not start: {proc.stderr.read().decode()[-500:]}")
            try:
                if httpx.get(url + "/v1/health", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError("the server did not start within 60 s")
            time.sleep(0.1)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()


def in_process(fn: Callable[[int], None], n: int, cap_s: float) -> list[float]:
    times: list[float] = []
    stop = time.perf_counter() + cap_s
    for i in range(n):
        t0 = time.perf_counter()
        fn(i)
        times.append(time.perf_counter() - t0)
        if time.perf_counter() > stop:
            break
    return times


def closed_loop(url: str, items: list[dict[str, Any]], clients: int, n: int, cap_s: float,
                tag: str) -> tuple[list[float], float, int]:
    """`clients` threads, each with its own keep-alive connection, share `n` requests; (latencies, s, errors)."""
    lock = threading.Lock()
    counter = iter(range(n))
    latencies: list[float] = []
    errors = [0]
    stop = time.perf_counter() + cap_s

    def run() -> None:
        with httpx.Client(base_url=url, timeout=30) as c:
            mine: list[float] = []
            while time.perf_counter() < stop:
                with lock:
                    i = next(counter, None)
                if i is None:
                    break
                body = {"id": f"{tag}-{i}", **items[i % len(items)]}
                t0 = time.perf_counter()
                r = c.post("/v1/route", json=body)
                mine.append(time.perf_counter() - t0)
                if r.status_code != 200:
                    errors[0] += 1
            with lock:
                latencies.extend(mine)

    # one warm-up request per connection is not counted
    with httpx.Client(base_url=url, timeout=30) as c:
        c.get("/v1/health")
    threads = [threading.Thread(target=run) for _ in range(clients)]
    t0 = time.perf_counter()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return latencies, time.perf_counter() - t0, errors[0]


def health_loop(url: str, n: int, cap_s: float) -> list[float]:
    """GET /v1/health at one client: the HTTP and worker-thread cost with next to no work behind it."""
    times: list[float] = []
    stop = time.perf_counter() + cap_s
    with httpx.Client(base_url=url, timeout=30) as c:
        c.get("/v1/health")
        for _ in range(n):
            t0 = time.perf_counter()
            c.get("/v1/health")
            times.append(time.perf_counter() - t0)
            if time.perf_counter() > stop:
                break
    return times


def paced(url: str, items: list[dict[str, Any]], rate: float, n: int, workers: int = 16) -> tuple[list[float], int]:
    """Open loop: request i is due at start + i/rate; latency counts from when it was due.

    The clock starts once every client has its connection open (a barrier): creating `workers` httpx clients
    takes longer than a fixed head start on a busy 2-core machine, and the first requests would otherwise be
    late by the clients' own setup, not by the server."""
    lock = threading.Lock()
    counter = iter(range(n))
    latencies: list[float] = []
    errors = [0]
    begin: list[float] = []
    ready = threading.Barrier(workers + 1, action=lambda: begin.append(time.perf_counter() + 0.05))

    def run() -> None:
        with httpx.Client(base_url=url, timeout=30) as c:
            c.get("/v1/health")
            ready.wait()
            start = begin[0]
            mine: list[float] = []
            while True:
                with lock:
                    i = next(counter, None)
                if i is None:
                    break
                due = start + i / rate
                wait = due - time.perf_counter()
                if wait > 0:
                    time.sleep(wait)
                r = c.post("/v1/route", json={"id": f"paced-{i}", **items[i % len(items)]})
                mine.append(time.perf_counter() - due)
                if r.status_code != 200:
                    errors[0] += 1
            with lock:
                latencies.extend(mine)

    threads = [threading.Thread(target=run) for _ in range(workers)]
    for t in threads:
        t.start()
    ready.wait()
    for t in threads:
        t.join()
    return latencies, errors[0]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    ap.add_argument("--requests", type=int, default=2000, help="requests per concurrency level (default 2000)")
    ap.add_argument("--level-seconds", type=float, default=30.0, help="time cap per level (default 30 s)")
    ap.add_argument("--paced", type=int, default=1000, help="requests of the 200/s run (default 1000 = 5 s)")
    args = ap.parse_args(argv)
    n = max(1, min(args.requests, 20_000))
    cap = max(1.0, min(args.level_seconds, 120.0))

    tmp = Path(tempfile.mkdtemp(prefix="triage-bench-service-"))
    try:
        root = tmp / "ws"
        root.mkdir()
        shutil.copy(CONFIG, root / "triage.toml")
        print("building the demo workspace ...", file=sys.stderr)
        t0 = time.perf_counter()
        with Workspace.open(root) as ws:
            ws.import_file(TICKETS)
            ws.train()
        print(f"  trained in {time.perf_counter() - t0:.1f} s", file=sys.stderr)
        items = incoming_items()

        ws = Workspace.open(root)
        recs = records_from_dicts({"id": f"direct-{i}", **items[i % len(items)]} for i in range(n))
        decide = in_process(lambda i: ws.decide_records([recs[i]]), n, cap)

        def route_direct(i: int) -> None:
            ws.refresh_if_changed()
            ws.route_records([recs[i]], "bench")

        route = in_process(route_direct, n, cap)
        refresh = in_process(lambda i: ws.refresh_if_changed(), n, cap)

        rows: list[tuple[str, int, list[float], float, int]] = []
        with running(root) as url:
            print(f"serving on {url}", file=sys.stderr)
            health = health_loop(url, n, cap)
            for clients in LEVELS:
                before = len(ws.store.batches())
                lat, secs, errs = closed_loop(url, items, clients, n, cap, tag=f"c{clients}")
                rows.append((f"HTTP, {clients} client{'s' if clients > 1 else ''}", clients, lat, secs, errs))
                commits = len(ws.store.batches()) - before
                print(f"  {clients} clients: {len(lat)} requests in {secs:.1f} s, stored in {commits} group "
                      f"commits ({len(lat) / max(commits, 1):.1f} requests each)", file=sys.stderr)
            paced_n = max(1, min(args.paced, 20_000))
            plat, perrs = paced(url, items, PACED_RATE, paced_n)

        ms = 1000.0
        d50, d99 = quantile(decide, 0.5) * ms, quantile(decide, 0.99) * ms
        r50, r99 = quantile(route, 0.5) * ms, quantile(route, 0.99) * ms
        print()
        print(f"{'':28} {'n':>6} {'p50 ms':>8} {'p99 ms':>8} {'req/s':>8} {'errors':>7} {'p50 / decide':>13}")
        print(f"{'in-process decide_records':28} {len(decide):>6} {d50:>8.3f} {d99:>8.3f} "
              f"{len(decide) / sum(decide):>8.0f} {0:>7} {1.0:>13.2f}")
        print(f"{'in-process route_records':28} {len(route):>6} {r50:>8.3f} {r99:>8.3f} "
              f"{len(route) / sum(route):>8.0f} {0:>7} {r50 / d50:>13.2f}")
        http1_p50 = float("nan")
        for name, clients, lat, secs, errs in rows:
            p50, p99 = quantile(lat, 0.5) * ms, quantile(lat, 0.99) * ms
            if clients == 1:
                http1_p50 = p50
            print(f"{name:28} {len(lat):>6} {p50:>8.3f} {p99:>8.3f} {len(lat) / secs:>8.0f} {errs:>7} "
                  f"{p50 / d50:>13.2f}")
        pp50, pp99 = quantile(plat, 0.5) * ms, quantile(plat, 0.99) * ms
        print(f"{'HTTP, paced 200 req/s':28} {len(plat):>6} {pp50:>8.3f} {pp99:>8.3f} {PACED_RATE:>8.0f} "
              f"{perrs:>7} {pp50 / d50:>13.2f}")
        h50, f50 = quantile(health, 0.5) * ms, quantile(refresh, 0.5) * ms
        print(f"{'HTTP GET /v1/health':28} {len(health):>6} {h50:>8.3f} {quantile(health, 0.99) * ms:>8.3f} "
              f"{len(health) / sum(health):>8.0f} {0:>7} {h50 / d50:>13.2f}")
        print(f"{'in-process refresh_if_changed':28} {len(refresh):>6} {f50:>8.3f} "
              f"{quantile(refresh, 0.99) * ms:>8.3f} {len(refresh) / sum(refresh):>8.0f} {0:>7} {f50 / d50:>13.2f}")
        overhead = http1_p50 - r50
        bare = h50 - f50
        print()
        print("targets")
        print(f"  p99 at {PACED_RATE:.0f} requests/s <= {P99_TARGET_MS:g} ms: {pp99:.2f} ms -> "
              f"{'met' if pp99 <= P99_TARGET_MS and not perrs else 'NOT met'}")
        print(f"  HTTP overhead at p50 <= {OVERHEAD_TARGET_MS:g} ms: {http1_p50:.3f} - {r50:.3f} = "
              f"{overhead:.3f} ms -> {'met' if overhead <= OVERHEAD_TARGET_MS else 'NOT met'}")
        print(f"  the same without the store's commits (GET /v1/health - in-process refresh): {h50:.3f} - "
              f"{f50:.3f} = {bare:.3f} ms -> {'met' if bare <= OVERHEAD_TARGET_MS else 'NOT met'}")
        print(f"  (HTTP p50 at one client is {http1_p50 / r50:.2f}x the in-process route_records p50, "
              f"{http1_p50 / d50:.2f}x decide_records)")
        ws.close()
        return 0
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
