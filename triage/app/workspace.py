"""The workspace: the one application layer under the command line, the HTTP service and the terminal UI.

A workspace is a folder with `triage.toml` (the config), `triage.db` (the SQLite store) and `models/` (one
folder per trained model). This class is a thin facade: it opens the folder, owns the config, the store, the
lock and the active model, and lends its methods from the use-case modules of `triage.app` (training, routing,
corrections, versions, review), which take the workspace as their first argument.
"""

from __future__ import annotations

import threading
from dataclasses import replace
from pathlib import Path

from triage.app import corrections, measuring, review, routing, training, versions
from triage.app.active import ActiveModel, LoadProblem, clean_models, load_active, replay_pending
from triage.app.decisions import ImportReport
from triage.app.errors import Conflict
from triage.config import Config, ConfigError, dump_config, load_config
from triage.core.model import NaiveBayes
from triage.core.routing import RoutingPolicy
from triage.ingest import describe_similar, read_items, similar_labels
from triage.records import ItemRecord
from triage.store import ModelVersion, Store
from triage.store.checkpoints import BackgroundCheckpoints

CONFIG_NAME = "triage.toml"
DB_NAME = "triage.db"
REJECTS_DIR = "rejects"


class Workspace:
    """One workspace folder. Safe to share between threads: a lock serialises changes to the active model."""

    def __init__(self, root: Path, config: Config, store: Store, *, serve_last_good: bool = False) -> None:
        self.root = root
        self.config = config
        self.store = store
        self.lock = threading.RLock()
        self._active: ActiveModel | None = None
        # set when the store's active version cannot be loaded (see active.load_active); never raised at open
        self.load_problem: LoadProblem | None = None
        self.serve_last_good = serve_last_good
        self._config_stamp = self._stamp()
        load_active(self)
        if not store.read_only:  # a read-only copy shows what is stored; pending corrections wait for a writer
            clean_models(self)
            replay_pending(self)

    # ----- opening ---------------------------------------------------------------------------------------
    @classmethod
    def open(cls, root: Path | str = ".", *, read_only: bool = False, serve_last_good: bool = False) -> Workspace:
        """Open a workspace folder. `read_only` is for commands that only look (evaluate, explain, models,
        overview): the store is opened read-only, nothing is migrated or written, so they work on a copy
        on a read-only disk or in a folder this user may only read. A damaged or missing active model never
        makes this fail: commands that need it say so, and `serve_last_good` (the service) serves the newest
        other version that loads."""
        root = Path(root).resolve()
        config = load_config(root / CONFIG_NAME)
        return cls(root, config, Store.open(root / DB_NAME, read_only=read_only), serve_last_good=serve_last_good)

    @property
    def read_only(self) -> bool:
        return self.store.read_only

    @property
    def store_path(self) -> Path:
        """The store's file: its messages name it (the service takes it out of what a client sees)."""
        return self.store.path

    def change_stamp(self) -> tuple[int, int | None]:
        """A value that changes when another process commits to the store or edits the config, for a front end
        that polls: SQLite's data_version (which this connection's own commits leave alone) and triage.toml's
        mtime. One pragma and one stat, cheap enough to ask every few seconds."""
        return int(self.store.pragma("data_version")), self._stamp()

    @staticmethod
    def create(root: Path | str, config: Config, comments: dict[str, str] | None = None,
               *, overwrite: bool = False) -> Path:
        """Write `triage.toml` in a (new) workspace folder."""
        root = Path(root)
        root.mkdir(parents=True, exist_ok=True)
        path = root / CONFIG_NAME
        if path.exists() and not overwrite:
            raise Conflict(f"{path} already exists; edit it, or pass --force to replace it")
        path.write_text(dump_config(config, comments), encoding="utf-8")
        return path

    def close(self) -> None:
        self.store.close()

    def checkpoint_in_background(self) -> BackgroundCheckpoints | None:
        """For a long-running writer (the service): the store's log checkpoints on a thread of its own instead of
        inside a commit (see triage.store.checkpoints); call `stop()` on the result before `close`. None for a
        read-only workspace."""
        return None if self.store.read_only else BackgroundCheckpoints(self.store)

    def __enter__(self) -> Workspace:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ----- config ----------------------------------------------------------------------------------------
    def _stamp(self) -> int | None:
        try:
            return (self.root / CONFIG_NAME).stat().st_mtime_ns
        except OSError:
            return None

    def _reload_config_if_changed(self) -> None:
        """A long-running service sees edits to triage.toml (a queue newly marked never-auto, new watch words)
        without a restart; a config that no longer loads is ignored until it is fixed."""
        stamp = self._stamp()
        if stamp == self._config_stamp:
            return
        self._config_stamp = stamp
        try:
            config = load_config(self.root / CONFIG_NAME)
        except ConfigError:
            return
        self.config = config
        if self._active is not None:
            p = self._active.policy
            self._active.policy = replace(p, never_auto=p.never_auto | config.never_auto(),
                                          watch_probability=config.watch_probability)

    def config_warnings(self, labels: set[str] | None = None) -> list[str]:
        """Config entries that match nothing: a queue named in [queues] that no item carries gets no safeguard."""
        labels = labels if labels is not None else set(self.store.queue_counts())
        out = [f"{self.root / CONFIG_NAME}: [queues.{q}] names no queue of the labelled items "
               f"(queues: {', '.join(sorted(labels))}); check the spelling, its rules apply to nothing"
               for q in self.config.queues if q not in labels]
        return out + self.safety_warnings()

    def safety_warnings(self) -> list[str]:
        """Never-auto queues without watch words: only the model guards them, and a hazard mentioned in an item
        about something else is what a text model misses. Every front end shows these (train, route, the UI)."""
        return [f"{self.root / CONFIG_NAME}: [queues.{q}] is never_auto but has no watch_words: only the model "
                "guards it; add word starts that mark it (`triage init --from FILE` proposes some from the data)"
                for q in self.config.unwatched_never_auto()]

    # ----- the active model ------------------------------------------------------------------------------
    @property
    def model(self) -> NaiveBayes | None:
        return self._active.model if self._active else None

    @property
    def policy(self) -> RoutingPolicy | None:
        return self._active.policy if self._active else None

    @property
    def active_version(self) -> ModelVersion | None:
        return self._active.version if self._active else None

    def refresh_if_changed(self) -> bool:
        """Pick up a model version activated by another process (training, rollback); True if it changed."""
        with self.lock:  # read and swap under the lock, so a correction cannot slip in between
            self._reload_config_if_changed()
            target = self.store.active_version_number()
            current = self._active.version.version if self._active else None
            if target == current:
                if self.load_problem is not None and self.load_problem.version != target:
                    self.load_problem = None  # the stand-in was made the active version (a rollback)
                return False
            if self.load_problem is not None and self.load_problem.version == target:
                return False  # the same version that could not be loaded a moment ago
            load_active(self)
            return True

    # ----- items -----------------------------------------------------------------------------------------
    def import_file(self, path: Path | str, *, progress: bool = False) -> ImportReport:
        """Read, validate and store a labelled export; bad rows go to the rejects file, good rows are kept."""
        result = read_items(path, self.config.schema, require_label=True,
                            max_text_chars=self.config.max_text_chars, progress=progress,
                            rejects_dir=self.rejects_dir, labels=self.config.labels, warn_similar=False)
        # look-alike queue names, in this file and against the queues already stored
        counts = dict(self.store.queue_counts())
        for r in result.records:
            if r.label:
                counts[r.label] = counts.get(r.label, 0) + 1
        incoming = {r.label for r in result.records if r.label}
        for group in similar_labels(counts):
            if any(name in incoming for name, _n in group):
                result.warnings.append(describe_similar(Path(path).name, group))
        summary = self.store.import_items(result.records, source=str(path))
        return ImportReport(result, summary.added, summary.unchanged, summary.conflicts)

    def item(self, item_id: str) -> ItemRecord | None:
        """The stored item with its current label, or None when no item has this id."""
        return self.store.get_item(item_id)

    @property
    def rejects_dir(self) -> Path:
        """Rejected rows hold personal data: they stay in the workspace, never in a shared temporary folder."""
        return self.root / REJECTS_DIR

    # ----- the use cases, each in its own module ---------------------------------------------------------
    measure = measuring.measure
    measure_kfold = measuring.measure_kfold
    train = training.train
    evaluate = measuring.evaluate
    decide_records = routing.decide_records
    route_records = routing.route_records
    route_file = routing.route_file
    stored_with_other_fields = routing.stored_with_other_fields
    correct = corrections.correct
    undo = corrections.undo
    known_queues = corrections.known_queues
    reply_for = corrections.reply_for
    save_reply = corrections.save_reply
    models = versions.models
    activate = versions.activate
    set_cutoffs = versions.set_cutoffs
    corrections_missing_from = versions.corrections_missing_from
    explain = review.explain
    overview = review.overview
    incoming_queues = review.incoming_queues
