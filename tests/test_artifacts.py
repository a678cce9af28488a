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
from triage.store.artifacts import (
    FORMAT_VERSION,
    SUMS,
    ArtifactError,
    clean_models_dir,
    load_model,
    read_manifest,
    save_model,
)

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
    # every other file is covered by the checksum list (SHA-256 as hashlib computes it, FIPS 180-4)
    sums = json.loads((path / SUMS).read_text(encoding="utf-8"))["sha256"]
    for name in ("arrays.npz", "manifest.json"):
        assert sums[name] == hashlib.sha256((path / name).read_bytes()).hexdigest()
    with np.load(path / "arrays.npz", allow_pickle=False) as npz:
        np.testing.assert_array_equal(npz["class_count"], m.counts.class_count_)
        np.testing.assert_array_equal(npz["token_count"], m.counts.token_count_)
        np.testing.assert_array_equal(npz["field_count_0"], m.counts.field_count_[0])


def _resum(path: Path) -> None:
    """Write a checksum list matching the files as they are now: an artifact whose damage the checksums cannot
    see (written wrongly rather than damaged later), so the content checks must find it."""
    sums = {n: hashlib.sha256((path / n).read_bytes()).hexdigest() for n in ("arrays.npz", "manifest.json")}
    (path / SUMS).write_text(json.dumps({"format": "triage-model-checksums", "sha256": sums}), encoding="utf-8")


def _edit_manifest(path: Path, resum: bool = True, **changes) -> None:
    mpath = path / "manifest.json"
    manifest = json.loads(mpath.read_text(encoding="utf-8"))
    for k, v in changes.items():
        if v is None:
            del manifest[k]
        else:
            manifest[k] = v
    mpath.write_text(json.dumps(manifest), encoding="utf-8")
    if resum:
        _resum(path)


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
    _resum(path)
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
    _resum(path)
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
    with pytest.raises(ArtifactError, match="checksum"):
        load_model(path)
    _resum(path)
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
    _resum(path)
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
    assert sorted(p.name for p in (tmp_path / "models" / "v2").iterdir()) == ["arrays.npz", SUMS, "manifest.json"]


# ----------------------------------------------------------------------------------------------------------
# every file checksummed; content checked on load; files private


def test_an_edited_manifest_is_refused_by_its_checksum(tmp_path: Path) -> None:
    """Swapping two queue names keeps the manifest valid JSON and every shape right: only a checksum over the
    manifest itself can tell."""
    path = save_model(_model(), tmp_path / "v1")
    queues = json.loads((path / "manifest.json").read_text(encoding="utf-8"))["queues"]
    _edit_manifest(path, resum=False, queues=[queues[1], queues[0], *queues[2:]])
    with pytest.raises(ArtifactError, match="checksum"):
        load_model(path)
    (path / SUMS).unlink()
    with pytest.raises(ArtifactError, match=SUMS):
        load_model(path)


def _edit_arrays(path: Path, **changes: np.ndarray) -> None:
    apath = path / "arrays.npz"
    with np.load(apath, allow_pickle=False) as npz:
        arrays = {k: npz[k] for k in npz.files}
    arrays.update(changes)
    with apath.open("wb") as fh:
        np.savez(fh, **arrays)
    _resum(path)


def test_content_that_cannot_be_right_is_refused(tmp_path: Path) -> None:
    m = _model()
    cases = {
        "repeat": lambda p: _edit_manifest(p, queues=[m.queues[0], *m.queues[:-1]]),
        "columns": lambda p: _edit_arrays(p, field_count_0=m.counts.field_count_[0][:, :-1]),
        "increasing": lambda p: _edit_manifest(p, encoder={**m.encoder.to_manifest(),
                                                           "edges": {"tenure": [400.0, 30.0]}}),
        "more items containing": lambda p: _edit_arrays(p, doc_freq=m.counts.doc_freq_ + 1e6),
        "more values": lambda p: _edit_arrays(p, field_count_0=m.counts.field_count_[0] * 1e6),
        "negative": lambda p: _edit_arrays(p, class_count=-m.counts.class_count_),
        "finite": lambda p: _edit_arrays(p, token_count=np.full_like(m.counts.token_count_, np.inf)),
    }
    for i, (why, damage) in enumerate(cases.items()):
        path = save_model(m, tmp_path / f"v{i}")
        load_model(path)  # fine before
        damage(path)
        with pytest.raises(ArtifactError, match=why):
            load_model(path)


def test_files_are_private_and_never_written_through_a_link(tmp_path: Path) -> None:
    path = save_model(_model(), tmp_path / "models" / "v1")
    assert (path.stat().st_mode & 0o777) == 0o700
    for f in path.iterdir():
        assert (f.stat().st_mode & 0o777) == 0o600, f
    target = tmp_path / "elsewhere"
    target.mkdir()
    (tmp_path / "models" / "v2").symlink_to(target)
    with pytest.raises(ArtifactError, match="never overwritten"):
        save_model(_model(), tmp_path / "models" / "v2")
    assert list(target.iterdir()) == []


def test_clean_removes_old_temporary_and_orphan_folders_only(tmp_path: Path) -> None:
    models = tmp_path / "models"
    kept = save_model(_model(), models / "kept")
    orphan = save_model(_model(), models / "orphan")
    young = save_model(_model(), models / "young")
    tmp = models / ".half.abc.tmp"
    tmp.mkdir()
    (tmp / "arrays.npz").write_bytes(b"half")
    other = models / "notes"
    other.mkdir()  # not a model folder: never touched
    now = orphan.stat().st_mtime + 7200
    import os
    os.utime(young, (now - 10, now - 10))
    removed = clean_models_dir(models, {"kept"}, now=now)
    assert sorted(p.name for p in removed) == [".half.abc.tmp", "orphan"]
    assert kept.exists() and young.exists() and other.exists()
    assert not orphan.exists() and not tmp.exists()
