"""What an operator scrapes: counters and latency histograms in the Prometheus text exposition format.

Each app has its own registry (two apps in one process, as in the tests, never share counts). The counts are
of what this process answered since it started: items auto-routed and held per queue (held items under the
queue the model suggested), corrections applied, store errors answered (5xx from the store or the disk), the
active model version, and the time of each endpoint's requests.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram
from prometheus_client.exposition import CONTENT_TYPE_LATEST, generate_latest

# seconds; the single-item route answers in milliseconds, a batch of a thousand in about a second
LATENCY_BUCKETS = (0.002, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0)


class ServiceMetrics:
    """The service's counters, one registry per app."""

    content_type = CONTENT_TYPE_LATEST

    def __init__(self) -> None:
        self.registry = CollectorRegistry(auto_describe=True)
        r = self.registry
        self.routed = Counter("triage_items_routed", "Items auto-routed to a queue", ["queue"], registry=r)
        self.held = Counter("triage_items_held", "Items held for review, by the queue the model suggested",
                            ["queue"], registry=r)
        self.corrections = Counter("triage_corrections", "Corrections applied", registry=r)
        self.store_errors = Counter("triage_store_errors", "Requests answered with a store or disk failure",
                                    registry=r)
        self.model_version = Gauge("triage_model_version", "The active model version (0: none yet)", registry=r)
        self.latency = Histogram("triage_request_duration_seconds", "Time from a request to its answer",
                                 ["endpoint", "status"], buckets=LATENCY_BUCKETS, registry=r)

    def decisions(self, decisions: Iterable[dict[str, Any]]) -> None:
        """Count routed decisions (JSON records with `held` and `suggested`)."""
        for d in decisions:
            (self.held if d["held"] else self.routed).labels(queue=d["suggested"]).inc()

    def request(self, endpoint: str, status: int, seconds: float) -> None:
        self.latency.labels(endpoint=endpoint, status=str(status)).observe(seconds)

    def exposition(self, model_version: int | None) -> bytes:
        self.model_version.set(model_version or 0)
        return generate_latest(self.registry)
