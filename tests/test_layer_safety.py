"""The score layer never weakens a safety rule nor routes on scores its cutoffs never measured.

References: the routing rules of triage's README (a never-auto queue with a chance of at least
`watch_probability` holds the item; nothing is routed on a calibration that does not describe the scores), and
scikit-learn's LogisticRegression, whose ConvergenceWarning at an iteration limit the layer reports.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegression

from triage.app.routing import layer_waits
from triage.core.model import ModelSpec, NaiveBayes, log_posterior
from triage.core.routing import HeldBy, RoutingPolicy, decide
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.stack import ScoreLayer

SCHEMA = Schema(fields=(FieldSpec("body", FieldRole.TEXT),), id="id", label="queue")
QUEUES = ["billing", "fault", "safety"]
ITEMS = [{"body": t} for t in ("invoice refund late", "invoice charge", "refund twice", "panel dead", "panel error",
                               "inverter error", "smoke battery", "battery swelling smoke", "burning smell")]
LABELS = ["billing"] * 3 + ["fault"] * 3 + ["safety"] * 3


def _model_with_layer(intercept: list[float]) -> NaiveBayes:
    model = NaiveBayes.fit(SCHEMA, ITEMS, LABELS, ModelSpec(score_layer=True))
    model.layer_ = ScoreLayer(tuple(model.queues), np.eye(3), np.array(intercept, dtype=float), 1.0)
    return model


def test_a_layer_that_talks_a_never_auto_queue_down_does_not_lift_the_hold() -> None:
    model = _model_with_layer([8.0, 0.0, -30.0])  # the layer all but rules out "safety"
    batch = model.encoder.transform([{"body": "invoice smoke"}])
    policy = RoutingPolicy({q: 0.0 for q in QUEUES}, never_auto=frozenset({"safety"}), watch_probability=0.10)
    layered = policy.calibrated(model.joint_log_likelihood(batch))
    base = model.watch_probabilities(batch)
    assert base is not None
    np.testing.assert_allclose(base, np.exp(log_posterior(model.base_scores(batch))), atol=1e-12)
    s = QUEUES.index("safety")
    assert layered[0, s] < 0.10 <= base[0, s]  # the case: the layer alone would let it through
    assert decide(layered, model.queues, policy)[0].held_by is None
    verdict = decide(layered, model.queues, policy, None, base)[0]
    assert verdict.held_by is HeldBy.WATCH_PROBABILITY and verdict.watch == ("safety",)
    # without a layer there is nothing else to read
    model.layer_ = None
    assert model.watch_probabilities(batch) is None


def test_a_new_queue_from_a_correction_holds_what_the_layer_cutoffs_would_route() -> None:
    model = _model_with_layer([0.0, 0.0, 0.0])
    policy = RoutingPolicy({q: 0.0 for q in QUEUES}, never_auto=frozenset({"safety"}))
    probe = [{"body": "invoice refund"}, {"body": "smoke"}]
    routed = decide(policy.calibrated(model.joint_log_likelihood(model.encoder.transform(probe))), model.queues,
                    policy)
    assert routed[0].queue == "billing" and not model.layer_waits
    assert layer_waits(routed, model) == routed  # the layer applies: nothing changes
    model.learn({"body": "warranty claim form"}, "warranty")
    assert model.layer_waits and not model.layer_active
    batch = model.encoder.transform(probe)
    verdicts = layer_waits(decide(policy.calibrated(model.joint_log_likelihood(batch)), model.queues, policy),
                           model)
    assert verdicts[0].queue is None and verdicts[0].held_by is HeldBy.NEW_QUEUE
    assert "warranty" in verdicts[0].reason and "train" in verdicts[0].reason
    assert verdicts[1].held_by is HeldBy.NEVER_AUTO  # a safety hold keeps its own reason


def test_a_layer_stopped_at_its_iteration_limit_says_so() -> None:
    rng = np.random.default_rng(0)
    scores = rng.normal(size=(600, 3)) * 5
    y = np.argmax(scores + rng.normal(size=(600, 3)) * 3, axis=1)
    z = scores - scores.mean(axis=1, keepdims=True)
    with pytest.warns(ConvergenceWarning):  # scikit-learn's own verdict on one iteration
        LogisticRegression(max_iter=1, tol=1e-3).fit(z / z.std(), y)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ConvergenceWarning)  # recorded by the layer, never raised or dropped
        short = ScoreLayer.fit(scores, y, QUEUES, max_iter=1)
    assert not short.converged and "iteration limit" in (short.note() or "")
    again = ScoreLayer.from_parts(short.to_manifest(), short.to_arrays())
    assert not again.converged
    full = ScoreLayer.fit(scores, y, QUEUES)
    assert full.converged and full.note() is None


def test_a_kfold_measurement_reads_the_models_own_chance_for_the_safety_rule() -> None:
    """k-fold rows are decided under their own fold's policy, with the same safety rule as routing: the larger of
    the layer's and the model's own posterior for a never-auto queue (README's routing rules)."""
    from triage.core.measure import Measurement
    from triage.core.metrics import scorecard

    model = _model_with_layer([8.0, 0.0, -30.0])  # the layer all but rules out "safety"
    batch = model.encoder.transform([{"body": "invoice smoke"}, {"body": "invoice refund"}])
    policy = RoutingPolicy({q: 0.0 for q in QUEUES}, never_auto=frozenset({"safety"}), watch_probability=0.10)
    probs = policy.calibrated(model.joint_log_likelihood(batch))
    own = model.watch_probabilities(batch)
    assert own is not None and probs[0, 2] < 0.10 <= own[0, 2]
    meas = Measurement(model.spec, policy, scorecard([], [], np.empty(0), QUEUES, {}), {}, {}, {},
                       ["a", "b"], ["safety", "billing"], probs, QUEUES, None, np.array([0, 1]), [policy, policy])
    assert meas.verdicts()[0].held_by is None  # the layer's chance alone would let it through
    meas.test_watch_probs = own
    first, second = meas.verdicts()
    assert first.held_by is HeldBy.WATCH_PROBABILITY and second.queue == "billing"
