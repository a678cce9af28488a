"""Evidence: the additive terms behind a decision add up exactly to the log-odds gap.

Reference values come from the worked examples in Manning, Raghavan & Schütze, Introduction to Information
Retrieval (2008), ch. 13 (Examples 13.1 and 13.2) and Mitchell, Machine Learning (1997), section 6.9.1: each
term is the log ratio of the probabilities printed there.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from triage.core.evidence import explain
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema

IIR_SCHEMA = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")
IIR_ITEMS = [{"text": "Chinese Beijing Chinese"}, {"text": "Chinese Chinese Shanghai"}, {"text": "Chinese Macao"},
             {"text": "Tokyo Japan Chinese"}]
IIR_LABELS = ["china", "china", "china", "not-china"]
D5 = {"text": "Chinese Chinese Chinese Tokyo Japan"}


def _terms(ev) -> dict[str, float]:
    return {t.feature: t.weight for t in ev.terms}


def test_iir_13_1_evidence_terms() -> None:
    m = NaiveBayes.fit(IIR_SCHEMA, IIR_ITEMS, IIR_LABELS, ModelSpec(text_model="multinomial"))
    ev = explain(m, m.encoder.encode(D5))
    assert (ev.top, ev.runner_up) == ("china", "not-china")
    w = _terms(ev)
    # IIR Example 13.1: P(c) = 3/4, P(not c) = 1/4; P(Chinese|c) = 3/7 vs 2/9 (three times),
    # P(Tokyo|c) = P(Japan|c) = 1/14 vs 2/9
    assert w["base rate"] == pytest.approx(math.log(3), abs=1e-12)
    assert w["chinese"] == pytest.approx(3 * math.log((3 / 7) / (2 / 9)), abs=1e-12)
    assert w["tokyo"] == pytest.approx(math.log((1 / 14) / (2 / 9)), abs=1e-12)
    assert w["japan"] == pytest.approx(math.log((1 / 14) / (2 / 9)), abs=1e-12)
    assert {t.feature: t.count for t in ev.terms if t.kind == "token"} == {"chinese": 3, "tokyo": 1, "japan": 1}
    gap = math.log((3 / 4 * (3 / 7) ** 3 * (1 / 14) ** 2) / (1 / 4 * (2 / 9) ** 5))
    assert ev.gap == pytest.approx(gap, abs=1e-12)
    assert ev.total() == pytest.approx(gap, abs=1e-12)
    assert [t.feature for t in ev.for_top(2)] == ["chinese", "base rate"]
    assert {t.feature for t in ev.against_top()} == {"tokyo", "japan"}


def test_iir_13_2_evidence_terms_include_absent_words() -> None:
    m = NaiveBayes.fit(IIR_SCHEMA, IIR_ITEMS, IIR_LABELS, ModelSpec(text_model="bernoulli"))
    ev = explain(m, m.encoder.encode(D5), absent_detail=3)
    assert (ev.top, ev.runner_up) == ("not-china", "china")
    w = _terms(ev)
    # IIR Example 13.2, with the roles turned round (the top queue is "not China" now):
    # P(Chinese) 2/3 vs 4/5, P(Japan) = P(Tokyo) 2/3 vs 1/5, absent Beijing/Shanghai/Macao (1-1/3) vs (1-2/5)
    assert w["base rate"] == pytest.approx(math.log(1 / 3), abs=1e-12)
    assert w["chinese"] == pytest.approx(math.log((2 / 3) / (4 / 5)), abs=1e-12)
    assert w["tokyo"] == pytest.approx(math.log((2 / 3) / (1 / 5)), abs=1e-12)
    for t in ("beijing", "shanghai", "macao"):
        assert w[f"no '{t}'"] == pytest.approx(math.log((2 / 3) / (3 / 5)), abs=1e-12)
    # IIR 13.2 scores: 1/4 · (2/3)^6 ≈ 0.021948 vs 3/4 · 4/5 · (1/5)^2 · (3/5)^3 = 0.005184
    assert ev.gap == pytest.approx(math.log((1 / 4 * (2 / 3) ** 6) / 0.005184), abs=1e-9)
    assert ev.gap == pytest.approx(math.log(0.021948 / 0.005184), abs=1e-4)
    assert ev.total() == pytest.approx(ev.gap, abs=1e-12)
    # with less detail the other absent words are aggregated and the sum stays exact
    ev1 = explain(m, m.encoder.encode(D5), absent_detail=1)
    assert sum(t.kind == "absent" for t in ev1.terms) == 2
    assert ev1.total() == pytest.approx(ev.gap, abs=1e-12)


def test_mitchell_field_evidence() -> None:
    attrs = ("outlook", "temperature", "humidity", "wind")
    # Mitchell (1997) table 3.2, from memory (checked against the book's 9/5 totals in test_model_reference)
    rows = ["sunny hot high weak no", "sunny hot high strong no", "overcast hot high weak yes",
            "rain mild high weak yes", "rain cool normal weak yes", "rain cool normal strong no",
            "overcast cool normal strong yes", "sunny mild high weak no", "sunny cool normal weak yes",
            "rain mild normal weak yes", "sunny mild normal strong yes", "overcast mild high strong yes",
            "overcast hot normal weak yes", "rain mild high strong no"]
    schema = Schema(fields=tuple(FieldSpec(a, FieldRole.CATEGORY) for a in attrs), id="day", label="play")
    items = [dict(zip(attrs, r.split()[:4], strict=True)) for r in rows]
    m = NaiveBayes.fit(schema, items, [r.split()[4] for r in rows], ModelSpec(alpha_fields=0.0))
    ev = explain(m, m.encoder.encode({"outlook": "sunny", "temperature": "cool", "humidity": "high",
                                      "wind": "strong"}))
    assert (ev.top, ev.runner_up) == ("no", "yes")
    w = _terms(ev)
    # Mitchell 6.9.1: P(strong|no) = 3/5, P(strong|yes) = 3/9; the scores .0206 vs .0053
    assert w["wind = strong"] == pytest.approx(math.log((3 / 5) / (3 / 9)), abs=1e-12)
    assert w["outlook = sunny"] == pytest.approx(math.log((3 / 5) / (2 / 9)), abs=1e-12)
    assert w["base rate"] == pytest.approx(math.log(5 / 9), abs=1e-12)
    assert ev.gap == pytest.approx(math.log(0.0206 / 0.0053), abs=0.01)
    assert ev.total() == pytest.approx(ev.gap, abs=1e-12)


# ----- the sum is exact, for any model and item ---------------------------------------------------------------
SCHEMA = Schema(
    fields=(FieldSpec("subject", FieldRole.TEXT, weight=2.0), FieldSpec("body", FieldRole.TEXT),
            FieldSpec("channel", FieldRole.CATEGORY), FieldSpec("tenure", FieldRole.NUMBER, bins=3)),
    id="id", label="queue",
)
WORDS = ["battery", "invoice", "smoke", "app", "login", "refund", "panel", "late", "never-seen", "order 123456"]
text_st = st.lists(st.sampled_from(WORDS), max_size=6).map(" ".join) | st.none()
item_st = st.fixed_dictionaries({
    "subject": text_st, "body": text_st,
    "channel": st.sampled_from(["email", "phone", "chat", None]),
    "tenure": st.none() | st.integers(min_value=0, max_value=3000),
})


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.tuples(item_st, st.sampled_from(["billing", "fault", "install"])), min_size=2, max_size=12),
    st.lists(item_st | st.just({}) | st.just({"body": "unheard of words"}), min_size=1, max_size=4),
    st.sampled_from(TEXT_MODELS),
    st.sampled_from([0.1, 1.0, 2.5]),
    st.data(),
)
def test_terms_sum_to_the_gap(train, probes, text_model, alpha, data) -> None:
    model = NaiveBayes.fit(SCHEMA, [it for it, _ in train], [lab for _, lab in train],
                           ModelSpec(text_model=text_model, alpha_text=alpha, alpha_fields=alpha))
    for p in probes:
        item = model.encoder.encode(p, allow_missing=True)
        jll = model.joint_log_likelihood_one(item)
        post = model.predict_log_proba(model.encoder.transform([p], allow_missing=True))[0]
        if model.counts.n_queues < 2:
            assert explain(model, item).terms == []
            continue
        ev = explain(model, item)
        assert model.queues.index(ev.top) == int(np.argmax(jll))
        assert ev.gap >= 0
        assert ev.total() == pytest.approx(ev.gap, abs=1e-9)
        # the gap is the log-odds of the two posteriors
        a, b = model.queues.index(ev.top), model.queues.index(ev.runner_up)
        assert ev.gap == pytest.approx(post[a] - post[b], abs=1e-9)
        assert set(ev.unknown_tokens) == {t for t in item.unknown_tokens}
        # any pair of queues, in either order
        qa = data.draw(st.integers(0, model.counts.n_queues - 1))
        qb = data.draw(st.integers(0, model.counts.n_queues - 1).filter(lambda q, qa=qa: q != qa))
        ev2 = explain(model, item, top=qa, runner_up=qb)
        assert ev2.total() == pytest.approx(jll[qa] - jll[qb], abs=1e-9)
        # one prior term, one term per field, one per distinct known token (text models other than Bernoulli)
        kinds = [t.kind for t in ev2.terms]
        assert kinds.count("prior") == 1 and kinds.count("field") == len(SCHEMA.value_fields)
        if text_model != "bernoulli":
            assert kinds.count("token") == item.token_ids.size


def test_one_word_vocabulary_complement_norm() -> None:
    """With one word every normalised complement weight is log 1 / 0 (scikit-learn's ComplementNB(norm=True)
    gives NaN here); the word carries no evidence, so the posterior is the prior and the terms still add up."""
    schema = Schema(fields=(FieldSpec("body", FieldRole.TEXT),), id="id", label="queue")
    items = [{"body": ""}, {"body": ""}, {"body": "battery"}]
    model = NaiveBayes.fit(schema, items, ["billing", "fault", "billing"],
                           ModelSpec(text_model="complement-norm", alpha_text=0.1))
    assert model.encoder.n_terms == 1
    for probe in ({}, {"body": "battery battery"}):
        item = model.encoder.encode(probe, allow_missing=True)
        post = model.predict_proba(model.encoder.transform([probe], allow_missing=True))[0]
        np.testing.assert_allclose(post, [2 / 3, 1 / 3], atol=1e-12)
        ev = explain(model, item)
        assert ev.gap == pytest.approx(math.log(2), abs=1e-12)
        assert ev.total() == pytest.approx(ev.gap, abs=1e-12)
