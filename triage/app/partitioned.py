"""Routing a large run in partitions on an engine (a Dask cluster): the active model goes to the workers once.

Each worker decides its partitions exactly as `routing.decide_batch` decides in this process (the same
decisions, evidence included); the decisions come back one partition at a time, in file order, and are
written to runs/run-<run id>.parquet in the workspace while they arrive. Then the items and decisions are
stored in one transaction, as `route_records` stores them, with the same run summary. The decisions hold the
items' words (evidence, unseen words), so the file is created owner-only (0600, in a 0700 folder) like the
store's own files, never through a symbolic link.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyarrow as pa
import pyarrow.parquet as pq

from triage.app.active import ActiveModel, require_model
from triage.app.decisions import RoutingDecision
from triage.app.errors import BadInput, WorkspaceError
from triage.app.routing import decide_batch, hits_for, run_summary, stored_rows, word_counts
from triage.engine import PARTITION_ROWS, Engine, EngineError, open_engine, partition_bounds
from triage.records import ItemRecord

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

RUNS_DIR = "runs"
FILE_MODE = 0o600  # the decisions carry the items' words: personal data, as in the store
DIR_MODE = 0o700
# the columns of RoutingDecision.to_dict, typed (a test checks a run reads back equal to the JSON records)
DECISION_SCHEMA = pa.schema([
    ("id", pa.string()), ("queue", pa.string()), ("suggested", pa.string()), ("confidence", pa.float64()),
    ("held", pa.bool_()), ("held_by", pa.string()), ("reason", pa.string()), ("runner_up", pa.string()),
    ("runner_up_confidence", pa.float64()), ("flag", pa.string()), ("watch", pa.list_(pa.string())),
    ("evidence", pa.list_(pa.struct([("feature", pa.string()), ("weight", pa.float64()), ("kind", pa.string())]))),
    ("unseen_words", pa.list_(pa.string())), ("model_version", pa.int64()),
])


@dataclass(frozen=True)
class Router:
    """What a worker needs to decide items: the active model (without its item map), the watch words."""

    active: ActiveModel
    watch: Any
    text_fields: tuple[str, ...]


def decide_partition(records: Sequence[ItemRecord],
                     router: Router) -> tuple[list[RoutingDecision], tuple[int, int]]:
    """One partition's decisions and its (unseen, known) word counts; runs on a worker."""
    if not records:
        return [], (0, 0)
    decisions, batch = decide_batch(router.active, records, hits_for(router.watch, router.text_fields, records))
    return decisions, word_counts(batch)


def route_on_engine(ws: Workspace, records: Sequence[ItemRecord], source: str, engine: str | Engine,
                    scheduler: str | None = None, workers: int | None = None,
                    rows: int = PARTITION_ROWS) -> tuple[list[dict[str, Any]], int]:
    """Decide `records` in partitions on `engine`, write them as Parquet, store them; (decisions, run id)."""
    if isinstance(engine, str):
        try:
            opened = open_engine(engine, scheduler, workers)
        except ValueError as e:
            raise BadInput(str(e)) from None
        except EngineError as e:
            raise WorkspaceError(f"nothing routed: {e}") from e
        with opened:
            return route_on_engine(ws, records, source, opened, rows=rows)
    try:
        return _route(ws, records, source, engine, rows)
    except EngineError as e:  # nothing was stored
        raise WorkspaceError(f"nothing routed: {e}") from e


def _route(ws: Workspace, records: Sequence[ItemRecord], source: str, engine: Engine,
           rows: int) -> tuple[list[dict[str, Any]], int]:
    with ws.lock:
        active = require_model(ws)
    # the item -> queue map of the training set stays here: workers only decide
    router = Router(replace(active, labels={}), ws.config.watch_words(),
                    tuple(f.name for f in ws.config.schema.text_fields))
    runs = _runs_folder(ws.root)
    tmp = runs / f".run-{os.getpid()}-{secrets.token_hex(4)}.parquet.part"
    decisions: list[RoutingDecision] = []
    unseen = known = 0
    bounds = partition_bounds(len(records), rows, engine.workers)
    try:
        with _create(tmp) as fh, pq.ParquetWriter(fh, DECISION_SCHEMA) as writer:
            parts = engine.put([list(records[lo:hi]) for lo, hi in bounds])
            results = engine.run(decide_partition, parts, shared=engine.share(router))
            for part_decisions, (u, k) in engine.results(results):
                writer.write_table(pa.Table.from_pylist([d.to_dict() for d in part_decisions],
                                                        schema=DECISION_SCHEMA))
                decisions.extend(part_decisions)
                unseen, known = unseen + u, known + k
            engine.release(results)
            engine.release(parts)
        summary = run_summary(ws, decisions, None, words=(unseen, known))
        summary["engine"] = engine.describe()
        rows_out = stored_rows(decisions)
        with ws.store.transaction(durable=False):
            ws.store.import_items([ItemRecord(r.item_id, r.fields, None, r.arrived_at) for r in records],
                                  source=source)
            run_id = ws.store.record_batch(source, rows_out, summary)
        tmp.replace(runs / f"run-{run_id}.parquet")
    finally:
        tmp.unlink(missing_ok=True)
    return [d.to_dict() for d in decisions], run_id


def _runs_folder(root: Path) -> Path:
    """The runs folder, made 0700 (or tightened to it: an older triage made it with the umask's mode)."""
    runs = Path(root) / RUNS_DIR
    runs.mkdir(mode=DIR_MODE, exist_ok=True)
    if not runs.is_symlink() and runs.stat().st_mode & 0o077 and runs.stat().st_uid == os.getuid():
        os.chmod(runs, DIR_MODE)
    return runs


def _create(path: Path) -> Any:
    """A new file opened for binary writing: exclusively, mode 0600 whatever the umask, never through a link."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, FILE_MODE)
    return os.fdopen(fd, "wb")


def parquet_path(ws_root: Path, run_id: int) -> Path:
    """Where a partitioned run's decisions are written."""
    return Path(ws_root) / RUNS_DIR / f"run-{run_id}.parquet"


__all__ = ["DECISION_SCHEMA", "Router", "decide_partition", "parquet_path", "route_on_engine"]
