"""Model settings and cutoff rules from the config, and whether the score layer stays: the choices `train`,
`evaluate` and `tune` share, so each is decided in one place."""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from triage.config import Config
from triage.core.measure import (
    CutoffRules,
)
from triage.core.measure import fit_policy as fit_policy_rules
from triage.core.model import ModelSpec
from triage.core.routing import RoutingPolicy
from triage.core.selection import (
    StackedScores,
    coverage_at_targets,
    ranked,
    score_jll,
)

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

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
        alpha_fields=float(m.alpha_fields), prior=m.prior, bigrams=m.bigrams is True, min_count=int(m.min_count),
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
    """The layer on or off by the one selection criterion (selection.ranked) on the same out-of-fold items:
    it stays unless the naive Bayes scores alone rank first (a coverage within one standard error is a tie,
    decided by macro-F1). `score_layer = true` keeps it whatever
    the ranking (the user asked for it; only too little data turns it off then)."""
    if stacked.layer is None or stacked.base is None or ws.config.model.score_layer is True:
        return stacked
    rules = cutoff_rules(ws.config, stacked.queues)
    figures = []
    for scores in (stacked.scores, stacked.base):
        _acc, f1, ll = score_jll(scores, stacked.queues, labels)
        figures.append((coverage_at_targets(scores, stacked.queues, labels, rules), f1, ll))
    with_layer, without = figures
    if ranked([with_layer, without], lambda f: f, len(labels))[0] is with_layer:
        return stacked
    why = (f"off: on the out-of-fold items it auto-routed {with_layer[0]:.1%} (macro-F1 {with_layer[1]:.3f}) "
           f"against {without[0]:.1%} (macro-F1 {without[1]:.3f}) without it")
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
