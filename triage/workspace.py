"""The workspace: the one application layer under the command line, the HTTP service and the terminal UI.

A workspace is a folder with `triage.toml` (the config), `triage.db` (the SQLite store) and `models/` (one
folder per trained model). It owns the active model and its routing policy; front ends call its methods and
never touch SQLite or numpy themselves.

Model versions: a `train` version has its own artifact folder. A `correction` version is its parent's artifact
plus the ordered list of journaled corrections learned on top of it, replayed exactly on load; this keeps every
version without writing megabytes per correction. Every `SNAPSHOT_EVERY` corrections a full artifact is written
so loading stays fast.
"""

from __future__ import annotations

import hashlib
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from triage.config import Config, ConfigError, dump_config, load_config
from triage.core.calibrate import (
    IsotonicCalibrator,
    TemperatureScaler,
    expected_calibration_error,
    reliability_table,
    softmax_rows,
)
from triage.core.encode import EncodedBatch, Encoder
from triage.core.evidence import explain as explain_item
from triage.core.evidence import strongest_batch
from triage.core.metrics import (
    Scorecard,
    population_stability_index,
    precision_coverage_curve,
    scorecard,
    solve_cutoff,
)
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.routing import HELD_WATCH, HELD_WORD, RoutingPolicy, Verdict, decide, plain_words, watch_hits
from triage.core.selection import fit_rows, n_folds_for, out_of_fold_jll, quick_grid, select, subset
from triage.core.tokens import Tokenizer
from triage.ingest import IngestResult, read_items
from triage.records import ItemRecord
from triage.store import Correction, Decision, ModelVersion, Store
from triage.store.artifacts import load_model, save_model

CONFIG_NAME = "triage.toml"
DB_NAME = "triage.db"
MODELS_DIR = "models"
SNAPSHOT_EVERY = 200
HOLDOUT_SHARE = 0.2
MIN_ITEMS = 20
EVIDENCE_TERMS = 8
# a population stability index above 0.25 is read as a major shift (common practice in credit scoring, no source)
PSI_FLAG = 0.25

Progress = Callable[[str, float], None]


class WorkspaceError(Exception):
    """A user-facing problem: the message says what is wrong and what to do."""


class Cancelled(WorkspaceError):
    """A long run was cancelled by the user; nothing was changed."""


class _StaleVersion(Exception):
    """Another process activated a model version while a correction was being committed."""


class _AlreadyApplied(Exception):
    """Another process applied the correction first."""


def _check_parent(store: Store, parent: int | None) -> None:
    """Inside a write transaction: the version a new one is built on must still be the active one."""
    current = store.active_model()
    if (current.version if current else None) != parent:
        raise _StaleVersion


@dataclass
class Measurement:
    """An honest measurement of one model setting on the current labels."""

    spec: ModelSpec
    policy: RoutingPolicy
    scorecard: Scorecard
    calibration: dict[str, Any]
    cutoffs: dict[str, dict[str, Any]]
    split: dict[str, Any]
    # the held-out rows behind the scorecard, so cutoffs can be moved and lift computed without refitting
    holdout_ids: list[str] = field(default_factory=list)
    holdout_labels: list[str] = field(default_factory=list)
    holdout_probs: np.ndarray | None = None  # (n, len(model_queues)) calibrated probabilities
    model_queues: list[str] = field(default_factory=list)
    holdout_hits: list[list[str]] | None = None  # watch-word hits per held-out row
    # k-fold split only: the outer fold of each held-out row, and each fold's own policy (calibration, cutoffs)
    holdout_folds: np.ndarray | None = None
    fold_policies: list[RoutingPolicy] = field(default_factory=list)
    holdout_jll: np.ndarray | None = None  # time split: the held-out joint log-likelihoods, before calibration
    # when routing uses cutoffs other than the solved ones (set by hand): those, and the scorecard at them
    active_cutoffs: dict[str, float | None] | None = None
    at_active: Scorecard | None = None

    def verdicts(self, cutoffs: dict[str, float | None] | None = None) -> list[Verdict]:
        """The routing decisions on the held-out rows (a k-fold row under its own fold's policy); `cutoffs`
        replaces every policy's cutoffs (what-if)."""
        assert self.holdout_probs is not None

        def pol(p: RoutingPolicy) -> RoutingPolicy:
            return p if cutoffs is None else replace(p, cutoffs=cutoffs)

        if self.holdout_folds is None:
            return decide(self.holdout_probs, self.model_queues, pol(self.policy), self.holdout_hits)
        out: list[Verdict | None] = [None] * len(self.holdout_labels)
        for f, p in enumerate(self.fold_policies):
            rows = np.flatnonzero(self.holdout_folds == f)
            hits = [self.holdout_hits[i] for i in rows] if self.holdout_hits is not None else None
            for i, v in zip(rows, decide(self.holdout_probs[rows], self.model_queues, pol(p), hits), strict=True):
                out[i] = v
        return [v for v in out if v is not None]

    def precision_coverage(self, max_points: int = 50) -> dict[str, dict[str, list[float]]]:
        """Per queue, the precision-coverage curve of the held-out rows suggested for it (for plots), thinned
        to at most `max_points` cutoffs (the highest and the lowest always kept)."""
        verdicts = self.verdicts()
        conf = np.array([v.confidence for v in verdicts], dtype=float)
        suggested = np.array([v.suggested for v in verdicts], dtype=object)
        labels = np.array(self.holdout_labels, dtype=object)
        out: dict[str, dict[str, list[float]]] = {}
        for q in self.model_queues:
            mine = suggested == q
            cut, prec, cov, low = precision_coverage_curve(conf[mine], labels[mine] == q)
            keep = np.unique(np.linspace(0, len(cut) - 1, min(len(cut), max_points)).round().astype(int)) \
                if len(cut) else np.empty(0, dtype=int)
            out[q] = {"cutoff": cut[keep].tolist(), "precision": prec[keep].tolist(),
                      "coverage": cov[keep].tolist(), "lower_bound": low[keep].tolist()}
        return out

    def rescore(self, cutoffs: dict[str, float | None]) -> Scorecard:
        """The scorecard of the same held-out rows under other cutoffs (what-if for the cutoff keys in the UI)."""
        verdicts = self.verdicts(cutoffs)
        return scorecard(self.holdout_labels, [v.suggested for v in verdicts], _scored_confidence(verdicts),
                         self.scorecard.queues, cutoffs,
                         never_auto=self.policy.never_auto,
                         targets={q.queue: q.target for q in self.scorecard.per_queue})


@dataclass
class TrainReport:
    version: ModelVersion
    measurement: Measurement
    selection: list[dict[str, Any]]
    n_items: int
    seconds: float
    warnings: list[str] = field(default_factory=list)


@dataclass
class ImportReport:
    result: IngestResult
    added: int
    unchanged: int
    conflicts: list[Any]


@dataclass
class CorrectionReport:
    correction: Correction
    version: ModelVersion
    before: str | None
    after: str | None
    decision: dict[str, Any] | None = None


@dataclass
class _Active:
    """The active model with the routing policy and the item -> queue map it learned."""

    version: ModelVersion
    model: NaiveBayes
    policy: RoutingPolicy
    labels: dict[str, str]
    base_artifact: str
    corrections: list[int] = field(default_factory=list)


def fingerprint(ids: Sequence[str], labels: Sequence[str], config: Config) -> str:
    """A short hash of the training set (ids with their labels) and the schema."""
    h = hashlib.sha256()
    h.update(repr(config.schema).encode())
    for i, lab in sorted(zip(ids, labels, strict=True)):
        h.update(f"{i}\x1f{lab}\x1e".encode())
    return h.hexdigest()[:16]


def spec_from_config(config: Config, **overrides: Any) -> ModelSpec:
    m = config.model
    spec = ModelSpec(
        text_model="multinomial" if m.text_model == "auto" else m.text_model,
        alpha_text=1.0 if m.alpha_text == "auto" else float(m.alpha_text),
        alpha_fields=float(m.alpha_fields), prior=m.prior, bigrams=bool(m.bigrams), min_count=int(m.min_count),
        max_vocab=int(m.max_vocab) if m.max_vocab else None, max_token_chars=int(m.max_token_chars),
        tf_log=bool(m.tf_log), idf=bool(m.idf), length_norm=bool(m.length_norm),
    )
    return replace(spec, **overrides)


class Workspace:
    """One workspace folder. Safe to share between threads: a lock serialises changes to the active model."""

    def __init__(self, root: Path, config: Config, store: Store) -> None:
        self.root = root
        self.config = config
        self.store = store
        self._lock = threading.RLock()
        self._active: _Active | None = None
        self._config_stamp = self._stamp()
        self._load_active()
        self._replay_pending()

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
        return [f"{self.root / CONFIG_NAME}: [queues.{q}] names no queue of the labelled items "
                f"(queues: {', '.join(sorted(labels))}); check the spelling, its rules apply to nothing"
                for q in self.config.queues if q not in labels]

    # ----- opening ---------------------------------------------------------------------------------------
    @classmethod
    def open(cls, root: Path | str = ".") -> Workspace:
        root = Path(root).resolve()
        config = load_config(root / CONFIG_NAME)
        return cls(root, config, Store.open(root / DB_NAME))

    @staticmethod
    def create(root: Path | str, config: Config, comments: dict[str, str] | None = None,
               *, overwrite: bool = False) -> Path:
        """Write `triage.toml` in a (new) workspace folder."""
        root = Path(root)
        root.mkdir(parents=True, exist_ok=True)
        path = root / CONFIG_NAME
        if path.exists() and not overwrite:
            raise WorkspaceError(f"{path} already exists; edit it, or pass --force to replace it")
        path.write_text(dump_config(config, comments), encoding="utf-8")
        return path

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> Workspace:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

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

    def _require_model(self) -> _Active:
        if self._active is None:
            raise WorkspaceError(f"{self.root}: no model yet; run `triage train` first")
        return self._active

    def _load_active(self) -> None:
        mv = self.store.active_model()
        self._active = self._load_version(mv) if mv else None

    def _load_version(self, mv: ModelVersion) -> _Active:
        base = mv.config.get("base_artifact", mv.artifact)
        model, manifest = load_model(self.root / base)
        extra = manifest.get("extra", {})
        labels = dict(zip(extra.get("trained_ids", []), extra.get("trained_labels", []), strict=True))
        policy = RoutingPolicy.from_dict(mv.config.get("policy", extra.get("policy", {})))
        # the config's never-auto queues always apply, even to a version trained before a queue was marked so
        policy = replace(policy, never_auto=policy.never_auto | self.config.never_auto())
        active = _Active(mv, model, policy, labels, base, [])
        for cid in mv.config.get("corrections", []):
            self._learn_correction(active, self.store.get_correction(cid))
        return active

    def refresh_if_changed(self) -> bool:
        """Pick up a model version activated by another process (training, rollback); True if it changed."""
        with self._lock:  # read and swap under the lock, so a correction cannot slip in between
            self._reload_config_if_changed()
            mv = self.store.active_model()
            current = self._active.version.version if self._active else None
            if (mv.version if mv else None) == current:
                return False
            self._active = self._load_version(mv) if mv else None
            return True

    # ----- items -----------------------------------------------------------------------------------------
    def import_file(self, path: Path | str, *, progress: bool = False) -> ImportReport:
        """Read, validate and store a labelled export; bad rows go to the rejects file, good rows are kept."""
        result = read_items(path, self.config.schema, require_label=True,
                            max_text_chars=self.config.max_text_chars, progress=progress)
        summary = self.store.import_items(result.records, source=str(path))
        return ImportReport(result, summary.added, summary.unchanged, summary.conflicts)

    # ----- measuring and training ------------------------------------------------------------------------
    def _labelled(self) -> list[ItemRecord]:
        recs = self.store.labelled_items()
        queues = {r.label for r in recs}
        if len(recs) < MIN_ITEMS or len(queues) < 2:
            raise WorkspaceError(
                f"{self.root}: {len(recs)} labelled items in {len(queues)} queue(s); training needs at least "
                f"{MIN_ITEMS} items in 2 or more queues (run `triage import FILE`)"
            )
        return recs

    def _encode(self, spec: ModelSpec, items: Sequence[dict[str, Any]]) -> tuple[Encoder, EncodedBatch]:
        """A fitted encoder and the items' batch, from one tokenisation pass."""
        tok = Tokenizer(bigrams=spec.bigrams, max_token_chars=spec.max_token_chars)
        enc = Encoder(self.config.schema, tok, min_count=spec.min_count, max_vocab=spec.max_vocab)
        return enc, enc.fit_transform(items)

    def measure(self, spec: ModelSpec, recs: Sequence[ItemRecord] | None = None,
                progress: Progress | None = None,
                encoded: tuple[Encoder, EncodedBatch] | None = None) -> Measurement:
        """Calibrate and choose cutoffs on out-of-fold scores of the older items, then score the newest
        `HOLDOUT_SHARE` of items (by arrival time) with a model that never saw them: routing's real use.

        `encoded` is the older items' encoding when the caller has it already (same tokenizer settings)."""
        say = progress or (lambda _s, _f: None)
        recs = list(recs) if recs is not None else self._labelled()
        older, newer = _time_split(recs)
        labels = [r.label or "" for r in older]
        say("tokenising", 0.1)
        enc, batch = encoded if encoded is not None else self._encode(spec, [r.fields for r in older])
        say("calibrating on out-of-fold scores", 0.3)
        oof, queues = out_of_fold_jll(enc, batch, labels, spec, folds=5)
        qi = {q: i for i, q in enumerate(queues)}
        y = np.array([qi[lab] for lab in labels])
        say("choosing cutoffs", 0.5)
        policy, calibration, cutoff_info = _fit_policy(self.config, oof, y, queues)
        never, cutoffs = policy.never_auto, dict(policy.cutoffs)
        say("scoring the newest items", 0.7)
        model = fit_rows(enc, batch, labels, np.arange(len(labels)), spec, queues)
        hold_batch = enc.transform([r.fields for r in newer], allow_missing=True)
        hold_jll = model.joint_log_likelihood(hold_batch)
        probs = policy.calibrated(hold_jll)
        hits = self._hits(newer)
        verdicts = decide(probs, model.queues, policy, hits)
        # the same figures on the newest items, which calibration never saw (an isotonic map is judged here)
        calibration["holdout"] = _reliability_figures(
            softmax_rows(hold_jll), probs, np.array([v.confidence for v in verdicts]),
            np.array([qi.get(r.label or "", -1) for r in newer]))
        all_queues = sorted(set(queues) | {r.label for r in newer if r.label})
        card = scorecard([r.label for r in newer], [v.suggested for v in verdicts], _scored_confidence(verdicts),
                         all_queues, cutoffs, never_auto=never,
                         targets={q: self.config.policy(q).target_precision for q in all_queues})
        split = {"kind": "time", "train_items": len(older), "test_items": len(newer),
                 "test_from": newer[0].arrived_at, "test_to": newer[-1].arrived_at}
        meas = Measurement(spec, policy, card, calibration, cutoff_info, split, [r.item_id for r in newer],
                           [r.label or "" for r in newer], probs, list(model.queues), hits)
        meas.holdout_jll = hold_jll
        return meas

    def measure_kfold(self, spec: ModelSpec, recs: Sequence[ItemRecord] | None = None, folds: int = 5,
                      progress: Progress | None = None) -> Measurement:
        """Stratified k-fold: every labelled item is decided by a model, a calibration and cutoffs that never
        saw it, so the scorecard covers all items.

        Nested: inside each outer fold, temperature, isotonic map and cutoffs are fitted on an inner out-of-fold
        pass (5 folds) over that fold's training part alone; the model counted on the whole training part then
        decides the outer fold's items. The vocabulary is built once over all items (no labels are read for it):
        a word only the held-out rows have gets zero counts in training, as an unseen word would.
        """
        say = progress or (lambda _s, _f: None)
        recs = list(recs) if recs is not None else self._labelled()
        items = [r.fields for r in recs]
        labels = [r.label or "" for r in recs]
        say("tokenising", 0.05)
        enc, batch = self._encode(spec, items)
        queues = sorted(set(labels))
        qi = {q: i for i, q in enumerate(queues)}
        y = np.array([qi[lab] for lab in labels])
        n = len(recs)
        k = n_folds_for(labels, folds)
        probs = np.zeros((n, len(queues)))
        raw = np.zeros((n, len(queues)))
        fold_of = np.full(n, -1, dtype=np.int64)
        policies: list[RoutingPolicy] = []
        fold_info: list[dict[str, Any]] = []
        from sklearn.model_selection import StratifiedKFold

        splitter = StratifiedKFold(n_splits=k, shuffle=True, random_state=0)
        for f, (train, test) in enumerate(splitter.split(np.zeros(n), y)):
            say(f"fold {f + 1}/{k}: calibrating on the training part", 0.1 + 0.8 * f / k)
            tr_labels = [labels[i] for i in train]
            inner, inner_queues = out_of_fold_jll(enc, subset(batch, train), tr_labels, spec, folds=5)
            if inner_queues != queues:  # n_folds_for keeps every queue in every training part
                raise WorkspaceError(f"fold {f + 1}: a queue is missing from the training part")
            policy, cal, cut = _fit_policy(self.config, inner, y[train], queues)
            model = fit_rows(enc, batch, labels, train, spec, queues)
            jll = model.joint_log_likelihood(subset(batch, test))
            probs[test], raw[test], fold_of[test] = policy.calibrated(jll), softmax_rows(jll), f
            policies.append(policy)
            fold_info.append({"fold": f, "train_items": len(train), "test_items": len(test),
                              "temperature": cal["temperature"], "isotonic": cal["isotonic"], "cutoffs": cut})
        hits = self._hits(recs)
        meas = Measurement(spec, policies[0], scorecard([], [], np.empty(0), queues, {}), {}, {}, {},
                           [r.item_id for r in recs], labels, probs, queues, hits, fold_of, policies)
        verdicts = meas.verdicts()
        routed = np.array([not v.held for v in verdicts])
        # cutoffs differ by fold: the scorecard gets each item's routing outcome (1 routed, -1 held) against
        # one representative cutoff per queue (the median over folds), which every routed item meets
        shown: dict[str, float | None] = {}
        for q in queues:
            cs = [p.cutoffs.get(q) for p in policies if p.cutoffs.get(q) is not None]
            shown[q] = float(np.median(cs)) if cs else None
        never = policies[0].never_auto
        meas.scorecard = scorecard(labels, [v.suggested for v in verdicts], np.where(routed, 1.0, -1.0), queues,
                                   shown, never_auto=never,
                                   targets={q: self.config.policy(q).target_precision for q in queues})
        used = [bool(fi["isotonic"]["used"]) for fi in fold_info]
        meas.calibration = {
            "temperature": float(np.median([fi["temperature"] for fi in fold_info])),
            "isotonic": {"used": all(used), "folds_used": int(sum(used))} if any(used)
            else {"used": False, "why": fold_info[0]["isotonic"]["why"]},
            "measured_on": "out-of-fold decisions (each fold calibrated on its own training part)",
            "folds": fold_info,
            **_reliability_figures(raw, probs, np.array([v.confidence for v in verdicts]), y),
        }
        meas.cutoffs = {q: {"cutoff": shown[q], "per_fold": [p.cutoffs.get(q) for p in policies],
                            "target": self.config.policy(q).target_precision, "never_auto": q in never}
                        for q in queues}
        meas.split = {"kind": "kfold", "folds": k, "train_items": n - n // k, "test_items": n}
        say("done", 1.0)
        return meas

    def train(self, *, progress: Progress | None = None, cancel: Callable[[], bool] | None = None,
              note: str = "") -> TrainReport:
        """Choose settings (unless the config pins them), measure, fit on every labelled item, activate."""
        t0 = time.perf_counter()
        say = progress or (lambda _s, _f: None)

        def check() -> None:
            if cancel is not None and cancel():
                raise Cancelled("training cancelled; the active model is unchanged")

        say("reading labelled items", 0.0)
        with self._lock:  # the labels and the newest correction are read together
            recs = self._labelled()
            journal = self.store.corrections()
            pending = [c.id for c in journal if c.status == "pending"]
            # corrections after the mark are replayed on the new model; a pending one may be applied meanwhile
            mark = (min(pending) - 1) if pending else max((c.id for c in journal), default=0)
        base = spec_from_config(self.config)
        selection: list[dict[str, Any]] = []
        encoded: tuple[Encoder, EncodedBatch] | None = None
        m = self.config.model
        if m.text_model == "auto" or m.alpha_text == "auto":
            specs = [s for s in quick_grid(base)
                     if (m.text_model == "auto" or s.text_model == m.text_model)
                     and (m.alpha_text == "auto" or s.alpha_text == float(m.alpha_text))]
            older, _ = _time_split(recs)
            enc, batch = self._encode(base, [r.fields for r in older])
            encoded = (enc, batch)  # the grid varies only the text model and alpha: measure reuses this pass
            check()
            say(f"comparing {len(specs)} settings by cross-validation", 0.05)
            def step(i: int, spec: ModelSpec) -> None:
                check()  # cancelling takes effect between settings, not only between stages
                say(f"setting {i + 1}/{len(specs)}: {spec.text_model}, alpha {spec.alpha_text:g}",
                    0.05 + 0.05 * i / len(specs))

            best, scores = select(enc, batch, [r.label or "" for r in older], specs, folds=3, before_each=step)
            selection = [s.to_dict() for s in scores]
            base = best.spec
        check()
        measurement = self.measure(base, recs, progress=lambda s, f: say(s, 0.1 + 0.6 * f), encoded=encoded)
        check()
        say("fitting the final model on every item", 0.8)
        items = [r.fields for r in recs]
        labels = [r.label or "" for r in recs]
        model = NaiveBayes.fit(self.config.schema, items, labels, base)
        check()
        say("saving", 0.95)
        version = self._save_trained(model, recs, measurement, selection, note or "trained", kind="train",
                                     corrections_after=mark)
        say("done", 1.0)
        return TrainReport(version, measurement, selection, len(recs), time.perf_counter() - t0,
                           self.config_warnings({r.label or "" for r in recs}))

    def _save_trained(self, model: NaiveBayes, recs: Sequence[ItemRecord], meas: Measurement,
                      selection: list[dict[str, Any]], note: str, kind: str,
                      corrections_after: int | None = None) -> ModelVersion:
        """Save and activate a trained model. Corrections applied while it was fitting (id above
        `corrections_after`) are learned on top of it, so none is lost to a training run."""
        ids = [r.item_id for r in recs]
        labels = [r.label or "" for r in recs]
        fp = fingerprint(ids, labels, self.config)
        with self._lock:
            name = f"{MODELS_DIR}/m{int(time.time() * 1000):x}-{fp[:8]}"
            extra = {"policy": meas.policy.to_dict(), "trained_ids": ids, "trained_labels": labels,
                     "calibration": meas.calibration, "cutoffs": meas.cutoffs, "selection": selection}
            save_model(model, self.root / name, fingerprint=fp, extra=extra)
            config = {"spec": meas.spec.to_dict(), "policy": meas.policy.to_dict(), "base_artifact": name,
                      "corrections": [], "split": meas.split, "calibration": {
                          k: v for k, v in meas.calibration.items() if k != "reliability"}}
            fresh = _Active(None, model, meas.policy, dict(zip(ids, labels, strict=True)), name, [])  # type: ignore[arg-type]
            # the journal is read and the version added under one write lock: no correction slips in between
            with self.store.transaction():
                if corrections_after is not None:
                    for c in self.store.corrections():
                        if c.id > corrections_after and c.status != "pending":
                            self._learn_correction(fresh, c)
                config["corrections"] = list(fresh.corrections)
                current = self.store.active_model()
                parent = current.version if current else None
                mv = self.store.add_model_version(parent, kind, config, fp, name,
                                                  scorecard=meas.scorecard.to_dict(), note=note)
            fresh.version = mv
            self._active = fresh
        return mv

    def evaluate(self, progress: Progress | None = None, split: str = "time", folds: int = 5) -> Measurement:
        """The scorecard of the active model's settings on the current labels (corrections included):
        split "time" scores the newest items, "kfold" every item by stratified k-fold."""
        active = self._require_model()
        if split == "kfold":
            if folds < 2:
                raise WorkspaceError(f"--folds {folds}: k-fold evaluation needs at least 2 folds")
            return self.measure_kfold(active.model.spec, folds=folds, progress=progress)
        if split != "time":
            raise WorkspaceError(f"unknown split {split!r}; use time or kfold")
        meas = self.measure(active.model.spec, progress=progress)
        # routing may use cutoffs set by hand: score the same rows at those too
        def same(a: float | None, b: float | None) -> bool:
            return (a is None and b is None) or (a is not None and b is not None and abs(a - b) < 1e-12)

        other = {q: c for q, c in active.policy.cutoffs.items()
                 if q in meas.model_queues and not same(c, meas.policy.cutoffs.get(q))}
        if other and meas.holdout_jll is not None:
            # the same held-out rows decided exactly as routing decides: the active version's calibration too
            meas.active_cutoffs = other
            meas.at_active = _score_under(meas, replace(active.policy,
                                                        cutoffs={**dict(meas.policy.cutoffs), **other}))
        return meas

    # ----- routing ---------------------------------------------------------------------------------------
    def _decision(self, active: _Active, rec: ItemRecord, verdict: Any, terms: Sequence[Any],
                  unseen: Sequence[str]) -> dict[str, Any]:
        return {
            "id": rec.item_id,
            "queue": verdict.queue,
            "suggested": verdict.suggested,
            "confidence": round(verdict.confidence, 6),
            "held": verdict.held,
            "reason": verdict.reason,
            "runner_up": verdict.runner_up,
            "runner_up_confidence": round(verdict.runner_up_confidence, 6),
            "needs_person": verdict.held,
            # never_auto: the top queue is one a person must always see; watch: such a queue has a real chance
            "flag": "never_auto" if verdict.suggested in active.policy.never_auto
            else ("watch" if verdict.reason.startswith((HELD_WATCH, HELD_WORD)) else None),
            "evidence": [{"feature": t.feature, "weight": round(t.weight, 4), "kind": t.kind} for t in terms],
            "unseen_words": list(unseen[:20]),
            "model_version": active.version.version,
        }

    def decide_records(self, records: Sequence[ItemRecord]) -> list[dict[str, Any]]:
        """Decisions for items, without storing anything (a pure read of the active model)."""
        return self._decide(records)[0]

    def _decide(self, records: Sequence[ItemRecord]) -> tuple[list[dict[str, Any]], EncodedBatch | None]:
        """Decisions and the encoded batch behind them (one tokenisation of each text)."""
        with self._lock:
            active = self._require_model()
            if not records:
                return [], None
            model = active.model
            batch = model.encoder.transform([r.fields for r in records], allow_missing=True, keep_unknown=True)
            probs = active.policy.calibrated(model.joint_log_likelihood(batch))
            verdicts = decide(probs, model.queues, active.policy, self._hits(records))
            top = np.array([v.top_index for v in verdicts])
            runner = np.array([v.runner_up_index for v in verdicts])
            evidence = strongest_batch(model, batch, top, runner, EVIDENCE_TERMS) if len(model.queues) > 1 \
                else [[] for _ in records]
            unknown = batch.unknown or tuple(() for _ in records)
            decisions = [self._decision(active, r, v, ev, unk)
                         for r, v, ev, unk in zip(records, verdicts, evidence, unknown, strict=True)]
            return decisions, batch

    def _hits(self, records: Sequence[ItemRecord]) -> list[list[str]] | None:
        """Watch-word hits per item, on the plain words of every text field (None when no queue has any)."""
        watch = self.config.watch_words()
        if not watch:
            return None
        names = [f.name for f in self.config.schema.text_fields]
        return [watch_hits({w for n in names for w in plain_words(r.fields.get(n))}, watch) for r in records]

    def route_records(self, records: Sequence[ItemRecord], source: str) -> tuple[list[dict[str, Any]], int]:
        """Decide, store the items (so they can be corrected later) and the decisions in one transaction;
        returns (decisions, batch id)."""
        with self._lock:  # the summary reads the same model the decisions came from
            decisions, batch = self._decide(records)
            summary = self.batch_summary(decisions, batch)
        rows = [Decision(item_id=d["id"], model_version=d["model_version"], queue=d["queue"],
                         suggested=d["suggested"], confidence=d["confidence"], held=d["held"],
                         runner_up=d["runner_up"], evidence=d["evidence"]) for d in decisions]
        # decisions can be made again from the stored items: a power cut may lose the newest batch, a crash not
        with self.store.transaction(durable=False):
            self.store.import_items([ItemRecord(r.item_id, r.fields, None, r.arrived_at) for r in records],
                                    source=source)
            batch_id = self.store.record_batch(source, rows, summary)
        return decisions, batch_id

    def stored_with_other_fields(self, records: Sequence[ItemRecord]) -> set[str]:
        """Ids already stored with other field values: routing them would decide on one text and store
        another, so a later correction would learn what was not routed."""
        stored = {r.item_id: r.fields for r in self.store.get_items_if_any([r.item_id for r in records])}
        return {r.item_id for r in records if r.item_id in stored and stored[r.item_id] != r.fields}

    def route_file(self, path: Path | str) -> tuple[list[dict[str, Any]], IngestResult, int]:
        """Route every good row of a file; rows whose id is stored with other fields are left out, with a
        warning naming them (give a changed item a new id)."""
        result = read_items(path, self.config.schema, require_label=False,
                            max_text_chars=self.config.max_text_chars)
        clash = self.stored_with_other_fields(result.records)
        if clash:
            result.records = [r for r in result.records if r.item_id not in clash]
            shown = ", ".join(sorted(clash)[:10]) + (" ..." if len(clash) > 10 else "")
            result.warnings.append(f"{path}: {len(clash)} item(s) not routed: already stored with other field "
                                   f"values (give a changed item a new id): {shown}")
        decisions, batch_id = self.route_records(result.records, source=str(path))
        return decisions, result, batch_id

    def batch_summary(self, decisions: Sequence[dict[str, Any]], batch: EncodedBatch | None) -> dict[str, Any]:
        """Counts per queue and drift figures: the share of each item's distinct words never seen in training,
        and the shift of the predicted queue mix against the training mix (population stability index)."""
        active = self._require_model()
        n = len(decisions)
        routed = sum(1 for d in decisions if not d["held"])
        per_queue: dict[str, int] = {}
        for d in decisions:
            per_queue[d["suggested"]] = per_queue.get(d["suggested"], 0) + 1
        unseen = sum(len(u) for u in batch.unknown) if batch is not None and batch.unknown else 0
        total = unseen + (batch.X.nnz if batch is not None else 0)
        queues = active.model.queues
        expected = active.model.counts.class_count_
        actual = np.array([per_queue.get(q, 0) for q in queues], dtype=float)
        psi = population_stability_index(expected, actual) if n else 0.0
        return {"n": n, "routed": routed, "held": n - routed, "coverage": routed / n if n else 0.0,
                "per_queue": per_queue, "unseen_word_share": unseen / total if total else 0.0,
                "queue_mix_psi": psi, "drift_flag": bool(psi > PSI_FLAG)}

    # ----- explaining ------------------------------------------------------------------------------------
    def explain(self, item_id: str, n: int = 10) -> dict[str, Any]:
        """The whole evidence behind the active model's decision on one stored item."""
        with self._lock:
            active = self._require_model()
            rec = self.store.get_item(item_id)
            if rec is None:
                raise WorkspaceError(f"{self.store.path}: no item with id {item_id!r}")
            batch = active.model.encoder.transform([rec.fields], allow_missing=True, keep_unknown=True)
            enc = replace(batch.row(0), unknown_tokens=(batch.unknown or ((),))[0])
            jll = active.model.joint_log_likelihood_one(enc)
            probs = active.policy.calibrated(jll)
            verdict = decide(probs, active.model.queues, active.policy, self._hits([rec]))[0]
            ev = explain_item(active.model, enc, verdict.top_index, verdict.runner_up_index)
        return {
            "id": item_id, "label": rec.label, "fields": rec.fields, "queue": verdict.queue,
            "suggested": verdict.suggested, "confidence": verdict.confidence, "held": verdict.held,
            "reason": verdict.reason, "runner_up": verdict.runner_up,
            "runner_up_confidence": verdict.runner_up_confidence, "log_odds_gap": ev.gap,
            "for": [t.to_dict() for t in ev.for_top(n)], "against": [t.to_dict() for t in ev.against_top(n)],
            "terms_total": ev.total(), "n_terms": len(ev.terms), "unseen_words": list(enc.unknown_tokens),
            "temperature": active.policy.temperature, "model_version": active.version.version,
        }

    # ----- corrections -----------------------------------------------------------------------------------
    def _learn_correction(self, active: _Active, c: Correction) -> None:
        """Apply one journaled correction to the in-memory model, exactly and idempotently."""
        rec = self.store.get_item(c.item_id)
        if rec is None:
            raise WorkspaceError(f"correction {c.id}: item {c.item_id!r} is not in the store")
        old = active.labels.get(c.item_id)
        new = c.to_queue
        if old == new:
            pass
        elif old is None:
            active.model.learn(rec.fields, new)
        elif new is None:
            active.model.forget(rec.fields, old)
        else:
            active.model.relabel(rec.fields, old, new)
        if new is None:
            active.labels.pop(c.item_id, None)
        else:
            active.labels[c.item_id] = new
        active.corrections.append(c.id)

    def _commit_correction(self, c: Correction) -> ModelVersion:
        """Learn a journaled correction and record the corrected version, safely against other processes.

        Inside the write transaction the store must still have our parent version active and the correction
        still pending; if another process activated a version meanwhile, the newest one is loaded and the
        correction learned on it instead; if another process already applied it, its version is taken. Any
        failure puts back the parent model, so memory never holds a correction the store lacks."""
        for _attempt in range(5):
            active = self._require_model()
            parent = active.version
            try:
                self._learn_correction(active, c)
                config = dict(parent.config)
                config["corrections"] = list(active.corrections)
                config["base_artifact"] = active.base_artifact
                with self.store.transaction():
                    current = self.store.active_model()
                    if current is None or current.version != parent.version:
                        raise _StaleVersion
                    if self.store.get_correction(c.id).status != "pending":
                        raise _AlreadyApplied
                    mv = self.store.add_model_version(parent.version, "correction", config, parent.fingerprint,
                                                      active.base_artifact, scorecard=parent.scorecard,
                                                      note=f"correction {c.id}: {c.item_id} -> {c.to_queue}")
                    self.store.apply_correction(c.id, mv.version)
            except _StaleVersion:
                self._load_active()
                continue
            except _AlreadyApplied:
                self._load_active()
                return self._require_model().version
            except BaseException:
                self._active = self._load_version(parent)
                raise
            active.version = mv
            if len(active.corrections) >= SNAPSHOT_EVERY:
                self._snapshot(active)
            return active.version
        raise WorkspaceError("the active model kept changing under this correction; it stays journaled and "
                             "is learned the next time the workspace opens")

    def _snapshot(self, active: _Active) -> None:
        """Write the corrected model as a full artifact so loading does not replay a long journal."""
        fp = active.version.fingerprint
        name = f"{MODELS_DIR}/m{int(time.time() * 1000):x}-{fp[:8]}-s"
        ids, labels = list(active.labels), list(active.labels.values())
        save_model(active.model, self.root / name, fingerprint=fp,
                   extra={"policy": active.policy.to_dict(), "trained_ids": ids, "trained_labels": labels})
        config = dict(active.version.config)
        config.update({"corrections": [], "base_artifact": name})
        try:
            with self.store.transaction():
                _check_parent(self.store, active.version.version)
                mv = self.store.add_model_version(active.version.version, "correction", config, fp, name,
                                                  scorecard=active.version.scorecard, note="snapshot of corrections")
        except _StaleVersion:
            return  # another process moved on; its version is loaded at the next refresh, the snapshot is unused
        active.version, active.base_artifact, active.corrections = mv, name, []

    def _replay_pending(self) -> None:
        """Finish corrections journaled before a crash: they are learned now, none is lost or doubled."""
        pending = self.store.pending_corrections()
        if not pending:
            return
        if self._active is None:
            return  # no model yet: they stay journaled and are learned once a model exists and the workspace opens
        with self._lock:
            for c in pending:
                if self.store.get_correction(c.id).status == "pending":  # another process may have finished it
                    self._commit_correction(c)

    def correct(self, item_id: str, queue: str, by: str = "operator") -> CorrectionReport:
        """Journal a correction (durable first), learn it exactly, and activate the corrected model."""
        queue = queue.strip()
        if not queue:
            raise WorkspaceError("the queue to correct to is empty")
        with self._lock:
            self.refresh_if_changed()  # correct the newest model, whoever activated it
            self._replay_pending()  # a correction left pending by a failed commit is finished first
            active = self._require_model()
            rec = self.store.get_item(item_id)
            if rec is None:
                raise WorkspaceError(f"{self.store.path}: no item with id {item_id!r}")
            known = set(active.model.queues) | set(self.store.queue_counts())
            if queue not in known and not queue.replace("_", "").replace("-", "").isalnum():
                raise WorkspaceError(f"queue {queue!r}: use letters, digits, '_' or '-' for a new queue")
            c = self.store.journal_correction(item_id, queue, by, active.version.version)
            before = rec.label
            mv = self._commit_correction(c)
            decision = self.decide_records([rec])[0]
        return CorrectionReport(self.store.get_correction(c.id), mv, before, queue, decision)

    def undo(self, by: str = "operator") -> CorrectionReport:
        """Reverse the newest correction that has not been undone (journaled and learned like any correction)."""
        with self._lock:
            self.refresh_if_changed()
            active = self._require_model()
            last = self.store.last_undoable_correction()
            if last is None:
                raise WorkspaceError("there is no correction to undo")
            c = self.store.journal_correction(last.item_id, last.from_queue, by, active.version.version,
                                              undo_of=last.id)
            mv = self._commit_correction(c)
        return CorrectionReport(self.store.get_correction(c.id), mv, last.to_queue, last.from_queue)

    # ----- versions --------------------------------------------------------------------------------------
    def models(self) -> list[ModelVersion]:
        return self.store.model_versions()

    def activate(self, version: int) -> ModelVersion:
        """Roll back (or forward) to a stored version; it is loaded and checked before it is activated."""
        with self._lock:
            mv = self.store.get_model_version(version)
            loaded = self._load_version(mv)
            mv = self.store.activate_model(version)
            loaded.version = mv
            self._active = loaded
        return mv

    def set_cutoffs(self, cutoffs: dict[str, float | None], by: str = "operator",
                    scorecard: dict[str, Any] | None = None) -> ModelVersion:
        """Adopt other cutoffs as a new model version (same counts, new routing policy); rollback restores.

        A never-auto queue keeps no cutoff whatever is asked: a person sees every item predicted there."""
        with self._lock:
            active = self._require_model()
            unknown = set(cutoffs) - set(active.model.queues)
            if unknown:
                raise WorkspaceError(f"unknown queue(s): {', '.join(sorted(unknown))}")
            for q, c in cutoffs.items():
                if c is not None and not 0.0 <= float(c) <= 1.0:
                    raise WorkspaceError(f"cutoff for {q!r} must be between 0 and 1, got {c}")
                if q in active.policy.never_auto and c is not None:
                    raise WorkspaceError(f"{q!r} is a never-auto queue: a person reviews every item, it takes no cutoff")
            if scorecard is None:  # the new version's scorecard: the held-out rows decided as it will decide
                meas = self.measure(active.model.spec)
                merged = {**dict(meas.policy.cutoffs), **dict(active.policy.cutoffs), **cutoffs}
                scorecard = _score_under(meas, replace(active.policy, cutoffs=merged)).to_dict()
            changed = ", ".join(f"{q} {'none' if c is None else f'{c:.3f}'}" for q, c in sorted(cutoffs.items()))
            for _attempt in range(5):
                self.refresh_if_changed()  # build on the newest version, whoever made it
                active = self._require_model()
                merged = dict(active.policy.cutoffs)
                merged.update({q: None if c is None else float(c) for q, c in cutoffs.items()})
                policy = replace(active.policy, cutoffs=merged)
                config = dict(active.version.config)
                config.update({"policy": policy.to_dict(), "corrections": list(active.corrections),
                               "base_artifact": active.base_artifact})
                try:
                    with self.store.transaction():
                        _check_parent(self.store, active.version.version)
                        mv = self.store.add_model_version(active.version.version, "adopt", config,
                                                          active.version.fingerprint, active.base_artifact,
                                                          scorecard=scorecard, note=f"cutoffs set by {by}: {changed}")
                except _StaleVersion:
                    continue
                active.version, active.policy = mv, policy
                return mv
            raise WorkspaceError("the active model kept changing; the cutoffs were not set, try again")

    def overview(self) -> dict[str, Any]:
        """Figures for a dashboard: items, queues, the active version and its scorecard summary, drift."""
        active = self._active
        since = 0
        if active is not None:
            since = len(active.corrections)
        card = active.version.scorecard if active else None
        batch = self.store.latest_batch()
        return {
            "workspace": str(self.root), "items": self.store.count_items(),
            "labelled": self.store.count_items(labelled=True), "queues": self.store.queue_counts(),
            "active_version": active.version.version if active else None,
            "text_model": active.model.spec.text_model if active else None,
            "scorecard": _summary(card) if card else None,
            "corrections_since_training": since,
            "never_auto": sorted(self.config.never_auto()),
            "latest_batch": {"id": batch.id, "source": batch.source, **batch.summary} if batch else None,
        }


def _table(conf: np.ndarray, correct: np.ndarray) -> list[dict[str, Any]]:
    return [vars(b) if hasattr(b, "__dict__") else b._asdict() for b in reliability_table(conf, correct)]


def _reliability_figures(raw: np.ndarray, cal: np.ndarray, conf: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """ECE and reliability tables of the raw posterior, the temperature-scaled one and the final routing
    confidence `conf` (isotonic when fitted) for rows with true queue index `y` (-1: a queue the model lacks)."""
    rows = np.arange(len(y))
    top_raw, top = raw.argmax(axis=1), cal.argmax(axis=1)
    raw_conf, temp_conf = raw[rows, top_raw], cal[rows, top]
    ok_raw, ok = top_raw == y, top == y
    return {
        "ece_before": expected_calibration_error(raw_conf, ok_raw),
        "ece_temperature": expected_calibration_error(temp_conf, ok),
        "ece_after": expected_calibration_error(conf, ok),
        "reliability_before": _table(raw_conf, ok_raw),
        "reliability_temperature": _table(temp_conf, ok),
        "reliability": _table(conf, ok),  # the confidences routing compares with the cutoffs
    }


def _fit_policy(config: Config, oof: np.ndarray, y: np.ndarray,
                queues: Sequence[str]) -> tuple[RoutingPolicy, dict[str, Any], dict[str, dict[str, Any]]]:
    """From out-of-fold joint log-likelihoods: a temperature, then (with IsotonicCalibrator.MIN_ITEMS items or
    more) an isotonic map of the top queue's temperature-scaled probability, then per queue the lowest cutoff
    on that final confidence whose Wilson lower bound of precision reaches the queue's target."""
    scaler = TemperatureScaler().fit(oof, y)
    cal = scaler.transform(oof)
    top = cal.argmax(axis=1)
    p_top = cal[np.arange(len(y)), top]
    correct = top == y
    iso: IsotonicCalibrator | None = None
    if len(y) >= IsotonicCalibrator.MIN_ITEMS:
        iso = IsotonicCalibrator().fit(p_top, correct)
        assert iso.x_thresholds_ is not None
        iso_info: dict[str, Any] = {"used": True, "items": len(y), "steps": int(iso.x_thresholds_.size)}
    else:
        iso_info = {"used": False, "why": f"{len(y)} out-of-fold items, fewer than the "
                    f"{IsotonicCalibrator.MIN_ITEMS} an isotonic map needs; temperature scaling only"}
    conf = iso.transform(p_top) if iso is not None else p_top
    calibration: dict[str, Any] = {"temperature": scaler.temperature, "isotonic": iso_info,
                                   **_reliability_figures(softmax_rows(oof), cal, conf, y)}
    calibration["ece_isotonic"] = calibration["ece_after"] if iso is not None else None
    never = config.never_auto()
    cutoffs: dict[str, float | None] = {}
    cutoff_info: dict[str, dict[str, Any]] = {}
    for i, q in enumerate(queues):
        policy_q = config.policy(q)
        mine = top == i
        if policy_q.cutoff is not None:
            cutoffs[q] = policy_q.cutoff
            cutoff_info[q] = {"cutoff": policy_q.cutoff, "fixed": True, "target": policy_q.target_precision}
            continue
        choice = solve_cutoff(conf[mine], correct[mine], policy_q.target_precision)
        cutoffs[q] = None if q in never else choice.cutoff
        cutoff_info[q] = {"cutoff": choice.cutoff, "target": choice.target, "precision": choice.precision,
                          "lower_bound": choice.lower_bound, "coverage": choice.coverage,
                          "routed": choice.routed, "never_auto": q in never}
    policy = RoutingPolicy(cutoffs=cutoffs, never_auto=never, watch_probability=config.watch_probability,
                           temperature=scaler.temperature, isotonic=iso)
    return policy, calibration, cutoff_info


def _time_split(recs: Sequence[ItemRecord]) -> tuple[Sequence[ItemRecord], Sequence[ItemRecord]]:
    """Older items to fit on and the newest `HOLDOUT_SHARE` (at least one) to score: recs are in arrival order."""
    n_hold = max(1, int(round(len(recs) * HOLDOUT_SHARE)))
    return recs[: len(recs) - n_hold], recs[len(recs) - n_hold:]


def _score_under(meas: Measurement, policy: RoutingPolicy) -> Scorecard:
    """The scorecard of a time-split measurement's held-out rows decided by another policy (its calibration
    and its cutoffs), as routing under that policy would decide them."""
    assert meas.holdout_jll is not None
    verdicts = decide(policy.calibrated(meas.holdout_jll), meas.model_queues, policy, meas.holdout_hits)
    return scorecard(meas.holdout_labels, [v.suggested for v in verdicts], _scored_confidence(verdicts),
                     meas.scorecard.queues, policy.cutoffs, never_auto=policy.never_auto,
                     targets={q.queue: q.target for q in meas.scorecard.per_queue})


def _scored_confidence(verdicts: Sequence[Any]) -> np.ndarray:
    """Confidences for the scorecard; an item held by a safeguard (watch word or watch probability) scores -1,
    below every cutoff, so the scorecard's own cutoff rule counts it as held, as routing did."""
    return np.array([-1.0 if v.held and v.reason.startswith((HELD_WATCH, HELD_WORD)) else v.confidence
                     for v in verdicts])


def _summary(card: dict[str, Any]) -> dict[str, Any]:
    return {k: card.get(k) for k in ("n", "accuracy", "macro_f1", "coverage", "held_share", "auto_precision")}


def records_from_dicts(rows: Iterable[dict[str, Any]]) -> list[ItemRecord]:
    """Records from plain dicts {id, fields, label, arrived_at} (the shape the service and tests use)."""
    return [ItemRecord(str(r["id"]), dict(r.get("fields", {})), r.get("label"), r.get("arrived_at")) for r in rows]


__all__ = ["Workspace", "WorkspaceError", "Cancelled", "ConfigError", "Measurement", "TrainReport"]
