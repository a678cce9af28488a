"""Merging and subtracting count tables (hypothesis properties).

References: the definition of the counts (a sum over items, so a sum over any partition of the items is the
same sum), and scikit-learn's `MultinomialNB.partial_fit` / `BernoulliNB.partial_fit`, whose `class_count_`
and `feature_count_` after one call per partition are the published incremental counts that our merged
tables must equal. Counts here are integers and halves (field weight 1.5), which floating-point addition sums
exactly in any order, so the comparisons are exact (array_equal), not approximate.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.naive_bayes import BernoulliNB, MultinomialNB

from triage.core.counts import CountError, CountTables, merged
from triage.core.encode import Encoder
from triage.core.model import ModelSpec, NaiveBayes, encoder_sizes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.selection import subset

SCHEMA = Schema(
    fields=(
        FieldSpec("subject", FieldRole.TEXT, weight=1.5),
        FieldSpec("body", FieldRole.TEXT),
        FieldSpec("channel", FieldRole.CATEGORY),
        FieldSpec("tenure", FieldRole.NUMBER, bins=3),
    ),
    id="id", label="queue",
)
WORDS = ["battery", "invoice", "smoke", "app", "login", "refund", "panel", "late", "VW-104233", "42"]
QUEUES = ["billing", "fault", "install", "safety"]

text_st = st.lists(st.sampled_from(WORDS), max_size=6).map(" ".join) | st.none()
item_st = st.fixed_dictionaries({
    "subject": text_st,
    "body": text_st,
    "channel": st.sampled_from(["email", "phone", "chat", None]),
    "tenure": st.none() | st.integers(min_value=-5, max_value=4000),
})
data_st = st.lists(st.tuples(item_st, st.sampled_from(QUEUES)), min_size=2, max_size=40)


def _encoded(data):
    items = [it for it, _ in data]
    labels = [q for _, q in data]
    enc = Encoder(SCHEMA)
    return enc, enc.fit_transform(items), labels


def _fit(enc, batch, labels, rows, queues=()):
    rows = np.asarray(rows, dtype=np.int64)
    t = CountTables(sorted(queues), enc.n_terms, encoder_sizes(enc))
    return t.fit(subset(batch, rows), [labels[i] for i in rows])


def _assert_equal_by_name(a: CountTables, b: CountTables) -> None:
    assert sorted(a.queues_) == sorted(b.queues_)
    order = [a.queue_index_[q] for q in b.queues_]
    for (name, x), y in zip(a.arrays().items(), b.arrays().values(), strict=True):
        np.testing.assert_array_equal(x[order], y, err_msg=name)


def _cuts(n: int, draw_cuts: list[int]) -> list[np.ndarray]:
    bounds = sorted({0, n, *(c % (n + 1) for c in draw_cuts)})
    return [np.arange(lo, hi) for lo, hi in zip(bounds[:-1], bounds[1:], strict=True)]


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data_st, st.lists(st.integers(min_value=0, max_value=100), max_size=5), st.booleans())
def test_merging_partitions_equals_one_count(data, cut_points, preset_queues) -> None:
    enc, batch, labels = _encoded(data)
    whole = _fit(enc, batch, labels, range(len(labels)))
    parts = _cuts(len(labels), cut_points)
    queues = sorted(set(labels)) if preset_queues else ()
    tables = [_fit(enc, batch, labels, rows, queues) for rows in parts]
    first = {k: v.copy() for k, v in tables[0].arrays().items()}
    total = merged(tables)
    if preset_queues:  # every partition knows every queue: the very same arrays, in the same order
        assert total.queues_ == whole.queues_
        for (name, x), y in zip(total.arrays().items(), whole.arrays().values(), strict=True):
            np.testing.assert_array_equal(x, y, err_msg=name)
    else:  # a partition without some queue: the merge adds it; the same counts under every name
        _assert_equal_by_name(total, whole)
    for k, v in tables[0].arrays().items():  # merged() copies the first table, never changes it
        np.testing.assert_array_equal(v, first[k])

    # scikit-learn's incremental counts, one partial_fit per partition (it needs at least one term)
    if enc.n_terms == 0:
        return
    y = np.array(labels)
    mnb, bnb = MultinomialNB(), BernoulliNB(binarize=0.0)
    classes = np.array(sorted(set(labels)))
    for rows in parts:
        if len(rows):
            mnb.partial_fit(batch.X[rows], y[rows], classes=classes)
            bnb.partial_fit(batch.X[rows], y[rows], classes=classes)
    order = [total.queue_index_[q] for q in classes]
    np.testing.assert_array_equal(total.class_count_[order], mnb.class_count_)
    np.testing.assert_array_equal(total.token_count_[order], mnb.feature_count_)
    np.testing.assert_array_equal(total.doc_freq_[order], bnb.feature_count_)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data_st, st.data())
def test_subtracting_a_fold_equals_counting_without_it(data, draw) -> None:
    enc, batch, labels = _encoded(data)
    n = len(labels)
    fold = np.array(draw.draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    queues = sorted(set(labels))
    total = _fit(enc, batch, labels, range(n), queues)
    rest = total.copy().subtract(_fit(enc, batch, labels, np.flatnonzero(fold), queues))
    direct = _fit(enc, batch, labels, np.flatnonzero(~fold), queues)
    for (name, x), y in zip(rest.arrays().items(), direct.arrays().values(), strict=True):
        np.testing.assert_array_equal(x, y, err_msg=name)
    # and the model derived from the subtracted tables is the model fitted without the fold
    spec = ModelSpec(text_model="multinomial", alpha_text=0.5)
    a, b = NaiveBayes(enc, rest, spec), NaiveBayes(enc, direct, spec)
    np.testing.assert_array_equal(a.joint_log_likelihood(batch), b.joint_log_likelihood(batch))


def test_subtract_refuses_what_was_never_counted() -> None:
    items = [{"subject": "battery smoke", "body": "", "channel": "phone", "tenure": 3},
             {"subject": "invoice", "body": "refund", "channel": "email", "tenure": 300}]
    enc, batch, labels = _encoded([(items[0], "fault"), (items[1], "billing")])
    total = _fit(enc, batch, labels, [0, 1])
    before = {k: v.copy() for k, v in total.arrays().items()}
    twice = _fit(enc, batch, labels, [0]).merge(_fit(enc, batch, labels, [0]))
    with pytest.raises(CountError, match="never counted"):
        total.subtract(twice)
    other_queue = CountTables(["install"], enc.n_terms, encoder_sizes(enc))
    with pytest.raises(CountError, match="install"):
        total.subtract(other_queue)
    with pytest.raises(CountError, match="vocabularies"):
        total.subtract(CountTables(["fault"], enc.n_terms + 1, encoder_sizes(enc)))
    with pytest.raises(CountError, match="vocabularies"):
        total.merge(CountTables(["fault"], enc.n_terms + 1, encoder_sizes(enc)))
    for k, v in total.arrays().items():  # a refused subtraction changes nothing
        np.testing.assert_array_equal(v, before[k])
    with pytest.raises(CountError, match="no count tables"):
        merged([])
    empty = total.copy().subtract(total)
    assert not any(v.any() for v in empty.arrays().values())  # exact zeros, nothing negative
