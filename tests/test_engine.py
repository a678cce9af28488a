"""The in-process engine: a history tokenised once and counted by partition equals one fit on all of it.

References: `Encoder.fit` + `NaiveBayes.fit` on all items at once and `core.selection.out_of_fold_jll` (the
single-process definitions the engine must reproduce), and scikit-learn's `StratifiedKFold` for the folds.
On two open datasets the partitioned counts also give scikit-learn's MultinomialNB and ComplementNB posteriors.
Untransformed counts are integers and halves, summed exactly in any order, so those comparisons are exact;
with tf-log, idf and length norm the partitions' sums are added in another order and agree to rounding.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_digits
from sklearn.feature_extraction.text import CountVectorizer
from sklearn.model_selection import StratifiedKFold, train_test_split
from sklearn.naive_bayes import ComplementNB, MultinomialNB

from triage.core.encode import Encoder
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.selection import out_of_fold_jll
from triage.core.tokens import Tokenizer
from triage.engine import InProcessEngine, open_engine, partition_bounds
from triage.engine.history import History

SCHEMA = Schema(
    fields=(
        FieldSpec("subject", FieldRole.TEXT, weight=1.5),
        FieldSpec("body", FieldRole.TEXT),
        FieldSpec("channel", FieldRole.CATEGORY),
        FieldSpec("tenure", FieldRole.NUMBER, bins=3),
    ),
    id="id", label="queue",
)
WORDS = ["battery", "invoice", "smoke", "app", "login", "refund", "panel", "late", "VW-104233", "42", "Straße"]
QUEUES = ["billing", "fault", "install"]
text_st = st.lists(st.sampled_from(WORDS), max_size=6).map(" ".join) | st.none()
item_st = st.fixed_dictionaries({
    "subject": text_st,
    "body": text_st,
    "channel": st.sampled_from(["email", "phone", " chat ", None]),
    "tenure": st.none() | st.integers(min_value=-5, max_value=4000) | st.just(float("nan")),
})
data_st = st.lists(st.tuples(item_st, st.sampled_from(QUEUES)), min_size=2, max_size=40)
spec_st = st.builds(ModelSpec, text_model=st.sampled_from(TEXT_MODELS), alpha_text=st.sampled_from([0.5, 1.0]),
                    bigrams=st.booleans(), min_count=st.sampled_from([1, 2]),
                    max_vocab=st.sampled_from([None, 4]))


def _fresh_encoder(spec: ModelSpec, items) -> tuple[Encoder, object]:
    enc = Encoder(SCHEMA, Tokenizer(bigrams=spec.bigrams, max_token_chars=spec.max_token_chars),
                  min_count=spec.min_count, max_vocab=spec.max_vocab)
    return enc, enc.fit_transform(items)


def assert_same_model(ours: NaiveBayes, ref: NaiveBayes, exact: bool = True) -> None:
    assert ours.encoder.to_manifest() == ref.encoder.to_manifest()
    assert ours.queues == ref.queues
    for (name, a), b in zip(ours.counts.arrays().items(), ref.counts.arrays().values(), strict=True):
        if exact:
            np.testing.assert_array_equal(a, b, err_msg=name)
        else:
            np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12, err_msg=name)
    for name in ("A_", "B_", "C_", "scale_", "log_prior_"):
        if exact:
            np.testing.assert_array_equal(getattr(ours, name), getattr(ref, name), err_msg=name)
    if ours.idf_ is not None or ref.idf_ is not None:
        np.testing.assert_array_equal(ours.idf_, ref.idf_)


def test_partition_bounds_cover_every_row_once() -> None:
    for n, rows, least in [(0, 5, 1), (1, 5, 3), (10, 3, 1), (10, 100, 4), (7, 7, 1), (100_001, 20_000, 2)]:
        b = partition_bounds(n, rows, least)
        assert sum(hi - lo for lo, hi in b) == n
        assert all(lo < hi for lo, hi in b) and all(b[i][1] == b[i + 1][0] for i in range(len(b) - 1))
        assert all(hi - lo <= rows for lo, hi in b)
        assert len(b) >= min(least, n)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data_st, spec_st, st.integers(min_value=1, max_value=9), st.floats(min_value=0.3, max_value=1.0))
def test_history_equals_one_fit(data, spec, rows, older_share) -> None:
    items = [it for it, _ in data]
    labels = [q for _, q in data]
    n_older = max(1, int(len(items) * older_share))
    h = History(InProcessEngine(), SCHEMA, spec, items, labels, n_older=n_older, rows=rows)
    assert_same_model(h.model(spec), NaiveBayes.fit(SCHEMA, items, labels, spec))
    assert_same_model(h.model(spec, "older"), NaiveBayes.fit(SCHEMA, items[:n_older], labels[:n_older], spec))
    assert h.older_encoder.to_manifest() == _fresh_encoder(spec, items[:n_older])[0].to_manifest()


@pytest.mark.parametrize("transforms", [{}, {"tf_log": True, "length_norm": True}, {"idf": True}])
def test_out_of_fold_scores_equal_refitting_each_fold(transforms) -> None:
    rng = np.random.default_rng(3)
    items = [{"subject": " ".join(rng.choice(WORDS, size=rng.integers(0, 5))),
              "body": " ".join(rng.choice(WORDS[:6], size=rng.integers(1, 8))),
              "channel": str(rng.choice(["email", "phone"])), "tenure": int(rng.integers(0, 900))}
             for _ in range(300)]
    labels = [str(q) for q in rng.choice(QUEUES, size=300)]
    base = ModelSpec(**transforms)
    specs = [ModelSpec(text_model=m, alpha_text=a, **transforms) for m in TEXT_MODELS for a in (0.5, 1.0)]
    n_older = 240
    h = History(InProcessEngine(), SCHEMA, base, items, labels, n_older=n_older, rows=70)
    folds = np.empty(n_older, dtype=np.int64)
    y = np.asarray(labels[:n_older])
    splitter = StratifiedKFold(n_splits=3, shuffle=True, random_state=0)  # what out_of_fold_jll uses
    for f, (_, test) in enumerate(splitter.split(np.zeros(n_older), y)):
        folds[test] = f
    enc, batch = _fresh_encoder(base, items[:n_older])
    for spec, ours in zip(specs, h.out_of_fold_jll(specs, folds), strict=True):
        ref, queues = out_of_fold_jll(enc, batch, labels[:n_older], spec, folds=3)
        assert queues == h.queues("older")
        if transforms:  # sums of real numbers in another order (and a subtraction): equal to rounding
            np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-9)
        else:
            np.testing.assert_array_equal(ours, ref)
    # the newest items scored by the older items' model, as a measurement does
    older = h.model(base, "older")
    ref_model = NaiveBayes.fit(SCHEMA, items[:n_older], labels[:n_older], base)
    np.testing.assert_allclose(h.joint_log_likelihood(older, "newer"),
                               ref_model.joint_log_likelihood(ref_model.encoder.transform(items[n_older:])),
                               rtol=1e-12, atol=1e-9)


def test_open_engine_refuses_unknown_names() -> None:
    with pytest.raises(ValueError, match="unknown engine"):
        open_engine("spark")
    with pytest.raises(ValueError, match="--engine dask"):
        open_engine("local", scheduler="tcp://127.0.0.1:8786")
    assert isinstance(open_engine("local"), InProcessEngine)


# ----- two open datasets, counted by partition, against scikit-learn's classifiers -----------------------------
TEXT_ONLY = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")
FORTUNES = Path("/usr/share/games/fortunes")  # the Debian package `fortunes`: one category per file
FORTUNE_FILES = ("computers", "definitions", "people", "politics", "science", "songs-poems")
REFERENCE_NB = {
    "multinomial": lambda a: MultinomialNB(alpha=a),
    "complement": lambda a: ComplementNB(alpha=a, norm=False),
    "complement-norm": lambda a: ComplementNB(alpha=a, norm=True),
}


def _fit_by_partition(texts: list[str], labels: list[str], spec: ModelSpec) -> NaiveBayes:
    """The model as training builds it: tokenised once, counted in partitions, the tables merged."""
    h = History(InProcessEngine(), TEXT_ONLY, spec, [{"text": t} for t in texts], labels, rows=97)
    try:
        return h.model(spec)
    finally:
        h.close()


def _assert_equals_sklearn(texts_train, y_train, texts_test, X_train, X_test, text_model: str, alpha: float,
                           terms: list[str]) -> None:
    """Same counts (the columns of X are `terms`), same alpha: the same log posteriors to 1e-9, the same picks."""
    # sklearn's ComplementNB leaves the prior out (with more than one class): ours with a uniform prior is that
    prior = "uniform" if text_model.startswith("complement") else "fitted"
    spec = ModelSpec(text_model=text_model, alpha_text=alpha, prior=prior)
    model = _fit_by_partition(texts_train, y_train, spec)
    assert model.encoder.terms_ == terms  # our columns are the reference's columns, in order
    ours_train = model.encoder.transform([{"text": t} for t in texts_train])
    np.testing.assert_array_equal(ours_train.X.toarray(), X_train)  # the same counts on both sides
    ref = REFERENCE_NB[text_model](alpha).fit(X_train, y_train)
    assert list(ref.classes_) == model.queues
    ours = model.predict_log_proba(model.encoder.transform([{"text": t} for t in texts_test]))
    theirs = ref.predict_log_proba(X_test)
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-9)
    picks = np.asarray(model.queues)[ours.argmax(axis=1)]
    assert (picks == ref.predict(X_test)).all()
    assert len(set(picks)) > 2  # a model that picks one class everywhere would make the check hollow


@pytest.mark.parametrize("alpha", [1.0, 0.1])
@pytest.mark.parametrize("text_model", list(REFERENCE_NB))
def test_digits_counted_by_partition_equal_sklearn(text_model: str, alpha: float) -> None:
    # scikit-learn's bundled copy of the UCI "Optical Recognition of Handwritten Digits" test set
    # (sklearn.datasets.load_digits, no download): 8x8 pixel intensities 0..16, used as counts of 64 words
    digits = load_digits()
    X, y = digits.data.astype(np.int64), np.array([f"digit{d}" for d in digits.target])
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.3, random_state=7, stratify=y)
    seen = np.flatnonzero(X_train.sum(axis=0) > 0)  # a pixel never inked in training is no word of ours

    def text(row: np.ndarray) -> str:
        return " ".join(f"p{j:02d}" for j, c in enumerate(row) for _ in range(int(c)))

    _assert_equals_sklearn([text(r) for r in X_train], list(y_train), [text(r) for r in X_test],
                           X_train[:, seen], X_test[:, seen], text_model, alpha, [f"p{j:02d}" for j in seen])


@pytest.mark.parametrize("text_model", list(REFERENCE_NB))
def test_fortunes_counted_by_partition_equal_sklearn(text_model: str) -> None:
    if not all((FORTUNES / f).is_file() for f in FORTUNE_FILES):
        pytest.skip(f"the open dataset is absent from {FORTUNES}: `apt-get install fortunes`")
    texts, labels = [], []
    for name in FORTUNE_FILES:  # cookies are separated by lines holding only "%"
        raw = (FORTUNES / name).read_text(encoding="utf-8", errors="replace")
        cookies = [c.strip() for c in re.split(r"^%\s*$", raw, flags=re.M) if c.strip()]
        texts += cookies
        labels += [name] * len(cookies)
    x_train, x_test, y_train, _ = train_test_split(texts, labels, test_size=0.3, random_state=3, stratify=labels)
    # sklearn counts the same tokens (our tokenizer as its analyzer); its vocabulary is sorted, as ours is
    vec = CountVectorizer(analyzer=Tokenizer().tokens, lowercase=False)
    X_train = vec.fit_transform(x_train).toarray()
    _assert_equals_sklearn(x_train, y_train, x_test, X_train, vec.transform(x_test), text_model, 0.5,
                           list(vec.get_feature_names_out()))
