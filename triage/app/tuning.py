"""Model selection over a grid, lift for ranking leads, and the check of the independence assumption.

The grid runs on one tokenisation pass: the encoder is fitted with bigrams, and the unigram settings use the
unigram columns of the same sparse matrix. "Fields off" settings use the same matrix with no field codes. Text
field weights are tried on the same pass too: the encoder keeps one unweighted matrix per text field, and a
setting's matrix is sum(w_f * X_f). The "transforms" switch turns on tf_log, idf and length_norm together
(Rennie et al. 2003). Every setting keeps learning from corrections exact (each is a function of counts of
per-item vectors), except that with the transforms on it is exact relative to the idf frozen at fit.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import scipy.sparse as sp

from triage.app.errors import BadInput, NoModel, UnknownQueue
from triage.app.measuring import encode, labelled
from triage.app.model_settings import fit_policy, spec_from_config
from triage.core.encode import EncodedBatch, Encoder
from triage.core.metrics import captured_share, conditional_mutual_information, lift_table
from triage.core.model import TEXT_MODELS
from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.selection import out_of_fold_jll, ranked, score_jll
from triage.core.tokens import Tokenizer, is_bigram

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

ALPHAS = (0.1, 0.5, 1.0)
# conditional mutual information above this (nats) flags a pair as double-counting evidence
# (common practice, no source: a rule of thumb, about a tenth of a bit)
CMI_FLAG = 0.07


@dataclass(frozen=True)
class GridRow:
    text_model: str
    alpha_text: float
    bigrams: bool
    fields: bool
    text_weights: dict[str, float]  # weight per text field
    transforms: bool  # tf_log + idf + length_norm
    accuracy: float
    macro_f1: float
    log_loss: float
    coverage: float  # share auto-routed at each queue's target precision (cutoffs solved on the same folds)

    def to_dict(self) -> dict[str, Any]:
        d = dict(vars(self))
        d["text_weights"] = dict(self.text_weights)
        return d


def _restrict(encoder: Encoder, batch: EncodedBatch, bigrams: bool, fields: bool,
              base_schema: Schema | None = None) -> tuple[Encoder, EncodedBatch]:
    """A view of the one tokenisation pass: unigram columns only and/or no field codes.

    `base_schema` (default the encoder's) names the text weights `batch` was built with."""
    base_schema = base_schema or encoder.schema
    schema = base_schema if fields else Schema(fields=base_schema.text_fields, id=base_schema.id,
                                               label=base_schema.label, time=base_schema.time)
    enc = Encoder(schema, Tokenizer(bigrams=bigrams, max_token_chars=encoder.tokenizer.max_token_chars))
    cols = np.arange(encoder.n_terms) if bigrams else np.array(
        [i for i, t in enumerate(encoder.terms_) if not is_bigram(t)], dtype=np.int64)
    enc.terms_ = [encoder.terms_[i] for i in cols]
    enc.vocabulary_ = {t: i for i, t in enumerate(enc.terms_)}
    if fields:
        enc.levels_, enc.level_index_, enc.edges_ = encoder.levels_, encoder.level_index_, encoder.edges_
    X = batch.X[:, cols] if not bigrams else batch.X
    codes = batch.codes if fields else batch.codes[:, :0]
    return enc, EncodedBatch(X.tocsr(), codes)


def run_grid(ws: Workspace, folds: int = 5, progress: Any = None) -> list[GridRow]:
    """Cross-validate every setting of the grid on the labelled items; best first."""
    say = progress or (lambda _s, _f: None)
    recs = labelled(ws)
    items = [r.fields for r in recs]
    labels = [r.label or "" for r in recs]
    base = spec_from_config(ws.config)
    enc = Encoder(ws.config.schema, Tokenizer(bigrams=True, max_token_chars=base.max_token_chars),
                  min_count=base.min_count, max_vocab=base.max_vocab).fit(items)
    by_field, codes = enc.transform_by_field(items)  # the one tokenisation pass every setting reuses
    combos = grid_settings(ws.config.schema)
    matrices: dict[tuple[tuple[str, float], ...], EncodedBatch] = {}
    rows: list[GridRow] = []
    for k, (model, alpha, bigrams, use_fields, weights, transforms) in enumerate(combos):
        say(f"setting {k + 1}/{len(combos)}: {model} a={alpha} bigrams={bigrams} fields={use_fields} "
            f"weights={weights} transforms={transforms}", k / len(combos))
        key = tuple(weights.items())
        if key not in matrices:
            X = sum((w * Xf for w, Xf in zip(weights.values(), by_field, strict=True)),
                    sp.csr_matrix((len(items), enc.n_terms)))
            matrices[key] = EncodedBatch(sp.csr_matrix(X), codes)
        e, bt = _restrict(enc, matrices[key], bigrams, use_fields, _with_weights(enc.schema, weights))
        spec = replace(base, text_model=model, alpha_text=alpha, bigrams=bigrams,
                       tf_log=transforms, idf=transforms, length_norm=transforms)
        jll, queues = out_of_fold_jll(e, bt, labels, spec, folds=folds)
        acc, f1, ll = score_jll(jll, queues, labels)
        rows.append(GridRow(model, alpha, bigrams, use_fields, dict(weights), transforms, acc, f1, ll,
                            _coverage(ws, jll, queues, labels)))
    say("done", 1.0)
    # the one criterion train uses too (selection.ranked): coverage at the targets within its noise, macro-F1,
    # log loss
    return ranked(rows, lambda r: (r.coverage, r.macro_f1, r.log_loss), len(labels))


# the first text field's weights tried (the other text fields at 1); the transforms go with these text models
FIRST_FIELD_WEIGHTS = (1.0, 2.0, 3.0)
TRANSFORM_MODELS = ("multinomial", "complement")
Setting = tuple[str, float, bool, bool, dict[str, float], bool]


def grid_settings(schema: Schema) -> list[Setting]:
    """The grid: (text model, alpha, bigrams, fields, text weights, transforms), no setting twice.

    1. every text model, and multinomial and complement with the transforms, x alpha x bigrams, fields on,
       the configured text weights (36);
    2. the first text field at weight 1, 2 and 3 with the others at 1, for the same six text variants
       (alpha 0.5, unigrams, fields on; up to 18, fewer where a weighting equals the configured one);
    3. fields off, for the four text models at alpha 0.5, unigrams, configured weights (4).
    """
    names = [f.name for f in schema.text_fields]
    configured = {f.name: float(f.weight) for f in schema.text_fields}
    variants = [(m, False) for m in TEXT_MODELS] + [(m, True) for m in TRANSFORM_MODELS]
    out: list[Setting] = [(m, a, b, True, configured, t) for m, t in variants for a in ALPHAS for b in (False, True)]
    if names:
        for w in FIRST_FIELD_WEIGHTS:
            weights = {n: (w if i == 0 else 1.0) for i, n in enumerate(names)}
            out += [(m, 0.5, False, True, weights, t) for m, t in variants]
    out += [(m, 0.5, False, False, configured, False) for m in TEXT_MODELS]
    seen: set[tuple[Any, ...]] = set()
    unique = []
    for s in out:
        key = (*s[:4], tuple(s[4].items()), s[5])
        if key not in seen:
            seen.add(key)
            unique.append(s)
    return unique


def _with_weights(schema: Schema, weights: dict[str, float]) -> Schema:
    """The schema with new text field weights (FieldSpec is frozen: the schema is rebuilt)."""
    fields = tuple(replace(f, weight=float(weights[f.name])) if f.name in weights else f for f in schema.fields)
    return Schema(fields=fields, id=schema.id, label=schema.label, time=schema.time)


def _coverage(ws: Workspace, jll: np.ndarray, queues: list[str], labels: list[str]) -> float:
    """The share auto-routed at each queue's target, with cutoffs fitted exactly as training fits them
    (temperature, isotonic map when there are enough items, the same cutoff rule)."""
    qi = {q: i for i, q in enumerate(queues)}
    y = np.array([qi[lab] for lab in labels])
    _policy, _calibration, cutoffs = fit_policy(ws.config, jll, y, queues)
    never = ws.config.never_auto()
    return sum(c.get("routed", 0) for q, c in cutoffs.items() if q not in never) / len(y)


def adopt(ws: Workspace, row: GridRow) -> list[tuple[str, Any, Any]]:
    """Write a grid row's text settings into triage.toml: text model, alpha, bigrams, the transforms in [model]
    and the text weights in [fields] (fields on/off is reported, not a config setting). Returns every change
    written, as (key, old value, new value)."""
    from triage.app.workspace import CONFIG_NAME
    from triage.config import update_config_text, write_config_atomically

    updates: dict[tuple[str, str], Any] = {
        ("model", "text_model"): row.text_model, ("model", "alpha_text"): row.alpha_text,
        ("model", "bigrams"): row.bigrams, ("model", "tf_log"): row.transforms, ("model", "idf"): row.transforms,
        ("model", "length_norm"): row.transforms,
    }
    updates.update({(f"fields.{name}", "weight"): float(w) for name, w in row.text_weights.items()})
    weights = {f.name: f.weight for f in ws.config.schema.text_fields}
    before = {(sec, key): (weights.get(sec.split(".", 1)[1]) if sec.startswith("fields.")
                           else getattr(ws.config.model, key)) for sec, key in updates}
    changes = [(f"{sec}.{key}", before[(sec, key)], new) for (sec, key), new in updates.items()
               if before[(sec, key)] != new]
    path = ws.root / CONFIG_NAME
    write_config_atomically(path, update_config_text(path.read_text(encoding="utf-8"), updates))
    ws.config.model.text_model = row.text_model
    ws.config.model.alpha_text = row.alpha_text
    ws.config.model.bigrams = row.bigrams
    ws.config.model.tf_log = ws.config.model.idf = ws.config.model.length_norm = row.transforms
    ws.config.schema = _with_weights(ws.config.schema, row.text_weights)
    return changes


def lift_for(ws: Workspace, queue: str) -> dict[str, Any]:
    """Lift and cumulative gains by decile of one queue's calibrated probability, on the newest items (the test items)."""
    meas = ws.evaluate()
    if queue not in meas.model_queues:
        raise UnknownQueue(f"queue {queue!r} is not one of the model's queues ({', '.join(meas.model_queues)})")
    assert meas.test_probs is not None
    scores = meas.test_probs[:, meas.model_queues.index(queue)]
    positive = np.array([lab == queue for lab in meas.test_labels])
    return {"queue": queue, "items": len(scores), "positives": int(positive.sum()),
            "deciles": lift_table(scores, positive, 10),
            "captured_top_10": captured_share(scores, positive, 0.10),
            "captured_top_20": captured_share(scores, positive, 0.20)}


def _informative_terms(df: np.ndarray, n: np.ndarray, k: int) -> np.ndarray:
    """The k words whose presence tells most about the queue (mutual information from the counts): the words
    the model leans on, rather than the most frequent ones ("i", "a", "the") that carry little."""
    total = n.sum()
    if total == 0 or df.size == 0:
        return np.empty(0, dtype=np.int64)
    p_q = n / total  # (Q,)
    p_t = df.sum(axis=0) / total  # (V,)
    mi = np.zeros(df.shape[1])
    with np.errstate(divide="ignore", invalid="ignore"):
        for joint, marg in ((df / total, p_t), ((n[:, None] - df) / total, 1 - p_t)):
            term = joint * np.log(joint / (p_q[:, None] * marg[None, :]))
            mi += np.nansum(np.where(joint > 0, term, 0.0), axis=0)
    return np.argsort(-mi, kind="stable")[:k]


def independence(ws: Workspace, top_terms: int = 15) -> list[dict[str, Any]]:
    """Conditional mutual information given the queue for field pairs and field x top-term pairs, from counts."""
    model = ws.model
    if model is None:
        raise NoModel("no model yet; run `triage train` first")
    recs = labelled(ws)
    batch = model.encoder.transform([r.fields for r in recs], allow_missing=True)
    qi = {q: i for i, q in enumerate(model.queues)}
    y = np.array([qi.get(r.label or "", -1) for r in recs])
    keep = y >= 0
    y, codes, X = y[keep], batch.codes[keep], batch.X[keep]
    fields = list(model.encoder.schema.value_fields)
    Q = len(model.queues)
    columns: list[tuple[str, np.ndarray]] = [(f.name, codes[:, k]) for k, f in enumerate(fields)]
    for j in _informative_terms(model.counts.doc_freq_, model.counts.class_count_, top_terms):
        present = (np.asarray(X[:, j].todense()).ravel() > 0).astype(np.int64)
        columns.append((f"word '{model.encoder.terms_[j]}'", present))
    out = []
    for a in range(len(columns)):
        for b in range(a + 1, len(columns)):
            if a >= len(fields) and b >= len(fields):
                continue  # word x word pairs are the text model's own assumption; not listed
            (na, va), (nb, vb) = columns[a], columns[b]
            table = np.zeros((Q, va.max() + 1, vb.max() + 1))
            np.add.at(table, (y, va, vb), 1.0)
            cmi = conditional_mutual_information(table)
            out.append({"a": na, "b": nb, "cmi_nats": cmi, "flagged": bool(cmi > CMI_FLAG)})
    return sorted(out, key=lambda r: -r["cmi_nats"])


def try_merge(ws: Workspace, a: str, b: str, folds: int = 5) -> dict[str, Any]:
    """Cross-validated figures with fields `a` and `b` apart and merged into one joint field "a×b".

    The joint field's levels are the code pairs observed on the labelled items, so it counts each combination as
    one piece of evidence instead of two. Both runs share one tokenisation pass and the same folds.
    """
    recs = labelled(ws)
    items = [r.fields for r in recs]
    labels = [r.label or "" for r in recs]
    spec = ws.model.spec if ws.model is not None else spec_from_config(ws.config)
    enc, batch = encode(ws, spec, items)
    fields = list(enc.schema.value_fields)
    names = [f.name for f in fields]
    for name in (a, b):
        if name not in names:
            raise BadInput(f"{name!r} is not a category or number field (fields: {', '.join(names)})")
    if a == b:
        raise BadInput("name two different fields to merge")
    ia, ib = names.index(a), names.index(b)
    la, lb = enc.field_labels(fields[ia]), enc.field_labels(fields[ib])
    pairs = batch.codes[:, ia] * len(lb) + batch.codes[:, ib]
    observed, joint = np.unique(pairs, return_inverse=True)
    merged_name = f"{a}×{b}"
    rest = [k for k in range(len(fields)) if k not in (ia, ib)]
    schema = Schema(fields=tuple(f for f in enc.schema.fields if f.name not in (a, b))
                    + (FieldSpec(merged_name, FieldRole.CATEGORY),),
                    id=enc.schema.id, label=enc.schema.label, time=enc.schema.time)
    merged = copy.copy(enc)
    merged.schema = schema
    merged.levels_ = {k: v for k, v in enc.levels_.items() if k not in (a, b)}
    merged.level_index_ = {k: v for k, v in enc.level_index_.items() if k not in (a, b)}
    merged.edges_ = {k: v for k, v in enc.edges_.items() if k not in (a, b)}
    merged._set_levels(merged_name, [f"{la[p // len(lb)]} | {lb[p % len(lb)]}" for p in observed])
    merged_batch = EncodedBatch(batch.X, np.column_stack([batch.codes[:, rest], joint]).astype(np.int64))
    out: dict[str, Any] = {"a": a, "b": b, "field": merged_name, "levels": int(observed.size), "folds": folds}
    for key, (e, bt) in {"apart": (enc, batch), "merged": (merged, merged_batch)}.items():
        jll, queues = out_of_fold_jll(e, bt, labels, spec, folds=folds)
        acc, f1, ll = score_jll(jll, queues, labels)
        out[key] = {"accuracy": acc, "macro_f1": f1, "log_loss": ll}
    out["merge_helps"] = bool(out["merged"]["log_loss"] < out["apart"]["log_loss"]
                              and out["merged"]["macro_f1"] >= out["apart"]["macro_f1"])
    return out
