"""The event models against published worked examples.

- Manning, Raghavan & Schütze, Introduction to Information Retrieval (Cambridge UP, 2008), chapter 13:
  Example 13.1 (multinomial NB, add-one smoothing) and Example 13.2 (Bernoulli NB) on the same four documents.
- Mitchell, Machine Learning (McGraw-Hill, 1997), section 6.9.1: naive Bayes on the PlayTennis data of table 3.2.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.naive_bayes import CategoricalNB

from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema

# ----- Introduction to Information Retrieval, ch. 13 ---------------------------------------------------------
IIR_SCHEMA = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")
IIR_TRAIN = [
    ({"text": "Chinese Beijing Chinese"}, "china"),  # d1
    ({"text": "Chinese Chinese Shanghai"}, "china"),  # d2
    ({"text": "Chinese Macao"}, "china"),  # d3
    ({"text": "Tokyo Japan Chinese"}, "not-china"),  # d4
]
IIR_TEST = {"text": "Chinese Chinese Chinese Tokyo Japan"}  # d5


def _iir(text_model: str) -> NaiveBayes:
    items, labels = zip(*IIR_TRAIN, strict=True)
    return NaiveBayes.fit(IIR_SCHEMA, list(items), list(labels), ModelSpec(text_model=text_model, alpha_text=1.0))


def test_iir_example_13_1_multinomial() -> None:
    m = _iir("multinomial")
    assert m.queues == ["china", "not-china"]
    assert m.encoder.n_terms == 6  # the book's vocabulary: Chinese Beijing Shanghai Macao Tokyo Japan
    c, nc = m.queues.index("china"), m.queues.index("not-china")

    # IIR Example 13.1: prior 3/4 and 1/4
    assert np.exp(m.log_prior_[c]) == pytest.approx(3 / 4, abs=1e-12)
    assert np.exp(m.log_prior_[nc]) == pytest.approx(1 / 4, abs=1e-12)

    # IIR Example 13.1: conditional probabilities, read off the model's table (P(t|c) = exp(A[c,t] + B[c]))
    def p(term: str, q: int) -> float:
        return float(np.exp(m.A_[q, m.encoder.vocabulary_[term]] + m.B_[q]))

    assert p("chinese", c) == pytest.approx(3 / 7, abs=1e-12)  # (5+1)/(8+6)
    assert p("tokyo", c) == pytest.approx(1 / 14, abs=1e-12)  # (0+1)/(8+6)
    assert p("japan", c) == pytest.approx(1 / 14, abs=1e-12)
    assert p("chinese", nc) == pytest.approx(2 / 9, abs=1e-12)  # (1+1)/(3+6)
    assert p("tokyo", nc) == pytest.approx(2 / 9, abs=1e-12)
    assert p("japan", nc) == pytest.approx(2 / 9, abs=1e-12)
    # the same from the raw counts
    n = m.counts.token_count_
    assert (n[c, m.encoder.vocabulary_["chinese"]] + 1) / (n[c].sum() + 6) == pytest.approx(3 / 7, abs=1e-12)

    # IIR Example 13.1: P(c|d5) ∝ 3/4 · (3/7)^3 · 1/14 · 1/14 ≈ 0.0003; P(not c|d5) ∝ 1/4 · (2/9)^3 · 2/9 · 2/9 ≈ 0.0001
    batch = m.encoder.transform([IIR_TEST])
    scores = np.exp(m.joint_log_likelihood(batch))[0]
    assert round(float(scores[c]), 4) == 0.0003
    assert round(float(scores[nc]), 4) == 0.0001
    assert scores[c] == pytest.approx(3 / 4 * (3 / 7) ** 3 * (1 / 14) ** 2, rel=1e-12)
    assert scores[nc] == pytest.approx(1 / 4 * (2 / 9) ** 5, rel=1e-12)
    assert m.predict(batch) == ["china"]
    # the single-item path agrees with the batch path
    one = m.joint_log_likelihood_one(m.encoder.encode(IIR_TEST))
    np.testing.assert_allclose(one, np.log(scores), rtol=0, atol=1e-12)


def test_iir_example_13_2_bernoulli() -> None:
    m = _iir("bernoulli")
    assert m.encoder.n_terms == 6  # IIR 13.2 uses the six training terms as the vocabulary
    c, nc = m.queues.index("china"), m.queues.index("not-china")

    # IIR Example 13.2: P(t|c) = (df + 1) / (N_c + 2); the model keeps A = logit P(t|c)
    def p(term: str, q: int) -> float:
        return float(1.0 / (1.0 + np.exp(-m.A_[q, m.encoder.vocabulary_[term]])))

    assert p("chinese", c) == pytest.approx(4 / 5, abs=1e-12)
    assert p("japan", c) == pytest.approx(1 / 5, abs=1e-12)
    assert p("tokyo", c) == pytest.approx(1 / 5, abs=1e-12)
    for t in ("beijing", "macao", "shanghai"):
        assert p(t, c) == pytest.approx(2 / 5, abs=1e-12)
        assert p(t, nc) == pytest.approx(1 / 3, abs=1e-12)
    for t in ("chinese", "japan", "tokyo"):
        assert p(t, nc) == pytest.approx(2 / 3, abs=1e-12)

    # IIR Example 13.2: P(c|d5) ∝ 3/4 · 4/5 · 1/5 · 1/5 · (1-2/5)^3 = 0.005184
    #                   P(not c|d5) ∝ 1/4 · 2/3 · 2/3 · 2/3 · (1-1/3)^3 ≈ 0.021948
    batch = m.encoder.transform([IIR_TEST])
    scores = np.exp(m.joint_log_likelihood(batch))[0]
    assert scores[c] == pytest.approx(0.005184, abs=5e-7)
    assert scores[nc] == pytest.approx(0.021948, abs=5e-7)
    assert m.predict(batch) == ["not-china"]
    one = m.joint_log_likelihood_one(m.encoder.encode(IIR_TEST))
    np.testing.assert_allclose(one, np.log(scores), rtol=0, atol=1e-12)


# ----- Mitchell, Machine Learning (1997), table 3.2 and section 6.9.1 ----------------------------------------
# PlayTennis, days D1..D14 (outlook, temperature, humidity, wind, play). Written out from memory; the totals
# (9 yes / 5 no) and the conditional probabilities the book quotes in 6.9.1 (P(strong|yes) = 3/9,
# P(strong|no) = 3/5) are checked below, as are the book's scores.
PLAY_TENNIS = [
    ("sunny", "hot", "high", "weak", "no"),
    ("sunny", "hot", "high", "strong", "no"),
    ("overcast", "hot", "high", "weak", "yes"),
    ("rain", "mild", "high", "weak", "yes"),
    ("rain", "cool", "normal", "weak", "yes"),
    ("rain", "cool", "normal", "strong", "no"),
    ("overcast", "cool", "normal", "strong", "yes"),
    ("sunny", "mild", "high", "weak", "no"),
    ("sunny", "cool", "normal", "weak", "yes"),
    ("rain", "mild", "normal", "weak", "yes"),
    ("sunny", "mild", "normal", "strong", "yes"),
    ("overcast", "mild", "high", "strong", "yes"),
    ("overcast", "hot", "normal", "weak", "yes"),
    ("rain", "mild", "high", "strong", "no"),
]
ATTRS = ("outlook", "temperature", "humidity", "wind")
TENNIS_SCHEMA = Schema(fields=tuple(FieldSpec(a, FieldRole.CATEGORY) for a in ATTRS), id="day", label="play")
QUERY = {"outlook": "sunny", "temperature": "cool", "humidity": "high", "wind": "strong"}


def _tennis(alpha: float) -> NaiveBayes:
    items = [dict(zip(ATTRS, row[:4], strict=True)) for row in PLAY_TENNIS]
    labels = [row[4] for row in PLAY_TENNIS]
    return NaiveBayes.fit(TENNIS_SCHEMA, items, labels, ModelSpec(alpha_fields=alpha))


def test_play_tennis_table_totals() -> None:
    assert len(PLAY_TENNIS) == 14
    assert sum(r[4] == "yes" for r in PLAY_TENNIS) == 9
    assert sum(r[4] == "no" for r in PLAY_TENNIS) == 5
    m = _tennis(0.0)
    np.testing.assert_array_equal(m.counts.class_count_, [5, 9])  # queues in name order: no, yes
    wind = m.field_log_[ATTRS.index("wind")]
    strong = m.encoder.level_index_["wind"]["strong"]
    # Mitchell 6.9.1: P(wind=strong | yes) = 3/9 = .33, P(wind=strong | no) = 3/5 = .60
    assert np.exp(wind[m.queues.index("yes"), strong]) == pytest.approx(3 / 9, abs=1e-12)
    assert np.exp(wind[m.queues.index("no"), strong]) == pytest.approx(3 / 5, abs=1e-12)


def test_mitchell_unsmoothed_scores() -> None:
    m = _tennis(0.0)
    batch = m.encoder.transform([QUERY])
    scores = np.exp(m.joint_log_likelihood(batch))[0]
    yes, no = m.queues.index("yes"), m.queues.index("no")
    # Mitchell 6.9.1: P(yes)·P(sunny|yes)·P(cool|yes)·P(high|yes)·P(strong|yes) = .0053,
    # P(no)·... = .0206; normalised, P(no | query) = .795
    assert round(float(scores[yes]), 4) == 0.0053
    assert round(float(scores[no]), 4) == 0.0206
    post = m.predict_proba(batch)[0]
    assert round(float(post[no]), 3) == 0.795
    assert m.predict(batch) == ["no"]
    # an unsmoothed zero (overcast never seen with "no") is -inf, never NaN
    zero = m.encoder.transform([{**QUERY, "outlook": "overcast"}])
    jll = m.joint_log_likelihood(zero)[0]
    assert jll[no] == -np.inf and np.isfinite(jll[yes])
    np.testing.assert_allclose(m.predict_proba(zero)[0], [0.0, 1.0])


def test_mitchell_with_add_one_equals_categorical_nb() -> None:
    """scikit-learn CategoricalNB as the reference for alpha = 1.

    Our tables have one more column per field than the values seen in training: the explicit unseen bucket
    (code K for a field with K training values). Laplace smoothing spreads alpha over every column, so the
    denominator is n_c + alpha * (K + 1). CategoricalNB gives the same denominator when told
    min_categories = K + 1, i.e. when it too reserves a never-observed category per field.
    """
    m = _tennis(1.0)
    items = [dict(zip(ATTRS, row[:4], strict=True)) for row in PLAY_TENNIS]
    train = m.encoder.transform(items)
    ks = [len(m.encoder.levels_[a]) for a in ATTRS]
    assert ks == [3, 3, 2, 2]
    ref = CategoricalNB(alpha=1.0, min_categories=[k + 1 for k in ks]).fit(
        train.codes, [r[4] for r in PLAY_TENNIS]
    )
    assert list(ref.classes_) == m.queues

    queries = [QUERY, {**QUERY, "outlook": "foggy"}, {**QUERY, "wind": "gale", "humidity": "low"}, items[2]]
    batch = m.encoder.transform(queries)
    np.testing.assert_allclose(m.predict_log_proba(batch), ref.predict_log_proba(batch.codes), rtol=0, atol=1e-9)
    np.testing.assert_allclose(m.joint_log_likelihood(batch), ref.predict_joint_log_proba(batch.codes),
                               rtol=0, atol=1e-9)


def test_unseen_value_gets_the_unseen_bucket() -> None:
    m = _tennis(1.0)
    item = m.encoder.encode({**QUERY, "outlook": "foggy"})
    k = len(m.encoder.levels_["outlook"])
    assert item.codes[0] == k  # the unseen bucket, not any training value's code 0..K-1
    assert "foggy" not in m.encoder.levels_["outlook"]
    assert m.encoder.field_labels(TENNIS_SCHEMA.fields[0])[k] == "(unseen value)"
    jll = m.joint_log_likelihood_one(item)
    assert np.all(np.isfinite(jll))
    # add-one: the unseen bucket holds alpha / (n_c + alpha (K+1)) under every queue
    for q, n_c in enumerate(m.counts.class_count_):
        assert m.field_log_[0][q, k] == pytest.approx(math.log(1 / (n_c + k + 1)), abs=1e-12)
    # unsmoothed, an unseen value is impossible everywhere; the posterior is then uniform, not NaN
    m0 = _tennis(0.0)
    post = m0.predict_proba(m0.encoder.transform([{**QUERY, "outlook": "foggy"}]))
    assert not np.isnan(post).any()
    np.testing.assert_allclose(post.sum(axis=1), 1.0)
