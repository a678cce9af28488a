"""Model artifacts on disk: numpy arrays in an .npz plus a JSON manifest, never pickle.

A model is a folder `<name>/` holding `arrays.npz` (the count tables, the only learned numbers, plus an "idf"
array when the model weights terms by the idf frozen at fit; absent means no idf),
`manifest.json` (format version, schema, vocabulary, levels, bin edges, model settings, the training-data
fingerprint, and any extra JSON such as calibration and cutoffs) and `checksums.json` (the SHA-256 of every
other file, the manifest included). The folder is written under a temporary name, every file fsynced (mode
0600, created exclusively), then renamed into place: a crash leaves either the old model or the new one, never
half of one. Loading checks every checksum before it reads a file, then the format version, then the content
itself (unique queue names, table shapes against the vocabulary and the levels, finite non-negative counts,
no queue with more documents for a word or values for a field than items, increasing bin edges), and only
ever calls `np.load(allow_pickle=False)` and `json.loads`, so a model file cannot run code. Format version 1
(before checksums.json) is still read; its arrays were covered by a checksum in the manifest.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import tempfile
import time
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from triage.core.counts import CountError, CountTables
from triage.core.encode import Encoder
from triage.core.model import ModelSpec, NaiveBayes, encoder_sizes
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.stack import ScoreLayer

FORMAT = "triage-model"
FORMAT_VERSION = 2
SUMS = "checksums.json"
FILES = ("arrays.npz", "manifest.json")
FILE_MODE = 0o600
TMP_SUFFIX = ".tmp"
ORPHAN_AGE_S = 3600.0  # a model folder no version names is removed once it is this old (a train may be saving it)


class ArtifactError(ValueError):
    """A model file that cannot be used: missing, corrupted, truncated, or of an unknown format version."""


class ArtifactSpaceError(ArtifactError):
    """The disk is full: the model was not saved (nothing half-written is left)."""


def schema_to_dict(schema: Schema) -> dict[str, Any]:
    return {
        "id": schema.id, "label": schema.label, "time": schema.time,
        "fields": [{"name": f.name, "role": f.role.value, "weight": f.weight, "bins": f.bins,
                    "pieces": f.pieces} for f in schema.fields],
    }


def schema_from_dict(d: dict[str, Any]) -> Schema:
    fields = tuple(FieldSpec(f["name"], FieldRole(f["role"]), float(f["weight"]), int(f["bins"]),
                             pieces=f.get("pieces", "words")) for f in d["fields"])
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


def _create(path: Path) -> Any:
    """A new file opened for writing: exclusively, mode 0600, never through a symbolic link."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, FILE_MODE)
    return os.fdopen(fd, "wb")


def _write_json(path: Path, value: Any) -> None:
    with _create(path) as fh:
        fh.write(json.dumps(value, ensure_ascii=False).encode("utf-8"))
        fh.flush()
        os.fsync(fh.fileno())


def save_model(model: NaiveBayes, path: Path, *, fingerprint: str = "", extra: dict[str, Any] | None = None) -> Path:
    """Write the model folder atomically; refuses to replace an existing model (versions are immutable).

    A full disk raises ArtifactSpaceError and leaves nothing behind."""
    path = Path(path)
    if path.exists() or path.is_symlink():
        raise ArtifactError(f"{path}: a model is already stored here; model versions are never overwritten")
    try:
        path.parent.mkdir(mode=0o700, parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=TMP_SUFFIX, dir=path.parent))
    except OSError as exc:
        raise _os_error(path, exc) from exc
    try:
        _write_files(model, tmp, fingerprint, extra)
        os.rename(tmp, path)
        _fsync_dir(path.parent)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise _os_error(path, exc) from exc
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return path


def _os_error(path: Path, exc: OSError) -> ArtifactError:
    if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):  # EFBIG: a file size limit (ulimit -f)
        return ArtifactSpaceError(f"{path}: no room to write the model ({exc.strerror}); nothing was saved and "
                                  "the active model is unchanged: free some space and try again")
    return ArtifactError(f"{path}: cannot write the model: {exc.strerror or exc}")


def _write_files(model: NaiveBayes, tmp: Path, fingerprint: str, extra: dict[str, Any] | None) -> None:
    arrays_path = tmp / "arrays.npz"
    with _create(arrays_path) as fh:
        arrays = model.counts.arrays()
        if model.idf_ is not None:
            arrays = {**arrays, "idf": model.idf_}
        if model.layer_ is not None:
            arrays = {**arrays, **model.layer_.to_arrays()}
        np.savez(fh, **arrays)
        fh.flush()
        os.fsync(fh.fileno())
    manifest = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "schema": schema_to_dict(model.encoder.schema),
        "spec": model.spec.to_dict(),
        "encoder": model.encoder.to_manifest(),
        "queues": model.queues,
        "layer": model.layer_.to_manifest() if model.layer_ is not None else None,
        "fingerprint": fingerprint,
        "extra": extra or {},
    }
    _write_json(tmp / "manifest.json", manifest)
    _write_json(tmp / SUMS, {"format": f"{FORMAT}-checksums", "sha256": {f: _sha256(tmp / f) for f in FILES}})
    _fsync_dir(tmp)


def _verify_checksums(path: Path) -> bool:
    """Check every file against checksums.json; False when the folder predates it (format version 1)."""
    sums_path = path / SUMS
    if not sums_path.exists():
        return False
    try:
        sums = json.loads(sums_path.read_text(encoding="utf-8"))
        listed = sums["sha256"]
        if sums.get("format") != f"{FORMAT}-checksums" or not isinstance(listed, dict):
            raise ValueError("not a checksum list")
    except (OSError, ValueError, KeyError, TypeError, UnicodeDecodeError) as exc:
        raise ArtifactError(f"{sums_path}: the checksum list is corrupted ({exc})") from None
    for name in FILES:
        f = path / name
        if not f.is_file():
            raise ArtifactError(f"{path}: {name} is missing")
        if listed.get(name) != _sha256(f):
            raise ArtifactError(f"{f}: checksum does not match {SUMS} (corrupted, truncated or edited file)")
    return True


def read_manifest(path: Path) -> dict[str, Any]:
    """The manifest alone, its checksum and its format version checked."""
    path = Path(path)
    mpath = path / "manifest.json"
    if not path.is_dir():
        raise ArtifactError(f"{path}: no model here (the folder is missing)")
    if not mpath.exists():
        raise ArtifactError(f"{path}: no model here (manifest.json is missing)")
    summed = _verify_checksums(path)
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
    if version >= 2 and not summed:
        raise ArtifactError(f"{path}: {SUMS} is missing, so the files cannot be checked")
    return manifest


def load_model(path: Path) -> tuple[NaiveBayes, dict[str, Any]]:
    """Load a model folder; returns the model and its manifest (fingerprint, extra)."""
    path = Path(path)
    manifest = read_manifest(path)
    arrays_path = path / "arrays.npz"
    if not arrays_path.exists():
        raise ArtifactError(f"{path}: arrays.npz is missing")
    if manifest["format_version"] == 1 and _sha256(arrays_path) != manifest.get("arrays_sha256"):
        raise ArtifactError(f"{arrays_path}: checksum does not match the manifest (corrupted or truncated file)")
    try:
        schema = schema_from_dict(manifest["schema"])
        with np.load(arrays_path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
        _check_queues(manifest["queues"])
        counts = CountTables.from_arrays(manifest["queues"], arrays, len(schema.value_fields))
        encoder = Encoder.from_manifest(schema, manifest["encoder"])
        spec = ModelSpec(**manifest["spec"])
        idf = arrays.get("idf")
        if spec.idf and idf is None:
            raise ValueError("the settings weight terms by idf but arrays.npz holds no idf array")
        _check_content(counts, encoder, idf)
    except (KeyError, TypeError, ValueError, zipfile.BadZipFile, OSError, CountError) as exc:
        raise ArtifactError(f"{path}: model is unreadable ({type(exc).__name__}: {exc})") from None
    try:
        model = NaiveBayes(encoder, counts, spec, idf)
        if manifest.get("layer"):
            model.layer_ = ScoreLayer.from_parts(manifest["layer"], arrays)
    except (KeyError, ValueError) as exc:
        raise ArtifactError(f"{path}: model is unreadable ({exc})") from None
    return model, manifest


def _check_queues(queues: Any) -> None:
    if not isinstance(queues, list) or not queues:
        raise ValueError("the manifest lists no queues")
    if any(not isinstance(q, str) or not q.strip() for q in queues):
        raise ValueError("a queue name is empty or not text")
    if len(set(queues)) != len(queues):
        dup = sorted({q for q in queues if queues.count(q) > 1})
        raise ValueError(f"queue names repeat: {', '.join(dup)}")


def _check_content(counts: CountTables, encoder: Encoder, idf: np.ndarray | None) -> None:
    """What the shapes and the counts must be for the tables to mean what the manifest says."""
    if counts.n_terms != encoder.n_terms:
        raise ValueError(f"the count tables and the vocabulary disagree ({counts.n_terms} vs {encoder.n_terms} terms)")
    if len(set(encoder.terms_)) != len(encoder.terms_):
        raise ValueError("the vocabulary lists a term twice")
    items = counts.class_count_
    slack = 1e-9 * max(1.0, float(items.max(initial=0.0)))
    if counts.doc_freq_.size and np.any(counts.doc_freq_ > items[:, None] + slack):
        raise ValueError("a queue has more items containing a word than items")
    for f, table, width in zip(encoder.schema.value_fields, counts.field_count_, encoder_sizes(encoder), strict=True):
        if table.shape[1] != width:
            raise ValueError(f"the table of field {f.name!r} has {table.shape[1]} columns, its levels or bins "
                             f"need {width}")
        if table.size and np.any(table.sum(axis=1) > items + slack):
            raise ValueError(f"the table of field {f.name!r} counts more values than a queue has items")
        if f.role is FieldRole.CATEGORY:
            levels = encoder.levels_[f.name]
            if len(set(levels)) != len(levels):
                raise ValueError(f"field {f.name!r} lists a level twice")
    for name, edges in encoder.edges_.items():
        if edges.ndim != 1 or not np.all(np.isfinite(edges)) or np.any(np.diff(edges) <= 0):
            raise ValueError(f"the bin edges of field {name!r} are not finite and increasing")
    if idf is not None and (idf.shape != (encoder.n_terms,) or not np.all(np.isfinite(idf)) or np.any(idf < 0)):
        raise ValueError("the idf array does not match the vocabulary or is not finite and non-negative")


def clean_models_dir(models: Path, referenced: set[str], *, now: float | None = None,
                     min_age_s: float = ORPHAN_AGE_S) -> list[Path]:
    """Remove temporary folders left by an interrupted save and model folders no version names.

    Only folders older than `min_age_s` go: a `train` in another process may be writing a temporary folder,
    or have saved its model and not yet recorded the version. `referenced` holds folder names (not paths).
    Returns what was removed."""
    now = time.time() if now is None else now
    removed: list[Path] = []
    try:
        entries = list(os.scandir(models))
    except OSError:
        return removed
    for entry in entries:
        try:
            if not entry.is_dir(follow_symlinks=False) or entry.name in referenced:
                continue
            temporary = entry.name.startswith(".") and entry.name.endswith(TMP_SUFFIX)
            orphan = not entry.name.startswith(".") and (Path(entry.path) / "manifest.json").exists()
            if (temporary or orphan) and now - entry.stat(follow_symlinks=False).st_mtime >= min_age_s:
                shutil.rmtree(entry.path)
                removed.append(Path(entry.path))
        except OSError:
            continue
    return removed
