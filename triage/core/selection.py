"""Honest measurement of a model setting: out-of-fold scores from one tokenisation pass.

The encoder is fitted once on all rows and every fold reuses its sparse matrix; only the count tables are rebuilt
per fold (a sparse product), which is why a grid of settings costs little more than one fit. The vocabulary
then includes words that occur only in a fold's test rows; they get zero counts in that fold, exactly as an
unseen word would, so no label leaks.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import TypeVar

import numpy as np
from sklearn.metrics import accuracy_score, f1_score
from sklearn.model_selection import StratifiedKFold

from triage.core.encode import EncodedBatch, Encoder
from triage.core.measure import CutoffRules, fit_policy
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes, log_posterior
from triage.core.stack import ScoreLayer, too_small

T = TypeVar("T")


def subset(batch: EncodedBatch, rows: np.ndarray) -> EncodedBatch:
    return EncodedBatch(batch.X[rows], batch.codes[rows])


def fit_rows(encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], rows: np.ndarray, spec: ModelSpec,
             queues: Sequence[str]) -> NaiveBayes:
    """A model counted on some rows of a shared batch; every queue present (empty if absent from these rows).

    The spec's transforms apply; an idf vector comes from these rows' document frequencies only."""
    return NaiveBayes.from_batch(encoder, subset(batch, rows), [labels[i] for i in rows], spec, queues=queues)


def n_folds_for(labels: Sequence[str], wanted: int = 5) -> int:
    """As many folds as the rarest queue allows (at least 2)."""
    _, counts = np.unique(np.asarray(labels), return_counts=True)
    return int(max(2, min(wanted, counts.min()))) if len(counts) else 2


def out_of_fold_jll(encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], spec: ModelSpec,
                    folds: int = 5, seed: int = 0) -> tuple[np.ndarray, list[str]]:
    """Joint log-likelihoods for every row from a model that never saw it; columns in sorted queue order."""
    queues = sorted(set(labels))
    y = np.asarray(labels)
    jll = np.empty((len(labels), len(queues)))
    k = n_folds_for(labels, folds)
    splitter = StratifiedKFold(n_splits=k, shuffle=True, random_state=seed)
    for train, test in splitter.split(np.zeros(len(y)), y):
        model = fit_rows(encoder, batch, labels, train, spec, queues)
        jll[test] = model.joint_log_likelihood(subset(batch, test))
    return jll, queues


@dataclass(frozen=True)
class StackedScores:
    """Out-of-fold scores for calibration and cutoffs, with the score layer behind them (None: layer off)."""

    scores: np.ndarray  # (n, Q): each row from a model, and a layer, that never saw the item
    queues: list[str]
    layer: ScoreLayer | None
    why_off: str | None = None
    base: np.ndarray | None = None  # the naive Bayes out-of-fold scores the layer was fitted on


def stacked_out_of_fold(encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], spec: ModelSpec,
                        folds: int = 5, seed: int = 0, layer_folds: int = 3) -> StackedScores:
    """Naive Bayes out-of-fold scores and, with spec.score_layer and enough items, the score layer fitted on
    them (stacked generalisation, Wolpert 1992: the layer only ever sees scores of items the model did not
    count). The scores returned for calibration are out of fold twice over: each item's stacked score comes
    from a layer fitted on the other `layer_folds` - 1 parts of the out-of-fold scores."""
    oof, queues = out_of_fold_jll(encoder, batch, labels, spec, folds, seed)
    return stack_scores(oof, queues, labels, spec, seed, layer_folds)


def stack_scores(oof: np.ndarray, queues: list[str], labels: Sequence[str], spec: ModelSpec, seed: int = 0,
                 layer_folds: int = 3) -> StackedScores:
    """stacked_out_of_fold from naive Bayes out-of-fold scores already computed (by any engine)."""
    if not spec.score_layer:
        return StackedScores(oof, queues, None, "off in the settings", oof)
    why = too_small(labels, len(queues))
    if why is not None:
        return StackedScores(oof, queues, None, why, oof)
    qi = {q: i for i, q in enumerate(queues)}
    y = np.array([qi[lab] for lab in labels])
    layer = ScoreLayer.fit(oof, y, queues)
    stacked = np.empty_like(oof)
    k = int(max(2, min(layer_folds, np.bincount(y).min())))
    for train, test in StratifiedKFold(n_splits=k, shuffle=True, random_state=seed + 1).split(oof, y):
        if np.unique(y[train]).size < len(queues):  # a queue absent from this part: the full layer's scores
            stacked[test] = layer.transform(oof[test])
            continue
        stacked[test] = ScoreLayer.fit(oof[train], y[train], queues).transform(oof[test])
    return StackedScores(stacked, queues, layer, None, oof)


def fit_layer(encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], spec: ModelSpec,
              folds: int = 5, seed: int = 0) -> ScoreLayer | None:
    """The score layer for a model counted on all of `batch`: fitted on out-of-fold scores of the same items."""
    if not spec.score_layer or too_small(labels, len(set(labels))) is not None:
        return None
    oof, queues = out_of_fold_jll(encoder, batch, labels, spec, folds, seed)
    qi = {q: i for i, q in enumerate(queues)}
    return ScoreLayer.fit(oof, np.array([qi[lab] for lab in labels]), queues)


@dataclass(frozen=True)
class SettingScore:
    """Cross-validated figures of one setting."""

    spec: ModelSpec
    accuracy: float
    macro_f1: float
    log_loss: float
    coverage: float = 0.0  # out-of-fold share auto-routed at the targets, cutoffs fitted as training fits them

    def to_dict(self) -> dict[str, object]:
        return {"spec": self.spec.to_dict(), "accuracy": self.accuracy, "macro_f1": self.macro_f1,
                "log_loss": self.log_loss, "coverage": self.coverage}


def rank_key(coverage: float, macro_f1: float, log_loss: float) -> tuple[float, float, float]:
    """The one criterion `train` and `tune` rank settings by (higher is better): the share auto-routed at the
    targets with the promise kept (the cutoffs are fitted so that it is), then macro-F1, then lower log loss.
    Rounded so that a difference below a millionth is a tie, not noise deciding."""
    return (round(coverage, 6), round(macro_f1, 6), -round(log_loss, 9))


def coverage_noise(coverage: float, n_items: int) -> float:
    """One standard error of an out-of-fold coverage measured on `n_items` items (binomial: sqrt(c (1 - c) / n))."""
    return float(np.sqrt(max(coverage * (1.0 - coverage), 0.0) / max(n_items, 1)))


def ranked(rows: Sequence[T], figures: Callable[[T], tuple[float, float, float]], n_items: int) -> list[T]:
    """Rows best first by the one criterion `train`, `tune` and the score layer's on/off share.

    `figures(row)` gives (coverage at the targets, macro-F1, log loss) on `n_items` out-of-fold items. Coverage
    comes first (the promise kept, the most work taken off the desk), but a coverage within one standard error
    of the best is a tie, not a win: among those rows the higher macro-F1 (then the lower log loss) leads, and the
    rest follow by `rank_key`. This is the one-standard-error rule of model selection (Breiman, Friedman, Olshen
    and Stone 1984, Classification and Regression Trees, from memory), read here as "a difference the noise can
    make decides nothing". The sort is stable: of two rows equal on every figure the earlier stays first."""
    if not rows:
        return []
    best = max(figures(r)[0] for r in rows)
    floor = best - coverage_noise(best, n_items)
    near = [r for r in rows if figures(r)[0] >= floor]
    rest = [r for r in rows if figures(r)[0] < floor]
    near.sort(key=lambda r: (round(figures(r)[1], 6), -round(figures(r)[2], 9)), reverse=True)
    rest.sort(key=lambda r: rank_key(*figures(r)), reverse=True)
    return near + rest


def coverage_at_targets(jll: np.ndarray, queues: Sequence[str], labels: Sequence[str],
                        rules: CutoffRules) -> float:
    """The share of out-of-fold items auto-routed at the targets, calibrated and cut exactly as training does
    (measure.fit_policy: temperature, isotonic map with enough items, own and pooled cutoff bounds)."""
    qi = {q: i for i, q in enumerate(queues)}
    y = np.array([qi[lab] for lab in labels])
    _policy, _calibration, cutoffs = fit_policy(jll, y, queues, rules)
    return sum(c.get("routed", 0) for q, c in cutoffs.items() if q not in rules.never_auto) / max(len(y), 1)


def score_jll(jll: np.ndarray, queues: list[str], labels: Sequence[str]) -> tuple[float, float, float]:
    """Accuracy, macro-F1 and log loss (of the raw, uncalibrated posterior) of out-of-fold scores."""
    index = {q: i for i, q in enumerate(queues)}
    y = np.array([index[lab] for lab in labels])
    pred = jll.argmax(axis=1)
    logp = log_posterior(jll)
    ll = float(-np.mean(np.maximum(logp[np.arange(len(y)), y], np.log(1e-15))))
    return (float(accuracy_score(y, pred)), float(f1_score(y, pred, average="macro", labels=range(len(queues)))), ll)


def quick_grid(base: ModelSpec) -> list[ModelSpec]:
    """The settings `train` tries when the config leaves the model on 'auto': every text model at three
    smoothings (the token-count transforms stay with `tune`: counted on a cluster their idf sums differ from
    one process in the last bits, which the engine's exactness check does not allow yet)."""
    return [replace(base, text_model=m, alpha_text=a) for m in TEXT_MODELS for a in (0.1, 0.5, 1.0)]


def select(encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], specs: Sequence[ModelSpec],
           folds: int = 3, seed: int = 0,
           before_each: Callable[[int, ModelSpec], None] | None = None, rules: CutoffRules | None = None,
           budget_seconds: float | None = None) -> tuple[SettingScore, list[SettingScore]]:
    """Score every setting by cross-validation; the best by `rank_key` (coverage at the targets under `rules`,
    then macro-F1, then log loss; without rules coverage is not measured and ties at 0).

    `before_each(i, spec)` runs before each setting: for progress, and a place to raise to cancel. With a
    `budget_seconds`, settings after the budget is spent are skipped (the first is always scored)."""
    scores = []
    start = time.perf_counter()
    for i, spec in enumerate(specs):
        if budget_seconds is not None and i > 0 and time.perf_counter() - start > budget_seconds:
            break
        if before_each is not None:
            before_each(i, spec)
        jll, queues = out_of_fold_jll(encoder, batch, labels, spec, folds, seed)
        acc, f1, ll = score_jll(jll, queues, labels)
        cov = coverage_at_targets(jll, queues, labels, rules) if rules is not None else 0.0
        scores.append(SettingScore(spec, acc, f1, ll, cov))
    return best_setting(scores, len(labels)), scores


def best_setting(scores: Sequence[SettingScore], n_items: int) -> SettingScore:
    """The best setting by `ranked` (coverage at the targets within its noise, then macro-F1, then log loss): the
    one rule every grid uses (coverage ties at 0 where it was not measured)."""
    return ranked(scores, lambda s: (s.coverage, s.macro_f1, s.log_loss), n_items)[0]
