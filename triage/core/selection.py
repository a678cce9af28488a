"""Honest measurement of a model setting: out-of-fold scores from one tokenisation pass.

The encoder is fitted once on all rows and every fold reuses its sparse matrix; only the count tables are rebuilt
per fold (a sparse product), which is why a grid of settings costs little more than one fit. The vocabulary
then includes words that occur only in a fold's test rows; they get zero counts in that fold, exactly as an
unseen word would, so no label leaks.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np
from sklearn.metrics import accuracy_score, f1_score
from sklearn.model_selection import StratifiedKFold

from triage.core.encode import EncodedBatch, Encoder
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes, log_posterior


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
class SettingScore:
    """Cross-validated figures of one setting."""

    spec: ModelSpec
    accuracy: float
    macro_f1: float
    log_loss: float

    def to_dict(self) -> dict[str, object]:
        return {"spec": self.spec.to_dict(), "accuracy": self.accuracy, "macro_f1": self.macro_f1,
                "log_loss": self.log_loss}


def score_jll(jll: np.ndarray, queues: list[str], labels: Sequence[str]) -> tuple[float, float, float]:
    """Accuracy, macro-F1 and log loss (of the raw, uncalibrated posterior) of out-of-fold scores."""
    index = {q: i for i, q in enumerate(queues)}
    y = np.array([index[lab] for lab in labels])
    pred = jll.argmax(axis=1)
    logp = log_posterior(jll)
    ll = float(-np.mean(np.maximum(logp[np.arange(len(y)), y], np.log(1e-15))))
    return (float(accuracy_score(y, pred)), float(f1_score(y, pred, average="macro", labels=range(len(queues)))), ll)


def quick_grid(base: ModelSpec) -> list[ModelSpec]:
    """The settings `train` tries when the config leaves the model on 'auto'."""
    return [replace(base, text_model=m, alpha_text=a) for m in TEXT_MODELS for a in (0.1, 0.5, 1.0)]


def select(encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], specs: Sequence[ModelSpec],
           folds: int = 3, seed: int = 0,
           before_each: Callable[[int, ModelSpec], None] | None = None) -> tuple[SettingScore, list[SettingScore]]:
    """Score every setting by cross-validation; the best by macro-F1 (ties: lower log loss).

    `before_each(i, spec)` runs before each setting: for progress, and a place to raise to cancel."""
    scores = []
    for i, spec in enumerate(specs):
        if before_each is not None:
            before_each(i, spec)
        jll, queues = out_of_fold_jll(encoder, batch, labels, spec, folds, seed)
        acc, f1, ll = score_jll(jll, queues, labels)
        scores.append(SettingScore(spec, acc, f1, ll))
    return best_setting(scores), scores


def best_setting(scores: Sequence[SettingScore]) -> SettingScore:
    """The best setting by macro-F1 (ties: lower log loss): the one rule every grid uses."""
    return max(scores, key=lambda s: (round(s.macro_f1, 6), -s.log_loss))
