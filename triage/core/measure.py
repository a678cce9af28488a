"""Measuring a model setting honestly: the time split, cutoff fitting on out-of-fold scores, reliability
figures, and `Measurement`, the record of one measurement that the scorecard, what-if cutoffs and plots read.

Pure: arrays and records in, figures out. The application layer reads the config and the store and hands the
rules over as plain values (`CutoffRules`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any, TypeVar

import numpy as np

from triage.core.calibrate import (
    IsotonicCalibrator,
    TemperatureScaler,
    expected_calibration_error,
    reliability_table,
    softmax_rows,
)
from triage.core.cutoffs import pooled_cutoffs
from triage.core.metrics import Scorecard, precision_coverage_curve, scorecard, solve_cutoff
from triage.core.model import ModelSpec
from triage.core.routing import RoutingPolicy, Verdict, decide

# the newest share of items (by arrival) a time split scores
TEST_SHARE = 0.2

T = TypeVar("T")


@dataclass(frozen=True)
class CutoffRules:
    """The config's rules for cutoffs, as plain values: per-queue targets, pinned cutoffs, never-auto queues."""

    targets: dict[str, float]
    pinned: dict[str, float]
    never_auto: frozenset[str]
    watch_probability: float


def time_split(recs: Sequence[T], share: float = TEST_SHARE) -> tuple[Sequence[T], Sequence[T]]:
    """Older items to fit on and the newest `share` (at least one) to score: recs are in arrival order."""
    n_test = max(1, int(round(len(recs) * share)))
    return recs[: len(recs) - n_test], recs[len(recs) - n_test:]


SPLIT_SEED = 0


def random_split(labels: Sequence[str], share: float = TEST_SHARE,
                 seed: int = SPLIT_SEED) -> tuple[np.ndarray, np.ndarray, bool]:
    """Train and test row indices for items without arrival times: a seeded random split, stratified by queue
    (scikit-learn's train_test_split) when every queue has two items or more and the test part can hold one
    of each; else unstratified. Returns (train rows, test rows, stratified). Ids are not an order: where
    they are codes, the "last" 20% by id is another queue mix altogether."""
    from sklearn.model_selection import train_test_split

    n = len(labels)
    rows = np.arange(n)
    n_test = max(1, int(round(n * share)))
    _, counts = np.unique(np.asarray(labels, dtype=object).astype(str), return_counts=True)
    stratified = bool(counts.min() >= 2 and n_test >= len(counts) and n - n_test >= len(counts))
    train, test = train_test_split(rows, test_size=n_test, random_state=seed,
                                   stratify=np.asarray(labels, dtype=object).astype(str) if stratified else None)
    return np.sort(train), np.sort(test), stratified


def _table(conf: np.ndarray, correct: np.ndarray) -> list[dict[str, Any]]:
    return [vars(b) if hasattr(b, "__dict__") else b._asdict() for b in reliability_table(conf, correct)]


def reliability_figures(raw: np.ndarray, cal: np.ndarray, conf: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """ECE and reliability tables of the raw posterior, the temperature-scaled one and the final routing
    confidence `conf` (isotonic when fitted) for rows with true queue index `y` (-1: a queue the model lacks)."""
    rows = np.arange(len(y))
    top_raw, top = raw.argmax(axis=1), cal.argmax(axis=1)
    raw_conf, temp_conf = raw[rows, top_raw], cal[rows, top]
    ok_raw, ok = top_raw == y, top == y
    return {
        "ece_before": expected_calibration_error(raw_conf, ok_raw),
        "ece_temperature": expected_calibration_error(temp_conf, ok),
        "ece_after": expected_calibration_error(conf, ok),
        "reliability_before": _table(raw_conf, ok_raw),
        "reliability_temperature": _table(temp_conf, ok),
        "reliability": _table(conf, ok),  # the confidences routing compares with the cutoffs
    }


def fit_policy(oof: np.ndarray, y: np.ndarray, queues: Sequence[str],
               rules: CutoffRules) -> tuple[RoutingPolicy, dict[str, Any], dict[str, dict[str, Any]]]:
    """From out-of-fold joint log-likelihoods: a temperature, then (with IsotonicCalibrator.MIN_ITEMS items or
    more) an isotonic map of the top queue's temperature-scaled probability, then per queue the lowest cutoff
    on that final confidence whose Wilson lower bound of precision reaches the queue's target, or, where lower,
    whose pooled (empirical-Bayes) bound does (core/cutoffs.py: a small queue borrows strength from the others)."""
    scaler = TemperatureScaler().fit(oof, y)
    cal = scaler.transform(oof)
    top = cal.argmax(axis=1)
    p_top = cal[np.arange(len(y)), top]
    correct = top == y
    iso: IsotonicCalibrator | None = None
    if len(y) >= IsotonicCalibrator.MIN_ITEMS:
        iso = IsotonicCalibrator().fit(p_top, correct)
        assert iso.x_thresholds_ is not None
        iso_info: dict[str, Any] = {"used": True, "items": len(y), "steps": int(iso.x_thresholds_.size)}
    else:
        iso_info = {"used": False, "why": f"{len(y)} out-of-fold items, fewer than the "
                    f"{IsotonicCalibrator.MIN_ITEMS} an isotonic map needs; temperature scaling only"}
    conf = iso.transform(p_top) if iso is not None else p_top
    calibration: dict[str, Any] = {"temperature": scaler.temperature, "isotonic": iso_info,
                                   **reliability_figures(softmax_rows(oof), cal, conf, y)}
    calibration["ece_isotonic"] = calibration["ece_after"] if iso is not None else None
    never = rules.never_auto
    cutoffs: dict[str, float | None] = {}
    cutoff_info: dict[str, dict[str, Any]] = {}
    pooled = pooled_cutoffs(conf, top, correct, queues, rules.targets, skip=set(never) | set(rules.pinned))
    for i, q in enumerate(queues):
        target = rules.targets[q]
        mine = top == i
        if q in rules.pinned:
            cutoffs[q] = rules.pinned[q]
            cutoff_info[q] = {"cutoff": rules.pinned[q], "fixed": True, "target": target,
                              "routed": int((conf[mine] >= rules.pinned[q]).sum()) if q not in never else 0}
            continue
        choice = solve_cutoff(conf[mine], correct[mine], target)
        cutoffs[q] = None if q in never else choice.cutoff
        cutoff_info[q] = {"cutoff": choice.cutoff, "target": choice.target, "precision": choice.precision,
                          "lower_bound": choice.lower_bound, "coverage": choice.coverage,
                          "routed": choice.routed, "never_auto": q in never, "method": "own Wilson bound"}
        pc = pooled.get(q)
        if q not in never and pc is not None and pc.cutoff is not None and (choice.cutoff is None
                                                                            or pc.cutoff < choice.cutoff):
            # the pooled estimate (core/cutoffs.py) opens the queue lower than its own items alone can
            cutoffs[q] = pc.cutoff
            cutoff_info[q].update({"cutoff": pc.cutoff, "precision": pc.precision, "lower_bound": pc.lower_bound,
                                   "coverage": pc.coverage, "routed": pc.routed,
                                   "method": "pooled across queues (beta-binomial empirical Bayes)",
                                   "prior_mean": pc.prior_mean, "prior_strength": pc.prior_strength})
        elif cutoffs[q] is None and q not in never and pc is not None and pc.why:
            cutoff_info[q]["why"] = pc.why
    policy = RoutingPolicy(cutoffs=cutoffs, never_auto=never, watch_probability=rules.watch_probability,
                           temperature=scaler.temperature, isotonic=iso)
    return policy, calibration, cutoff_info


def scored_confidence(verdicts: Sequence[Verdict]) -> np.ndarray:
    """Confidences for the scorecard; an item held by a safeguard (watch word or watch probability) scores -1,
    below every cutoff, so the scorecard's own cutoff rule counts it as held, as routing did."""
    return np.array([-1.0 if v.held_by is not None and v.held_by.safeguard else v.confidence for v in verdicts])


@dataclass
class Measurement:
    """An honest measurement of one model setting on the current labels."""

    spec: ModelSpec
    policy: RoutingPolicy
    scorecard: Scorecard
    calibration: dict[str, Any]
    cutoffs: dict[str, dict[str, Any]]
    split: dict[str, Any]
    # the test rows behind the scorecard, so cutoffs can be moved and lift computed without refitting
    test_ids: list[str] = field(default_factory=list)
    test_labels: list[str] = field(default_factory=list)
    test_probs: np.ndarray | None = None  # (n, len(model_queues)) calibrated probabilities
    model_queues: list[str] = field(default_factory=list)
    test_hits: list[list[str]] | None = None  # watch-word hits per test row
    # k-fold split only: the outer fold of each test row, and each fold's own policy (calibration, cutoffs)
    test_folds: np.ndarray | None = None
    fold_policies: list[RoutingPolicy] = field(default_factory=list)
    test_jll: np.ndarray | None = None  # time split: the test rows' joint log-likelihoods, before calibration
    # with the score layer on: the model's own posteriors, read by the watch-probability rule (k-fold: rows of a
    # fold without a layer hold zeros, so the rule reads the calibrated probabilities there)
    test_watch_probs: np.ndarray | None = None
    # the score layer the scorecard measured (fitted on the measured items' out-of-fold scores; None: off)
    layer: Any = None
    # when routing uses cutoffs other than the solved ones (set by hand): those, and the scorecard at them
    active_cutoffs: dict[str, float | None] | None = None
    at_active: Scorecard | None = None
    # what went wrong quietly while measuring (a queue too rare for the folds), in words for a person
    notes: list[str] = field(default_factory=list)

    def verdicts(self, cutoffs: dict[str, float | None] | None = None) -> list[Verdict]:
        """The routing decisions on the test rows (a k-fold row under its own fold's policy); `cutoffs`
        replaces every policy's cutoffs (what-if)."""
        assert self.test_probs is not None

        def pol(p: RoutingPolicy) -> RoutingPolicy:
            return p if cutoffs is None else replace(p, cutoffs=cutoffs)

        if self.test_folds is None:
            return decide(self.test_probs, self.model_queues, pol(self.policy), self.test_hits,
                          self.test_watch_probs)
        out: list[Verdict | None] = [None] * len(self.test_labels)
        for f, p in enumerate(self.fold_policies):
            rows = np.flatnonzero(self.test_folds == f)
            hits = [self.test_hits[i] for i in rows] if self.test_hits is not None else None
            watch = self.test_watch_probs[rows] if self.test_watch_probs is not None else None
            for i, v in zip(rows, decide(self.test_probs[rows], self.model_queues, pol(p), hits, watch),
                            strict=True):
                out[i] = v
        return [v for v in out if v is not None]

    def precision_coverage(self, max_points: int = 50) -> dict[str, dict[str, list[float]]]:
        """Per queue, the precision-coverage curve of the test rows suggested for it (for plots), thinned
        to at most `max_points` cutoffs (the highest and the lowest always kept)."""
        verdicts = self.verdicts()
        conf = np.array([v.confidence for v in verdicts], dtype=float)
        suggested = np.array([v.suggested for v in verdicts], dtype=object)
        labels = np.array(self.test_labels, dtype=object)
        out: dict[str, dict[str, list[float]]] = {}
        for q in self.model_queues:
            mine = suggested == q
            cut, prec, cov, low = precision_coverage_curve(conf[mine], labels[mine] == q)
            keep = np.unique(np.linspace(0, len(cut) - 1, min(len(cut), max_points)).round().astype(int)) \
                if len(cut) else np.empty(0, dtype=int)
            out[q] = {"cutoff": cut[keep].tolist(), "precision": prec[keep].tolist(),
                      "coverage": cov[keep].tolist(), "lower_bound": low[keep].tolist()}
        return out

    def rescore(self, cutoffs: dict[str, float | None]) -> Scorecard:
        """The scorecard of the same test rows under other cutoffs (what-if for the cutoff keys in the UI)."""
        verdicts = self.verdicts(cutoffs)
        return scorecard(self.test_labels, [v.suggested for v in verdicts], scored_confidence(verdicts),
                         self.scorecard.queues, cutoffs,
                         never_auto=self.policy.never_auto,
                         targets={q.queue: q.target for q in self.scorecard.per_queue})

    def score_under(self, policy: RoutingPolicy) -> Scorecard:
        """The scorecard of a time-split measurement's test rows decided by another policy (its calibration
        and its cutoffs), as routing under that policy would decide them."""
        assert self.test_jll is not None
        verdicts = decide(policy.calibrated(self.test_jll), self.model_queues, policy, self.test_hits,
                          self.test_watch_probs)
        return scorecard(self.test_labels, [v.suggested for v in verdicts], scored_confidence(verdicts),
                         self.scorecard.queues, policy.cutoffs, never_auto=policy.never_auto,
                         targets={q.queue: q.target for q in self.scorecard.per_queue})
