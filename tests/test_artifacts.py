"""Model artifacts: an .npz of count tables plus a JSON manifest, written atomically, refused when unusable.

The files are checked with the formats' own readers (numpy.load with allow_pickle=False, json.loads), so the
artifact stays readable without triage.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.store.artifacts import FORMAT_VERSION, ArtifactError, load_model, read_manifest, save_model

SCHEMA = Schema(
    fields=(FieldSpec("subject", FieldRole.TEXT, weight=2.0), FieldSpec("body", FieldRole.TEXT),
            FieldSpec("channel", FieldRole.CATEGORY), FieldSpec("tenure", FieldRole.NUMBER, bins=3)),
    id="id", label="queue",
)
ITEMS = [
    {"subject": "Battery smoke", "body": "the battery is swelling", "channel": "phone", "tenure": 30},
    {"subject": "Invoice wrong", "body": "refund order VW-104233", "channel": "email", "tenure": 400},
    {"subject": "App login", "body": "cannot log in to the app", "channel": "chat", "tenure": 90},
    {"subject": "Refund", "body": "double charge on invoice", "channel": "email", "tenure": None},
    {"subject": "Inverter fault", "body": "error code on the display", "channel": None, "tenure": 1200},
]
LABELS = ["fault", "billing", "app", "billing", "fault"]
PROBES = ITEMS + [
    {"subject": "Straße café", "body": "unheard words", "channel": "fax", "tenure": -3},
    {"subject": None, "body": "", "channel": None, "tenure": None},
]


def _model(text_model: str = "multinomial") -> NaiveBayes:
    m = NaiveBayes.fit(SCHEMA, ITEMS, LABELS, ModelSpec(text_model=text_model, alpha_text=0.5, bigrams=True))
    # grow after fit: a new word, a new channel and a new queue appended after the sorted ones
    m.learn({"subject": "Smoke alarm", "body": "burning smell", "channel": "web", "tenure": 5}, "safety")
    return m


@pytest.mark.parametrize("text_model", ["multinomial", "bernoulli", "complement", "complement-norm"])
def test_round_trip_gives_identical_posteriors(tmp_path: Path, text_model: str) -> None:
    m = _model(text_model)
    path = save_model(m, tmp_path / "v1", fingerprint="abc123", extra={"cutoffs": {"fault": 0.9}})
    loaded, manifest = load_model(path)
    assert loaded.queues == m.queues == ["app", "billing", "fault", "safety"]
    assert loaded.encoder.terms_ == m.encoder.terms_
    assert loaded.encoder.levels_ == m.encoder.levels_
    assert loaded.spec == m.spec
    assert manifest["fingerprint"] == "abc123" and manifest["extra"] == {"cutoffs": {"fault": 0.9}}
    a = m.predict_log_proba(m.encoder.transform(PROBES, allow_missing=True))
    b = loaded.predict_log_proba(loaded.encoder.transform(PROBES, allow_missing=True))
    np.testing.assert_array_equal(a, b)
    # the loaded model keeps learning exactly like the original
    extra_item = {"subject": "Panel cracked", "body": "hail", "channel": "phone", "tenure": 60}
    m.relabel(ITEMS[0], "fault", "safety")
    loaded.relabel(ITEMS[0], "fault", "safety")
    m.learn(extra_item, "install")
    loaded.learn(extra_item, "install")
    np.testing.assert_array_equal(m.predict_log_proba(m.encoder.transform(PROBES, allow_missing=True)),
                                  loaded.predict_log_proba(loaded.encoder.transform(PROBES, allow_missing=True)))


def test_files_are_plain_npz_and_json(tmp_path: Path) -> None:
    m = _model()
    path = save_model(m, tmp_path / "v1")
    manifest = json.loads((path / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["format_version"] == FORMAT_VERSION
    assert manifest["queues"] == m.queues
    assert manifest["arrays_sha256"] == hashlib.sha256((path / "arrays.npz").read_bytes()).hexdigest()
    with np.load(path / "arrays.npz", allow_pickle=False) as npz:
        np.testing.assert_array_equal(npz["class_count"], m.counts.class_count_)
        np.testing.assert_array_equal(npz["token_count"], m.counts.token_count_)
        np.testing.assert_array_equal(npz["field_count_0"], m.counts.field_count_[0])


def _edit_manifest(path: Path, **changes) -> None:
    mpath = path / "manifest.json"
    manifest = json.loads(mpath.read_text(encoding="utf-8"))
    for k, v in changes.items():
        if v is None:
            del manifest[k]
        else:
            manifest[k] = v
    mpath.write_text(json.dumps(manifest), encoding="utf-8")


def test_model_from_the_future_is_refused(tmp_path: Path) -> None:
    path = save_model(_model(), tmp_path / "v1")
    _edit_manifest(path, format_version=FORMAT_VERSION + 1)
    with pytest.raises(ArtifactError, match=f"version {FORMAT_VERSION + 1}"):
        load_model(path)
    with pytest.raises(ArtifactError, match="upgrade triage"):
        read_manifest(path)
    for bad in (0, "1", 1.5):
        _edit_manifest(path, format_version=bad)
        with pytest.raises(ArtifactError, match="version"):
            load_model(path)


def test_truncated_arrays_are_refused(tmp_path: Path) -> None:
    path = save_model(_model(), tmp_path / "v1")
    apath = path / "arrays.npz"
    data = apath.read_bytes()
    apath.write_bytes(data[: len(data) // 2])
    with pytest.raises(ArtifactError, match="checksum"):
        load_model(path)
    # even with a checksum that matches the truncated file, the broken zip is reported, not raised raw
    _edit_manifest(path, arrays_sha256=hashlib.sha256(apath.read_bytes()).hexdigest())
    with pytest.raises(ArtifactError, match="unreadable"):
        load_model(path)
    apath.unlink()
    with pytest.raises(ArtifactError, match="missing"):
        load_model(path)


def test_arrays_needing_pickle_are_refused(tmp_path: Path) -> None:
    m = _model()
    path = save_model(m, tmp_path / "v1")
    apath = path / "arrays.npz"
    arrays = dict(m.counts.arrays())
    arrays["class_count"] = np.array([object()] * m.counts.n_queues, dtype=object)
    with apath.open("wb") as fh:
        np.savez(fh, **arrays)
    _edit_manifest(path, arrays_sha256=hashlib.sha256(apath.read_bytes()).hexdigest())
    with pytest.raises(ArtifactError):
        load_model(path)


@pytest.mark.parametrize(
    "content",
    [b"", b"{\"format\": \"triage-model\", \"format_ver", b"\xff\xfe\x00garbage", b"[1, 2, 3]",
     b"{\"format\": \"something-else\", \"format_version\": 1}"],
)
def test_corrupted_manifest_is_refused(tmp_path: Path, content: bytes) -> None:
    path = save_model(_model(), tmp_path / "v1")
    (path / "manifest.json").write_bytes(content)
    with pytest.raises(ArtifactError):
        load_model(path)


@pytest.mark.parametrize("key", ["encoder", "schema", "spec", "queues"])
def test_manifest_missing_a_part_is_refused(tmp_path: Path, key: str) -> None:
    path = save_model(_model(), tmp_path / "v1")
    _edit_manifest(path, **{key: None})
    with pytest.raises(ArtifactError, match="unreadable"):
        load_model(path)


def test_counts_and_vocabulary_must_agree(tmp_path: Path) -> None:
    path = save_model(_model(), tmp_path / "v1")
    manifest = json.loads((path / "manifest.json").read_text(encoding="utf-8"))
    manifest["encoder"]["terms"] = manifest["encoder"]["terms"][:-1]
    (path / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    with pytest.raises(ArtifactError, match="disagree"):
        load_model(path)


def test_no_model_here(tmp_path: Path) -> None:
    with pytest.raises(ArtifactError, match="no model"):
        load_model(tmp_path / "nothing")


def test_saving_over_a_version_refuses_and_keeps_it(tmp_path: Path) -> None:
    m = _model()
    path = save_model(m, tmp_path / "v1")
    before = {p.name: p.read_bytes() for p in path.iterdir()}
    other = NaiveBayes.fit(SCHEMA, ITEMS[:2], LABELS[:2])
    with pytest.raises(ArtifactError, match="never overwritten"):
        save_model(other, path)
    assert {p.name: p.read_bytes() for p in path.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["v1"]  # no temporary folder left behind


def test_a_failed_save_leaves_nothing(tmp_path: Path) -> None:
    """The manifest cannot be written (extra is not JSON): the arrays were already written to the temporary
    folder, so a non-atomic save would leave half a model behind."""
    with pytest.raises(TypeError):
        save_model(_model(), tmp_path / "models" / "v2", extra={"not json": object()})
    assert not (tmp_path / "models" / "v2").exists()
    assert list((tmp_path / "models").iterdir()) == []  # the temporary folder is gone too
    # a later save under the same name works
    save_model(_model(), tmp_path / "models" / "v2")
    assert sorted(p.name for p in (tmp_path / "models" / "v2").iterdir()) == ["arrays.npz", "manifest.json"]
