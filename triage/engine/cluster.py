"""The Dask engine: partitions live on the workers of a dask.distributed cluster.

Without a scheduler address it starts a local cluster of worker processes on this machine's cores (one thread
each: the counting is numpy and Python, and processes keep the Python parts from sharing one interpreter lock).
With an address it joins an existing cluster; its workers need the same `triage` installed. Shared objects (the
fitted encoder, the models of the folds, the active model) are scattered to every worker once, and results are
read back one partition at a time in order, so the machine that drives the cluster holds at most one
partition's result besides what it folds them into.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from triage.engine.base import Engine, EngineError


class DaskEngine(Engine):
    """Runs partitions on a dask.distributed cluster (given, joined by address, or started locally)."""

    name = "dask"

    def __init__(self, scheduler: str | None = None, *, client: Any = None, n_workers: int | None = None) -> None:
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError as e:  # pragma: no cover - dask is a dependency; a trimmed install may lack it
            raise EngineError("the dask engine needs dask.distributed: pip install 'dask[distributed]'") from e
        self._owned: list[Any] = []
        if client is not None:
            self.client = client
        elif scheduler:
            import dask.config

            # how long to try: Dask's own setting (distributed.comm.timeouts.connect, 30 s unless the user's
            # Dask configuration or DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT says otherwise)
            try:
                self.client = Client(scheduler, timeout=dask.config.get("distributed.comm.timeouts.connect"))
            except (OSError, TimeoutError) as e:
                raise EngineError(f"cannot reach the Dask scheduler at {scheduler}: {e}") from e
            self._owned.append(self.client)
        else:
            workers = n_workers or max(1, os.cpu_count() or 1)
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   dashboard_address=None)
            self.client = Client(cluster)
            self._owned += [self.client, cluster]
        self.workers = max(1, len(self.client.scheduler_info().get("workers", {})))

    def put(self, parts: Sequence[Any]) -> list[Any]:
        # one scatter per partition: the driver's copy can go as soon as the caller drops it
        # (wrapped in a list: scatter would otherwise send a tuple's elements one by one)
        return [self.client.scatter([p], hash=False)[0] for p in parts]

    def share(self, obj: Any) -> Any:
        return self.client.scatter([obj], broadcast=True, hash=False)[0]

    def run(self, fn: Callable[..., Any], handles: Sequence[Any], shared: Any = None) -> list[Any]:
        if not handles:
            return []
        return self.client.map(fn, list(handles), [shared] * len(handles), pure=False)

    def results(self, handles: Sequence[Any]) -> Iterator[Any]:
        from concurrent.futures import CancelledError  # what a future whose data died with its worker raises

        from distributed.comm import CommClosedError

        for h in handles:
            try:
                yield h.result()
            except (CancelledError, CommClosedError, OSError) as e:  # a worker died with partitions only it held
                raise EngineError(f"the Dask cluster lost a partition ({e}); run the command again") from e

    def release(self, handles: Sequence[Any]) -> None:
        for h in handles:
            h.release()

    def close(self) -> None:
        for thing in self._owned:
            thing.close()
        self._owned = []

    def describe(self) -> str:
        return f"dask at {self.client.scheduler.address} ({self.workers} worker{'s' if self.workers != 1 else ''})"
