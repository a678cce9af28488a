"""Where work on partitions runs: the engine interface, and the engine that runs it in this process.

Training and batch routing are written once, against this interface: put partitions somewhere, run a function
on each partition (with one shared object, sent once), and read the results back in partition order. In
process, a "handle" is the value itself; on a cluster it is a reference to a value kept on a worker, so an
encoded partition is tokenised once and then counted, scored and decided where it lives.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Callable, Iterator, Sequence
from typing import Any

# rows per partition: large enough that per-task overhead is small, small enough that one partition's items,
# its sparse matrix and one set of count tables fit comfortably in a worker (common practice, no source)
PARTITION_ROWS = 20_000


def partition_bounds(n: int, rows: int = PARTITION_ROWS, at_least: int = 1) -> list[tuple[int, int]]:
    """Contiguous [lo, hi) row ranges of at most `rows` rows, at least `at_least` of them when n allows.

    The split depends only on n and the sizes asked for, never on the engine, so the same data counted by any
    engine is merged in the same order."""
    if n <= 0:
        return []
    k = max(math.ceil(n / max(int(rows), 1)), min(max(int(at_least), 1), n))
    step = math.ceil(n / k)
    return [(lo, min(lo + step, n)) for lo in range(0, n, step)]


class EngineError(RuntimeError):
    """The engine could not start, reach its cluster, or lost a worker's partitions."""


class Engine(ABC):
    """Runs a function on each partition; results come back in partition order."""

    name: str = "engine"
    workers: int = 1

    @abstractmethod
    def put(self, parts: Sequence[Any]) -> list[Any]:
        """Place partitions where the work runs; returns one handle per partition."""

    @abstractmethod
    def share(self, obj: Any) -> Any:
        """Send one object (an encoder, a model) to every worker once; returns a handle for `run`."""

    @abstractmethod
    def run(self, fn: Callable[..., Any], handles: Sequence[Any], shared: Any = None) -> list[Any]:
        """fn(part, shared) for every partition; the results stay where they were computed (handles)."""

    @abstractmethod
    def results(self, handles: Sequence[Any]) -> Iterator[Any]:
        """The values behind handles, one at a time and in order (the caller folds them as they come)."""

    def release(self, handles: Sequence[Any]) -> None:
        """Forget values kept for handles (a cluster frees the workers' memory)."""
        return None

    def close(self) -> None:
        """Stop what the engine started."""
        return None

    def describe(self) -> str:
        return f"{self.name} ({self.workers} worker{'s' if self.workers != 1 else ''})"

    def __enter__(self) -> Engine:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class InProcessEngine(Engine):
    """Every partition in this process, one after another: the reference the cluster must equal."""

    name = "in-process"

    def put(self, parts: Sequence[Any]) -> list[Any]:
        return list(parts)

    def share(self, obj: Any) -> Any:
        return obj

    def run(self, fn: Callable[..., Any], handles: Sequence[Any], shared: Any = None) -> list[Any]:
        return [fn(part, shared) for part in handles]

    def results(self, handles: Sequence[Any]) -> Iterator[Any]:
        yield from handles
