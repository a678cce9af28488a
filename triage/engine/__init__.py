"""Where counting and batch routing run: in this process, or on a Dask cluster (partitions counted, tables merged).

`open_engine("dask", scheduler)` joins a cluster (or starts a local one); `open_engine("local")` runs every
partition here. Both give the same count tables: partitions are counted with one fitted encoder and merged
exactly (see triage.core.counts).
"""

from __future__ import annotations

from triage.engine.base import PARTITION_ROWS, Engine, EngineError, InProcessEngine, partition_bounds

ENGINES = ("local", "dask")


def open_engine(name: str = "local", scheduler: str | None = None, n_workers: int | None = None) -> Engine:
    """An engine by name; "dask" without a scheduler starts a local cluster on this machine's cores."""
    if name == "local":
        if scheduler:
            raise ValueError("--scheduler needs --engine dask")
        return InProcessEngine()
    if name == "dask":
        from triage.engine.cluster import DaskEngine  # dask is imported only when asked for

        return DaskEngine(scheduler, n_workers=n_workers)
    raise ValueError(f"unknown engine {name!r} (one of: {', '.join(ENGINES)})")


__all__ = ["ENGINES", "PARTITION_ROWS", "Engine", "EngineError", "InProcessEngine", "open_engine", "partition_bounds"]
