"""Model artifacts on disk: numpy arrays in an .npz plus a JSON manifest, never pickle.

A model is a folder `<name>/` holding `arrays.npz` (the count tables, the only learned numbers, plus an "idf"
array when the model weights terms by the idf frozen at fit; absent means no idf) and
`manifest.json` (format version, schema, vocabulary, levels, bin edges, model settings, a checksum of the
arrays, the training-data fingerprint, and any extra JSON such as calibration and cutoffs). The folder is
written under a temporary name, every file fsynced, then renamed into place: a crash leaves either the old
model or the new one, never half of one. Loading checks the format version and the checksum, and only ever
calls `np.load(allow_pickle=False)` and `json.loads`, so a model file cannot run code.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from triage.core.counts import CountError, CountTables
from triage.core.encode import Encoder
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, FieldSpec, Schema

FORMAT = "triage-model"
FORMAT_VERSION = 1


class ArtifactError(ValueError):
    """A model file that cannot be used: missing, corrupted, truncated, or of an unknown format version."""


def schema_to_dict(schema: Schema) -> dict[str, Any]:
    return {
        "id": schema.id, "label": schema.label, "time": schema.time,
        "fields": [{"name": f.name, "role": f.role.value, "weight": f.weight, "bins": f.bins} for f in schema.fields],
    }


def schema_from_dict(d: dict[str, Any]) -> Schema:
    fields = tuple(FieldSpec(f["name"], FieldRole(f["role"]), float(f["weight"]), int(f["bins"])) for f in d["fields"])
    return Schema(fields=fields, id=d["id"], label=d["label"], time=d.get("time"))


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def save_model(model: NaiveBayes, path: Path, *, fingerprint: str = "", extra: dict[str, Any] | None = None) -> Path:
    """Write the model folder atomically; refuses to replace an existing model (versions are immutable)."""
    path = Path(path)
    if path.exists():
        raise ArtifactError(f"{path}: a model is already stored here; model versions are never overwritten")
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent))
    try:
        arrays_path = tmp / "arrays.npz"
        with arrays_path.open("wb") as fh:
            arrays = model.counts.arrays()
            if model.idf_ is not None:
                arrays = {**arrays, "idf": model.idf_}
            np.savez(fh, **arrays)
            fh.flush()
            os.fsync(fh.fileno())
        manifest = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "arrays_sha256": _sha256(arrays_path),
            "schema": schema_to_dict(model.encoder.schema),
            "spec": model.spec.to_dict(),
            "encoder": model.encoder.to_manifest(),
            "queues": model.queues,
            "fingerprint": fingerprint,
            "extra": extra or {},
        }
        with (tmp / "manifest.json").open("w", encoding="utf-8") as fh:
            json.dump(manifest, fh, ensure_ascii=False)
            fh.flush()
            os.fsync(fh.fileno())
        _fsync_dir(tmp)
        os.rename(tmp, path)
        _fsync_dir(path.parent)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return path


def read_manifest(path: Path) -> dict[str, Any]:
    """The manifest alone, checked for format and version."""
    mpath = Path(path) / "manifest.json"
    if not mpath.exists():
        raise ArtifactError(f"{path}: no model here (manifest.json is missing)")
    try:
        manifest = json.loads(mpath.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise ArtifactError(f"{mpath}: manifest is corrupted or truncated ({exc})") from None
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise ArtifactError(f"{mpath}: not a triage model manifest")
    version = manifest.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION or version < 1:
        raise ArtifactError(
            f"{mpath}: model format version {version!r} is not supported by this triage "
            f"(it reads version {FORMAT_VERSION}); upgrade triage or retrain"
        )
    return manifest


def load_model(path: Path) -> tuple[NaiveBayes, dict[str, Any]]:
    """Load a model folder; returns the model and its manifest (fingerprint, extra)."""
    path = Path(path)
    manifest = read_manifest(path)
    arrays_path = path / "arrays.npz"
    if not arrays_path.exists():
        raise ArtifactError(f"{path}: arrays.npz is missing")
    if _sha256(arrays_path) != manifest.get("arrays_sha256"):
        raise ArtifactError(f"{arrays_path}: checksum does not match the manifest (corrupted or truncated file)")
    try:
        schema = schema_from_dict(manifest["schema"])
        with np.load(arrays_path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
        counts = CountTables.from_arrays(manifest["queues"], arrays, len(schema.value_fields))
        encoder = Encoder.from_manifest(schema, manifest["encoder"])
        spec = ModelSpec(**manifest["spec"])
        idf = arrays.get("idf")
        if spec.idf and idf is None:
            raise ValueError("the settings weight terms by idf but arrays.npz holds no idf array")
    except (KeyError, TypeError, ValueError, zipfile.BadZipFile, OSError, CountError) as exc:
        raise ArtifactError(f"{path}: model is unreadable ({type(exc).__name__}: {exc})") from None
    if counts.n_terms != encoder.n_terms:
        raise ArtifactError(f"{path}: the count tables and the vocabulary disagree ({counts.n_terms} vs {encoder.n_terms})")
    try:
        model = NaiveBayes(encoder, counts, spec, idf)
    except ValueError as exc:
        raise ArtifactError(f"{path}: model is unreadable ({exc})") from None
    return model, manifest
