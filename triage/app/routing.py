"""Routing: deciding items with the active model, storing a run of decisions, and the rule that an id already
stored with other field values is not routed (decided here, once, for every front end)."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from triage.app.active import ActiveModel, require_model
from triage.app.decisions import RoutingDecision
from triage.app.errors import BadInput
from triage.core.encode import EncodedBatch
from triage.core.evidence import strongest_batch
from triage.core.metrics import population_stability_index
from triage.core.routing import HeldBy, Verdict, decide, plain_words, watch_hits
from triage.ingest import IngestResult, Reject, read_items
from triage.records import ItemRecord
from triage.store import Decision

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

EVIDENCE_TERMS = 8
CLASH_REASON = ("already stored with other field values (a reopened or changed item); not routed: give it a new id "
                "or route the stored one")
# A queue with fewer training items than this (one a correction just created) is never suggested over an
# established queue: it is shown as the runner-up and the item is held. With a handful of items its tables say
# little, and least of all about missing values: one item with every field missing gives that queue the largest
# share of missing-value counts, so it would win every sparse item. 5 is common practice, no source.
MIN_QUEUE_ITEMS = 5
HELD_YOUNG = "a new queue is the runner-up until it has"
# a population stability index above 0.25 is read as a major shift (common practice in credit scoring, no source)
PSI_FLAG = 0.25
HELD_LAYER = "held: a queue added by a correction"


def _decision(active: ActiveModel, rec: ItemRecord, verdict: Verdict, terms: Sequence[Any],
              unseen: Sequence[str]) -> RoutingDecision:
    return RoutingDecision(
        id=rec.item_id, suggested=verdict.suggested, confidence=round(verdict.confidence, 6),
        runner_up=verdict.runner_up, runner_up_confidence=round(verdict.runner_up_confidence, 6),
        held_by=verdict.held_by, reason=verdict.reason, watch=verdict.watch,
        evidence=[{"feature": t.feature, "weight": round(t.weight, 4), "kind": t.kind} for t in terms],
        unseen_words=list(unseen[:20]), model_version=active.version.version)


def watch_word_hits(ws: Workspace, records: Sequence[ItemRecord]) -> list[list[str]] | None:
    """Watch-word hits per item, on the plain words of every text field (None when no queue has any)."""
    return hits_for(ws.config.watch_words(), [f.name for f in ws.config.schema.text_fields], records)


def hits_for(watch: Any, text_fields: Sequence[str], records: Sequence[ItemRecord]) -> list[list[str]] | None:
    """Watch-word hits of `watch` (the config's watch words) on the named text fields' plain words."""
    if not watch:
        return None
    return [watch_hits({w for n in text_fields for w in plain_words(r.fields.get(n))}, watch) for r in records]


def verdicts_for(ws: Workspace, records: Sequence[ItemRecord]) -> list[Verdict]:
    """The active model's routing verdicts for items, without evidence (cheap: for lists of many items)."""
    with ws.lock:
        active = require_model(ws)
        if not records:
            return []
        model = active.model
        batch = model.encoder.transform([r.fields for r in records], allow_missing=True)
        probs = active.policy.calibrated(model.joint_log_likelihood(batch))
        verdicts = decide(probs, model.queues, active.policy, watch_word_hits(ws, records),
                          model.watch_probabilities(batch))
        return layer_waits(_young_second(verdicts, model.counts.class_count_, active.policy.never_auto), model)


def decide_with_batch(ws: Workspace,
                      records: Sequence[ItemRecord]) -> tuple[list[RoutingDecision], EncodedBatch | None]:
    """Decisions and the encoded matrix behind them (one tokenisation of each text)."""
    with ws.lock:
        active = require_model(ws)
        if not records:
            return [], None
        return decide_batch(active, records, watch_word_hits(ws, records))


def decide_batch(active: ActiveModel, records: Sequence[ItemRecord],
                 hits: list[list[str]] | None) -> tuple[list[RoutingDecision], EncodedBatch]:
    """The decisions of one batch by one active model (no workspace needed: a cluster worker runs this too)."""
    model = active.model
    batch = model.encoder.transform([r.fields for r in records], allow_missing=True, keep_unknown=True)
    probs = active.policy.calibrated(model.joint_log_likelihood(batch))
    verdicts = decide(probs, model.queues, active.policy, hits, model.watch_probabilities(batch))
    verdicts = layer_waits(_young_second(verdicts, model.counts.class_count_, active.policy.never_auto), model)
    top = np.array([v.top_index for v in verdicts])
    runner = np.array([v.runner_up_index for v in verdicts])
    evidence = strongest_batch(model, batch, top, runner, EVIDENCE_TERMS) if len(model.queues) > 1 \
        else [[] for _ in records]
    unknown = batch.unknown or tuple(() for _ in records)
    decisions = [_decision(active, r, v, ev, unk)
                 for r, v, ev, unk in zip(records, verdicts, evidence, unknown, strict=True)]
    return decisions, batch


def _young_second(verdicts: list[Verdict], items: np.ndarray, never_auto: frozenset[str] | set[str]) -> list[Verdict]:
    """Put a queue with fewer than MIN_QUEUE_ITEMS items behind an established runner-up (see MIN_QUEUE_ITEMS);
    a never-auto queue keeps its place (a person sees those items anyway, flagged), and so does an item held by a
    safeguard (a watch word or a never-auto queue's probability): its safety reason must reach the person."""
    young = {i for i, n in enumerate(items) if n < MIN_QUEUE_ITEMS}
    if not young or len(young) == len(items):
        return verdicts
    out = []
    for v in verdicts:
        if v.top_index in young and v.runner_up_index >= 0 and v.runner_up_index not in young \
                and v.suggested not in never_auto and v.runner_up is not None:
            safeguard = v.held_by is not None and v.held_by.safeguard
            v = replace(v, suggested=v.runner_up, confidence=v.runner_up_confidence, runner_up=v.suggested,
                        runner_up_confidence=v.confidence, top_index=v.runner_up_index,
                        runner_up_index=v.top_index, queue=None,
                        **({} if safeguard else dict(
                            held_by=HeldBy.NEW_QUEUE, watch=(),
                            reason=f"{HELD_YOUNG} {MIN_QUEUE_ITEMS} items ({v.suggested}: {int(items[v.top_index])})")))
        out.append(v)
    return out


def layer_waits(verdicts: list[Verdict], model: Any) -> list[Verdict]:
    """Hold what would be auto-routed while a correction's new queue keeps the score layer off: the calibration
    and cutoffs were fitted on the layer's scores, and the model's own scores are not what they measured.
    Safety holds keep their reason; `train` fits the layer over every queue and routing resumes."""
    if not model.layer_waits:
        return verdicts
    new = ", ".join(q for q in model.queues if q not in model.layer_.queues)
    reason = (f"{HELD_LAYER} ({new}) until `triage train` refits the score layer: the cutoffs were fitted "
              "through it")
    return [replace(v, queue=None, held_by=HeldBy.NEW_QUEUE, watch=(), reason=reason) if v.held_by is None else v
            for v in verdicts]


def decisions_for(ws: Workspace, records: Sequence[ItemRecord]) -> list[RoutingDecision]:
    """Typed decisions for items, without storing anything (a pure read of the active model)."""
    return decide_with_batch(ws, records)[0]


def decide_records(ws: Workspace, records: Sequence[ItemRecord]) -> list[dict[str, Any]]:
    """Decisions for items as JSON records (`RoutingDecision.to_dict`), without storing anything."""
    return [d.to_dict() for d in decisions_for(ws, records)]


def route_records(ws: Workspace, records: Sequence[ItemRecord], source: str) -> tuple[list[dict[str, Any]], int]:
    """Decide, store the items (so they can be corrected later) and the decisions in one transaction;
    returns (decisions as JSON records, run id)."""
    with ws.lock:  # the summary reads the same model the decisions came from
        decisions, batch = decide_with_batch(ws, records)
        summary = run_summary(ws, decisions, batch)
    rows = stored_rows(decisions)
    # decisions can be made again from the stored items: a power cut may lose the newest run, a crash not
    with ws.store.transaction(durable=False):
        ws.store.import_items([ItemRecord(r.item_id, r.fields, None, r.arrived_at) for r in records],
                              source=source)
        run_id = ws.store.record_batch(source, rows, summary)
    return [d.to_dict() for d in decisions], run_id


def stored_rows(decisions: Sequence[RoutingDecision]) -> list[Decision]:
    """The store's rows of a run's decisions."""
    return [Decision(item_id=d.id, model_version=d.model_version, queue=d.queue, suggested=d.suggested,
                     confidence=d.confidence, held=d.held, runner_up=d.runner_up, evidence=d.evidence,
                     held_by=d.held_by.value if d.held_by else None, reason=d.reason,
                     runner_up_confidence=d.runner_up_confidence) for d in decisions]


def stored_with_other_fields(ws: Workspace, records: Sequence[ItemRecord]) -> set[str]:
    """Ids already stored with other field values: routing them would decide on one text and store
    another, so a later correction would learn what was not routed."""
    stored = {r.item_id: r.fields for r in ws.store.get_items_if_any([r.item_id for r in records])}
    return {r.item_id for r in records if r.item_id in stored and stored[r.item_id] != r.fields}


def first_of_each_id(records: Sequence[ItemRecord], rows: Sequence[int],
                     id_field: str) -> tuple[list[ItemRecord], list[Reject]]:
    """Within one input, an id given again gets no second decision but a reject naming the first row, as a
    file's second row with the same id does (`rows` are the records' row or line numbers)."""
    seen: dict[str, int] = {}
    keep: list[ItemRecord] = []
    dupes: list[Reject] = []
    for r, row in zip(records, rows, strict=True):
        if r.item_id in seen:
            dupes.append(Reject(row=row, field=id_field, reason=f"duplicate of row {seen[r.item_id]}",
                                raw={id_field: r.item_id}))
            continue
        seen[r.item_id] = row
        keep.append(r)
    return keep, dupes


def route_file(ws: Workspace, path: Path | str, *, engine: str | None = None, scheduler: str | None = None,
               workers: int | None = None) -> tuple[list[dict[str, Any]], IngestResult, int]:
    """Route every good row of a file; rows whose id is stored with other fields are left out, with a
    warning naming them (give a changed item a new id).

    With `engine="dask"` the items are decided in partitions on a cluster (triage.app.partitioned), and the
    decisions are also written as Parquet to runs/run-<run id>.parquet in the workspace."""
    if scheduler and engine in (None, "local"):
        raise BadInput("--scheduler needs --engine dask")
    result = read_items(path, ws.config.schema, require_label=False, max_text_chars=ws.config.max_text_chars,
                        rejects_dir=ws.rejects_dir)
    clash = stored_with_other_fields(ws, result.records)
    if clash:
        # each such row is not routed and says so in the result, as a reject naming its row: every input row
        # gets a decision or an error record
        for rec, row in zip(result.records, result.record_rows, strict=True):
            if rec.item_id in clash:
                result.rejects.append(Reject(row=row, field=ws.config.schema.id, reason=CLASH_REASON,
                                             raw={ws.config.schema.id: rec.item_id, **rec.fields}))
        kept = [(r, n) for r, n in zip(result.records, result.record_rows, strict=True) if r.item_id not in clash]
        result.records, result.record_rows = [r for r, _ in kept], [n for _, n in kept]
        shown = ", ".join(sorted(clash)[:10]) + (" ..." if len(clash) > 10 else "")
        result.warnings.append(f"{path}: {len(clash)} item(s) not routed: already stored with other field "
                               f"values (give a changed item a new id): {shown}")
    if engine not in (None, "local"):
        from triage.app.partitioned import route_on_engine

        decisions, run_id = route_on_engine(ws, result.records, str(path), engine, scheduler, workers)
    else:
        decisions, run_id = route_records(ws, result.records, source=str(path))
    return decisions, result, run_id


def run_summary(ws: Workspace, decisions: Sequence[RoutingDecision], batch: EncodedBatch | None,
                words: tuple[int, int] | None = None) -> dict[str, Any]:
    """Counts per queue and drift figures: the share of each item's distinct words never seen in training,
    and the shift of the predicted queue mix against the training mix (population stability index).
    `words` (unseen, known) stands in for `batch` when the run was decided in partitions elsewhere."""
    active = require_model(ws)
    n = len(decisions)
    routed = sum(1 for d in decisions if not d.held)
    per_queue: dict[str, int] = {}
    for d in decisions:
        per_queue[d.suggested] = per_queue.get(d.suggested, 0) + 1
    unseen, known = words if words is not None else word_counts(batch)
    total = unseen + known
    queues = active.model.queues
    expected = active.model.counts.class_count_
    actual = np.array([per_queue.get(q, 0) for q in queues], dtype=float)
    psi = population_stability_index(expected, actual) if n else 0.0
    return {"n": n, "routed": routed, "held": n - routed, "coverage": routed / n if n else 0.0,
            "per_queue": per_queue, "unseen_word_share": unseen / total if total else 0.0,
            "queue_mix_psi": psi, "drift_flag": bool(psi > PSI_FLAG)}


def word_counts(batch: EncodedBatch | None) -> tuple[int, int]:
    """(distinct unseen words, stored known-token entries) of a decided batch, for the drift figure."""
    if batch is None:
        return 0, 0
    return (sum(len(u) for u in batch.unknown) if batch.unknown else 0), int(batch.X.nnz)


def records_from_dicts(rows: Iterable[dict[str, Any]]) -> list[ItemRecord]:
    """Records from plain dicts {id, fields, label, arrived_at} (the shape the service and tests use)."""
    return [ItemRecord(str(r["id"]), dict(r.get("fields", {})), r.get("label"), r.get("arrived_at")) for r in rows]
