"""Model versions and the config parts they share."""

from __future__ import annotations

import hashlib
import json
from dataclasses import replace
from typing import Any

from triage.store.base import StoreBase
from triage.store.errors import StoreError, UnknownVersionError
from triage.store.rows import VERSION_COLS, ModelVersion, dumps, utc_now, version_from_row

SHARED_KEYS = ("calibration", "policy", "split", "spec")
SHARED_REF = "$shared"
SHARE_MIN_CHARS = 256
MODEL_KINDS = ("train", "correction", "adopt")


class VersionTable(StoreBase):
    """Immutable model versions, which one is active, and config parts shared between versions."""


    def add_model_version(
        self,
        parent: int | None,
        kind: str,
        config: dict[str, Any],
        fingerprint: str,
        artifact: str,
        scorecard: dict[str, Any] | None = None,
        note: str = "",
        activate: bool = True,
    ) -> ModelVersion:
        """Record a new model version (numbered from 1); by default it becomes the one active version."""
        if kind not in MODEL_KINDS:
            raise StoreError(f"{self.path}: model kind must be one of {', '.join(MODEL_KINDS)}, not {kind!r}")
        with self.transaction():
            if parent is not None:
                self._version_row(parent)
            if activate:
                self._write("UPDATE model_versions SET active = 0 WHERE active = 1")
            cur = self._write(
                "INSERT INTO model_versions(parent, created_at, kind, config_json, fingerprint, scorecard_json,"
                " artifact, active, note) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    parent,
                    utc_now(),
                    kind,
                    dumps(self._share(config)),
                    fingerprint,
                    None if scorecard is None else dumps(self._share({"scorecard": scorecard}, force=True)),
                    artifact,
                    1 if activate else 0,
                    note,
                ),
            )
            assert cur.lastrowid is not None
            return self._version_row(cur.lastrowid)

    def activate_model(self, version: int) -> ModelVersion:
        """Make `version` the one active model version (UnknownVersionError if there is none)."""
        with self.transaction():
            self._version_row(version)
            self._write("UPDATE model_versions SET active = 0 WHERE active = 1 AND version != ?", (version,))
            self._write("UPDATE model_versions SET active = 1 WHERE version = ?", (version,))
            return self._version_row(version)

    def active_model(self) -> ModelVersion | None:
        """The active model version, or None before the first one."""
        rows = self._all(f"SELECT {VERSION_COLS} FROM model_versions WHERE active = 1")
        return self._version(rows[0]) if rows else None

    def active_version_number(self) -> int | None:
        """The active model version's number alone (None before the first one): what a per-request check for a
        newly activated version needs, without reading and resolving the version's config and scorecard."""
        row = self._one("SELECT version FROM model_versions WHERE active = 1")
        return None if row is None else int(row[0])

    def get_model_version(self, version: int) -> ModelVersion:
        """One model version; UnknownVersionError when there is none."""
        with self._lock:
            return self._version_row(version)

    def model_versions(self) -> list[ModelVersion]:
        """Every model version, oldest first."""
        return [
            self._version(r) for r in self._all(f"SELECT {VERSION_COLS} FROM model_versions ORDER BY version")
        ]

    def set_scorecard(self, version: int, scorecard: dict[str, Any]) -> None:
        """Attach (or replace) the evaluation report of a model version."""
        with self.transaction():
            self._version_row(version)
            self._write(
                "UPDATE model_versions SET scorecard_json = ? WHERE version = ?",
                (dumps(self._share({"scorecard": scorecard}, force=True)), version)
            )

    def _share(self, config: dict[str, Any], force: bool = False) -> dict[str, Any]:
        """Store large parts of a version's config once, by digest, and refer to them (inside a transaction).

        A correction version carries its parent's calibration and routing policy unchanged; copying them into
        every version made the store grow by kilobytes per correction."""
        out = dict(config)
        for key in (SHARED_KEYS if not force else tuple(config)):
            value = out.get(key)
            if value is None:
                continue
            text = dumps(value)
            if len(text) < SHARE_MIN_CHARS:
                continue
            digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
            self._write("INSERT OR IGNORE INTO shared_parts(digest, json) VALUES (?, ?)", (digest, text))
            out[key] = {SHARED_REF: digest}
        return out

    def _resolve(self, config: dict[str, Any]) -> dict[str, Any]:
        for key, value in list(config.items()):
            if isinstance(value, dict) and set(value) == {SHARED_REF}:
                digest = value[SHARED_REF]
                text = self._parts.get(digest)
                if text is None:
                    row = self._one("SELECT json FROM shared_parts WHERE digest = ?", (digest,))
                    if row is None:
                        raise StoreError(f"{self.path}: the shared part {digest[:12]} of a model version is missing")
                    text = self._parts[digest] = str(row[0])
                config[key] = json.loads(text)
        return config

    def _version(self, row: tuple[Any, ...]) -> ModelVersion:
        mv = version_from_row(row)
        self._resolve(mv.config)
        if isinstance(mv.scorecard, dict) and set(mv.scorecard) == {"scorecard"}:  # the scorecard, shared
            return replace(mv, scorecard=self._resolve(dict(mv.scorecard))["scorecard"])
        return mv

    def _version_row(self, version: int) -> ModelVersion:
        rows = self._all(f"SELECT {VERSION_COLS} FROM model_versions WHERE version = ?", (version,))
        if not rows:
            raise UnknownVersionError(f"{self.path}: no such model version: {version}")
        return self._version(rows[0])
