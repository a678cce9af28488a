"""CountTables: the sufficient statistics of the model, kept apart from the smoothed log tables derived from them.

Everything the model knows is a count: items per queue, weighted token counts and document frequencies per queue,
and value counts per field per queue ("a table of queue against each field"). Learning adds counts, forgetting
subtracts them and merging adds two tables, so a correction (forget under the old queue, learn under the new one)
gives exactly the model a fresh fit on the corrected labels would give.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
import scipy.sparse as sp

from triage.core.encode import EncodedBatch, EncodedItem


class CountError(ValueError):
    """Counts that cannot be: negative, not finite, or forgetting what was never learned."""


def _check_queue(name: str) -> str:
    if not isinstance(name, str) or not name.strip():
        raise CountError(f"a queue name must be non-empty text, got {name!r}")
    return name


class CountTables:
    """Per-queue counts. Arrays are dense (queues x terms): queues are few, and dense rows make a correction a
    handful of in-place additions rather than a sparse-matrix rebuild."""

    def __init__(self, queues: Sequence[str], n_terms: int, field_sizes: Sequence[int]) -> None:
        self.queues_: list[str] = []
        self.queue_index_: dict[str, int] = {}
        q = 0
        self.class_count_ = np.zeros(q, dtype=np.float64)
        self.token_count_ = np.zeros((q, n_terms), dtype=np.float64)
        self.doc_freq_ = np.zeros((q, n_terms), dtype=np.float64)
        # field tables hold only observed codes; the unseen bucket (last code of a category field) is never counted
        self.field_count_: list[np.ndarray] = [np.zeros((q, k), dtype=np.float64) for k in field_sizes]
        for name in queues:
            self.add_queue(name)

    # ----- shape -------------------------------------------------------------------------------------------
    @property
    def n_queues(self) -> int:
        return len(self.queues_)

    @property
    def n_terms(self) -> int:
        return self.token_count_.shape[1]

    def add_queue(self, name: str) -> int:
        """Add an empty queue (a correction may send an item to a queue unknown at fit time)."""
        _check_queue(name)
        if name in self.queue_index_:
            return self.queue_index_[name]
        self.queue_index_[name] = len(self.queues_)
        self.queues_.append(name)
        self.class_count_ = np.append(self.class_count_, 0.0)
        self.token_count_ = np.vstack([self.token_count_, np.zeros((1, self.n_terms))])
        self.doc_freq_ = np.vstack([self.doc_freq_, np.zeros((1, self.n_terms))])
        self.field_count_ = [np.vstack([t, np.zeros((1, t.shape[1]))]) for t in self.field_count_]
        return self.queue_index_[name]

    def resize(self, n_terms: int, field_sizes: Sequence[int]) -> None:
        """Widen the tables after the encoder grew (new tokens, new category levels); never shrinks."""
        if n_terms > self.n_terms:
            pad = ((0, 0), (0, n_terms - self.n_terms))
            self.token_count_ = np.pad(self.token_count_, pad)
            self.doc_freq_ = np.pad(self.doc_freq_, pad)
        for k, size in enumerate(field_sizes):
            t = self.field_count_[k]
            if size > t.shape[1]:
                self.field_count_[k] = np.pad(t, ((0, 0), (0, size - t.shape[1])))

    def queue(self, name: str, *, create: bool = False) -> int:
        if name not in self.queue_index_:
            if not create:
                known = ", ".join(self.queues_) or "none"
                raise CountError(f"unknown queue {_check_queue(name)!r} (known: {known})")
            return self.add_queue(name)
        return self.queue_index_[name]

    # ----- learning ----------------------------------------------------------------------------------------
    def fit(self, batch: EncodedBatch, labels: Sequence[str]) -> CountTables:
        """Count a whole training set at once (sparse products, not a loop over items)."""
        if len(labels) != len(batch):
            raise CountError(f"{len(batch)} items but {len(labels)} labels")
        for name in sorted(set(labels)):  # queues in name order, whatever order the rows come in
            self.queue(name, create=True)
        idx = np.fromiter((self.queue_index_[lab] for lab in labels), dtype=np.int64, count=len(labels))
        _check_counts(batch.X.data)
        Y = np.zeros((len(labels), self.n_queues), dtype=np.float64)
        Y[np.arange(len(labels)), idx] = 1.0
        self.class_count_ += Y.sum(axis=0)
        self.token_count_ += np.asarray((batch.X.T @ Y).T)
        # presence shares the count matrix's index arrays: only a new data array, not a copy of the matrix
        X = batch.X
        present = sp.csr_matrix(((X.data > 0).astype(np.float64), X.indices, X.indptr), shape=X.shape)
        self.doc_freq_ += np.asarray((present.T @ Y).T)
        for k, table in enumerate(self.field_count_):
            np.add.at(table, (idx, batch.codes[:, k]), 1.0)
        return self

    def _apply(self, item: EncodedItem, q: int, sign: float) -> None:
        ids, counts = item.token_ids, item.token_counts
        _check_counts(counts)
        if sign < 0:
            problems = []
            if self.class_count_[q] < 1:
                problems.append("it holds no items")
            elif np.any(self.token_count_[q, ids] < counts - 1e-9) or np.any(self.doc_freq_[q, ids] < 1 - 1e-9):
                problems.append("it does not hold this item's tokens")
            for k, table in enumerate(self.field_count_):
                if item.codes[k] >= table.shape[1] or table[q, item.codes[k]] < 1:  # unseen bucket: never counted
                    problems.append(f"field #{k} has no item with this value")
            if problems:
                raise CountError(
                    f"cannot forget an item under queue {self.queues_[q]!r}: {'; '.join(problems)}"
                    " (it was never learned there)"
                )
        self.class_count_[q] += sign
        self.token_count_[q, ids] += sign * counts
        self.doc_freq_[q, ids] += sign
        for k, table in enumerate(self.field_count_):
            table[q, item.codes[k]] += sign
        if sign < 0:  # wipe float dust so a forgotten item leaves exact zeros behind
            np.maximum(self.token_count_[q, ids], 0.0, out=self.token_count_[q, ids])
            small = np.abs(self.token_count_[q, ids]) < 1e-9
            if small.any():
                self.token_count_[q, ids[small]] = 0.0

    def learn(self, item: EncodedItem, queue: str) -> int:
        """Add one item under a queue (created if new); returns the queue index."""
        q = self.queue(queue, create=True)
        self._apply(item, q, +1.0)
        return q

    def forget(self, item: EncodedItem, queue: str) -> int:
        """Remove one item from a queue; raises CountError if the queue cannot hold it."""
        q = self.queue(queue)
        self._apply(item, q, -1.0)
        return q

    def relabel(self, item: EncodedItem, old: str, new: str) -> tuple[int, int]:
        """Move one item from one queue to another: the exact learning step behind a correction."""
        a = self.forget(item, old)
        try:
            b = self.learn(item, new)
        except Exception:
            self.learn(item, old)
            raise
        return a, b

    def merge(self, other: CountTables) -> CountTables:
        """Add another table's counts (counted on other items with the same encoder): counting partitions apart
        and merging gives the tables of one count over all of them, which is what makes a cluster exact.
        A queue the other table has and this one lacks is added after this one's queues."""
        self._check_same_encoding(other)
        for name in other.queues_:
            self.queue(name, create=True)
        rows = np.array([self.queue_index_[n] for n in other.queues_], dtype=np.int64)
        self.class_count_[rows] += other.class_count_
        self.token_count_[rows] += other.token_count_
        self.doc_freq_[rows] += other.doc_freq_
        for mine, theirs in zip(self.field_count_, other.field_count_, strict=True):
            mine[rows] += theirs
        return self

    def subtract(self, other: CountTables) -> CountTables:
        """Remove another table's counts, counted on a subset of this table's items with the same encoder.

        The training part of a cross-validation fold is the total minus the fold: one count of every item serves
        every fold. Exact for the integer and half-integer counts of untransformed text (floating-point sums of
        such numbers do not depend on their order); transformed counts (tf-log, idf, length norm) agree to
        rounding, and the float dust below 1e-9 that a subtraction can leave is wiped to an exact zero.
        Refuses (and changes nothing) when the other table holds what this one does not.
        """
        self._check_same_encoding(other)
        missing = [n for n in other.queues_ if n not in self.queue_index_]
        if missing:
            raise CountError(f"cannot subtract counts of queue(s) {', '.join(map(repr, missing))}: not counted here")
        rows = np.array([self.queue_index_[n] for n in other.queues_], dtype=np.int64)
        pairs = [(self.class_count_, other.class_count_), (self.token_count_, other.token_count_),
                 (self.doc_freq_, other.doc_freq_), *zip(self.field_count_, other.field_count_, strict=True)]
        for mine, theirs in pairs:
            if theirs.size and np.any(mine[rows] < theirs - 1e-9):
                raise CountError("cannot subtract counts that were never counted here (a count would go negative)")
        for mine, theirs in pairs:
            part = mine[rows] - theirs
            part[part < 1e-9] = 0.0  # exact zeros where everything was removed (and no negative dust)
            mine[rows] = part
        return self

    def _check_same_encoding(self, other: CountTables) -> None:
        if other.n_terms != self.n_terms or [t.shape[1] for t in other.field_count_] != [
            t.shape[1] for t in self.field_count_
        ]:
            raise CountError("cannot combine count tables built with different vocabularies or field levels")

    def copy(self) -> CountTables:
        new = CountTables([], 0, [])
        new.queues_ = list(self.queues_)
        new.queue_index_ = dict(self.queue_index_)
        new.class_count_ = self.class_count_.copy()
        new.token_count_ = self.token_count_.copy()
        new.doc_freq_ = self.doc_freq_.copy()
        new.field_count_ = [t.copy() for t in self.field_count_]
        return new

    # ----- persistence -------------------------------------------------------------------------------------
    def arrays(self) -> dict[str, np.ndarray]:
        out = {"class_count": self.class_count_, "token_count": self.token_count_, "doc_freq": self.doc_freq_}
        out.update({f"field_count_{k}": t for k, t in enumerate(self.field_count_)})
        return out

    @classmethod
    def from_arrays(cls, queues: Iterable[str], arrays: dict[str, np.ndarray], n_fields: int) -> CountTables:
        new = cls([], 0, [])
        new.queues_ = [_check_queue(q) for q in queues]
        new.queue_index_ = {q: i for i, q in enumerate(new.queues_)}
        new.class_count_ = np.asarray(arrays["class_count"], dtype=np.float64)
        new.token_count_ = np.asarray(arrays["token_count"], dtype=np.float64)
        new.doc_freq_ = np.asarray(arrays["doc_freq"], dtype=np.float64)
        new.field_count_ = [np.asarray(arrays[f"field_count_{k}"], dtype=np.float64) for k in range(n_fields)]
        new.validate()
        return new

    def validate(self) -> None:
        """Raise CountError if any table is inconsistent (shapes, negative or non-finite counts)."""
        q = len(self.queues_)
        if self.class_count_.shape != (q,):
            raise CountError(f"class counts have shape {self.class_count_.shape}, expected ({q},)")
        for name, t in [("token counts", self.token_count_), ("document frequencies", self.doc_freq_),
                        *[(f"field table #{k}", t) for k, t in enumerate(self.field_count_)]]:
            if t.ndim != 2 or t.shape[0] != q:
                raise CountError(f"{name} have shape {t.shape}, expected {q} rows")
            _check_counts(t, name)
        _check_counts(self.class_count_, "class counts")


def merged(tables: Iterable[CountTables]) -> CountTables:
    """The sum of count tables, in the order given (the first one is copied, never changed)."""
    it = iter(tables)
    try:
        total = next(it).copy()
    except StopIteration:
        raise CountError("no count tables to merge") from None
    for t in it:
        total.merge(t)
    return total


def _check_counts(values: np.ndarray, what: str = "token counts") -> None:
    if values.size and not np.all(np.isfinite(values)):
        raise CountError(f"{what} must be finite numbers")
    if values.size and values.min() < 0:
        raise CountError(f"{what} must not be negative (found {values.min():g})")
