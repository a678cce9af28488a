"""Ordered schema migrations for the triage store.

`MIGRATIONS[i]` takes a database from schema version `i` to `i + 1`; the version lives in
`PRAGMA user_version` (0 for a new or empty file). Append new scripts, never edit a released one:
a database written by an older triage is brought forward by running only the scripts it has not seen.
"""

from __future__ import annotations

import sqlite3

_V1 = """
CREATE TABLE items (
    item_id     TEXT PRIMARY KEY,
    fields_json TEXT NOT NULL,
    label       TEXT,
    arrived_at  TEXT,
    source      TEXT NOT NULL,
    added_at    TEXT NOT NULL
);
CREATE INDEX items_by_label ON items(label);
CREATE INDEX items_by_arrival ON items(arrived_at, item_id);

CREATE TABLE corrections (
    id              INTEGER PRIMARY KEY AUTOINCREMENT,
    item_id         TEXT NOT NULL REFERENCES items(item_id),
    from_queue      TEXT,
    to_queue        TEXT,
    actor           TEXT NOT NULL,
    at              TEXT NOT NULL,
    base_version    INTEGER,
    status          TEXT NOT NULL DEFAULT 'pending' CHECK (status IN ('pending', 'applied', 'undone')),
    applied_version INTEGER,
    undo_of         INTEGER REFERENCES corrections(id),
    CHECK (to_queue IS NOT NULL OR undo_of IS NOT NULL)
);
CREATE INDEX corrections_by_item ON corrections(item_id);
CREATE INDEX corrections_by_status ON corrections(status);

CREATE TABLE labels (
    id             INTEGER PRIMARY KEY AUTOINCREMENT,
    item_id        TEXT NOT NULL REFERENCES items(item_id),
    queue          TEXT,
    source         TEXT NOT NULL CHECK (source IN ('imported', 'corrected')),
    actor          TEXT NOT NULL,
    at             TEXT NOT NULL,
    previous_queue TEXT,
    correction_id  INTEGER REFERENCES corrections(id)
);
CREATE INDEX labels_by_item ON labels(item_id);

CREATE TABLE batches (
    id           INTEGER PRIMARY KEY AUTOINCREMENT,
    source       TEXT NOT NULL,
    at           TEXT NOT NULL,
    n_items      INTEGER NOT NULL,
    summary_json TEXT NOT NULL
);

CREATE TABLE decisions (
    id            INTEGER PRIMARY KEY AUTOINCREMENT,
    batch_id      INTEGER NOT NULL REFERENCES batches(id),
    item_id       TEXT NOT NULL,
    model_version INTEGER,
    queue         TEXT,
    suggested     TEXT,
    confidence    REAL NOT NULL,
    held          INTEGER NOT NULL CHECK (held IN (0, 1)),
    runner_up     TEXT,
    evidence_json TEXT NOT NULL,
    decided_at    TEXT NOT NULL
);
CREATE INDEX decisions_by_item ON decisions(item_id, id);
CREATE INDEX decisions_by_batch ON decisions(batch_id, held, id);

CREATE TABLE model_versions (
    version        INTEGER PRIMARY KEY AUTOINCREMENT,
    parent         INTEGER REFERENCES model_versions(version),
    created_at     TEXT NOT NULL,
    kind           TEXT NOT NULL CHECK (kind IN ('train', 'correction', 'adopt')),
    config_json    TEXT NOT NULL,
    fingerprint    TEXT NOT NULL,
    scorecard_json TEXT,
    artifact       TEXT NOT NULL,
    active         INTEGER NOT NULL DEFAULT 0 CHECK (active IN (0, 1)),
    note           TEXT NOT NULL DEFAULT ''
);
-- at most one active model version, enforced by the database itself
CREATE UNIQUE INDEX model_versions_one_active ON model_versions(active) WHERE active = 1;
"""

# 2: a stored decision says why it was held (a triage.core.routing.HeldBy value), its reason text and the
# runner-up's confidence (the review list orders close calls by it)
_V2 = """
ALTER TABLE decisions ADD COLUMN held_by TEXT;
ALTER TABLE decisions ADD COLUMN reason TEXT NOT NULL DEFAULT '';
ALTER TABLE decisions ADD COLUMN runner_up_confidence REAL;
"""

# 3: idempotency keys on corrections (a repeat returns the first outcome), and parts of model-version configs
# that many versions share (calibration, routing policy) stored once, by content digest
_V3 = """
ALTER TABLE corrections ADD COLUMN request_key TEXT;
CREATE UNIQUE INDEX corrections_by_request_key ON corrections(request_key) WHERE request_key IS NOT NULL;

CREATE TABLE replies (
    request_key   TEXT PRIMARY KEY,
    correction_id INTEGER NOT NULL REFERENCES corrections(id),
    reply_json    TEXT NOT NULL,
    at            TEXT NOT NULL
);

CREATE TABLE shared_parts (
    digest TEXT PRIMARY KEY,
    json   TEXT NOT NULL
);
"""

MIGRATIONS: list[str] = [_V1, _V2, _V3]
LATEST_VERSION = len(MIGRATIONS)


def statements(script: str) -> list[str]:
    """Split a script into complete statements.

    `Connection.executescript` commits any open transaction first, so a migration could not be
    rolled back with it; running statement by statement keeps each migration inside one transaction.
    """
    out: list[str] = []
    pending = ""
    for piece in script.split(";"):
        pending += piece + ";"
        if sqlite3.complete_statement(pending):
            text = pending.strip()
            if text.strip(";").strip() and not _only_comments(text):
                out.append(text)
            pending = ""
    if pending.strip(";").strip():
        raise ValueError(f"incomplete SQL statement at end of migration: {pending.strip()[:80]!r}")
    return out


def _only_comments(text: str) -> bool:
    """True when a chunk holds nothing but `--` comments (SQLite would run it as an empty statement)."""
    lines = [line.strip() for line in text.rstrip(";").splitlines()]
    return all(not line or line.startswith("--") for line in lines)
