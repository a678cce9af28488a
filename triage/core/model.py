"""The Naive Bayes router: text and field evidence in one posterior, derived from CountTables.

One joint log-likelihood per queue c:  log prior(c) + text part(c) + sum over fields of log P(value | c).
Every text event model is kept in one factored form, so that both the batch product and a correction's update
touch as little as possible:

    text part(c) = scale[c] * (x . A[c] + len(x) * B[c]) + C[c]

  multinomial      A = log(n_ct + a)            B = -log(N_c + a V)   scale = 1   C = 0
  bernoulli        A = log(df+a) - log(N-df+a)  B = 0                 scale = 1   C = sum_t log(N-df+a) - V log(N+2a)
  complement       A = -log(comp_ct)            B = log(S_c)          scale = 1   C = 0
  complement-norm  A = log(comp_ct)             B = -log(S_c)         scale = 1/(sum_t log comp_ct - V log S_c)

with comp_ct = sum_over_queues n_.t + a - n_ct and S_c = sum_t comp_ct (Rennie et al. 2003, as in scikit-learn's
ComplementNB). The per-token weight behind a decision is scale[c] * (A[c, t] + B[c]) (Bernoulli: log p_ct).

A plain base class (the model) owns posteriors, normalisation and the single-item path; the event model only
decides how A, B, C and scale come from the counts. When training sets a score layer (stack.py), the class
scores every caller reads (`joint_log_likelihood`) are the layer's output over these; `base_scores` are the
naive Bayes scores themselves.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.special import logsumexp

from triage.core.counts import CountTables, _check_queue
from triage.core.encode import EncodedBatch, EncodedItem, Encoder
from triage.core.schema import Schema
from triage.core.stack import ScoreLayer
from triage.core.tokens import Tokenizer

TEXT_MODELS = ("multinomial", "bernoulli", "complement", "complement-norm")


@dataclass(frozen=True)
class ModelSpec:
    """How log tables are derived from counts. alpha = 0 is allowed for multinomial text and for fields.

    The token-count transforms of Rennie et al. (2003), applied in this order wherever counts enter the model
    (fitting, batch and single-item scoring, learn / forget / relabel); all off by default:

    - `tf_log`: x -> log(1 + x), damping a word repeated many times in one item;
    - `idf`: x -> x * idf_t with idf_t = ln((1 + n) / (1 + df_t)) + 1 (scikit-learn's smoothed formula), n the
      training items and df_t those holding term t. The vector is frozen at fit; a term the vocabulary gains
      afterwards (a correction's new word) gets the largest idf of the vector, i.e. counts as the rarest word;
    - `length_norm`: each item's transformed vector divided by its L2 norm (an empty text stays empty).

    Exactness of learning from corrections: `tf_log` and `length_norm` act on one item at a time, so a sequence
    of learns, forgets and relabels still equals a fresh fit with the same encoder. `idf` is exact only relative
    to the idf frozen at fit: the incremental model equals a fresh count of the final labelled items under that
    frozen vector, while a fresh fit would recompute idf from the new document frequencies (run `train`).
    The Bernoulli text model ignores the three transforms: it sees only presence, which none of them changes.
    """

    text_model: str = "multinomial"
    alpha_text: float = 1.0
    alpha_fields: float = 1.0
    prior: str = "fitted"  # fitted | uniform
    bigrams: bool = False
    min_count: int = 1
    max_vocab: int | None = None
    max_token_chars: int = 40
    tf_log: bool = False
    idf: bool = False
    length_norm: bool = False
    # fit the score layer (stack.py) at training; the counts and every formula above are the same either way
    score_layer: bool = False

    def __post_init__(self) -> None:
        if self.text_model not in TEXT_MODELS:
            raise ValueError(f"text model {self.text_model!r} is not one of {', '.join(TEXT_MODELS)}")
        for name in ("alpha_text", "alpha_fields"):
            a = getattr(self, name)
            if not np.isfinite(a) or a < 0:
                raise ValueError(f"{name} must be a finite number >= 0, got {a!r}")
        if self.alpha_text == 0 and self.text_model != "multinomial":
            raise ValueError(f"{self.text_model} text needs alpha_text > 0 (zero counts would give log 0 - log 0)")
        if self.prior not in ("fitted", "uniform"):
            raise ValueError(f"prior must be 'fitted' or 'uniform', got {self.prior!r}")

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def _log(x: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(x)


class NaiveBayes:
    """A fitted router. Learned state has a trailing underscore; `counts` is the truth, the rest is derived."""

    def __init__(self, encoder: Encoder, counts: CountTables, spec: ModelSpec, idf: np.ndarray | None = None) -> None:
        """`counts` were counted on transformed input; `idf` is the vector frozen at fit (needed if spec.idf)."""
        self.encoder = encoder
        self.counts = counts
        self.spec = spec
        self.idf_: np.ndarray | None = None
        # the score layer over the class scores (stack.py), fitted by training on out-of-fold scores; None: off
        self.layer_: ScoreLayer | None = None
        if spec.idf:
            if idf is None:
                raise ValueError("a model with idf needs the idf vector frozen at fit (NaiveBayes.fit builds it)")
            idf = np.array(idf, dtype=np.float64)
            if idf.shape != (counts.n_terms,) or not np.all(np.isfinite(idf)) or (idf.size and idf.min() <= 0):
                raise ValueError(f"idf must be {counts.n_terms} finite numbers > 0, got shape {idf.shape}")
            self.idf_ = idf
        self.refresh()

    # ----- construction ------------------------------------------------------------------------------------
    @classmethod
    def fit(cls, schema: Schema, items: Sequence[Mapping[str, Any]], labels: Sequence[str],
            spec: ModelSpec | None = None, *, encoder: Encoder | None = None,
            batch: EncodedBatch | None = None) -> NaiveBayes:
        """Fit on labelled items. Pass a fitted `encoder` and its `batch` to reuse one tokenisation pass."""
        spec = spec or ModelSpec()
        if encoder is None:
            tok = Tokenizer(bigrams=spec.bigrams, max_token_chars=spec.max_token_chars)
            encoder = Encoder(schema, tok, min_count=spec.min_count, max_vocab=spec.max_vocab)
            batch = encoder.fit_transform(items)  # one tokenisation pass
        if batch is None:
            batch = encoder.transform(items)
        return cls.from_batch(encoder, batch, labels, spec)

    @classmethod
    def from_batch(cls, encoder: Encoder, batch: EncodedBatch, labels: Sequence[str], spec: ModelSpec, *,
                   queues: Sequence[str] = (), idf: np.ndarray | None = None) -> NaiveBayes:
        """Count a batch of raw (weighted) token counts encoded by `encoder`, after the spec's transforms.

        `queues` are created (empty) even if no label names them. With spec.idf the idf vector is computed from
        this batch's document frequencies unless a frozen one is given.
        """
        if spec.idf and idf is None:
            idf = document_idf(batch.X)
        counts = CountTables(sorted(queues), encoder.n_terms, encoder_sizes(encoder))
        counts.fit(EncodedBatch(_transform_matrix(batch.X, spec, idf), batch.codes), labels)
        return cls(encoder, counts, spec, idf)

    @property
    def queues(self) -> list[str]:
        return self.counts.queues_

    # ----- derived tables ----------------------------------------------------------------------------------
    def refresh(self, columns: np.ndarray | None = None, queues: Sequence[int] | None = None) -> None:
        """Recompute the log tables from the counts; with `columns`/`queues` only what a correction touched."""
        c = self.counts
        partial = (
            columns is not None
            and hasattr(self, "A_")
            and self.A_.shape == c.token_count_.shape
            and self.spec.text_model in ("multinomial", "bernoulli")
            and c.n_terms > 0
        )
        if partial:
            self._refresh_text_partial(np.asarray(columns, dtype=np.int64), list(queues or range(c.n_queues)))
        else:
            self._refresh_text()
        self._refresh_fields()
        self._refresh_prior()

    def _refresh_prior(self) -> None:
        n = self.counts.class_count_
        if self.spec.prior == "uniform" or n.sum() == 0:
            self.log_prior_ = np.full(len(n), -np.log(max(len(n), 1)))
        else:
            self.log_prior_ = _log(n) - np.log(n.sum())

    def _refresh_fields(self) -> None:
        a = self.spec.alpha_fields
        self.field_log_ = []
        for k, f in enumerate(self.encoder.schema.value_fields):
            counts = self.counts.field_count_[k]
            width = self.encoder.n_codes(f)
            full = np.zeros((counts.shape[0], width))
            full[:, : counts.shape[1]] = counts
            total = self.counts.class_count_[:, None]
            with np.errstate(invalid="ignore", divide="ignore"):
                table = _log(full + a) - _log(total + a * width)
            self.field_log_.append(np.where(np.isnan(table), -np.inf, table))

    def _refresh_text(self) -> None:
        c, a, model = self.counts, self.spec.alpha_text, self.spec.text_model
        n, df, N = c.token_count_, c.doc_freq_, c.class_count_
        Q, V = n.shape
        self.scale_ = np.ones(Q)
        self.C_ = np.zeros(Q)
        with np.errstate(invalid="ignore", divide="ignore"):
            if model == "multinomial":
                self.A_ = _log(n + a)
                self.B_ = -_log(n.sum(axis=1) + a * V)
            elif model == "bernoulli":
                absent = _log(N[:, None] - df + a)
                self.A_ = _log(df + a) - absent
                self.B_ = np.zeros(Q)
                self.C_ = absent.sum(axis=1) - V * _log(N + 2 * a)
            else:
                comp = n.sum(axis=0, keepdims=True) + a - n
                log_comp = _log(comp)
                log_s = _log(comp.sum(axis=1))
                if model == "complement":
                    self.A_, self.B_ = -log_comp, log_s
                else:
                    self.A_, self.B_ = log_comp, -log_s
                    # one-word vocabulary: every weight is log 1 = 0 and the norm 0; the word carries no evidence
                    norm = log_comp.sum(axis=1) - V * log_s
                    self.scale_ = np.divide(1.0, norm, out=np.zeros_like(norm), where=norm != 0)
        if V == 0:  # no vocabulary (e.g. a schema without text fields): the text part is 0 for every queue
            self.A_, self.B_, self.C_, self.scale_ = np.zeros((Q, 0)), np.zeros(Q), np.zeros(Q), np.ones(Q)
        for name in ("A_", "B_", "C_", "scale_"):
            arr = getattr(self, name)
            arr[np.isnan(arr)] = -np.inf

    def _refresh_text_partial(self, cols: np.ndarray, rows: list[int]) -> None:
        """Multinomial and Bernoulli: a correction changes a few columns of a few rows, and each row's totals."""
        c, a = self.counts, self.spec.alpha_text
        V = c.n_terms
        r = np.asarray(rows, dtype=np.int64)
        n, df, N = c.token_count_, c.doc_freq_, c.class_count_
        with np.errstate(invalid="ignore", divide="ignore"):
            if self.spec.text_model == "multinomial":
                self.A_[np.ix_(r, cols)] = _log(n[np.ix_(r, cols)] + a)
                self.B_[r] = -_log(n[r].sum(axis=1) + a * V)
            else:
                # N_c moved, so every term's absence weight in these rows moved: whole rows, few of them
                absent = _log(N[r, None] - df[r] + a)
                self.A_[r] = _log(df[r] + a) - absent
                self.C_[r] = absent.sum(axis=1) - V * _log(N[r] + 2 * a)

    # ----- scoring -----------------------------------------------------------------------------------------
    def _text_input(self, X: Any) -> Any:
        if self.spec.text_model == "bernoulli":
            X = X.copy()
            X.data = (X.data > 0).astype(np.float64)
            return X
        return _transform_matrix(X, self.spec, self.idf_)

    def transform_item(self, item: EncodedItem) -> EncodedItem:
        """One encoded item's token counts after the spec's transforms (what the counts and scores see).

        Bernoulli text and a spec without transforms leave the item as it is."""
        if self.spec.text_model == "bernoulli" or not _has_transforms(self.spec):
            return item
        x = item.token_counts
        if self.spec.tf_log:
            x = np.log1p(x)
        if self.idf_ is not None:
            x = x * self.idf_[item.token_ids]
        if self.spec.length_norm:
            norm = np.sqrt(np.dot(x, x))
            if norm > 0:
                x = x / norm
        return EncodedItem(item.token_ids, x, item.codes, item.unknown_tokens)

    @property
    def layer_active(self) -> bool:
        """Whether the score layer reads this model's scores (a queue added by a correction switches it off)."""
        return self.layer_ is not None and self.layer_.applies_to(self.queues)

    @property
    def layer_waits(self) -> bool:
        """A layer is set but a queue added by a correction switched it off: the policy's calibration and cutoffs
        were fitted through it, so they do not describe these scores until the next `train`."""
        return self.layer_ is not None and not self.layer_active

    def watch_probabilities(self, batch: EncodedBatch) -> np.ndarray | None:
        """The naive Bayes posteriors (no layer) when the layer is on, else None: the never-auto watch rule reads
        the larger of these and the layer's, so the layer can never talk a safety queue's chance down."""
        if not self.layer_active:
            return None
        return np.exp(log_posterior(self.base_scores(batch)))

    def joint_log_likelihood(self, batch: EncodedBatch) -> np.ndarray:
        """(n, Q) class scores: the naive Bayes joint log-likelihoods, through the score layer when one is set."""
        jll = self.base_scores(batch)
        return self.layer_.transform(jll) if self.layer_active else jll  # type: ignore[union-attr]

    def base_scores(self, batch: EncodedBatch) -> np.ndarray:
        """(n, Q) joint log-likelihoods, log P(c) + log P(x | c) up to a constant shared by all queues."""
        X = self._text_input(batch.X)
        lengths = np.asarray(X.sum(axis=1)).ravel()
        with np.errstate(invalid="ignore"):
            text = (np.asarray(X @ self.A_.T) + lengths[:, None] * self.B_) * self.scale_ + self.C_
            jll = self.log_prior_ + text
            for k, table in enumerate(self.field_log_):
                jll = jll + table[:, batch.codes[:, k]].T
        return _clean(jll)

    def joint_log_likelihood_one(self, item: EncodedItem) -> np.ndarray:
        """(Q,) class scores of one item (through the score layer when one is set)."""
        jll = self.base_scores_one(item)
        return self.layer_.transform(jll[None, :])[0] if self.layer_active else jll  # type: ignore[union-attr]

    def base_scores_one(self, item: EncodedItem) -> np.ndarray:
        """(Q,) joint log-likelihood of one item; reads columns of the tables, copies none of them."""
        counts = item.token_counts
        if self.spec.text_model == "bernoulli":
            counts = np.ones_like(counts)
        elif _has_transforms(self.spec):
            counts = self.transform_item(item).token_counts
        with np.errstate(invalid="ignore"):
            text = (self.A_[:, item.token_ids] @ counts + counts.sum() * self.B_) * self.scale_ + self.C_
            jll = self.log_prior_ + text
            for k, table in enumerate(self.field_log_):
                jll = jll + table[:, item.codes[k]]
        return _clean(jll[None, :])[0]

    def predict_log_proba(self, batch: EncodedBatch) -> np.ndarray:
        return log_posterior(self.joint_log_likelihood(batch))

    def predict_proba(self, batch: EncodedBatch) -> np.ndarray:
        return np.exp(self.predict_log_proba(batch))

    def predict(self, batch: EncodedBatch) -> list[str]:
        idx = self.joint_log_likelihood(batch).argmax(axis=1)
        return [self.queues[i] for i in idx]

    # ----- learning from corrections -----------------------------------------------------------------------
    def _sync_shape(self, item: Mapping[str, Any]) -> bool:
        """Grow the encoder and the counts for an item's new tokens/values; True if the tables changed shape."""
        new_tokens, new_levels = self.encoder.grow(item)
        if new_tokens or new_levels:
            self.counts.resize(self.encoder.n_terms, encoder_sizes(self.encoder))
            if self.idf_ is not None and self.encoder.n_terms > self.idf_.size:
                # a word unseen at fit counts as the rarest word (the largest idf; 1 if the vocabulary was empty)
                fill = self.idf_.max() if self.idf_.size else 1.0
                self.idf_ = np.concatenate([self.idf_, np.full(self.encoder.n_terms - self.idf_.size, fill)])
            return True
        return False

    def learn(self, item: Mapping[str, Any], queue: str) -> None:
        """Learn one new labelled item (e.g. a routed item a person has now labelled)."""
        _check_queue(queue)  # before growing: a refused learn must not leave grown, unrefreshed tables
        grew = self._sync_shape(item)
        n_before = self.counts.n_queues
        enc = self.transform_item(self.encoder.encode(item, allow_missing=True))
        q = self.counts.learn(enc, queue)
        self._after_change(enc, [q], full=grew or self.counts.n_queues != n_before)

    def forget(self, item: Mapping[str, Any], queue: str) -> None:
        """Forget one item learned under `queue`."""
        enc = self.transform_item(self.encoder.encode(item, allow_missing=True))
        q = self.counts.forget(enc, queue)
        self._after_change(enc, [q], full=False)

    def relabel(self, item: Mapping[str, Any], old: str, new: str) -> None:
        """The exact correction: forget under the old queue, learn under the new one.

        The item was learned already, so it is encoded with the vocabulary it was counted with; growing it here
        would add words pruned at fit (min_count, max_vocab) that the old queue never counted.
        """
        n_before = self.counts.n_queues
        enc = self.transform_item(self.encoder.encode(item, allow_missing=True))
        a, b = self.counts.relabel(enc, old, new)
        self._after_change(enc, [a, b], full=self.counts.n_queues != n_before)

    def _after_change(self, enc: EncodedItem, rows: list[int], full: bool) -> None:
        if full:
            self.refresh()
        else:
            self.refresh(columns=enc.token_ids, queues=rows)

    def copy(self) -> NaiveBayes:
        enc = Encoder.from_manifest(self.encoder.schema, self.encoder.to_manifest())
        out = NaiveBayes(enc, self.counts.copy(), self.spec, self.idf_)
        out.layer_ = self.layer_  # frozen: shared, never changed in place
        return out


def encoder_sizes(encoder: Encoder) -> list[int]:
    """Observed-code columns per value field (the unseen bucket is derived, not counted)."""
    from triage.core.schema import FieldRole

    return [len(encoder.levels_[f.name]) if f.role is FieldRole.CATEGORY else encoder.n_codes(f)
            for f in encoder.schema.value_fields]


def document_idf(X: Any) -> np.ndarray:
    """Smoothed idf per column of a count matrix: ln((1 + n) / (1 + df)) + 1, as scikit-learn's TfidfTransformer."""
    X = sp.csr_matrix(X)
    df = np.bincount(X.indices[X.data > 0], minlength=X.shape[1]).astype(np.float64)
    return np.log((1.0 + X.shape[0]) / (1.0 + df)) + 1.0


def _has_transforms(spec: ModelSpec) -> bool:
    return spec.tf_log or spec.idf or spec.length_norm


def _transform_matrix(X: Any, spec: ModelSpec, idf: np.ndarray | None) -> Any:
    """Rows of raw token counts after tf_log, idf and length_norm; the matrix itself when all are off."""
    if not _has_transforms(spec):
        return X
    X = sp.csr_matrix(X, dtype=np.float64, copy=True)
    if spec.tf_log:
        np.log1p(X.data, out=X.data)
    if spec.idf:
        assert idf is not None
        X.data *= idf[X.indices]
    if spec.length_norm:
        norms = np.sqrt(np.asarray(X.multiply(X).sum(axis=1)).ravel())
        norms[norms == 0] = 1.0
        X.data /= np.repeat(norms, np.diff(X.indptr))
    return X


def _clean(jll: np.ndarray) -> np.ndarray:
    """NaN (from -inf + inf when alpha = 0) means "impossible under this queue"."""
    jll = np.asarray(jll, dtype=np.float64)
    jll[np.isnan(jll)] = -np.inf
    return jll


def log_posterior(jll: np.ndarray) -> np.ndarray:
    """Normalise joint log-likelihoods by log-sum-exp; a row impossible under every queue becomes uniform."""
    jll = np.atleast_2d(jll)
    with np.errstate(invalid="ignore"):
        norm = logsumexp(jll, axis=1, keepdims=True)
        out = jll - norm
    dead = ~np.isfinite(norm[:, 0])
    if dead.any():
        out[dead] = -np.log(jll.shape[1])
    return out
