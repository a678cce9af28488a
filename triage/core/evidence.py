"""Evidence: why an item went to its top queue rather than the runner-up.

Each term is log P(x | a) - log P(x | b) for one piece of the item (a token with its multiplicity, a field value,
the prior), so the terms add up to log P(a | x) - log P(b | x): nothing is hidden in a remainder. For the
Bernoulli text model the words *absent* from the item count too; the few largest are shown one by one and the
rest as one aggregated term, so the sum stays exact.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from triage.core.encode import EncodedBatch, EncodedItem
from triage.core.model import NaiveBayes


@dataclass(frozen=True)
class Contribution:
    """One additive term. kind: prior | token | field | absent (a word the item lacks; Bernoulli only) | layer
    (the score layer's offset between the two queues)."""

    kind: str
    feature: str
    weight: float
    count: float = 1.0

    def to_dict(self) -> dict[str, object]:
        return {"kind": self.kind, "feature": self.feature, "weight": round(float(self.weight), 6),
                "count": float(self.count)}


@dataclass(frozen=True)
class Evidence:
    """All the terms behind one decision of `top` over `runner_up`."""

    top: str
    runner_up: str
    gap: float  # log P(top | x) - log P(runner_up | x)
    terms: list[Contribution]
    unknown_tokens: tuple[str, ...] = field(default=())

    def total(self) -> float:
        return float(sum(t.weight for t in self.terms))

    def for_top(self, n: int = 5) -> list[Contribution]:
        """The strongest terms pushing towards the top queue."""
        return sorted((t for t in self.terms if t.weight > 0), key=lambda t: -t.weight)[:n]

    def against_top(self, n: int = 5) -> list[Contribution]:
        """The strongest terms pushing towards the runner-up."""
        return sorted((t for t in self.terms if t.weight < 0), key=lambda t: t.weight)[:n]

    def strongest(self, n: int = 5) -> list[Contribution]:
        return sorted(self.terms, key=lambda t: -abs(t.weight))[:n]


def _finite_diff(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        d = x - y
    return np.where(np.isnan(d), 0.0, d)  # -inf - -inf: impossible under both, no evidence either way


LAYER_OFFSET = "score layer (queue offset)"
BASE_RATE = "base rate"  # the prior: how common each queue is, before any word or field is read
ABSENT_WORDS = "words the item lacks"


def _token_table(model: NaiveBayes) -> np.ndarray:
    """(Q, V) score of one occurrence of each term per queue (Bernoulli: of its presence)."""
    if model.spec.text_model == "bernoulli":
        return model.A_
    return (model.A_ + model.B_[:, None]) * model.scale_[:, None]


def _project(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """u . v over the queue axis (last of u, first of v); an impossible (-inf) score adds nothing."""
    return u @ np.where(np.isfinite(v), v, 0.0)


def _explain_through_layer(model: NaiveBayes, item: EncodedItem, jll: np.ndarray, a: int, b: int) -> Evidence:
    """Each piece's share of f_a - f_b through the score layer: u . v_piece (stack.ScoreLayer.direction), where
    v_piece is the piece's vector of naive Bayes scores over all queues. The pieces' vectors sum to the item's
    naive Bayes scores, so the shares plus the layer's offset b_a - b_b sum to the gap exactly."""
    layer = model.layer_
    assert layer is not None
    u = layer.direction(a, b)
    base = model.base_scores_one(item)
    terms = [Contribution("prior", BASE_RATE, float(_project(u, model.log_prior_)))]
    used = np.where(np.isfinite(model.log_prior_), model.log_prior_, 0.0)
    ids, counts = item.token_ids, item.token_counts
    if ids.size:
        V = _token_table(model)[:, ids] * (1.0 if model.spec.text_model == "bernoulli" else counts)
        w = _project(u, V)
        used = used + np.where(np.isfinite(V), V, 0.0).sum(axis=1)
        terms.extend(Contribution("token", model.encoder.terms_[j], float(x), float(m))
                     for j, x, m in zip(ids.tolist(), w.tolist(), counts.tolist(), strict=True))
    for k, f in enumerate(model.encoder.schema.value_fields):
        code = int(item.codes[k])
        v = model.field_log_[k][:, code]
        used = used + np.where(np.isfinite(v), v, 0.0)
        terms.append(Contribution("field", f"{f.name} = {model.encoder.field_labels(f)[code]}",
                                  float(_project(u, v))))
    rest = np.where(np.isfinite(base), base, 0.0) - used  # Bernoulli: the absent words and constants; else ~0
    if model.spec.text_model == "bernoulli":
        terms.append(Contribution("absent", ABSENT_WORDS, float(_project(u, rest))))
    terms.append(Contribution("layer", LAYER_OFFSET, float(layer.intercept[a] - layer.intercept[b])))
    gap = float(_finite_diff(jll[a:a + 1], jll[b:b + 1])[0])
    return Evidence(model.queues[a], model.queues[b], gap, terms, item.unknown_tokens)


def explain(model: NaiveBayes, item: EncodedItem, top: int | None = None, runner_up: int | None = None,
            *, absent_detail: int = 3) -> Evidence:
    """Evidence for queue index `top` against `runner_up` (default: the two highest-scoring queues)."""
    jll = model.joint_log_likelihood_one(item)
    item = model.transform_item(item)  # the counts the model scores (tf-log / idf / length norm when on)
    if model.counts.n_queues < 2:
        q = model.queues[0] if model.queues else "(none)"
        return Evidence(q, q, 0.0, [], item.unknown_tokens)
    order = np.argsort(-jll, kind="stable")
    a = int(order[0]) if top is None else top
    b = int(order[1] if order[0] == a else order[0]) if runner_up is None else runner_up
    if model.layer_active:
        return _explain_through_layer(model, item, jll, a, b)
    terms: list[Contribution] = []
    terms.append(Contribution("prior", BASE_RATE,
                              float(_finite_diff(model.log_prior_[a:a + 1], model.log_prior_[b:b + 1])[0])))
    ids, counts = item.token_ids, item.token_counts
    terms_text = model.encoder.terms_
    if model.spec.text_model == "bernoulli":
        terms.extend(_bernoulli_terms(model, ids, a, b, absent_detail))
    elif ids.size:
        wa = (model.A_[a, ids] + model.B_[a]) * model.scale_[a]
        wb = (model.A_[b, ids] + model.B_[b]) * model.scale_[b]
        diff = _finite_diff(wa, wb) * counts
        terms.extend(Contribution("token", terms_text[j], float(w), float(m))
                     for j, w, m in zip(ids.tolist(), diff.tolist(), counts.tolist(), strict=True))
    for k, f in enumerate(model.encoder.schema.value_fields):
        code = int(item.codes[k])
        table = model.field_log_[k]
        w = float(_finite_diff(table[a, code:code + 1], table[b, code:code + 1])[0])
        label = model.encoder.field_labels(f)[code]
        terms.append(Contribution("field", f"{f.name} = {label}", w))
    gap = float(_finite_diff(jll[a:a + 1], jll[b:b + 1])[0])
    return Evidence(model.queues[a], model.queues[b], gap, terms, item.unknown_tokens)


def _bernoulli_terms(model: NaiveBayes, ids: np.ndarray, a: int, b: int, detail: int) -> list[Contribution]:
    c, alpha = model.counts, model.spec.alpha_text
    df, N = c.doc_freq_, c.class_count_
    log_den = np.log(N[[a, b]] + 2 * alpha)
    log_p_a = np.log(df[a, ids] + alpha) - log_den[0]
    log_p_b = np.log(df[b, ids] + alpha) - log_den[1]
    terms = [Contribution("token", model.encoder.terms_[j], float(w))
             for j, w in zip(ids.tolist(), (log_p_a - log_p_b).tolist(), strict=True)]
    log_q = np.log(N[[a, b], None] - df[[a, b]] + alpha) - log_den[:, None]
    absent = log_q[0] - log_q[1]
    absent[ids] = 0.0
    n_absent = c.n_terms - ids.size
    if n_absent <= 0:
        return terms
    shown = np.argsort(-np.abs(absent), kind="stable")[:detail]
    shown = shown[absent[shown] != 0]
    for j in shown.tolist():
        terms.append(Contribution("absent", f"no '{model.encoder.terms_[j]}'", float(absent[j])))
    rest = float(absent.sum() - absent[shown].sum())
    terms.append(Contribution("absent", f"other absent words ({n_absent - shown.size})", rest))
    return terms


def strongest_batch(model: NaiveBayes, batch: EncodedBatch, top: np.ndarray, runner_up: np.ndarray,
                    k: int = 5) -> list[list[Contribution]]:
    """The k strongest terms (by absolute weight) of each item's decision of `top` over `runner_up`.

    The same terms as `explain(...).strongest(k)`, computed for a whole batch with array operations: one weight
    per stored (item, token) entry, one per field value and the prior, then one sort by (item, -|weight|).
    Only the k winners per item become objects. For the Bernoulli model the absent words enter as one
    aggregated term per item.
    """
    n = len(batch)
    if n == 0:
        return []
    top = np.asarray(top, dtype=np.int64)
    runner_up = np.asarray(runner_up, dtype=np.int64)
    X = batch.X
    rows = np.repeat(np.arange(n), np.diff(X.indptr))
    cols = X.indices.astype(np.int64)
    a, b = top[rows], runner_up[rows]
    kinds: list[np.ndarray] = []
    weights: list[np.ndarray] = []
    owners: list[np.ndarray] = []
    refs: list[np.ndarray] = []
    counts_all: list[np.ndarray] = []
    if model.layer_active:
        return _strongest_through_layer(model, batch, top, runner_up, k)
    if model.spec.text_model == "bernoulli":
        c, alpha = model.counts, model.spec.alpha_text
        df, N = c.doc_freq_, c.class_count_
        log_den = np.log(N + 2 * alpha)
        log_p = lambda q, j: np.log(df[q, j] + alpha) - log_den[q]  # noqa: E731
        log_q = lambda q, j: np.log(N[q] - df[q, j] + alpha) - log_den[q]  # noqa: E731
        w_tok = log_p(a, cols) - log_p(b, cols)
        present_absent = np.bincount(rows, weights=log_q(a, cols) - log_q(b, cols), minlength=n)
        absent = (model.C_[top] - model.C_[runner_up]) - present_absent
        kinds.append(np.full(n, 3))
        weights.append(absent)
        owners.append(np.arange(n))
        refs.append(np.zeros(n, dtype=np.int64))
        counts_all.append(np.ones(n))
        m = np.ones_like(w_tok)
    else:
        A, B, S = model.A_, model.B_, model.scale_
        m = model._text_input(X).data  # same sparsity pattern as X; the transformed counts when enabled
        w_tok = _finite_diff((A[a, cols] + B[a]) * S[a], (A[b, cols] + B[b]) * S[b]) * m
    kinds.append(np.full(w_tok.size, 1))
    weights.append(w_tok)
    owners.append(rows)
    refs.append(cols)
    counts_all.append(m)
    for f_idx, table in enumerate(model.field_log_):
        code = batch.codes[:, f_idx]
        kinds.append(np.full(n, 2))
        weights.append(_finite_diff(table[top, code], table[runner_up, code]))
        owners.append(np.arange(n))
        refs.append(f_idx * (1 << 32) + code)
        counts_all.append(np.ones(n))
    kinds.append(np.zeros(n, dtype=np.int64))
    weights.append(_finite_diff(model.log_prior_[top], model.log_prior_[runner_up]))
    owners.append(np.arange(n))
    refs.append(np.zeros(n, dtype=np.int64))
    counts_all.append(np.ones(n))
    return _pick(model, n, k, kinds, weights, owners, refs, counts_all)


def _pick(model: NaiveBayes, n: int, k: int, kinds: list[np.ndarray], weights: list[np.ndarray],
          owners: list[np.ndarray], refs: list[np.ndarray], counts_all: list[np.ndarray]) -> list[list[Contribution]]:
    """The k strongest terms per item from flat arrays of (kind, weight, owner item, reference, count)."""
    kind, weight, owner, ref, count = (np.concatenate(x) for x in (kinds, weights, owners, refs, counts_all))
    order = np.lexsort((-np.abs(weight), owner))
    owner_sorted = owner[order]
    starts = np.searchsorted(owner_sorted, np.arange(n))
    rank = np.arange(order.size) - starts[owner_sorted]
    chosen = order[rank < k]
    out: list[list[Contribution]] = [[] for _ in range(n)]
    terms = model.encoder.terms_
    fields = model.encoder.schema.value_fields
    labels = [model.encoder.field_labels(f) for f in fields]
    for i in chosen.tolist():
        kd, w, r = int(kind[i]), float(weight[i]), int(ref[i])
        if kd == 1:
            item = Contribution("token", terms[r], w, float(count[i]))
        elif kd == 2:
            f_idx, code = divmod(r, 1 << 32)
            item = Contribution("field", f"{fields[f_idx].name} = {labels[f_idx][code]}", w)
        elif kd == 3:
            item = Contribution("absent", ABSENT_WORDS, w)
        elif kd == 4:
            item = Contribution("layer", LAYER_OFFSET, w)
        else:
            item = Contribution("prior", BASE_RATE, w)
        out[int(owner[i])].append(item)
    return out


def _strongest_through_layer(model: NaiveBayes, batch: EncodedBatch, top: np.ndarray, runner_up: np.ndarray,
                             k: int) -> list[list[Contribution]]:
    """strongest_batch through the score layer: the same shares as _explain_through_layer, for a whole batch."""
    layer = model.layer_
    assert layer is not None
    n = len(batch)
    D = layer.weights[top] - layer.weights[runner_up]
    U = (D - D.mean(axis=1, keepdims=True)) / layer.scale  # (n, Q): one direction per item
    X = batch.X
    rows = np.repeat(np.arange(n), np.diff(X.indptr))
    cols = X.indices.astype(np.int64)
    bern = model.spec.text_model == "bernoulli"
    m = np.ones(cols.size) if bern else model._text_input(X).data
    T = _token_table(model)
    T = np.where(np.isfinite(T), T, 0.0)
    w_tok = np.empty(cols.size)
    step = 1 << 16  # entries at a time: bounds the (entries, queues) temporary to a few megabytes per queue
    for lo in range(0, cols.size, step):
        hi = min(lo + step, cols.size)
        w_tok[lo:hi] = np.einsum("iq,qi->i", U[rows[lo:hi]], T[:, cols[lo:hi]]) * m[lo:hi]
    prior = np.where(np.isfinite(model.log_prior_), model.log_prior_, 0.0)
    kinds = [np.full(cols.size, 1), np.zeros(n, dtype=np.int64)]
    weights = [w_tok, U @ prior]
    owners = [rows, np.arange(n)]
    refs = [cols, np.zeros(n, dtype=np.int64)]
    counts_all = [m, np.ones(n)]
    total = np.bincount(rows, weights=w_tok, minlength=n) + weights[1]
    for f_idx, table in enumerate(model.field_log_):
        code = batch.codes[:, f_idx]
        tab = np.where(np.isfinite(table), table, 0.0)
        w = np.einsum("iq,qi->i", U, tab[:, code])
        total += w
        kinds.append(np.full(n, 2))
        weights.append(w)
        owners.append(np.arange(n))
        refs.append(f_idx * (1 << 32) + code)
        counts_all.append(np.ones(n))
    if bern:  # the absent words and constants: the rest of each item's naive Bayes scores
        base = model.base_scores(batch)
        rest = np.einsum("iq,iq->i", U, np.where(np.isfinite(base), base, 0.0)) - total
        kinds.append(np.full(n, 3))
        weights.append(rest)
        owners.append(np.arange(n))
        refs.append(np.zeros(n, dtype=np.int64))
        counts_all.append(np.ones(n))
    kinds.append(np.full(n, 4))
    weights.append(layer.intercept[top] - layer.intercept[runner_up])
    owners.append(np.arange(n))
    refs.append(np.zeros(n, dtype=np.int64))
    counts_all.append(np.ones(n))
    return _pick(model, n, k, kinds, weights, owners, refs, counts_all)
