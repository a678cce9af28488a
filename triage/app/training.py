"""Training: choosing settings (unless pinned), measuring the chosen one, fitting the final model on every
labelled item, and activating it as a new version."""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from triage.app.active import (
    ON_CURRENT,
    ActiveModel,
    artifact_name,
    commit_version,
    learn_correction,
)
from triage.app.decisions import TrainReport
from triage.app.errors import BadInput, Cancelled, WorkspaceError
from triage.core.measure import (
    Measurement,
)
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.selection import (
    SettingScore,
    best_setting,
    coverage_at_targets,
    quick_grid,
    score_jll,
)
from triage.core.stack import ScoreLayer
from triage.engine import Engine, EngineError, InProcessEngine, open_engine
from triage.engine.history import History, stratified_folds
from triage.records import ItemRecord
from triage.store import ModelVersion
from triage.store.artifacts import save_model

if TYPE_CHECKING:
    from triage.app.workspace import Workspace
from triage.app.measuring import Progress, labelled, library_warnings, measure, test_split
from triage.app.model_settings import cutoff_rules, fingerprint, spec_from_config


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
        if m.text_model == "auto" or m.alpha_text == "auto" or m.bigrams == "auto":
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
            folds = stratified_folds(older_labels, 3)
            queues = history.queues("older")
            rules = cutoff_rules(ws.config, queues)  # one criterion with tune: selection.ranked

            def scored(spec: ModelSpec, jll: np.ndarray) -> SettingScore:
                return SettingScore(spec, *score_jll(jll, queues, older_labels),
                                    coverage_at_targets(jll, queues, older_labels, rules))

            jlls = history.out_of_fold_jll(specs, folds, before_each=step)
            scores = [scored(spec, jll) for spec, jll in zip(specs, jlls, strict=True)]
            best = best_setting(scores, len(older_labels))
            if m.bigrams == "auto":
                # the best setting once more with word pairs (a second tokenisation; the grid stays on words):
                # kept only if it ranks first by the same rule
                check()
                say(f"setting {len(specs) + 1}/{len(specs) + 1}: {best.spec.text_model}, alpha "
                    f"{best.spec.alpha_text:g}, with word pairs", 0.1)
                paired = replace(best.spec, bigrams=True)
                with_pairs = History(engine, ws.config.schema, paired, [r.fields for r in ordered], labels,
                                     n_older=len(older))
                try:
                    scores.append(scored(paired, with_pairs.out_of_fold_jll([paired], folds)[0]))
                except BaseException:
                    with_pairs.close()
                    raise
                best = best_setting(scores, len(older_labels))
                if best.spec.bigrams:
                    history.close()
                    history = with_pairs
                else:
                    with_pairs.close()
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
