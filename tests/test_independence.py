"""The words the independence check looks at are the most informative ones, by mutual information.

Reference: scikit-learn's `mutual_info_score` (natural log) of word presence against the queue.
"""

from __future__ import annotations

import numpy as np
from sklearn.metrics import mutual_info_score

from triage.app.tuning import _informative_terms
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema


def test_informative_terms_rank_words_by_mutual_information_with_the_queue() -> None:
    rng = np.random.default_rng(4)
    words = ["refund", "invoice", "app", "login", "smoke", "the", "a", "and", "please", "install"]
    labels = [str(rng.choice(["billing", "app", "safety"])) for _ in range(600)]
    cue = {"billing": ["refund", "invoice"], "app": ["app", "login"], "safety": ["smoke"]}
    texts = [" ".join(list(rng.choice(words[5:], size=4)) + ([str(rng.choice(cue[q]))] if rng.random() < 0.7 else []))
             for q in labels]
    schema = Schema(fields=(FieldSpec("body", FieldRole.TEXT),), id="id", label="q")
    model = NaiveBayes.fit(schema, [{"body": t} for t in texts], labels, ModelSpec())
    X = model.encoder.transform([{"body": t} for t in texts]).X
    mi = np.array([mutual_info_score(labels, X[:, j].toarray().ravel() > 0) for j in range(model.encoder.n_terms)])
    got = _informative_terms(model.counts.doc_freq_, model.counts.class_count_, 4)
    assert list(got) == list(np.argsort(-mi, kind="stable")[:4])
    assert {model.encoder.terms_[j] for j in got} <= {"refund", "invoice", "app", "login", "smoke"}
