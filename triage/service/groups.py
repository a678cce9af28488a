"""Group commit for routes: requests that arrive while a route is being stored go together in the next one.

Storing an item and its decision costs two durable commits (an fsync each), far more than deciding, so
routing requests one at a time caps throughput at a few hundred per second whatever the number of clients.
Here the first waiting request leads: it takes every request queued behind it (up to `max_items` items, no
id twice) and routes them in one call; the others wait and get their share. A lone request is routed at once.
Each request still gets exactly its own decisions, in its own order.

Two rules keep replies honest. A request still waiting in the queue when its time is up is taken out and told
503, not done; once a group has started it is finished and answered, whatever the clock says. And a failing
group never fails its neighbours: the group is run again one request at a time, so only the request whose own
items fail gets an error.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from triage.records import ItemRecord

log = logging.getLogger(__name__)


class NotStarted(Exception):
    """The request's time ran out while it waited for its turn; nothing of it was done."""


@dataclass(eq=False)  # compared by identity: two requests with equal items are still two
class Pending:
    """One route request waiting for its decisions."""

    records: list[ItemRecord]
    prefixes: list[str]
    deadline: float  # time.monotonic() after which it may no longer start
    decisions: list[dict[str, Any]] | None = None
    error: BaseException | None = None
    done: bool = False


class RouteGroups:
    """See the module docstring. `run(group)` fills in each job's `decisions` or `error`, or raises."""

    def __init__(self, run: Callable[[list[Pending]], None], max_items: int) -> None:
        self._run = run
        self._max_items = max_items
        self._cv = threading.Condition()
        self._queue: list[Pending] = []
        self._busy = False

    def submit(self, job: Pending) -> list[dict[str, Any]]:
        group: list[Pending] = []
        with self._cv:
            self._queue.append(job)
            while self._busy and not job.done:
                left = job.deadline - time.monotonic()
                if left <= 0 and job in self._queue:  # not taken by a leader: withdraw it, nothing was done
                    self._queue.remove(job)
                    raise NotStarted
                self._cv.wait(timeout=max(left, 0.05) if job in self._queue else None)
            if not job.done:  # nobody took it: lead the next group
                if job.deadline <= time.monotonic():
                    self._queue.remove(job)
                    raise NotStarted
                self._busy = True
                group = self._take(job)
        if group:
            try:
                self._run_isolated(group)
            finally:
                with self._cv:
                    for j in group:
                        j.done = True
                    self._busy = False
                    self._cv.notify_all()
        if job.error is not None:
            raise job.error
        assert job.decisions is not None
        return job.decisions

    def _run_isolated(self, group: list[Pending]) -> None:
        """Run the group; if it fails as a whole, run each request alone so one cannot fail another."""
        try:
            self._run(group)
            return
        except BaseException as exc:
            if len(group) == 1:
                group[0].error = exc
                return
            log.warning("a group of %d route requests failed (%r); routing them one by one", len(group), exc)
        for j in group:
            j.decisions, j.error = None, None
            try:
                self._run([j])
            except BaseException as exc:
                j.error = exc
            if j.error is None and j.decisions is None:
                j.error = RuntimeError("the route group gave no decisions")

    def _take(self, leader: Pending) -> list[Pending]:
        group = [leader]
        ids = {r.item_id for r in leader.records}
        n = len(leader.records)
        now = time.monotonic()
        for j in self._queue:
            if j is leader or j.deadline <= now:
                continue
            mine = {r.item_id for r in j.records}
            if n + len(j.records) > self._max_items or ids & mine:
                continue
            group.append(j)
            ids |= mine
            n += len(j.records)
        taken = {id(j) for j in group}
        self._queue = [j for j in self._queue if id(j) not in taken]
        return group
