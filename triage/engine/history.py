"""A labelled history spread over an engine: tokenised once, then counted, cross-validated and fitted.

Each partition is tokenised once, into its own provisional term ids, and kept where it was tokenised (on a
cluster: in the worker's memory). The vocabulary statistics of the partitions are merged into encoders (one for
the older items a measurement fits on, one for every item), and each partition's matrix is then renumbered into
an encoder's ids without reading the text again. Everything a training run needs follows from count tables:

- a model: the partitions' tables merged (exact; see triage.core.counts);
- out-of-fold scores: one table per fold per partition, merged per fold; fold f's model is counted from the
  total minus fold f (subtraction is exact), so k folds cost one count, not k fits;
- a grid of settings that differ only in the event model and smoothing: the same fold tables serve them all.

With the idf transform a fold's training part has its own idf, so its counts cannot come from a subtraction:
those folds are counted directly (still from the cached token ids).
The partitions never straddle the boundary between the older and the newest items, so both encoders are
exact merges of whole partitions.
"""

from __future__ import annotations

from array import array
from collections import Counter
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sp

from triage.core.counts import CountTables, merged
from triage.core.encode import MISSING, EncodedBatch, Encoder, _is_missing, _number
from triage.core.model import ModelSpec, NaiveBayes
from triage.core.schema import FieldRole, Schema
from triage.core.selection import n_folds_for
from triage.core.tokens import Tokenizer
from triage.engine.base import PARTITION_ROWS, Engine, partition_bounds
from triage.engine.vocabulary import VocabularyCounts


# ----- what lives on a worker ------------------------------------------------------------------------------------
@dataclass
class TokenisedPart:
    """One partition after its only tokenisation: weighted counts over provisional ids, in first-sight order."""

    lo: int  # the partition's first row in the history
    terms: list[str]
    X: sp.csr_matrix  # (rows, len(terms)), the field weights applied, provisional column ids
    occurrences: np.ndarray  # unweighted occurrences per provisional term (what min_count reads)
    values: dict[str, Any]  # per value field: category keys or numbers (NaN: missing); the text is gone
    labels: list[str]
    vocabulary: VocabularyCounts


@dataclass
class EncodedPart:
    """One partition in a fitted encoder's ids."""

    lo: int
    batch: EncodedBatch
    labels: list[str]


# items tokenised together: their tokens are alive at once (about 100 bytes a token), so a chunk bounds that
TOKEN_CHUNK_ITEMS = 2048


def _tokenise(part: tuple[int, list[dict[str, Any]], list[str]], template: Encoder) -> TokenisedPart:
    """The one pass over a partition's text: the encoder's tokens of every text field, weighted by the field.

    A chunk's tokens go into one list and are numbered by pandas' hash factorisation (in C); only the chunk's
    distinct tokens then meet the partition's term dictionary, so the Python work per token is the
    tokenizer's. Repeated tokens of one item are summed by the sparse constructor. The counts equal
    Encoder.transform's (the same weights added; tests/test_engine.py)."""
    lo, items, labels = part
    # what the encoder counts for a text field: its tokens, or (a tokenizer with `pieces`) the field's pieces
    tokenizer = template.tokenizer
    pieces = getattr(tokenizer, "pieces", None)
    text_fields = [(f.name, f.weight, getattr(f, "pieces", None)) for f in template.schema.text_fields]
    provisional: dict[str, int] = {}
    chunks: list[sp.csr_matrix] = []
    occurrences = np.zeros(0, dtype=np.int64)
    for start in range(0, len(items), TOKEN_CHUNK_ITEMS):
        chunk = items[start: start + TOKEN_CHUNK_ITEMS]
        flat: list[str] = []
        rows, lengths, weights = array("q"), array("q"), array("d")
        for i, item in enumerate(chunk):
            for name, w, kind in text_fields:
                text = item.get(name)
                toks = pieces(text, kind) if pieces is not None and kind is not None else tokenizer.tokens(text)
                if toks:
                    flat.extend(toks)
                    rows.append(i)
                    lengths.append(len(toks))
                    weights.append(w)
        if flat:
            codes, uniques = pd.factorize(np.array(flat, dtype=object))
            ids = np.fromiter((provisional.setdefault(t, len(provisional)) for t in uniques), dtype=np.int64,
                              count=len(uniques))[codes]
            n_len = np.frombuffer(lengths, dtype=np.int64)
            row_of = np.repeat(np.frombuffer(rows, dtype=np.int64), n_len)
            w_of = np.repeat(np.frombuffer(weights, dtype=np.float64), n_len)
            del flat, codes
            occurrences = np.pad(occurrences, (0, len(provisional) - occurrences.size))
            occurrences += np.bincount(ids, minlength=len(provisional))
        else:
            ids, row_of, w_of = (np.empty(0, dtype=np.int64),) * 2 + (np.empty(0),)
        chunks.append(sp.csr_matrix((w_of, (row_of, ids)), shape=(len(chunk), len(provisional))))
    terms = list(provisional)
    for c in chunks:  # earlier chunks saw fewer terms: widen them (no data moves)
        c.resize((c.shape[0], len(terms)))
    X = sp.vstack(chunks, format="csr") if chunks else sp.csr_matrix((0, 0))
    occurrences = np.pad(occurrences, (0, len(terms) - occurrences.size))
    occ = np.asarray(occurrences, dtype=np.int64)
    # each value field read once, by the encoder's rules: a category's key, a number (NaN when missing)
    values: dict[str, Any] = {}
    vocab = VocabularyCounts(Counter(dict(zip(terms, occ.tolist(), strict=True))))
    for f in template.schema.value_fields:
        raw = [item.get(f.name) for item in items]
        if f.role is FieldRole.CATEGORY:
            keys = [MISSING if _is_missing(v) else str(v).strip() for v in raw]
            values[f.name] = keys
            vocab.levels[f.name] = set(keys)
        else:
            xs = np.array([np.nan if (x := _number(v, f.name)) is None else x for v in raw], dtype=np.float64)
            values[f.name] = xs
            vocab.numbers[f.name] = [xs[~np.isnan(xs)]]
    return TokenisedPart(lo, terms, X, occ, values, list(labels), vocab)


def _vocabulary(part: TokenisedPart, _: Any) -> VocabularyCounts:
    return part.vocabulary


def _renumber(part: TokenisedPart, encoder: Encoder) -> EncodedPart:
    """The partition in the encoder's ids: pruned terms dropped, columns sorted; equals encoder.transform."""
    vocab = encoder.vocabulary_
    remap = np.fromiter((vocab.get(t, -1) for t in part.terms), dtype=np.int64, count=len(part.terms))
    X = part.X
    cols = remap[X.indices] if X.nnz else np.empty(0, dtype=np.int64)
    keep = cols >= 0
    kept_before = np.concatenate(([0], np.cumsum(keep, dtype=np.int64)))
    Y = sp.csr_matrix((X.data[keep], cols[keep], kept_before[X.indptr]), shape=(X.shape[0], encoder.n_terms))
    Y.sort_indices()
    fields = encoder.schema.value_fields
    codes = np.empty((X.shape[0], len(fields)), dtype=np.int64)
    for k, f in enumerate(fields):  # Encoder.code, a column at a time
        if f.role is FieldRole.CATEGORY:
            index, unseen = encoder.level_index_[f.name], len(encoder.levels_[f.name])
            codes[:, k] = np.fromiter((index.get(key, unseen) for key in part.values[f.name]), dtype=np.int64,
                                      count=X.shape[0])
        else:
            xs, edges = part.values[f.name], encoder.edges_[f.name]
            col = np.searchsorted(edges, xs, side="right")
            col[np.isnan(xs)] = len(edges) + 1
            codes[:, k] = col
    return EncodedPart(part.lo, EncodedBatch(Y, codes), part.labels)


@dataclass(frozen=True)
class _CountJob:
    encoder: Encoder
    spec: ModelSpec
    queues: tuple[str, ...]
    idf: np.ndarray | None = None
    folds: np.ndarray | None = None  # fold per history row (-1: not counted); None: one table of every row
    k: int = 1
    only_fold: int | None = None  # with folds: count the rows of every fold but this one (idf folds)


def _tables(encoder: Encoder, spec: ModelSpec, queues: Sequence[str], batch: EncodedBatch, labels: list[str],
            idf: np.ndarray | None) -> CountTables:
    # from_batch applies the spec's transforms exactly as a single-process fit does
    return NaiveBayes.from_batch(encoder, batch, labels, spec, queues=queues, idf=idf).counts


def _subset(part: EncodedPart, rows: np.ndarray) -> tuple[EncodedBatch, list[str]]:
    b = part.batch
    return EncodedBatch(b.X[rows], b.codes[rows]), [part.labels[i] for i in rows]


def _count(part: EncodedPart, job: _CountJob) -> list[CountTables]:
    """One table (no folds), one per fold, or one of every fold but `only_fold`."""
    n = len(part.labels)
    if job.folds is None:
        return [_tables(job.encoder, job.spec, job.queues, part.batch, part.labels, job.idf)]
    fold = job.folds[part.lo: part.lo + n]
    if job.only_fold is not None:
        rows = np.flatnonzero((fold >= 0) & (fold != job.only_fold))
        return [_tables(job.encoder, job.spec, job.queues, *_subset(part, rows), job.idf)]
    return [_tables(job.encoder, job.spec, job.queues, *_subset(part, np.flatnonzero(fold == f)), job.idf)
            for f in range(job.k)]


def _doc_freq(part: EncodedPart, exclude: np.ndarray | None) -> tuple[int, np.ndarray]:
    X = part.batch.X
    if exclude is not None:
        X = X[np.flatnonzero(~exclude[part.lo: part.lo + X.shape[0]])]
    return X.shape[0], np.bincount(X.indices[X.data > 0], minlength=X.shape[1]).astype(np.float64)


def _jll(part: EncodedPart, job: tuple[list[NaiveBayes], np.ndarray | None]) -> np.ndarray:
    """Joint log-likelihoods of a partition's rows: fold f's rows by model f, or every row by the one model."""
    models, folds = job
    if folds is None:
        return models[0].joint_log_likelihood(part.batch)
    fold = folds[part.lo: part.lo + len(part.labels)]
    out = np.full((len(fold), models[0].counts.n_queues), np.nan)
    for f, model in enumerate(models):
        rows = np.flatnonzero(fold == f)
        if rows.size:
            out[rows] = model.joint_log_likelihood(EncodedBatch(part.batch.X[rows], part.batch.codes[rows]))
    return out


def stratified_folds(labels: Sequence[str], wanted: int, seed: int = 0) -> np.ndarray:
    """A fold number per row: the folds core.selection.out_of_fold_jll uses (as many as the rarest queue
    allows, stratified, shuffled with `seed`)."""
    from sklearn.model_selection import StratifiedKFold

    y = np.asarray(labels)
    folds = np.empty(len(y), dtype=np.int64)
    splitter = StratifiedKFold(n_splits=n_folds_for(labels, wanted), shuffle=True, random_state=seed)
    for f, (_, test) in enumerate(splitter.split(np.zeros(len(y)), y)):
        folds[test] = f
    return folds


# ----- what the driver does ------------------------------------------------------------------------------------
class History:
    """Labelled items in arrival order on an engine; rows [0, n_older) are the older items a measurement fits on.

    `spec` gives the tokenizer and vocabulary settings (bigrams, token length, min_count, max_vocab); every
    model settings used later must share them (the grid varies the event model, smoothing and transforms)."""

    def __init__(self, engine: Engine, schema: Schema, spec: ModelSpec, items: Sequence[Mapping[str, Any]],
                 labels: Sequence[str], n_older: int | None = None, rows: int = PARTITION_ROWS) -> None:
        n = len(items)
        if len(labels) != n:
            raise ValueError(f"{n} items but {len(labels)} labels")
        self.engine, self.schema, self.spec = engine, schema, spec
        self.labels = list(labels)
        self.n, self.n_older = n, n if n_older is None else int(n_older)
        per_side = max(1, engine.workers)
        bounds = [*partition_bounds(self.n_older, rows, per_side),
                  *[(lo + self.n_older, hi + self.n_older)
                    for lo, hi in partition_bounds(n - self.n_older, rows, per_side)]]
        self._older_parts = sum(1 for _, hi in bounds if hi <= self.n_older)
        template = Encoder(schema, Tokenizer(bigrams=spec.bigrams, max_token_chars=spec.max_token_chars),
                           min_count=spec.min_count, max_vocab=spec.max_vocab)
        parts = engine.put([(lo, list(items[lo:hi]), self.labels[lo:hi]) for lo, hi in bounds])
        self._tokenised = engine.run(_tokenise, parts, shared=engine.share(template))
        engine.release(parts)
        older: VocabularyCounts | None = None
        full = VocabularyCounts()
        for i, v in enumerate(engine.results(engine.run(_vocabulary, self._tokenised))):
            full.merge(v)
            if i + 1 == self._older_parts:
                older = VocabularyCounts().merge(full)
        self.encoder = full.encoder(template)  # every item: the final model's vocabulary
        self.older_encoder = (older or VocabularyCounts()).encoder(template) if self.n_older < n else self.encoder
        self._encoded: dict[str, list[Any]] = {}

    # ----- encodings ---------------------------------------------------------------------------------------
    def _parts(self, which: str) -> list[Any]:
        """Encoded partitions, made on first use and kept: "all" (final encoder), "older" and "newer" (the older
        items' encoder)."""
        if which not in self._encoded:
            enc = self.encoder if which == "all" else self.older_encoder
            src = {"all": self._tokenised, "older": self._tokenised[: self._older_parts],
                   "newer": self._tokenised[self._older_parts:]}[which]
            self._encoded[which] = self.engine.run(_renumber, src, shared=self.engine.share(enc))
        return self._encoded[which]

    def _counts(self, which: str, spec: ModelSpec, queues: Sequence[str], idf: np.ndarray | None,
                folds: np.ndarray | None = None, k: int = 1, only_fold: int | None = None) -> list[CountTables]:
        """Each partition's list of tables, merged position by position in partition order."""
        enc = self.encoder if which == "all" else self.older_encoder
        job = _CountJob(enc, spec, tuple(queues), idf, folds, k, only_fold)
        total: list[CountTables] | None = None
        for tables in self.engine.results(self.engine.run(_count, self._parts(which),
                                                          shared=self.engine.share(job))):
            if total is None:
                total = tables
            else:
                for mine, theirs in zip(total, tables, strict=True):
                    mine.merge(theirs)
        assert total is not None
        return total

    def _idf(self, which: str, exclude: np.ndarray | None = None) -> np.ndarray:
        """Smoothed idf, ln((1 + n) / (1 + df)) + 1 as core.model.document_idf computes it, from merged document
        counts (integers, so exact); `exclude` (a boolean per history row) leaves rows out."""
        n, df = 0, None
        for m, d in self.engine.results(self.engine.run(_doc_freq, self._parts(which), shared=exclude)):
            n, df = n + m, d if df is None else df + d
        assert df is not None
        return np.log((1.0 + n) / (1.0 + df)) + 1.0

    def _rows(self, which: str) -> tuple[int, int]:
        return {"all": (0, self.n), "older": (0, self.n_older), "newer": (self.n_older, self.n)}[which]

    # ----- what training asks for --------------------------------------------------------------------------
    def queues(self, which: str = "all") -> list[str]:
        lo, hi = self._rows(which)
        return sorted(set(self.labels[lo:hi]))

    def model(self, spec: ModelSpec, which: str = "all") -> NaiveBayes:
        """The model counted on every item ("all") or on the older items; equals NaiveBayes.fit on them."""
        enc = self.encoder if which == "all" else self.older_encoder
        idf = self._idf(which) if spec.idf else None
        counts = self._counts(which, spec, self.queues(which), idf)[0]
        return NaiveBayes(enc, counts, spec, idf)

    def joint_log_likelihood(self, model: NaiveBayes, which: str = "newer") -> np.ndarray:
        """Rows of `which` scored by one model (fitted with this history's encoder for those rows)."""
        parts = self._parts(which)
        out = list(self.engine.results(self.engine.run(_jll, parts, shared=self.engine.share(([model], None)))))
        return np.vstack(out) if out else np.empty((0, model.counts.n_queues))

    def out_of_fold_jll(self, specs: Sequence[ModelSpec], folds: np.ndarray, which: str = "older",
                        before_each: Callable[[int, ModelSpec], None] | None = None) -> list[np.ndarray]:
        """Out-of-fold joint log-likelihoods of the rows of `which` for each setting; `folds` holds a fold
        number per row of `which` (0..k-1). Columns in sorted queue order; equals
        core.selection.out_of_fold_jll with the same folds."""
        lo, hi = self._rows(which)
        fold_of = np.full(self.n, -1, dtype=np.int64)
        fold_of[lo:hi] = folds
        k = int(folds.max()) + 1 if len(folds) else 0
        queues = self.queues(which)
        enc = self.encoder if which == "all" else self.older_encoder
        out: list[np.ndarray] = []
        by_transform: dict[tuple[bool, bool], list[CountTables]] = {}
        for i, spec in enumerate(specs):
            if before_each is not None:
                before_each(i, spec)
            if spec.idf:  # each fold's training part has its own idf: count it directly
                models = []
                for f in range(k):
                    idf = self._idf(which, exclude=(fold_of == f) | (fold_of < 0))
                    counts = self._counts(which, spec, queues, idf, fold_of, k, only_fold=f)[0]
                    models.append(NaiveBayes(enc, counts, spec, idf))
            else:
                key = (spec.tf_log, spec.length_norm)  # the counts depend only on these (and not on the model)
                if key not in by_transform:
                    by_transform[key] = self._counts(which, spec, queues, None, fold_of, k)
                per_fold = by_transform[key]
                total = merged(per_fold)
                models = [NaiveBayes(enc, total.copy().subtract(t), spec) for t in per_fold]
            parts = self._parts(which)
            jll = list(self.engine.results(self.engine.run(_jll, parts,
                                                            shared=self.engine.share((models, fold_of)))))
            out.append(np.vstack(jll) if jll else np.empty((0, len(queues))))
        return out

    def close(self) -> None:
        """Free what the partitions hold on the engine."""
        for handles in [self._tokenised, *self._encoded.values()]:
            self.engine.release(handles)
        self._encoded = {}

