"""Encoding items for the model: text fields to token counts, category fields to codes, numbers to bins.

A text field is counted as its words, its character 3-5-grams (marked terms, see tokens.grams), or both, as its
`pieces` says. All text fields share one vocabulary: a word in the subject and the same word in the body are the same evidence,
and a field's `weight` says how much one occurrence counts (a subject word at weight 2 counts twice). One shared
vocabulary keeps the model small and lets short fields borrow strength from long ones; the price is that the
model cannot tell where a word appeared, which the weights partly make up for.

Category field codes: 0..K-1 for the values seen in training, K for the explicit *unseen* bucket. A missing
value is a level of its own ("<missing>") when training saw one, else it falls into the unseen bucket.
Number fields: bins from training quantiles (edges kept), values outside the training range fall into the end
bins, and a missing value has a bin of its own (the last code).
"""

from __future__ import annotations

import math
from array import array
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp

from triage.core.schema import FieldRole, FieldSpec, Schema
from triage.core.tokens import Tokenizer

MISSING = "<missing>"


class MissingFieldError(KeyError):
    """An item lacks a field the schema names (as opposed to holding an empty value for it)."""

    def __str__(self) -> str:
        return str(self.args[0])


@dataclass(frozen=True)
class EncodedItem:
    """One item: unique token ids with their (weighted) counts, one code per value field, unseen tokens."""

    token_ids: np.ndarray  # int64, sorted, unique
    token_counts: np.ndarray  # float64, > 0
    codes: np.ndarray  # int64, one per value field
    unknown_tokens: tuple[str, ...] = ()


@dataclass(frozen=True)
class EncodedBatch:
    """Many items: a sparse (n, V) matrix of weighted token counts and an (n, F) matrix of field codes."""

    X: sp.csr_matrix
    codes: np.ndarray
    # per item, when asked for (routing): the distinct tokens outside the vocabulary, in text order
    unknown: tuple[tuple[str, ...], ...] | None = None

    def __len__(self) -> int:
        return self.X.shape[0]

    def row(self, i: int) -> EncodedItem:
        lo, hi = self.X.indptr[i], self.X.indptr[i + 1]
        return EncodedItem(self.X.indices[lo:hi].astype(np.int64), self.X.data[lo:hi], self.codes[i])


def _is_missing(value: Any) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    return isinstance(value, str) and not value.strip()


def _number(value: Any, field: str) -> float | None:
    if _is_missing(value):
        return None
    if isinstance(value, bool):
        raise ValueError(f"field {field!r}: {value!r} is not a number")
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"field {field!r}: {value!r} is not a number") from None
    if not math.isfinite(x):
        raise ValueError(f"field {field!r}: {value!r} is not a finite number")
    return x


class Encoder:
    """Learns the vocabulary, category levels and number bins from training items, then encodes items.

    The vocabulary and the levels can grow after fitting (`grow`), so that a correction on a new item with a word
    or value never seen before is learned at once; `fit` on the next training rebuilds them from scratch.
    """

    def __init__(self, schema: Schema, tokenizer: Tokenizer | None = None, *, min_count: int = 1,
                 max_vocab: int | None = None) -> None:
        self.schema = schema
        self.tokenizer = tokenizer or Tokenizer()
        self.min_count = int(min_count)
        self.max_vocab = max_vocab
        self.terms_: list[str] = []
        self.vocabulary_: dict[str, int] = {}
        self.levels_: dict[str, list[str]] = {}
        self.level_index_: dict[str, dict[str, int]] = {}
        self.edges_: dict[str, np.ndarray] = {}
        self.pruned_ = False  # did fitting drop any word? then the vocabulary does not grow (see grow)

    # ----- fitting -------------------------------------------------------------------------------------------
    def fit(self, items: Sequence[Mapping[str, Any]]) -> Encoder:
        """Build the vocabulary (pruned by `min_count` total occurrences and `max_vocab`), levels and bin edges."""
        self.fit_transform(items)
        return self

    def fit_transform(self, items: Sequence[Mapping[str, Any]]) -> EncodedBatch:
        """Fit and encode the training items in one tokenisation pass.

        Tokens get provisional ids in order of first sight while the rows are counted; after pruning, the kept
        terms are sorted and the stored entries renumbered (pruned ones dropped). The result equals
        `fit(items)` followed by `transform(items)`, at about half the cost.
        """
        provisional: dict[str, int] = {}
        occurrences: list[int] = []
        indptr = array("q", [0])
        indices = array("i")  # 4 bytes an entry: vocabularies stay far below 2**31
        data = array("d")
        text_fields = self.schema.text_fields
        pieces = self.tokenizer.pieces
        for item in items:
            acc: dict[int, float] = {}
            for f in text_fields:
                w = f.weight
                for tok in pieces(self._get(item, f, False), f.pieces):
                    j = provisional.get(tok)
                    if j is None:
                        j = provisional[tok] = len(occurrences)
                        occurrences.append(0)
                    occurrences[j] += 1
                    acc[j] = acc.get(j, 0.0) + w
            indices.extend(acc.keys())
            data.extend(acc.values())
            indptr.append(len(indices))
        kept = [(t, occurrences[j]) for t, j in provisional.items() if occurrences[j] >= self.min_count]
        if self.max_vocab is not None and len(kept) > self.max_vocab:
            kept.sort(key=lambda tc: (-tc[1], tc[0]))
            kept = kept[: self.max_vocab]
        self.pruned_ = len(kept) < len(provisional)
        self.terms_ = sorted(t for t, _ in kept)
        self.vocabulary_ = {t: i for i, t in enumerate(self.terms_)}
        remap = np.full(len(occurrences), -1, dtype=np.int32)
        for t, i in self.vocabulary_.items():
            remap[provisional[t]] = i
        for f in self.schema.value_fields:
            values = [self._get(item, f, False) for item in items]
            if f.role is FieldRole.CATEGORY:
                seen = {MISSING if _is_missing(v) else str(v).strip() for v in values}
                self._set_levels(f.name, sorted(seen))
            else:
                xs = np.array([x for v in values if (x := _number(v, f.name)) is not None], dtype=np.float64)
                self.edges_[f.name] = _quantile_edges(xs, f.bins)
        # renumber in place of a COO round trip: new row pointers from a running count of kept entries
        cols = remap[np.frombuffer(indices, dtype=np.int32)] if len(indices) else np.empty(0, dtype=np.int32)
        keep = cols >= 0
        kept_before = np.concatenate(([0], np.cumsum(keep, dtype=np.int64)))
        new_indptr = kept_before[np.frombuffer(indptr, dtype=np.int64)]
        X = sp.csr_matrix((np.frombuffer(data, dtype=np.float64)[keep], cols[keep], new_indptr),
                          shape=(len(items), self.n_terms))
        X.sort_indices()
        codes = np.empty((len(items), len(self.schema.value_fields)), dtype=np.int64)
        for k, f in enumerate(self.schema.value_fields):
            code = self.code
            for i, item in enumerate(items):
                codes[i, k] = code(f, self._get(item, f, False))
        return EncodedBatch(X, codes)

    def _set_levels(self, name: str, levels: list[str]) -> None:
        self.levels_[name] = levels
        self.level_index_[name] = {v: i for i, v in enumerate(levels)}

    def grow(self, item: Mapping[str, Any]) -> tuple[int, dict[str, int]]:
        """Add the item's unseen tokens and category values; returns (new tokens, new levels per field).

        When fitting pruned words (min_count, max_vocab), no word is added: a pruned word cannot be told from a
        new one, and adding it would make the training items that hold it disagree with their counts. Such
        words wait for the next training; category values are never pruned and always grow."""
        new_tokens = 0
        for f in () if self.pruned_ else self.schema.text_fields:
            for tok in self.tokenizer.pieces(self._get(item, f, True), f.pieces):
                if tok not in self.vocabulary_:
                    self.vocabulary_[tok] = len(self.terms_)
                    self.terms_.append(tok)
                    new_tokens += 1
        new_levels: dict[str, int] = {}
        for f in self.schema.value_fields:
            if f.role is FieldRole.CATEGORY:
                v = self._get(item, f, True)
                key = MISSING if _is_missing(v) else str(v).strip()
                if key not in self.level_index_[f.name]:
                    self.level_index_[f.name][key] = len(self.levels_[f.name])
                    self.levels_[f.name].append(key)
                    new_levels[f.name] = new_levels.get(f.name, 0) + 1
        return new_tokens, new_levels

    # ----- shape ---------------------------------------------------------------------------------------------
    @property
    def n_terms(self) -> int:
        return len(self.terms_)

    def n_codes(self, f: FieldSpec) -> int:
        """Number of columns of a field's table: levels + the unseen bucket, or bins + the missing bin."""
        if f.role is FieldRole.CATEGORY:
            return len(self.levels_[f.name]) + 1
        return len(self.edges_[f.name]) + 2

    def field_labels(self, f: FieldSpec) -> list[str]:
        """A readable label per code of a field (for evidence and the field tables)."""
        if f.role is FieldRole.CATEGORY:
            return [*self.levels_[f.name], "(unseen value)"]
        e = self.edges_[f.name]
        if len(e) == 0:
            return ["(any value)", "(missing)"]
        labels = [f"< {_fmt(e[0])}"]
        labels += [f"{_fmt(a)} to < {_fmt(b)}" for a, b in zip(e[:-1], e[1:], strict=True)]
        labels += [f">= {_fmt(e[-1])}", "(missing)"]
        return labels

    # ----- encoding ------------------------------------------------------------------------------------------
    def _get(self, item: Mapping[str, Any], f: FieldSpec, allow_missing: bool) -> Any:
        if f.name in item:
            return item[f.name]
        if allow_missing:
            return None
        raise MissingFieldError(f"item has no field {f.name!r} (the schema names it; pass None for an empty value)")

    def code(self, f: FieldSpec, value: Any) -> int:
        """The code of one field value; never fails on an unseen value."""
        if f.role is FieldRole.CATEGORY:
            key = MISSING if _is_missing(value) else str(value).strip()
            return self.level_index_[f.name].get(key, len(self.levels_[f.name]))
        edges = self.edges_[f.name]
        x = _number(value, f.name)
        if x is None:
            return len(edges) + 1
        return int(np.searchsorted(edges, x, side="right"))

    def token_counts(self, item: Mapping[str, Any], allow_missing: bool = False) -> tuple[dict[int, float], list[str]]:
        """Weighted counts per known token id, and the tokens outside the vocabulary."""
        acc: dict[int, float] = {}
        unknown: list[str] = []
        vocab = self.vocabulary_
        for f in self.schema.text_fields:
            w = f.weight
            for tok in self.tokenizer.pieces(self._get(item, f, allow_missing), f.pieces):
                j = vocab.get(tok)
                if j is None:
                    unknown.append(tok)
                else:
                    acc[j] = acc.get(j, 0.0) + w
        return acc, unknown

    def encode(self, item: Mapping[str, Any], *, allow_missing: bool = False) -> EncodedItem:
        """Encode one item (the single-item routing path)."""
        acc, unknown = self.token_counts(item, allow_missing)
        ids = np.fromiter(sorted(acc), dtype=np.int64, count=len(acc))
        counts = np.fromiter((acc[j] for j in ids), dtype=np.float64, count=len(acc))
        codes = np.array([self.code(f, self._get(item, f, allow_missing)) for f in self.schema.value_fields],
                         dtype=np.int64)
        return EncodedItem(ids, counts, codes, tuple(dict.fromkeys(unknown)))

    def transform(self, items: Sequence[Mapping[str, Any]], *, allow_missing: bool = False,
                  keep_unknown: bool = False) -> EncodedBatch:
        """Encode many items into a sparse count matrix and a code matrix.

        `keep_unknown` also keeps each item's tokens outside the vocabulary (shown in decisions, counted for
        drift), so routing tokenises each text once."""
        unknown_rows: list[tuple[str, ...]] = []
        # typed buffers, not lists: 8 bytes a stored count instead of a list slot plus a boxed int or float
        indptr = array("q", [0])
        indices = array("q")
        data = array("d")
        codes = np.empty((len(items), len(self.schema.value_fields)), dtype=np.int64)
        value_fields = self.schema.value_fields
        for i, item in enumerate(items):
            acc, unknown = self.token_counts(item, allow_missing)
            if keep_unknown:
                unknown_rows.append(tuple(dict.fromkeys(unknown)))
            indices.extend(acc.keys())
            data.extend(acc.values())
            indptr.append(len(indices))
            for k, f in enumerate(value_fields):
                codes[i, k] = self.code(f, self._get(item, f, allow_missing))
        X = sp.csr_matrix(
            (np.frombuffer(data, dtype=np.float64), np.frombuffer(indices, dtype=np.int64),
             np.frombuffer(indptr, dtype=np.int64)),
            shape=(len(items), self.n_terms),
        )
        X.sort_indices()
        if keep_unknown:
            return EncodedBatch(X, codes, tuple(unknown_rows))
        return EncodedBatch(X, codes)

    # ----- persistence ---------------------------------------------------------------------------------------
    def to_manifest(self) -> dict[str, Any]:
        return {
            "tokenizer": {"bigrams": self.tokenizer.bigrams, "max_token_chars": self.tokenizer.max_token_chars},
            "min_count": self.min_count,
            "max_vocab": self.max_vocab,
            "pruned": self.pruned_,
            "terms": self.terms_,
            "levels": self.levels_,
            "edges": {k: v.tolist() for k, v in self.edges_.items()},
        }

    @classmethod
    def from_manifest(cls, schema: Schema, m: Mapping[str, Any]) -> Encoder:
        enc = cls(schema, Tokenizer(**m["tokenizer"]), min_count=m["min_count"], max_vocab=m["max_vocab"])
        enc.terms_ = list(m["terms"])
        enc.vocabulary_ = {t: i for i, t in enumerate(enc.terms_)}
        # older manifests did not say; a model fitted with min_count > 1 may have pruned, so assume it did
        enc.pruned_ = bool(m.get("pruned", m.get("min_count", 1) > 1))
        for name, levels in m["levels"].items():
            enc._set_levels(name, list(levels))
        enc.edges_ = {k: np.asarray(v, dtype=np.float64) for k, v in m["edges"].items()}
        return enc

    # ----- per-field views -----------------------------------------------------------------------------------
    def transform_by_field(self, items: Sequence[Mapping[str, Any]], *,
                           allow_missing: bool = False) -> tuple[list[sp.csr_matrix], np.ndarray]:
        """Unweighted token counts per text field (schema order, shared vocabulary) and the field codes.

        One tokenisation pass serves any field weights: sum(w_f * X_f) is what `transform` gives with weights w_f.
        """
        text_fields = self.schema.text_fields
        value_fields = self.schema.value_fields
        vocab = self.vocabulary_
        pieces = self.tokenizer.pieces
        buffers = [(array("q", [0]), array("q"), array("d")) for _ in text_fields]
        codes = np.empty((len(items), len(value_fields)), dtype=np.int64)
        for i, item in enumerate(items):
            for f, (indptr, indices, data) in zip(text_fields, buffers, strict=True):
                acc: dict[int, float] = {}
                for tok in pieces(self._get(item, f, allow_missing), f.pieces):
                    j = vocab.get(tok)
                    if j is not None:
                        acc[j] = acc.get(j, 0.0) + 1.0
                indices.extend(acc.keys())
                data.extend(acc.values())
                indptr.append(len(indices))
            for k, f in enumerate(value_fields):
                codes[i, k] = self.code(f, self._get(item, f, allow_missing))
        out = []
        for indptr, indices, data in buffers:
            X = sp.csr_matrix(
                (np.frombuffer(data, dtype=np.float64), np.frombuffer(indices, dtype=np.int64),
                 np.frombuffer(indptr, dtype=np.int64)),
                shape=(len(items), self.n_terms),
            )
            X.sort_indices()
            out.append(X)
        return out, codes


def _quantile_edges(xs: np.ndarray, bins: int) -> np.ndarray:
    """Inner bin edges at training quantiles; duplicates dropped, so a field with few values gets fewer bins."""
    if xs.size == 0 or bins <= 1:
        return np.empty(0, dtype=np.float64)
    qs = np.quantile(xs, np.linspace(0, 1, bins + 1)[1:-1])
    edges = np.unique(qs)
    # an edge equal to the minimum would leave the first bin empty
    return edges[edges > xs.min()] if edges.size else edges


def _fmt(x: float) -> str:
    return f"{x:g}"
