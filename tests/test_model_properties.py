"""Properties of the model that must hold for any data (hypothesis), and refusals of bad input.

The reference for the learning properties is the definition of the model itself: naive Bayes is a function of
its count tables, so any sequence of learns, forgets and relabels must end in exactly the model that a fresh
fit on the final labelled set gives (with the same encoder, whose vocabulary only grows between trainings).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from triage.core.counts import CountError, CountTables
from triage.core.encode import EncodedItem, Encoder, MissingFieldError
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema

SCHEMA = Schema(
    fields=(
        FieldSpec("subject", FieldRole.TEXT, weight=1.5),
        FieldSpec("body", FieldRole.TEXT),
        FieldSpec("channel", FieldRole.CATEGORY),
        FieldSpec("tenure", FieldRole.NUMBER, bins=3),
    ),
    id="id", label="queue",
)
# the same fields with the subject counted as words and character grams too (the grams are counts like the words)
SCHEMA_GRAMS = Schema(fields=(FieldSpec("subject", FieldRole.TEXT, weight=1.5, pieces="words+grams"),
                              *SCHEMA.fields[1:]), id="id", label="queue")
WORDS = ["battery", "invoice", "smoke", "app", "login", "refund", "panel", "late", "VW-104233", "42"]
NEW_WORDS = ["inverter", "swelling", "wifi"]  # never in the initial training set
CHANNELS = ["email", "phone", "chat"]
QUEUES = ["billing", "fault", "install"]
NEW_QUEUES = ["safety", "cancel"]  # appear only through learns and corrections

text_st = st.lists(st.sampled_from(WORDS + NEW_WORDS), max_size=6).map(" ".join) | st.none()
item_st = st.fixed_dictionaries({
    "subject": text_st,
    "body": text_st,
    "channel": st.sampled_from([*CHANNELS, "web", None]),
    "tenure": st.none() | st.integers(min_value=-5, max_value=4000),
})
initial_st = st.lists(st.tuples(item_st, st.sampled_from(QUEUES)), min_size=2, max_size=12)
op_st = st.one_of(
    st.tuples(st.just("learn"), item_st, st.sampled_from(QUEUES + NEW_QUEUES)),
    st.tuples(st.just("forget"), st.integers(min_value=0, max_value=1000)),
    st.tuples(st.just("relabel"), st.integers(min_value=0, max_value=1000), st.sampled_from(QUEUES + NEW_QUEUES)),
)
spec_st = st.builds(
    ModelSpec,
    text_model=st.sampled_from(TEXT_MODELS),
    alpha_text=st.sampled_from([0.1, 0.5, 1.0, 2.0]),
    alpha_fields=st.sampled_from([0.1, 1.0, 3.0]),
    prior=st.just("fitted"),
)
PROBES = [
    {"subject": "battery smoke", "body": "inverter wifi", "channel": "fax", "tenure": 10},
    {"subject": None, "body": "", "channel": None, "tenure": None},
    {"subject": "totally unseen words", "body": "refund refund", "channel": "email", "tenure": 99999},
]


def _compare_by_name(model: NaiveBayes, fresh: NaiveBayes, items: list[dict]) -> None:
    batch = model.encoder.transform(items, allow_missing=True)
    ours = model.joint_log_likelihood(batch)
    ref = fresh.joint_log_likelihood(fresh.encoder.transform(items, allow_missing=True))
    ours_post, ref_post = model.predict_log_proba(batch), fresh.predict_log_proba(batch)
    for q, name in enumerate(model.queues):
        if name in fresh.queues:
            r = fresh.queues.index(name)
            np.testing.assert_allclose(ours[:, q], ref[:, r], rtol=0, atol=1e-9)
            np.testing.assert_allclose(ours_post[:, q], ref_post[:, r], rtol=0, atol=1e-9)
        else:  # a queue emptied by forgets: holds nothing, so impossible
            assert model.counts.class_count_[q] == 0
            assert np.all(np.isneginf(ours[:, q]))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(initial_st, st.lists(op_st, max_size=12), spec_st, st.sampled_from([SCHEMA, SCHEMA_GRAMS]))
def test_learn_forget_relabel_equals_fresh_fit(initial, ops, spec, schema) -> None:
    items = [it for it, _ in initial]
    labels = [lab for _, lab in initial]
    model = NaiveBayes.fit(schema, items, labels, spec)
    current = list(initial)
    for op in ops:
        if op[0] == "learn":
            model.learn(op[1], op[2])
            current.append((op[1], op[2]))
        elif op[0] == "forget" and len(current) > 1:
            i = op[1] % len(current)
            model.forget(current[i][0], current[i][1])
            del current[i]
        elif op[0] == "relabel":
            i = op[1] % len(current)
            model.relabel(current[i][0], current[i][1], op[2])
            current[i] = (current[i][0], op[2])
    final_items = [it for it, _ in current]
    final_labels = [lab for _, lab in current]
    # a fresh fit with the same (grown) encoder; its queues are the sorted names of the final labels
    fresh = NaiveBayes.fit(schema, final_items, final_labels, spec, encoder=model.encoder)
    assert fresh.queues == sorted(set(final_labels))
    # queues known at fit keep their places; later ones are appended in the order they appeared
    assert model.queues[: len(set(labels))] == sorted(set(labels))
    _compare_by_name(model, fresh, final_items + PROBES)


def test_a_correction_can_create_a_queue() -> None:
    items = [{"subject": "battery", "body": "smoke", "channel": "phone", "tenure": 5},
             {"subject": "invoice", "body": "refund", "channel": "email", "tenure": 500}]
    for text_model in TEXT_MODELS:
        model = NaiveBayes.fit(SCHEMA, items, ["fault", "billing"], ModelSpec(text_model=text_model))
        assert model.queues == ["billing", "fault"]  # sorted at fit
        model.relabel(items[0], "fault", "safety")
        assert model.queues == ["billing", "fault", "safety"]  # appended
        fresh = NaiveBayes.fit(SCHEMA, items, ["safety", "billing"], model.spec, encoder=model.encoder)
        _compare_by_name(model, fresh, items + PROBES)
        post = model.predict_proba(model.encoder.transform(items[:1]))[0]
        assert post.argmax() == model.queues.index("safety")


@pytest.mark.parametrize("text_model", TEXT_MODELS)
def test_correcting_a_training_item_with_pruned_words(text_model: str) -> None:
    """min_count = 2 prunes "rare"; correcting the item that holds it still equals a fresh fit."""
    schema = Schema(fields=(FieldSpec("body", FieldRole.TEXT),), id="id", label="queue")
    items = [{"body": "battery smoke rare"}, {"body": "battery invoice"}, {"body": "invoice smoke"}]
    spec = ModelSpec(text_model=text_model, min_count=2)
    model = NaiveBayes.fit(schema, items, ["fault", "billing", "fault"], spec)
    assert "rare" not in model.encoder.vocabulary_
    model.relabel(items[0], "fault", "billing")
    fresh = NaiveBayes.fit(schema, items, ["billing", "billing", "fault"], spec, encoder=model.encoder)
    _compare_by_name(model, fresh, [*items, {"body": "rare smoke"}])


@settings(max_examples=150, deadline=None)
@given(initial_st, st.lists(item_st | st.just({}) | st.just({"body": "smoke"}), min_size=1, max_size=5), spec_st)
def test_unseen_and_missing_never_crash(initial, probes, spec) -> None:
    items = [it for it, _ in initial]
    model = NaiveBayes.fit(SCHEMA, items, [lab for _, lab in initial], spec)
    batch = model.encoder.transform(probes, allow_missing=True)
    post = model.predict_proba(batch)
    assert post.shape == (len(probes), model.counts.n_queues)
    assert not np.isnan(post).any()
    np.testing.assert_allclose(post.sum(axis=1), 1.0, atol=1e-9)
    for i, p in enumerate(probes):
        enc = model.encoder.encode(p, allow_missing=True)
        np.testing.assert_allclose(model.joint_log_likelihood_one(enc), model.joint_log_likelihood(batch)[i],
                                   rtol=0, atol=1e-9)
        ch = model.encoder.code(SCHEMA.field("channel"), p.get("channel"))
        levels = model.encoder.levels_["channel"]
        key = "<missing>" if p.get("channel") is None else p["channel"]
        # a value seen in training keeps its code; anything else is the unseen bucket, never another code
        assert ch == (levels.index(key) if key in levels else len(levels))
        for tok in enc.unknown_tokens:
            assert tok not in model.encoder.vocabulary_


def test_missing_value_is_a_level_only_if_training_saw_one() -> None:
    f = SCHEMA.field("channel")
    base = {"subject": "a", "body": "b", "tenure": 1}
    without = Encoder(SCHEMA).fit([{**base, "channel": "email"}, {**base, "channel": "phone"}])
    assert without.code(f, None) == 2 == without.code(f, "fax")  # the unseen bucket
    with_missing = Encoder(SCHEMA).fit([{**base, "channel": "email"}, {**base, "channel": None}])
    assert with_missing.levels_["channel"] == ["<missing>", "email"]
    assert with_missing.code(f, None) == 0 == with_missing.code(f, "  ")
    assert with_missing.code(f, "fax") == 2
    # numbers: the missing bin is the last code, outside values fall into the end bins
    t = SCHEMA.field("tenure")
    enc = Encoder(SCHEMA).fit([{**base, "channel": "x", "tenure": v} for v in range(1, 31)])
    last = enc.n_codes(t) - 1
    assert enc.code(t, None) == last
    assert enc.code(t, -100) == 0 and enc.code(t, 10**9) == last - 1


# ----- bad input ---------------------------------------------------------------------------------------------
def _tables() -> CountTables:
    return CountTables(["billing", "fault"], n_terms=3, field_sizes=[2])


def _item(counts, ids=(0, 1), code=0) -> EncodedItem:
    return EncodedItem(np.asarray(ids, dtype=np.int64), np.asarray(counts, dtype=np.float64),
                       np.asarray([code], dtype=np.int64))


@pytest.mark.parametrize("bad", [[-1.0, 1.0], [np.nan, 1.0], [np.inf, 1.0]])
def test_counts_refuse_negative_or_non_finite(bad) -> None:
    t = _tables()
    with pytest.raises(CountError, match="negative|finite"):
        t.learn(_item(bad), "billing")
    assert t.class_count_.sum() == 0 and t.token_count_.sum() == 0  # nothing half-learned
    arrays = _tables().arrays()
    arrays["token_count"] = arrays["token_count"].copy()
    arrays["token_count"][0, 0] = bad[0]
    with pytest.raises(CountError):
        CountTables.from_arrays(["billing", "fault"], arrays, n_fields=1)


@pytest.mark.parametrize("name", ["", "   ", None])
def test_empty_queue_name_is_refused(name) -> None:
    t = _tables()
    with pytest.raises(CountError, match="queue name"):
        t.learn(_item([1.0, 1.0]), name)
    with pytest.raises(CountError):
        t.add_queue(name)
    assert t.queues_ == ["billing", "fault"]


def test_forgetting_what_was_never_learned() -> None:
    t = _tables()
    with pytest.raises(CountError, match="never learned"):
        t.forget(_item([1.0, 1.0]), "billing")  # the queue is empty
    t.learn(_item([1.0, 2.0]), "billing")
    before = {k: v.copy() for k, v in t.arrays().items()}
    with pytest.raises(CountError, match="never learned"):
        t.forget(_item([1.0, 5.0]), "billing")  # more of a token than the queue holds
    with pytest.raises(CountError, match="never learned"):
        t.forget(_item([1.0, 2.0], code=1), "billing")  # a field value the queue never saw
    with pytest.raises(CountError, match="never learned"):
        t.forget(_item([1.0, 2.0]), "fault")  # learned elsewhere
    with pytest.raises(CountError, match="unknown queue"):
        t.forget(_item([1.0, 2.0]), "install")
    for k, v in t.arrays().items():
        np.testing.assert_array_equal(v, before[k])  # a refused forget changes nothing
    t.forget(_item([1.0, 2.0]), "billing")
    assert not any(v.any() for v in t.arrays().values())  # exact zeros left behind


def test_model_refusals_leave_the_model_usable() -> None:
    items = [{"subject": "battery", "body": "smoke", "channel": "phone", "tenure": 5},
             {"subject": "invoice", "body": "refund", "channel": "email", "tenure": 500}]
    model = NaiveBayes.fit(SCHEMA, items, ["fault", "billing"])
    probe = model.encoder.transform(items + PROBES, allow_missing=True)
    before = model.predict_log_proba(probe)
    new_item = {"subject": "brand new words", "body": None, "channel": "carrier pigeon", "tenure": 1}
    with pytest.raises(CountError):
        model.learn(new_item, "")
    with pytest.raises(CountError):
        model.forget(items[0], "billing")
    with pytest.raises(CountError):
        model.relabel(new_item, "fault", "billing")  # never learned under fault
    after = model.encoder.transform(items + PROBES, allow_missing=True)
    np.testing.assert_allclose(model.predict_log_proba(after), before, rtol=0, atol=1e-12)


def test_missing_field_names_the_field() -> None:
    enc = Encoder(SCHEMA).fit([{"subject": "a", "body": "b", "channel": "email", "tenure": 3}])
    with pytest.raises(MissingFieldError, match="channel"):
        enc.encode({"subject": "a", "body": "b", "tenure": 3})
    with pytest.raises(MissingFieldError, match="tenure"):
        enc.transform([{"subject": "a", "body": "b", "channel": "email"}])
    with pytest.raises(KeyError):  # MissingFieldError is a KeyError, for callers that catch those
        enc.encode({"body": "b", "channel": "email", "tenure": 3})
    # with allow_missing the absent field reads as an empty value
    assert enc.encode({}, allow_missing=True).token_ids.size == 0
    # an empty value is not a missing field
    enc.encode({"subject": None, "body": "", "channel": None, "tenure": None})
