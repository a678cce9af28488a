"""Batch evidence equals the per-item evidence it speeds up.

Reference: `triage.core.evidence.explain`, whose terms tests/test_evidence.py ties to the published worked
examples (Manning et al. 2008, ch. 13) and to the log-odds gap of the posterior.
"""

from __future__ import annotations

import numpy as np
import pytest

from triage.core.evidence import Contribution, explain, strongest_batch
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema

SCHEMA = Schema(fields=(FieldSpec("subject", FieldRole.TEXT, weight=2.0), FieldSpec("body", FieldRole.TEXT),
                        FieldSpec("channel", FieldRole.CATEGORY), FieldSpec("n", FieldRole.NUMBER, bins=3)),
                id="id", label="q")
WORDS = ["refund", "invoice", "charged", "smoke", "burning", "app", "login", "install", "date", "cancel", "fee"]


def _items(rng: np.random.Generator, n: int) -> list[dict]:
    return [{"subject": " ".join(rng.choice(WORDS, size=rng.integers(0, 4))),
             "body": " ".join(rng.choice(WORDS, size=rng.integers(0, 12))),
             "channel": rng.choice(["email", "phone", None]), "n": float(rng.integers(0, 50))} for _ in range(n)]


@pytest.mark.parametrize("text_model", TEXT_MODELS)
def test_strongest_batch_equals_explain(text_model: str) -> None:
    rng = np.random.default_rng(11)
    train = _items(rng, 300)
    labels = [str(rng.choice(["billing", "safety", "app"])) for _ in train]
    model = NaiveBayes.fit(SCHEMA, train, labels, ModelSpec(text_model=text_model, alpha_text=0.5))
    test = _items(rng, 120) + [{"subject": "", "body": None, "channel": "fax", "n": None}]
    batch = model.encoder.transform(test, allow_missing=True)
    order = np.argsort(-model.joint_log_likelihood(batch), axis=1, kind="stable")
    top, runner = order[:, 0], order[:, 1]
    got = strongest_batch(model, batch, top, runner, k=5)
    for i in range(len(test)):
        ev = explain(model, batch.row(i), int(top[i]), int(runner[i]))
        terms = ev.terms
        if text_model == "bernoulli":  # the batch path shows the absent words as one aggregated term
            absent = sum(t.weight for t in terms if t.kind == "absent")
            terms = [t for t in terms if t.kind != "absent"] + [Contribution("absent", "words the item lacks", absent)]
        want = sorted(terms, key=lambda t: -abs(t.weight))[:5]
        assert [round(t.weight, 9) for t in got[i]] == [round(t.weight, 9) for t in want]
        assert {t.kind for t in got[i]} <= {"token", "field", "prior", "absent"}


@pytest.mark.parametrize("text_model", ["multinomial", "complement", "complement-norm"])
def test_evidence_sums_to_gap_with_transforms(text_model: str) -> None:
    """With tf-log, idf and length normalisation on, the terms still add up to the log-odds gap."""
    rng = np.random.default_rng(5)
    train = _items(rng, 200)
    labels = [str(rng.choice(["billing", "safety", "app"])) for _ in train]
    spec = ModelSpec(text_model=text_model, alpha_text=0.5, tf_log=True, idf=True, length_norm=True)
    model = NaiveBayes.fit(SCHEMA, train, labels, spec)
    batch = model.encoder.transform(_items(rng, 40), allow_missing=True)
    order = np.argsort(-model.joint_log_likelihood(batch), axis=1, kind="stable")
    got = strongest_batch(model, batch, order[:, 0], order[:, 1], k=1000)
    for i in range(len(batch)):
        ev = explain(model, batch.row(i), int(order[i, 0]), int(order[i, 1]))
        assert abs(ev.total() - ev.gap) < 1e-9
        assert abs(sum(t.weight for t in got[i]) - ev.gap) < 1e-9
