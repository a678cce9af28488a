"""The token-count transforms (tf_log, idf, length_norm; Rennie et al. 2003) and the settings grid that tries them.

References: scikit-learn's TfidfTransformer, ComplementNB and MultinomialNB (sklearn.feature_extraction.text,
sklearn.naive_bayes) on random count data. TfidfTransformer's `sublinear_tf` is 1 + log(tf), not the
log(1 + tf) of Rennie et al., so the reference pipelines apply np.log1p first and leave sublinear_tf off; the
idf (smooth_idf=True) and the L2 norm are scikit-learn's own. For learning from corrections the reference is the
model's definition: a function of the counts of the per-item vectors, so any sequence of learns, forgets and
relabels equals a fresh count of the final labelled items with the same encoder (and the same frozen idf).
"""

from __future__ import annotations

import csv
import hashlib
import itertools
import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.feature_extraction.text import TfidfTransformer
from sklearn.naive_bayes import ComplementNB, MultinomialNB
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer

from triage.config import config_from_dict, load_config
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.store.artifacts import load_model, save_model

TEXT_ONLY = Schema(fields=(FieldSpec("text", FieldRole.TEXT),), id="id", label="queue")
RENNIE = {"tf_log": True, "idf": True, "length_norm": True}
SEEDS = (0, 1, 2)
REPO = Path(__file__).resolve().parents[1]


def _text(row: np.ndarray) -> str:
    return " ".join(f"w{j:03d}" for j, c in enumerate(row) for _ in range(int(c)))


def _data(seed: int, n: int = 80, V: int = 25, Q: int = 4, lam: float = 0.8):
    """Counts C (every word seen in training, some repeated), labels using every queue."""
    rng = np.random.default_rng(seed)
    C = rng.poisson(lam, (n, V))
    C[rng.integers(0, n, V), np.arange(V)] += 1
    C[0] = 0  # one empty text
    C[1, :3] = 7  # one text with heavy repeats, where log(1 + x) matters
    y = np.array([f"q{i % Q}" for i in range(n)])[rng.permutation(n)]
    return C, y


def _items(C: np.ndarray) -> list[dict]:
    return [{"text": _text(row)} for row in C]


def _fit(C: np.ndarray, y: np.ndarray, **spec) -> NaiveBayes:
    m = NaiveBayes.fit(TEXT_ONLY, _items(C), list(y), ModelSpec(**spec))
    np.testing.assert_array_equal(m.encoder.transform(_items(C)).X.toarray(), C)  # columns are w000.. in order
    return m


def _log1p_tfidf() -> list:
    return [FunctionTransformer(np.log1p, accept_sparse=True),
            TfidfTransformer(norm="l2", use_idf=True, smooth_idf=True, sublinear_tf=False)]


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize(("text_model", "norm"), [("complement", False), ("complement-norm", True)])
@pytest.mark.parametrize("alpha", [1.0, 0.1])
def test_rennie_complement_equals_sklearn_tfidf_pipeline(text_model: str, norm: bool, alpha: float,
                                                         seed: int) -> None:
    # reference: sklearn Pipeline(log1p, TfidfTransformer(norm='l2', smooth_idf=True), ComplementNB(alpha));
    # ComplementNB's decision carries no prior, so ours runs with a uniform prior
    C, y = _data(seed)
    Ct, _ = _data(seed + 100, n=30)
    m = _fit(C, y, text_model=text_model, alpha_text=alpha, prior="uniform", **RENNIE)
    ref = make_pipeline(*_log1p_tfidf(), ComplementNB(alpha=alpha, norm=norm)).fit(sp.csr_matrix(C), y)
    np.testing.assert_allclose(m.idf_, ref[1].idf_, rtol=0, atol=1e-12)
    test = m.encoder.transform(_items(Ct))
    np.testing.assert_allclose(m.predict_log_proba(test), ref.predict_log_proba(sp.csr_matrix(Ct)),
                               rtol=0, atol=1e-9)
    for i in range(6):  # the single-item path applies the same transforms
        np.testing.assert_allclose(m.joint_log_likelihood_one(m.encoder.encode(_items(Ct[i:i + 1])[0])),
                                   m.joint_log_likelihood(test)[i], rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", SEEDS)
def test_rennie_multinomial_equals_multinomial_nb_on_the_transformed_matrix(seed: int) -> None:
    # reference: sklearn MultinomialNB (fitted prior) on sklearn's TfidfTransformer output of log1p(C)
    C, y = _data(seed)
    Ct, _ = _data(seed + 100, n=30)
    m = _fit(C, y, text_model="multinomial", alpha_text=0.5, **RENNIE)
    tfidf = make_pipeline(*_log1p_tfidf()).fit(sp.csr_matrix(C))
    ref = MultinomialNB(alpha=0.5).fit(tfidf.transform(sp.csr_matrix(C)), y)
    test = m.encoder.transform(_items(Ct))
    np.testing.assert_allclose(m.predict_log_proba(test), ref.predict_log_proba(tfidf.transform(sp.csr_matrix(Ct))),
                               rtol=0, atol=1e-9)


@pytest.mark.parametrize("seed", SEEDS)
def test_tf_log_alone_equals_multinomial_nb_on_log1p_counts(seed: int) -> None:
    # reference: sklearn MultinomialNB on np.log1p(C)
    C, y = _data(seed)
    Ct, _ = _data(seed + 100, n=30)
    m = _fit(C, y, alpha_text=1.0, tf_log=True)
    ref = MultinomialNB(alpha=1.0).fit(np.log1p(C), y)
    test = m.encoder.transform(_items(Ct))
    np.testing.assert_allclose(m.predict_log_proba(test), ref.predict_log_proba(np.log1p(Ct)), rtol=0, atol=1e-9)
    plain = _fit(C, y, alpha_text=1.0)
    assert np.abs(m.predict_log_proba(test) - plain.predict_log_proba(test)).max() > 1e-3  # the option acts


def test_transforms_count_presence_in_doc_freq_and_bernoulli_ignores_them() -> None:
    C, y = _data(3)
    Ct, _ = _data(103, n=30)
    m = _fit(C, y, **RENNIE)
    plain = _fit(C, y)
    np.testing.assert_array_equal(m.counts.doc_freq_, plain.counts.doc_freq_)
    assert not np.allclose(m.counts.token_count_, plain.counts.token_count_)
    b = _fit(C, y, text_model="bernoulli", **RENNIE)
    b0 = _fit(C, y, text_model="bernoulli")
    test = b.encoder.transform(_items(Ct))
    np.testing.assert_array_equal(b.predict_log_proba(test), b0.predict_log_proba(test))


WORDS = ["battery", "invoice", "smoke", "app", "login", "refund", "panel", "late"]
NEW_WORDS = ["inverter", "swelling", "wifi"]
SCHEMA = Schema(fields=(FieldSpec("subject", FieldRole.TEXT, weight=1.5), FieldSpec("body", FieldRole.TEXT),
                        FieldSpec("channel", FieldRole.CATEGORY)), id="id", label="queue")
QUEUES = ["billing", "fault", "install"]
text_st = st.lists(st.sampled_from(WORDS + NEW_WORDS), max_size=8).map(" ".join) | st.none()
item_st = st.fixed_dictionaries({"subject": text_st, "body": text_st,
                                 "channel": st.sampled_from(["email", "phone", "chat", None])})
op_st = st.one_of(
    st.tuples(st.just("learn"), item_st, st.sampled_from([*QUEUES, "safety"])),
    st.tuples(st.just("forget"), st.integers(min_value=0, max_value=1000)),
    st.tuples(st.just("relabel"), st.integers(min_value=0, max_value=1000), st.sampled_from([*QUEUES, "safety"])),
)
PROBES = [{"subject": "battery smoke smoke", "body": "inverter wifi", "channel": "fax"},
          {"subject": None, "body": "", "channel": None},
          {"subject": "refund refund refund late", "body": "app", "channel": "email"}]


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(item_st, st.sampled_from(QUEUES)), min_size=2, max_size=10), st.lists(op_st, max_size=10),
       st.sampled_from(["multinomial", "complement", "complement-norm"]), st.booleans())
def test_learn_forget_relabel_equals_fresh_fit_with_transforms(initial, ops, text_model, idf) -> None:
    # tf_log and length_norm act per item: exact against a fresh fit; idf: exact against a fresh count under the
    # idf vector frozen at fit (grown for new words), which is what the options promise
    spec = ModelSpec(text_model=text_model, alpha_text=0.5, tf_log=True, length_norm=True, idf=idf)
    held = [(dict(it), q) for it, q in initial]
    model = NaiveBayes.fit(SCHEMA, [it for it, _ in held], [q for _, q in held], spec)
    for op in ops:
        if op[0] == "learn":
            model.learn(op[1], op[2])
            held.append((dict(op[1]), op[2]))
        elif not held:
            continue
        elif op[0] == "forget":
            it, q = held.pop(op[1] % len(held))
            model.forget(it, q)
        else:
            i = op[1] % len(held)
            it, q = held[i]
            model.relabel(it, q, op[2])
            held[i] = (it, op[2])
    if not held:
        return
    batch = model.encoder.transform([it for it, _ in held], allow_missing=True)
    fresh = NaiveBayes.from_batch(model.encoder, batch, [q for _, q in held], spec, queues=model.queues,
                                  idf=model.idf_)
    probe = model.encoder.transform(PROBES + [it for it, _ in held], allow_missing=True)
    order = [fresh.queues.index(q) for q in model.queues]  # fresh counts list queues in name order
    live = np.array([q for q in range(len(model.queues)) if model.counts.class_count_[q] > 0])
    np.testing.assert_allclose(model.counts.token_count_, fresh.counts.token_count_[order], rtol=0, atol=1e-9)
    np.testing.assert_allclose(model.joint_log_likelihood(probe)[:, live],
                               fresh.joint_log_likelihood(probe)[:, order][:, live], rtol=0, atol=1e-9)
    for i, it in enumerate(PROBES):
        np.testing.assert_allclose(model.joint_log_likelihood_one(model.encoder.encode(it, allow_missing=True)),
                                   model.joint_log_likelihood(probe)[i], rtol=0, atol=1e-9)


def test_new_words_get_the_largest_idf() -> None:
    C, y = _data(4)
    m = _fit(C, y, **RENNIE)
    before = m.idf_.copy()
    m.learn({"text": "w001 brandnewword"}, "q0")
    assert m.idf_.shape == (m.encoder.n_terms,)
    np.testing.assert_array_equal(m.idf_[:before.size], before)
    assert m.idf_[m.encoder.vocabulary_["brandnewword"]] == before.max()


def test_artifact_round_trip_keeps_idf_and_posteriors(tmp_path: Path) -> None:
    C, y = _data(5)
    Ct, _ = _data(105, n=30)
    m = _fit(C, y, text_model="complement", **RENNIE)
    m.learn({"text": "w002 w002 unseenword"}, "q1")  # idf grown past the fit-time vocabulary
    path = save_model(m, tmp_path / "v1")
    with np.load(path / "arrays.npz", allow_pickle=False) as npz:
        assert "idf" in npz.files
    loaded, manifest = load_model(path)
    assert manifest["spec"]["idf"] is True
    np.testing.assert_array_equal(loaded.idf_, m.idf_)
    probes = _items(Ct) + [{"text": "unseenword w002"}]
    np.testing.assert_array_equal(loaded.predict_log_proba(loaded.encoder.transform(probes)),
                                  m.predict_log_proba(m.encoder.transform(probes)))


def test_an_artifact_without_idf_still_loads(tmp_path: Path) -> None:
    """A model saved before the transforms existed: no 'idf' array, no transform keys in its spec."""
    C, y = _data(6)
    m = _fit(C, y, alpha_text=0.5)
    path = save_model(m, tmp_path / "v1")
    with np.load(path / "arrays.npz", allow_pickle=False) as npz:
        assert "idf" not in npz.files
    manifest_path = path / "manifest.json"
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    for key in ("tf_log", "idf", "length_norm"):
        del manifest["spec"][key]
    # written as format 1 was: the arrays' checksum in the manifest, no checksum list
    manifest["format_version"] = 1
    manifest["arrays_sha256"] = hashlib.sha256((path / "arrays.npz").read_bytes()).hexdigest()
    (path / "checksums.json").unlink()
    manifest_path.write_text(json.dumps(manifest), encoding="utf-8")
    loaded, _ = load_model(path)
    assert loaded.idf_ is None and not loaded.spec.tf_log and not loaded.spec.length_norm
    test = m.encoder.transform(_items(C[:20]))
    np.testing.assert_array_equal(loaded.predict_log_proba(test), m.predict_log_proba(test))


def test_idf_spec_without_its_vector_is_refused() -> None:
    C, y = _data(7)
    m = _fit(C, y, **RENNIE)
    with pytest.raises(ValueError, match="idf"):
        NaiveBayes(m.encoder, m.counts, m.spec)


# ----- the settings grid --------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def small_ws(tmp_path_factory: pytest.TempPathFactory):
    from triage.app import Workspace

    d = tmp_path_factory.mktemp("grid")
    root = d / "ws"
    root.mkdir()
    (root / "triage.toml").write_text((REPO / "configs" / "voltwren.toml").read_text(encoding="utf-8"),
                                      encoding="utf-8")
    with (REPO / "demo_corpus" / "voltwren_tickets.csv").open(newline="", encoding="utf-8") as fh:
        rows = list(itertools.islice(csv.DictReader(fh), 800))
    src = d / "tickets.csv"
    with src.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    ws = Workspace.open(root)
    assert ws.import_file(src).added == 800
    yield ws
    ws.close()


def test_grid_covers_weights_and_transforms_and_adopt_writes_them(small_ws) -> None:
    from triage.app import tuning

    rows = tuning.run_grid(small_ws, folds=3)
    assert 24 <= len(rows) <= 60
    keys = {(r.text_model, r.alpha_text, r.bigrams, r.fields, tuple(r.text_weights.items()), r.transforms)
            for r in rows}
    assert len(keys) == len(rows)  # no setting twice
    assert {r.text_weights["subject"] for r in rows} == {1.0, 2.0, 3.0}
    assert all(r.text_weights["body"] == 1.0 for r in rows)
    assert {r.text_model for r in rows if r.transforms} == {"multinomial", "complement"}
    assert {r.transforms for r in rows} == {False, True}
    assert all(0 <= r.accuracy <= 1 and 0 <= r.coverage <= 1 and np.isfinite(r.log_loss) for r in rows)
    json.dumps([r.to_dict() for r in rows])

    # one criterion, the one train uses (selection.ranked): coverage at the targets within one standard error
    # of the best, then macro-F1, log loss
    from triage.core.selection import ranked

    def figures(r):
        return (r.coverage, r.macro_f1, r.log_loss)

    again = ranked(list(reversed(rows)), figures, len(small_ws.store.labelled_items()))
    assert [figures(r) for r in rows] == [figures(r) for r in again]

    chosen = next(r for r in rows if r.transforms and r.text_weights["subject"] == 3.0)
    before = small_ws.config.model.text_model
    changes = tuning.adopt(small_ws, chosen)
    # every change written is reported, and only changes
    assert ("fields.subject.weight", 2.0, 3.0) in changes and ("model.tf_log", False, True) in changes
    assert all(old != new for _, old, new in changes)
    assert (("model.text_model", before, chosen.text_model) in changes) == (before != chosen.text_model)
    text = (small_ws.root / "triage.toml").read_text(encoding="utf-8")
    cfg = config_from_dict(tomllib.loads(text))
    assert cfg.schema.field("subject").weight == 3.0 and cfg.schema.field("body").weight == 1.0
    assert (cfg.model.tf_log, cfg.model.idf, cfg.model.length_norm) == (True, True, True)
    assert (cfg.model.text_model, cfg.model.alpha_text) == (chosen.text_model, chosen.alpha_text)
    assert load_config(small_ws.root / "triage.toml").schema == cfg.schema

    plain = next(r for r in rows if not r.transforms and r.text_weights["subject"] == 1.0)
    tuning.adopt(small_ws, plain)
    cfg = load_config(small_ws.root / "triage.toml")
    assert cfg.schema.field("subject").weight == 1.0
    assert (cfg.model.tf_log, cfg.model.idf, cfg.model.length_norm) == (False, False, False)
