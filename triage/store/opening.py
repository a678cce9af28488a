"""Opening a store file: owner-only permissions, connection settings, migrations, refusing a newer schema."""

from __future__ import annotations

import os
import sqlite3
import stat
from collections.abc import Sequence
from pathlib import Path

from triage.store.errors import StoreError
from triage.store.migrations import MIGRATIONS, statements

BUSY_TIMEOUT_S = 5.0
FILE_MODE = 0o600  # tickets hold personal data: the database is readable by its owner only




def own_file(path: Path) -> None:
    """Create the database file exclusively with mode 0600, never through a symbolic link; tighten an existing
    file (and its WAL and shared-memory files, which SQLite creates with the database's mode) to 0600."""
    for p in (path, Path(f"{path}-wal"), Path(f"{path}-shm")):
        try:
            st = os.lstat(p)
        except FileNotFoundError:
            continue
        except OSError as exc:
            raise StoreError(f"{p}: cannot read the file: {exc.strerror}") from exc
        if stat.S_ISLNK(st.st_mode):
            raise StoreError(f"{p}: is a symbolic link; the store must be a plain file in the workspace")
        if stat.S_IMODE(st.st_mode) & 0o077 and st.st_uid == os.getuid():
            try:
                os.chmod(p, FILE_MODE)
            except OSError:
                pass  # a read-only file system: SQLite says what is wrong when it opens it
    if not path.exists():
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, FILE_MODE)
        except FileExistsError:
            return  # another process created it first
        except OSError as exc:
            raise StoreError(f"{path}: cannot create the store: {exc.strerror}") from exc
        os.close(fd)


def configure(conn: sqlite3.Connection, path: Path) -> None:
    """Per-connection settings: WAL, foreign keys, durable commits, busy timeout."""
    try:
        conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute("PRAGMA synchronous = FULL")
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
    except sqlite3.DatabaseError as exc:
        raise StoreError(f"{path}: not a usable triage store: {exc}") from exc
    if str(mode).lower() != "wal":
        raise StoreError(f"{path}: the store needs WAL journal mode, but SQLite kept {mode!r}")


def migrate(conn: sqlite3.Connection, path: Path, migrations: Sequence[str] = MIGRATIONS) -> int:
    """Bring the file's schema to `len(migrations)`, each step in its own transaction; return the version.

    The version is read again under the write lock, so two processes opening a new file at once do not
    both run the same migration. A file from a newer triage is refused, naming both versions.
    """
    latest = len(migrations)
    try:
        version = int(conn.execute("PRAGMA user_version").fetchone()[0])
        refuse_newer(path, version, latest)
        while version < latest:
            conn.execute("BEGIN IMMEDIATE")
            try:
                version = int(conn.execute("PRAGMA user_version").fetchone()[0])
                refuse_newer(path, version, latest)
                if version < latest:
                    for sql in statements(migrations[version]):
                        conn.execute(sql)
                    version += 1
                    conn.execute(f"PRAGMA user_version = {version}")
                conn.execute("COMMIT")
            except BaseException:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise
    except sqlite3.Error as exc:
        raise StoreError(f"{path}: migrating the store to schema version {latest} failed: {exc}") from exc
    return version


def refuse_newer(path: Path, version: int, latest: int) -> None:
    if version > latest:
        raise StoreError(
            f"{path}: schema version {version} was written by a newer triage; this one knows up to"
            f" version {latest}. Upgrade triage to open it."
        )
