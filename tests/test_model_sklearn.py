"""The event models against scikit-learn's naive Bayes classifiers on random data (sklearn.naive_bayes).

The texts are built from words "w000", "w001", ... repeated to give a chosen count matrix C; the encoder sorts
its vocabulary, so its columns are the words in that order and scikit-learn is fed C itself (built without our
code). Random data compared with the reference library is the check; no value here is invented.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.special import logsumexp
from sklearn.naive_bayes import BernoulliNB, CategoricalNB, ComplementNB, MultinomialNB

from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema

TEXT_ONLY = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")
JOINT = Schema(
    fields=(FieldSpec("text", FieldRole.TEXT), FieldSpec("channel", FieldRole.CATEGORY),
            FieldSpec("plan", FieldRole.CATEGORY)),
    id="id", label="queue",
)
FIELD_LEVELS = (4, 3)  # training levels of channel and plan
SEEDS = (0, 1, 2)
ALPHAS = (1.0, 0.37, 2.5)


def _text(row: np.ndarray) -> str:
    return " ".join(f"w{j:03d}" for j, c in enumerate(row) for _ in range(int(c)))


def _data(seed: int, n: int = 80, V: int = 25, Q: int = 4, lam: float = 0.6):
    """Counts C (every word seen in training), labels (every queue used), two category columns."""
    rng = np.random.default_rng(seed)
    C = rng.poisson(lam, (n, V))
    C[rng.integers(0, n, V), np.arange(V)] += 1
    C[0] = 0  # one empty text
    y = np.array([f"q{i % Q}" for i in range(n)])[rng.permutation(n)]
    F = np.c_[rng.integers(0, FIELD_LEVELS[0], n), rng.integers(0, FIELD_LEVELS[1], n)]
    F[np.arange(FIELD_LEVELS[0]), 0] = np.arange(FIELD_LEVELS[0])  # every level seen in training
    F[np.arange(FIELD_LEVELS[1]), 1] = np.arange(FIELD_LEVELS[1])
    return C, y, F


def _items(C: np.ndarray, F: np.ndarray | None = None) -> list[dict]:
    out = []
    for i, row in enumerate(C):
        item = {"text": _text(row)}
        if F is not None:
            # codes as names "a0".. sort in code order, so our level codes equal F (unseen: code K)
            item["channel"] = f"a{F[i, 0]}"
            item["plan"] = f"b{F[i, 1]}"
        out.append(item)
    return out


SKLEARN_TEXT = {
    "multinomial": lambda a: MultinomialNB(alpha=a),
    "bernoulli": lambda a: BernoulliNB(alpha=a),
    "complement": lambda a: ComplementNB(alpha=a, norm=False),
    "complement-norm": lambda a: ComplementNB(alpha=a, norm=True),
}


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("alpha", ALPHAS)
@pytest.mark.parametrize("text_model", list(SKLEARN_TEXT))
def test_text_models_equal_sklearn(text_model: str, alpha: float, seed: int) -> None:
    C, y, _ = _data(seed)
    Ct, _, _ = _data(seed + 100, n=30)
    m = NaiveBayes.fit(TEXT_ONLY, _items(C), list(y), ModelSpec(text_model=text_model, alpha_text=alpha))
    train = m.encoder.transform(_items(C))
    np.testing.assert_array_equal(train.X.toarray(), C)  # the columns really are w000.. in order
    test = m.encoder.transform(_items(Ct))
    ref = SKLEARN_TEXT[text_model](alpha).fit(C, y)
    assert list(ref.classes_) == m.queues

    ref_jll = ref.predict_joint_log_proba(Ct)
    if text_model.startswith("complement"):
        # sklearn's ComplementNB leaves the prior out of its joint log-likelihood (with more than one class);
        # ours adds it, so add it to the reference ...
        ref_jll = ref_jll + ref.class_log_prior_
    np.testing.assert_allclose(m.joint_log_likelihood(test), ref_jll, rtol=0, atol=1e-9)
    np.testing.assert_allclose(m.predict_log_proba(test), ref_jll - logsumexp(ref_jll, axis=1, keepdims=True),
                               rtol=0, atol=1e-9)
    if text_model.startswith("complement"):
        # ... and with a uniform prior ours equals sklearn's posterior as it stands
        mu = NaiveBayes.fit(TEXT_ONLY, _items(C), list(y),
                            ModelSpec(text_model=text_model, alpha_text=alpha, prior="uniform"))
        np.testing.assert_allclose(mu.predict_log_proba(test), ref.predict_log_proba(Ct), rtol=0, atol=1e-9)
    else:
        np.testing.assert_allclose(m.predict_log_proba(test), ref.predict_log_proba(Ct), rtol=0, atol=1e-9)
    # the single-item path gives the same numbers as the batch path
    for i in range(5):
        np.testing.assert_allclose(m.joint_log_likelihood_one(m.encoder.encode(_items(Ct[i:i + 1])[0])),
                                   m.joint_log_likelihood(test)[i], rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", SEEDS)
def test_weighted_text_fields_equal_sklearn_on_weighted_counts(seed: int) -> None:
    """Two text fields in one vocabulary, the second at weight 2.5: sklearn MultinomialNB on C1 + 2.5 C2."""
    schema = Schema(fields=(FieldSpec("subject", FieldRole.TEXT, weight=2.5), FieldSpec("body", FieldRole.TEXT)),
                    id="id", label="queue")
    C1, y, _ = _data(seed)
    C2, _, _ = _data(seed + 50)
    items = [{"subject": _text(a), "body": _text(b)} for a, b in zip(C2, C1, strict=True)]
    m = NaiveBayes.fit(schema, items, list(y), ModelSpec(alpha_text=0.5))
    X = C1 + 2.5 * C2
    ref = MultinomialNB(alpha=0.5).fit(X, y)
    np.testing.assert_allclose(m.predict_log_proba(m.encoder.transform(items)), ref.predict_log_proba(X),
                               rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("alpha", ALPHAS)
def test_category_fields_equal_categorical_nb(alpha: float, seed: int) -> None:
    """CategoricalNB with min_categories = K + 1: our explicit unseen bucket is one extra column per field
    (code K), which add-alpha smoothing counts in the denominator n_c + alpha (K + 1)."""
    schema = Schema(fields=JOINT.fields[1:], id="id", label="queue")
    C, y, F = _data(seed)
    _, _, Ft = _data(seed + 100, n=40)
    Ft[:5, 0] = FIELD_LEVELS[0]  # values never seen in training ("a4"): the unseen bucket
    Ft[5:8, 1] = FIELD_LEVELS[1]
    train_items = [{k: v for k, v in it.items() if k != "text"} for it in _items(C, F)]
    test_items = [{k: v for k, v in it.items() if k != "text"} for it in _items(C[:40], Ft)]
    m = NaiveBayes.fit(schema, train_items, list(y), ModelSpec(alpha_fields=alpha))
    test = m.encoder.transform(test_items)
    np.testing.assert_array_equal(test.codes, Ft)
    ref = CategoricalNB(alpha=alpha, min_categories=[k + 1 for k in FIELD_LEVELS]).fit(F, y)
    np.testing.assert_allclose(m.predict_log_proba(test), ref.predict_log_proba(Ft), rtol=0, atol=1e-9)
    np.testing.assert_allclose(m.joint_log_likelihood(test), ref.predict_joint_log_proba(Ft), rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("text_model", list(SKLEARN_TEXT))
def test_joint_model_is_the_sum_of_the_parts(text_model: str, seed: int) -> None:
    """Text + two category fields = sklearn's text jll + CategoricalNB's jll, with the prior counted once."""
    alpha = 0.8
    C, y, F = _data(seed)
    Ct, _, Ft = _data(seed + 100, n=30)
    Ft[:3, 0] = FIELD_LEVELS[0]
    m = NaiveBayes.fit(JOINT, _items(C, F), list(y),
                       ModelSpec(text_model=text_model, alpha_text=alpha, alpha_fields=alpha))
    test = m.encoder.transform(_items(Ct, Ft))
    text_ref = SKLEARN_TEXT[text_model](alpha).fit(C, y)
    cat_ref = CategoricalNB(alpha=alpha, min_categories=[k + 1 for k in FIELD_LEVELS]).fit(F, y)
    text_jll = text_ref.predict_joint_log_proba(Ct)
    if not text_model.startswith("complement"):
        text_jll = text_jll - text_ref.class_log_prior_  # keep only P(text | c)
    ref = text_jll + cat_ref.predict_joint_log_proba(Ft)  # CategoricalNB's jll brings the prior, once
    np.testing.assert_allclose(m.joint_log_likelihood(test), ref, rtol=0, atol=1e-9)
    np.testing.assert_allclose(m.predict_log_proba(test), ref - logsumexp(ref, axis=1, keepdims=True),
                               rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", SEEDS)
def test_multinomial_alpha_zero(seed: int) -> None:
    """alpha = 0: words a queue never used are impossible there (-inf), equal to sklearn's unsmoothed
    MultinomialNB where the latter is finite, and the posterior never holds NaN."""
    C, y, _ = _data(seed, n=20, lam=0.15, V=30)
    Ct, _, _ = _data(seed + 100, n=30, lam=0.1, V=30)
    m = NaiveBayes.fit(TEXT_ONLY, _items(C), list(y), ModelSpec(alpha_text=0.0))
    assert np.isneginf(m.A_).any()  # the data do leave zero counts
    test = m.encoder.transform(_items(Ct))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # sklearn warns about alpha = 0 and log(0)
        ref = MultinomialNB(alpha=0.0, force_alpha=True).fit(C, y)
        ref_jll = ref.predict_joint_log_proba(sp.csr_matrix(Ct))  # sparse: 0 * log 0 never computed
    ours = m.joint_log_likelihood(test)
    np.testing.assert_array_equal(np.isneginf(ours), np.isneginf(ref_jll))
    finite = np.isfinite(ref_jll)
    np.testing.assert_allclose(ours[finite], ref_jll[finite], rtol=0, atol=1e-9)
    post = m.predict_log_proba(test)
    assert not np.isnan(post).any()
    np.testing.assert_allclose(np.exp(post).sum(axis=1), 1.0, atol=1e-12)
    possible = np.isfinite(ref_jll).any(axis=1)
    assert possible.any() and (~possible).any()  # both kinds of row occur in this data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref_post = ref.predict_log_proba(sp.csr_matrix(Ct[possible]))
    np.testing.assert_allclose(post[possible], ref_post, rtol=0, atol=1e-9)
    # a text impossible under every queue gets a uniform posterior (sklearn gives NaN there)
    np.testing.assert_allclose(post[~possible], -np.log(m.counts.n_queues), atol=1e-12)
