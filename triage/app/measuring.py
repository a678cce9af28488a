"""Measuring: the honest measurement of a setting (time split or k-fold) and the scorecard of the active
setting (`evaluate`); the labelled items and the split they are measured on."""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from triage.app.active import (
    ActiveModel,
    require_model,
)
from triage.app.errors import BadInput
from triage.app.routing import watch_word_hits
from triage.core.calibrate import softmax_rows
from triage.core.encode import EncodedBatch, Encoder
from triage.core.measure import (
    SPLIT_SEED,
    Measurement,
    random_split,
    reliability_figures,
    scored_confidence,
    time_split,
)
from triage.core.metrics import scorecard
from triage.core.model import ModelSpec
from triage.core.routing import RoutingPolicy, decide
from triage.core.selection import (
    fit_rows,
    n_folds_for,
    out_of_fold_jll,
    stack_scores,
    stacked_out_of_fold,
    subset,
)
from triage.core.tokens import Tokenizer
from triage.engine.history import History, stratified_folds
from triage.records import ItemRecord

if TYPE_CHECKING:
    from triage.app.workspace import Workspace
from triage.app.model_settings import fit_policy, keep_layer_if_better, layer_info

MIN_ITEMS = 20
Progress = Callable[[str, float], None]

def labelled(ws: Workspace) -> list[ItemRecord]:
    """The labelled items in arrival order; too few to train on is a user error."""
    recs = ws.store.labelled_items()
    queues = {r.label for r in recs}
    if len(recs) < MIN_ITEMS or len(queues) < 2:
        raise BadInput(
            f"{ws.root}: {len(recs)} labelled items in {len(queues)} queue(s); training needs at least "
            f"{MIN_ITEMS} items in 2 or more queues (run `triage import FILE`)"
        )
    return recs


def test_split(recs: Sequence[ItemRecord]) -> tuple[list[ItemRecord], list[ItemRecord], dict[str, Any]]:
    """The items to fit on, the items to score, and how they were chosen.

    With arrival times: the newest items are scored (items without a time sort first, so they are never
    among them). With no arrival time at all: a seeded random split, stratified by queue (ids are not an
    order). `train` and `measure` both call this, so settings are chosen on the same items measure fits on."""
    if any(r.arrived_at for r in recs):
        older, newer = time_split(recs)
        return list(older), list(newer), {"kind": "time", "train_items": len(older), "test_items": len(newer),
                                          "test_from": newer[0].arrived_at, "test_to": newer[-1].arrived_at}
    train_rows, test_rows, stratified = random_split([r.label or "" for r in recs])
    return ([recs[i] for i in train_rows], [recs[i] for i in test_rows],
            {"kind": "random", "seed": SPLIT_SEED, "stratified": stratified, "train_items": len(train_rows),
             "test_items": len(test_rows)})


@contextmanager
def library_warnings(labels: Sequence[str], notes: list[str]) -> Iterator[None]:
    """Catch scikit-learn's warnings (a queue with one example trips its fold splitter) and say each once, in
    our words, in `notes`; warnings from elsewhere pass through unchanged."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    said: set[str] = set()
    for w in caught:
        if "sklearn" not in (w.filename or "") and not type(w.message).__module__.startswith("sklearn"):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
            continue
        text = str(w.message)
        if "least populated class" in text:
            counts: dict[str, int] = {}
            for lab in labels:
                counts[lab] = counts.get(lab, 0) + 1
            rare = sorted((n, q) for q, n in counts.items() if n < RARE_QUEUE_ITEMS)
            listed = ", ".join(f"{q!r} ({n} item{'s' if n != 1 else ''})" for n, q in rare)
            key = "rare"
            line = (f"few labelled items in {listed}: cross-validation cannot put such a queue in every fold, so "
                    "its calibration, cutoff and scores rest on almost nothing; label more of its items, or map "
                    "it to another queue in [labels]")
        else:
            key, line = text, f"scikit-learn says: {text}"
        if key not in said:
            said.add(key)
            notes.append(line)


# a queue with fewer labelled items than the folds of cross-validation (5) cannot be in every fold
RARE_QUEUE_ITEMS = 5


def encode(ws: Workspace, spec: ModelSpec, items: Sequence[dict[str, Any]]) -> tuple[Encoder, EncodedBatch]:
    """A fitted encoder and the items' matrix, from one tokenisation pass."""
    tok = Tokenizer(bigrams=spec.bigrams, max_token_chars=spec.max_token_chars)
    enc = Encoder(ws.config.schema, tok, min_count=spec.min_count, max_vocab=spec.max_vocab)
    return enc, enc.fit_transform(items)


def measure(ws: Workspace, spec: ModelSpec, recs: Sequence[ItemRecord] | None = None,
            progress: Progress | None = None,
            encoded: tuple[Encoder, EncodedBatch] | None = None, history: History | None = None) -> Measurement:
    """Calibrate and choose cutoffs on out-of-fold scores of the older items, then score the newest
    `TEST_SHARE` of items (by arrival time) with a model that never saw them: routing's real use.

    `encoded` is the older items' encoding when the caller has it already (same tokenizer settings);
    `history` holds `recs` tokenised once on an engine (older items first), and then the folds, the model and
    the scores all come from its count tables (the same numbers; see triage.engine.history)."""
    say = progress or (lambda _s, _f: None)
    recs = list(recs) if recs is not None else labelled(ws)
    older, newer, split = test_split(recs)
    labels = [r.label or "" for r in older]
    say("tokenising", 0.1)
    if history is None:
        enc, batch = encoded if encoded is not None else encode(ws, spec, [r.fields for r in older])
    say("calibrating on out-of-fold scores", 0.3)
    if history is not None:
        oof = history.out_of_fold_jll([spec], stratified_folds(labels, 5))[0]
        queues = history.queues("older")
    else:
        oof, queues = out_of_fold_jll(enc, batch, labels, spec, folds=5)
    stacked = keep_layer_if_better(ws, stack_scores(oof, queues, labels, spec), labels)
    oof = stacked.scores
    qi = {q: i for i, q in enumerate(queues)}
    y = np.array([qi[lab] for lab in labels])
    say("choosing cutoffs", 0.5)
    policy, calibration, cutoff_info = fit_policy(ws.config, oof, y, queues)
    calibration["score_layer"] = layer_info(stacked)
    never, cutoffs = policy.never_auto, dict(policy.cutoffs)
    say("scoring the newest items", 0.7)
    if history is not None:
        model = history.model(spec, "older")
        test_base = history.joint_log_likelihood(model, "newer")  # no layer yet: the model's own scores
        model.layer_ = stacked.layer
        test_jll = stacked.layer.transform(test_base) if model.layer_active else test_base
        test_base = test_base if model.layer_active else None
    else:
        model = fit_rows(enc, batch, labels, np.arange(len(labels)), spec, queues)
        model.layer_ = stacked.layer
        newer_batch = enc.transform([r.fields for r in newer], allow_missing=True)
        test_jll = model.joint_log_likelihood(newer_batch)
        test_base = model.base_scores(newer_batch) if model.layer_active else None
    probs = policy.calibrated(test_jll)
    # the safety rule reads the model's own posteriors too when the layer is on (routing.decide, watch_probs)
    watch_probs = softmax_rows(test_base) if test_base is not None else None
    hits = watch_word_hits(ws, newer)
    verdicts = decide(probs, model.queues, policy, hits, watch_probs)
    # the same figures on the newest items, which calibration never saw (an isotonic map is judged here)
    calibration["holdout"] = reliability_figures(
        softmax_rows(test_jll), probs, np.array([v.confidence for v in verdicts]),
        np.array([qi.get(r.label or "", -1) for r in newer]))
    all_queues = sorted(set(queues) | {r.label for r in newer if r.label})
    card = scorecard([r.label for r in newer], [v.suggested for v in verdicts], scored_confidence(verdicts),
                     all_queues, cutoffs, never_auto=never,
                     targets={q: ws.config.queue_settings(q).target_precision for q in all_queues})
    meas = Measurement(spec, policy, card, calibration, cutoff_info, split, [r.item_id for r in newer],
                       [r.label or "" for r in newer], probs, list(model.queues), hits)
    meas.test_jll = test_jll
    meas.test_watch_probs = watch_probs
    meas.layer = stacked.layer
    return meas


def measure_kfold(ws: Workspace, spec: ModelSpec, recs: Sequence[ItemRecord] | None = None, folds: int = 5,
                  progress: Progress | None = None) -> Measurement:
    """Stratified k-fold: every labelled item is decided by a model, a calibration and cutoffs that never
    saw it, so the scorecard covers all items.

    Nested: inside each outer fold, temperature, isotonic map and cutoffs are fitted on an inner out-of-fold
    pass (5 folds) over that fold's training part alone; the model counted on the whole training part then
    decides the outer fold's items. The vocabulary is built once over all items (no labels are read for it):
    a word only the test rows have gets zero counts in training, as an unseen word would.
    """
    from sklearn.model_selection import StratifiedKFold

    say = progress or (lambda _s, _f: None)
    recs = list(recs) if recs is not None else labelled(ws)
    items = [r.fields for r in recs]
    labels = [r.label or "" for r in recs]
    say("tokenising", 0.05)
    enc, batch = encode(ws, spec, items)
    queues = sorted(set(labels))
    qi = {q: i for i, q in enumerate(queues)}
    y = np.array([qi[lab] for lab in labels])
    n = len(recs)
    k = n_folds_for(labels, folds)
    probs = np.zeros((n, len(queues)))
    raw = np.zeros((n, len(queues)))
    watch = np.zeros((n, len(queues)))  # the model's own posteriors where a fold's layer is on (the safety rule)
    any_layer = False
    fold_of = np.full(n, -1, dtype=np.int64)
    policies: list[RoutingPolicy] = []
    fold_info: list[dict[str, Any]] = []
    splitter = StratifiedKFold(n_splits=k, shuffle=True, random_state=0)
    for f, (train_rows, test) in enumerate(splitter.split(np.zeros(n), y)):
        say(f"fold {f + 1}/{k}: calibrating on the training part", 0.1 + 0.8 * f / k)
        tr_labels = [labels[i] for i in train_rows]
        inner_st = stacked_out_of_fold(enc, subset(batch, train_rows), tr_labels, spec, folds=5)
        inner, inner_queues = inner_st.scores, inner_st.queues
        if inner_queues != queues:  # n_folds_for keeps every queue in every training part
            raise BadInput(f"fold {f + 1}: a queue is missing from the training part")
        policy, cal, cut = fit_policy(ws.config, inner, y[train_rows], queues)
        model = fit_rows(enc, batch, labels, train_rows, spec, queues)
        model.layer_ = inner_st.layer
        jll = model.joint_log_likelihood(subset(batch, test))
        probs[test], raw[test], fold_of[test] = policy.calibrated(jll), softmax_rows(jll), f
        if (own := model.watch_probabilities(subset(batch, test))) is not None:
            watch[test], any_layer = own, True
        policies.append(policy)
        fold_info.append({"fold": f, "train_items": len(train_rows), "test_items": len(test),
                          "temperature": cal["temperature"], "isotonic": cal["isotonic"], "cutoffs": cut})
    hits = watch_word_hits(ws, recs)
    meas = Measurement(spec, policies[0], scorecard([], [], np.empty(0), queues, {}), {}, {}, {},
                       [r.item_id for r in recs], labels, probs, queues, hits, fold_of, policies)
    meas.test_watch_probs = watch if any_layer else None  # as routing decides: routing.decide's watch_probs
    verdicts = meas.verdicts()
    routed = np.array([not v.held for v in verdicts])
    # cutoffs differ by fold: the scorecard gets each item's routing outcome (1 routed, -1 held) against
    # one representative cutoff per queue (the median over folds), which every routed item meets
    shown: dict[str, float | None] = {}
    for q in queues:
        cs = [p.cutoffs.get(q) for p in policies if p.cutoffs.get(q) is not None]
        shown[q] = float(np.median(cs)) if cs else None
    never = policies[0].never_auto
    meas.scorecard = scorecard(labels, [v.suggested for v in verdicts], np.where(routed, 1.0, -1.0), queues,
                               shown, never_auto=never,
                               targets={q: ws.config.queue_settings(q).target_precision for q in queues})
    used = [bool(fi["isotonic"]["used"]) for fi in fold_info]
    meas.calibration = {
        "temperature": float(np.median([fi["temperature"] for fi in fold_info])),
        "isotonic": {"used": all(used), "folds_used": int(sum(used))} if any(used)
        else {"used": False, "why": fold_info[0]["isotonic"]["why"]},
        "measured_on": "out-of-fold decisions (each fold calibrated on its own training part)",
        "folds": fold_info,
        **reliability_figures(raw, probs, np.array([v.confidence for v in verdicts]), y),
    }
    meas.cutoffs = {q: {"cutoff": shown[q], "per_fold": [p.cutoffs.get(q) for p in policies],
                        "target": ws.config.queue_settings(q).target_precision, "never_auto": q in never}
                    for q in queues}
    meas.split = {"kind": "kfold", "folds": k, "train_items": n - n // k, "test_items": n}
    say("done", 1.0)
    return meas


def evaluate(ws: Workspace, progress: Progress | None = None, split: str = "time", folds: int = 5) -> Measurement:
    """The scorecard of the active model's settings on the current labels (corrections included):
    split "time" scores the newest items, "kfold" every item by stratified k-fold."""
    active: ActiveModel = require_model(ws)
    if split not in ("time", "kfold"):
        raise BadInput(f"unknown split {split!r}; use time or kfold")
    if split == "kfold" and folds < 2:
        raise BadInput(f"--folds {folds}: k-fold evaluation needs at least 2 folds")
    recs = labelled(ws)
    notes: list[str] = []
    with library_warnings([r.label or "" for r in recs], notes):
        if split == "kfold":
            meas = measure_kfold(ws, active.model.spec, recs, folds=folds, progress=progress)
            meas.notes = notes
            return meas
        meas = measure(ws, active.model.spec, recs, progress=progress)
    meas.notes = notes

    # routing may use cutoffs set by hand: score the same rows at those too
    def same(a: float | None, b: float | None) -> bool:
        return (a is None and b is None) or (a is not None and b is not None and abs(a - b) < 1e-12)

    other = {q: c for q, c in active.policy.cutoffs.items()
             if q in meas.model_queues and not same(c, meas.policy.cutoffs.get(q))}
    if other and meas.test_jll is not None:
        # the same test rows decided exactly as routing decides: the active version's calibration too
        meas.active_cutoffs = other
        meas.at_active = meas.score_under(replace(active.policy, cutoffs={**dict(meas.policy.cutoffs), **other}))
    return meas
