"""Measuring and training: the honest measurement of a setting (time split or k-fold), choosing settings,
fitting the final model on every labelled item and activating it, and the scorecard of the active setting."""

from __future__ import annotations

import hashlib
import time
import warnings
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from triage.app.active import (
    ON_CURRENT,
    ActiveModel,
    artifact_name,
    commit_version,
    learn_correction,
    require_model,
)
from triage.app.decisions import TrainReport
from triage.app.errors import BadInput, Cancelled, WorkspaceError
from triage.app.routing import watch_word_hits
from triage.config import Config
from triage.core.calibrate import softmax_rows
from triage.core.encode import EncodedBatch, Encoder
from triage.core.measure import (
    SPLIT_SEED,
    CutoffRules,
    Measurement,
    random_split,
    reliability_figures,
    scored_confidence,
    time_split,
)
from triage.core.measure import fit_policy as fit_policy_rules
from triage.core.metrics import scorecard
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.routing import RoutingPolicy, decide
from triage.core.selection import (
    SettingScore,
    StackedScores,
    best_setting,
    coverage_at_targets,
    fit_rows,
    n_folds_for,
    out_of_fold_jll,
    quick_grid,
    rank_key,
    score_jll,
    stack_scores,
    stacked_out_of_fold,
    subset,
)
from triage.core.stack import ScoreLayer
from triage.core.tokens import Tokenizer
from triage.engine import Engine, EngineError, InProcessEngine, open_engine
from triage.engine.history import History, stratified_folds
from triage.records import ItemRecord
from triage.store import ModelVersion
from triage.store.artifacts import save_model

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

MIN_ITEMS = 20
Progress = Callable[[str, float], None]


def fingerprint(ids: Sequence[str], labels: Sequence[str], config: Config) -> str:
    """A short hash of the training set (ids with their labels) and the schema."""
    h = hashlib.sha256()
    h.update(repr(config.schema).encode())
    for i, lab in sorted(zip(ids, labels, strict=True)):
        h.update(f"{i}\x1f{lab}\x1e".encode())
    return h.hexdigest()[:16]


def spec_from_config(config: Config, **overrides: Any) -> ModelSpec:
    m = config.model
    spec = ModelSpec(
        text_model="multinomial" if m.text_model == "auto" else m.text_model,
        alpha_text=1.0 if m.alpha_text == "auto" else float(m.alpha_text),
        alpha_fields=float(m.alpha_fields), prior=m.prior, bigrams=bool(m.bigrams), min_count=int(m.min_count),
        max_vocab=int(m.max_vocab) if m.max_vocab else None, max_token_chars=int(m.max_token_chars),
        tf_log=bool(m.tf_log), idf=bool(m.idf), length_norm=bool(m.length_norm),
        score_layer=m.score_layer is not False,  # "auto": on, unless the data is too small (stack.too_small)
    )
    return replace(spec, **overrides)


def cutoff_rules(config: Config, queues: Sequence[str]) -> CutoffRules:
    """The config's cutoff rules for these queues, as the plain values the core fits with."""
    pinned = {q: config.queue_settings(q).cutoff for q in queues}
    return CutoffRules(targets={q: config.queue_settings(q).target_precision for q in queues},
                       pinned={q: c for q, c in pinned.items() if c is not None},
                       never_auto=config.never_auto(), watch_probability=config.watch_probability)


def fit_policy(config: Config, oof: np.ndarray, y: np.ndarray,
               queues: Sequence[str]) -> tuple[RoutingPolicy, dict[str, Any], dict[str, dict[str, Any]]]:
    """Calibration and cutoffs from out-of-fold scores under the config's rules (see `core.measure`)."""
    return fit_policy_rules(oof, y, queues, cutoff_rules(config, queues))


def keep_layer_if_better(ws: Workspace, stacked: StackedScores, labels: Sequence[str]) -> StackedScores:
    """The layer on or off by the one selection criterion (selection.rank_key) on the same out-of-fold items:
    it stays only if it does not rank below the naive Bayes scores alone. `score_layer = true` keeps it whatever
    the ranking (the user asked for it; only too little data turns it off then)."""
    if stacked.layer is None or stacked.base is None or ws.config.model.score_layer is True:
        return stacked
    rules = cutoff_rules(ws.config, stacked.queues)
    ranks = []
    for scores in (stacked.scores, stacked.base):
        _acc, f1, ll = score_jll(scores, stacked.queues, labels)
        ranks.append((rank_key(coverage_at_targets(scores, stacked.queues, labels, rules), f1, ll), f1))
    if ranks[0][0] >= ranks[1][0]:
        return stacked
    (with_layer, f1_l), (without, f1_b) = ranks
    why = (f"off: on the out-of-fold items it auto-routed {with_layer[0]:.1%} (macro-F1 {f1_l:.3f}) against "
           f"{without[0]:.1%} (macro-F1 {f1_b:.3f}) without it")
    return StackedScores(stacked.base, stacked.queues, None, why, stacked.base)


def layer_info(stacked: StackedScores) -> dict[str, Any]:
    """What the scorecard says about the score layer: used (with its size) or off, and why."""
    if stacked.layer is None:
        return {"used": False, "why": stacked.why_off}
    info: dict[str, Any] = {"used": True, "items": stacked.layer.n_items, "queues": len(stacked.layer.queues),
                            "C": stacked.layer.C, "fitted_on": "out-of-fold scores",
                            "converged": stacked.layer.converged}
    if (note := stacked.layer.note()) is not None:
        info["note"] = note
    return info


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
        policies.append(policy)
        fold_info.append({"fold": f, "train_items": len(train_rows), "test_items": len(test),
                          "temperature": cal["temperature"], "isotonic": cal["isotonic"], "cutoffs": cut})
    hits = watch_word_hits(ws, recs)
    meas = Measurement(spec, policies[0], scorecard([], [], np.empty(0), queues, {}), {}, {}, {},
                       [r.item_id for r in recs], labels, probs, queues, hits, fold_of, policies)
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


def train(ws: Workspace, *, progress: Progress | None = None, cancel: Callable[[], bool] | None = None,
          note: str = "", engine: str | Engine | None = None, scheduler: str | None = None,
          workers: int | None = None) -> TrainReport:
    """Choose settings (unless the config pins them), measure, fit on every labelled item, activate.

    The labelled items are tokenised once (triage.engine.history): the settings grid, the measurement's folds
    and the final model are all counted from those token ids, by partition, on `engine` ("local", the
    default, in this process; "dask" on a cluster at `scheduler`, or on a local one of `workers` processes).
    Every engine gives the same model, array for array."""
    try:
        if engine is None or isinstance(engine, str):
            try:
                opened = open_engine(engine or "local", scheduler, workers)
            except ValueError as e:
                raise BadInput(str(e)) from None
            with opened:
                return _train(ws, opened, progress, cancel, note)
        return _train(ws, engine, progress, cancel, note)
    except EngineError as e:  # nothing was saved: the active model is unchanged
        raise WorkspaceError(f"training not finished: {e}") from e


def _train(ws: Workspace, engine: Engine, progress: Progress | None, cancel: Callable[[], bool] | None,
           note: str) -> TrainReport:
    t0 = time.perf_counter()
    say = progress or (lambda _s, _f: None)

    def check() -> None:
        if cancel is not None and cancel():
            raise Cancelled("training cancelled; the active model is unchanged")

    say("reading labelled items", 0.0)
    # the labels and the journal in one read transaction (one snapshot): a correction committed by another
    # process between two separate reads would be in neither the items nor the replayed corrections
    with ws.lock, ws.store.reading():
        recs = labelled(ws)
        journal = ws.store.corrections()
        pending = [c.id for c in journal if c.status == "pending"]
        # corrections after the mark are replayed on the new model; a pending one may be applied meanwhile
        mark = (min(pending) - 1) if pending else max((c.id for c in journal), default=0)
    notes: list[str] = []
    with library_warnings([r.label or "" for r in recs], notes):
        model, measurement, selection, base = _fit(ws, engine, recs, say, check)
    say("saving", 0.95)
    version = save_trained(ws, model, recs, measurement, selection, note or "trained", kind="train",
                           corrections_after=mark)
    say("done", 1.0)
    return TrainReport(version, measurement, selection, len(recs), time.perf_counter() - t0,
                       ws.config_warnings({r.label or "" for r in recs}) + notes)


def _fit(ws: Workspace, engine: Engine, recs: list[ItemRecord], say: Progress,
         check: Callable[[], None]) -> tuple[NaiveBayes, Measurement, list[dict[str, Any]], ModelSpec]:
    """Choose settings (unless pinned), measure, and fit the final model on every labelled item."""
    base = spec_from_config(ws.config)
    selection: list[dict[str, Any]] = []
    older, newer, _ = test_split(recs)
    ordered = [*older, *newer]  # the history's rows: the measurement's older items first
    labels = [r.label or "" for r in ordered]
    say("tokenising" if isinstance(engine, InProcessEngine) else f"tokenising on {engine.describe()}", 0.02)
    history = History(engine, ws.config.schema, base, [r.fields for r in ordered], labels, n_older=len(older))
    try:
        m = ws.config.model
        if m.text_model == "auto" or m.alpha_text == "auto":
            specs = [s for s in quick_grid(base)
                     if (m.text_model == "auto" or s.text_model == m.text_model)
                     and (m.alpha_text == "auto" or s.alpha_text == float(m.alpha_text))]
            check()
            say(f"comparing {len(specs)} settings by cross-validation", 0.05)

            def step(i: int, spec: ModelSpec) -> None:
                check()  # cancelling takes effect between settings, not only between stages
                say(f"setting {i + 1}/{len(specs)}: {spec.text_model}, alpha {spec.alpha_text:g}",
                    0.05 + 0.05 * i / len(specs))

            older_labels = labels[: len(older)]
            jlls = history.out_of_fold_jll(specs, stratified_folds(older_labels, 3), before_each=step)
            queues = history.queues("older")
            rules = cutoff_rules(ws.config, queues)  # one criterion with tune: selection.rank_key
            scores = [SettingScore(spec, *score_jll(jll, queues, older_labels),
                                   coverage_at_targets(jll, queues, older_labels, rules))
                      for spec, jll in zip(specs, jlls, strict=True)]
            best = best_setting(scores)
            selection = [s.to_dict() for s in scores]
            base = best.spec
        check()
        measurement = measure(ws, base, recs, progress=lambda s, f: say(s, 0.1 + 0.6 * f), history=history)
        check()
        say("fitting the final model on every item", 0.8)
        model = history.model(base, "all")
        if measurement.layer is not None and measurement.layer.applies_to(model.queues):
            # the layer the scorecard measured, with the calibration and cutoffs fitted through it: the model
            # keeps that one instead of refitting on every item's out-of-fold scores (a second 5-fold pass that
            # doubled train time, and a layer no figure had described). Its note (converged) is already said.
            model.layer_ = measurement.layer
        elif measurement.layer is not None:
            check()  # the newest items hold a queue the older ones lack: fit over every queue
            say("fitting the score layer on out-of-fold scores of every item", 0.85)
            oof_all = history.out_of_fold_jll([base], stratified_folds(labels, 5), which="all")[0]
            queues_all = history.queues("all")
            qi_all = {q: i for i, q in enumerate(queues_all)}
            model.layer_ = ScoreLayer.fit(oof_all, np.array([qi_all[lab] for lab in labels]), queues_all)
            if (note := model.layer_.note()) is not None:  # the layer the model keeps: train and info say so
                measurement.calibration["score_layer"].update(converged=False, note=note)
    finally:
        history.close()
    check()
    return model, measurement, selection, base


def save_trained(ws: Workspace, model: NaiveBayes, recs: Sequence[ItemRecord], meas: Measurement,
                 selection: list[dict[str, Any]], note: str, kind: str,
                 corrections_after: int | None = None) -> ModelVersion:
    """Save and activate a trained model. Corrections applied while it was fitting (id above
    `corrections_after`) are learned on top of it, so none is lost to a training run."""
    ids = [r.item_id for r in recs]
    labels = [r.label or "" for r in recs]
    fp = fingerprint(ids, labels, ws.config)
    with ws.lock:
        name = artifact_name(fp)
        extra = {"policy": meas.policy.to_dict(), "trained_ids": ids, "trained_labels": labels,
                 "calibration": meas.calibration, "cutoffs": meas.cutoffs, "selection": selection}
        save_model(model, ws.root / name, fingerprint=fp, extra=extra)
        config = {"spec": meas.spec.to_dict(), "policy": meas.policy.to_dict(), "base_artifact": name,
                  "corrections": [], "split": meas.split, "calibration": {
                      k: v for k, v in meas.calibration.items() if k != "reliability"}}
        fresh = ActiveModel(None, model, meas.policy, dict(zip(ids, labels, strict=True)), name, [])  # type: ignore[arg-type]
        def learn_newer() -> None:
            """The journal is read and the version added under one write lock: no correction slips in between."""
            if corrections_after is not None:
                for c in ws.store.corrections():
                    if c.id > corrections_after and c.status != "pending":
                        learn_correction(ws, fresh, c)
            config["corrections"] = list(fresh.corrections)

        mv = commit_version(ws, ON_CURRENT, kind, config, fp, name, scorecard=meas.scorecard.to_dict(), note=note,
                            inside=learn_newer)
        fresh.version = mv
        ws._active = fresh
        ws.load_problem = None
    return mv


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
