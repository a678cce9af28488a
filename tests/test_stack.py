"""The score layer (stacked generalisation, Wolpert 1992, Neural Networks 5(2)): leak-free fitting, exact
evidence through it, stored as plain arrays.

References: scikit-learn's LogisticRegression (the layer is one; its predict_log_proba is checked against ours),
and the open dataset of Debian's package `fortunes` for the out-of-fold check.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import train_test_split

from triage.core.calibrate import log_loss, softmax_rows
from triage.core.evidence import explain, strongest_batch
from triage.core.model import TEXT_MODELS, ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.selection import fit_layer, fit_rows, out_of_fold_jll, stacked_out_of_fold, subset
from triage.core.stack import ScoreLayer, too_small
from triage.store.artifacts import load_model, save_model

FORTUNES = Path("/usr/share/games/fortunes")
CATEGORIES = ("computers", "definitions", "people", "politics", "science", "songs-poems", "work", "zippy")
TEXT = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="category")


def _fortunes() -> tuple[list[dict], list[str]]:
    if not FORTUNES.is_dir() or not all((FORTUNES / c).is_file() for c in CATEGORIES):
        pytest.skip(f"{FORTUNES} lacks {CATEGORIES}: install the open dataset with `apt-get install fortunes`")
    items, labels = [], []
    for cat in CATEGORIES:
        text = (FORTUNES / cat).read_text(encoding="utf-8", errors="replace")
        for cookie in (c.strip() for c in text.split("\n%\n")):
            if cookie:
                items.append({"text": cookie})
                labels.append(cat)
    return items, labels


@pytest.fixture(scope="module")
def fortunes_split():
    items, labels = _fortunes()
    idx = np.arange(len(items))
    tr, te = train_test_split(idx, test_size=0.3, random_state=7, stratify=labels)
    model = NaiveBayes.fit(TEXT, [items[i] for i in tr], [labels[i] for i in tr],
                           ModelSpec(alpha_text=0.1, score_layer=True))
    return items, labels, tr, te, model


def test_layer_is_fitted_on_out_of_fold_scores_only(fortunes_split) -> None:
    """fit_layer's weights are those of a layer fitted on out-of-fold scores, and not those of one fitted on the
    scores the model gives the items it counted (in-fold). The in-fold layer also predicts worse on the test
    items (it learned to trust over-confident scores): the reason stacking uses out-of-fold scores."""
    items, labels, tr, te, model = fortunes_split
    enc = model.encoder
    tr_items, tr_labels = [items[i] for i in tr], [labels[i] for i in tr]
    batch = enc.transform(tr_items)
    layer = fit_layer(enc, batch, tr_labels, model.spec)
    assert layer is not None
    qi = {q: i for i, q in enumerate(model.queues)}
    y = np.array([qi[lab] for lab in tr_labels])
    oof, _ = out_of_fold_jll(enc, batch, tr_labels, model.spec)
    np.testing.assert_allclose(layer.weights, ScoreLayer.fit(oof, y, model.queues).weights, atol=1e-12)
    in_fold = ScoreLayer.fit(model.base_scores(batch), y, model.queues)
    assert not np.allclose(layer.weights, in_fold.weights, atol=1e-3)
    test = enc.transform([items[i] for i in te], allow_missing=True)
    y_te = np.array([qi[labels[i]] for i in te])
    base = model.base_scores(test)
    loss_oof = log_loss(softmax_rows(layer.transform(base)), y_te)
    loss_in = log_loss(softmax_rows(in_fold.transform(base)), y_te)
    assert loss_oof < loss_in
    # and the layer helps over the naive Bayes posterior itself on these test items
    assert loss_oof < log_loss(softmax_rows(base), y_te)


def test_layer_equals_scikit_learn_logistic_regression(fortunes_split) -> None:
    """The layer's class scores give scikit-learn's predict_log_proba on the centred, scaled scores."""
    items, labels, tr, te, model = fortunes_split
    batch = model.encoder.transform([items[i] for i in tr])
    s = model.base_scores(batch)
    qi = {q: i for i, q in enumerate(model.queues)}
    y = np.array([qi[labels[i]] for i in tr])
    layer = ScoreLayer.fit(s, y, model.queues)
    z = (s - s.mean(axis=1, keepdims=True)) / layer.scale
    ref = LogisticRegression(C=layer.C, max_iter=100, tol=1e-3).fit(z, y)
    ours = layer.transform(s)
    np.testing.assert_allclose(ours - ours.max(axis=1, keepdims=True),
                               ref.predict_log_proba(z) - ref.predict_log_proba(z).max(axis=1, keepdims=True),
                               atol=1e-9)


def test_stacked_scores_for_calibration_are_out_of_fold_twice(fortunes_split) -> None:
    items, labels, tr, te, model = fortunes_split
    batch = model.encoder.transform([items[i] for i in tr])
    tr_labels = [labels[i] for i in tr]
    st_ = stacked_out_of_fold(model.encoder, batch, tr_labels, model.spec)
    assert st_.layer is not None and st_.why_off is None
    # not the full layer applied to its own training scores (that would be in-fold for the layer)
    assert not np.allclose(st_.scores, st_.layer.transform(st_.base), atol=1e-6)
    off = stacked_out_of_fold(model.encoder, batch, tr_labels, ModelSpec(alpha_text=0.1, score_layer=False))
    assert off.layer is None and off.why_off == "off in the settings"


def test_small_data_keeps_the_layer_off_and_says_why() -> None:
    why = too_small(["a"] * 100 + ["b"] * 100, 2)
    assert why is not None and "200 items" in why
    assert too_small(["a"] * 400 + ["b"] * 400, 2) is None


# ----- evidence through the layer: exact, for any layer ---------------------------------------------------
SCHEMA = Schema(
    fields=(FieldSpec("subject", FieldRole.TEXT, weight=2.0, pieces="words+grams"), FieldSpec("body", FieldRole.TEXT),
            FieldSpec("channel", FieldRole.CATEGORY), FieldSpec("tenure", FieldRole.NUMBER, bins=3)),
    id="id", label="queue",
)
WORDS = ["battery", "invoice", "smoke", "app", "login", "refund", "panel", "late", "never-seen", "vw-104233"]
text_st = st.lists(st.sampled_from(WORDS), max_size=6).map(" ".join) | st.none()
item_st = st.fixed_dictionaries({
    "subject": text_st, "body": text_st,
    "channel": st.sampled_from(["email", "phone", "chat", None]),
    "tenure": st.none() | st.integers(min_value=0, max_value=3000),
})
QUEUES = ["billing", "fault", "install"]


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(st.tuples(item_st, st.sampled_from(QUEUES)), min_size=3, max_size=12),
    st.lists(item_st | st.just({}), min_size=1, max_size=4),
    st.sampled_from(TEXT_MODELS),
    st.sampled_from([0.1, 1.0]),
    st.integers(0, 2**32 - 1),
)
def test_evidence_through_the_layer_sums_to_the_gap(train, probes, text_model, alpha, seed) -> None:
    model = NaiveBayes.fit(SCHEMA, [it for it, _ in train], [lab for _, lab in train],
                           ModelSpec(text_model=text_model, alpha_text=alpha))
    K = len(model.queues)
    if K < 2:
        return
    rng = np.random.default_rng(seed)
    model.layer_ = ScoreLayer(tuple(model.queues), rng.normal(size=(K, K)), rng.normal(size=K),
                              float(rng.uniform(0.5, 5.0)))
    assert model.layer_active
    batch = model.encoder.transform(probes, allow_missing=True)
    jll = model.joint_log_likelihood(batch)
    tops, runners = [], []
    for i, p in enumerate(probes):
        item = model.encoder.encode(p, allow_missing=True)
        np.testing.assert_allclose(model.joint_log_likelihood_one(item), jll[i], atol=1e-9)
        ev = explain(model, item)
        a, b = model.queues.index(ev.top), model.queues.index(ev.runner_up)
        assert a == int(np.argmax(jll[i]))
        assert ev.total() == pytest.approx(jll[i, a] - jll[i, b], abs=1e-8)
        assert [t.kind for t in ev.terms].count("layer") == 1
        tops.append(a)
        runners.append(b)
    # the batch path gives the same terms (all of them, when k is large)
    many = strongest_batch(model, batch, np.array(tops), np.array(runners), k=10_000)
    for i, p in enumerate(probes):
        ev = explain(model, model.encoder.encode(p, allow_missing=True), tops[i], runners[i])
        assert sum(t.weight for t in many[i]) == pytest.approx(ev.total(), abs=1e-8)
        if text_model != "bernoulli":
            assert sorted(round(t.weight, 9) for t in many[i]) == sorted(round(t.weight, 9) for t in ev.terms)


def test_a_correction_changes_scores_at_once_and_a_new_queue_turns_the_layer_off() -> None:
    items = [{"subject": w, "body": w, "channel": "email", "tenure": 1} for w in WORDS]
    labels = [QUEUES[i % 3] for i in range(len(WORDS))]
    model = NaiveBayes.fit(SCHEMA, items, labels, ModelSpec(score_layer=True))
    model.layer_ = ScoreLayer(tuple(model.queues), np.eye(3) * 2.0, np.zeros(3), 1.0)
    probe = model.encoder.transform([items[0]])
    before = model.joint_log_likelihood(probe)
    model.relabel(items[0], labels[0], QUEUES[1])
    assert not np.allclose(model.joint_log_likelihood(probe), before)  # the counts moved, and the scores
    assert model.layer_active
    model.learn({"subject": "wifi", "body": "router", "channel": "chat", "tenure": 3}, "network")
    assert not model.layer_active  # a fourth queue: the layer reads three; it waits for the next train
    probe = model.encoder.transform([items[0]])  # the vocabulary grew with the new words
    np.testing.assert_array_equal(model.joint_log_likelihood(probe), model.base_scores(probe))


def test_layer_round_trips_as_plain_arrays(tmp_path: Path, fortunes_split) -> None:
    items, labels, tr, te, model = fortunes_split
    enc = model.encoder
    model = model.copy()
    model.layer_ = fit_layer(enc, enc.transform([items[i] for i in tr]), [labels[i] for i in tr], model.spec)
    save_model(model, tmp_path / "m")
    with zipfile.ZipFile(tmp_path / "m" / "arrays.npz") as z:
        assert {"layer_weights.npy", "layer_intercept.npy"} <= set(z.namelist())
    with np.load(tmp_path / "m" / "arrays.npz", allow_pickle=False) as npz:
        assert npz["layer_weights"].shape == (len(CATEGORIES), len(CATEGORIES))
    loaded, _ = load_model(tmp_path / "m")
    probe = enc.transform([items[i] for i in te[:50]], allow_missing=True)
    np.testing.assert_array_equal(loaded.joint_log_likelihood(probe), model.joint_log_likelihood(probe))


def test_fit_rows_models_have_no_layer() -> None:
    """Out-of-fold scoring counts plain models: a layer never feeds its own inputs."""
    items = [{"subject": w, "body": None, "channel": None, "tenure": None} for w in WORDS]
    labels = [QUEUES[i % 3] for i in range(len(WORDS))]
    model = NaiveBayes.fit(SCHEMA, items, labels, ModelSpec(score_layer=True))
    batch = model.encoder.transform(items)
    part = fit_rows(model.encoder, batch, labels, np.arange(6), model.spec, model.queues)
    assert part.layer_ is None
    np.testing.assert_array_equal(part.joint_log_likelihood(subset(batch, np.arange(6, 10))),
                                  part.base_scores(subset(batch, np.arange(6, 10))))
