"""How well routing works: confusion matrix, precision/recall at the cutoffs, the cutoff solver, lift, drift.

Everything here is computed from arrays with numpy; nothing calls back into a model. Empty sets follow the
scikit-learn ``zero_division=0`` convention (a precision over no items is 0.0), so every figure is a finite
number and a scorecard survives a JSON round trip.
"""

from __future__ import annotations

import math
from collections.abc import Collection, Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
from scipy.stats import norm

__all__ = [
    "CutoffChoice",
    "QueueScore",
    "Scorecard",
    "captured_share",
    "conditional_mutual_information",
    "lift_table",
    "population_stability_index",
    "precision_coverage_curve",
    "scorecard",
    "solve_cutoff",
    "wilson_interval",
]


# --------------------------------------------------------------------------- intervals


def _z(confidence: float) -> float:
    """Two-sided normal critical value; 0.95 -> 1.959964."""
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}")
    return float(norm.isf((1.0 - confidence) / 2.0))


def _wilson_bounds(k: np.ndarray, n: np.ndarray, z: float) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised Wilson score interval; n must be > 0. Clipped to [0, 1] against rounding."""
    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    p = k / n
    z2 = z * z
    denom = 1.0 + z2 / n
    centre = (p + z2 / (2.0 * n)) / denom
    half = z * np.sqrt(p * (1.0 - p) / n + z2 / (4.0 * n * n)) / denom
    return np.clip(centre - half, 0.0, 1.0), np.clip(centre + half, 0.0, 1.0)


def wilson_interval(successes: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a proportion.

    Used instead of the normal approximation because cutoffs are chosen on small, lopsided counts
    (precision near 1), where the normal interval leaves [0, 1] and is far too narrow.
    Returns (0.0, 1.0) when n == 0: nothing observed, nothing excluded.
    """
    if n < 0 or successes < 0 or successes > n:
        raise ValueError(f"need 0 <= successes <= n, got successes={successes}, n={n}")
    z = _z(confidence)
    if n == 0:
        return 0.0, 1.0
    lo, hi = _wilson_bounds(np.asarray(successes), np.asarray(n), z)
    return float(lo), float(hi)


# --------------------------------------------------------------------------- cutoffs


@dataclass(frozen=True)
class CutoffChoice:
    """The cutoff for one queue and what it buys.

    ``cutoff`` None means no cutoff reaches the target: nothing is auto-routed to this queue, and then
    ``routed`` is 0, ``coverage`` 0.0, ``precision`` 0.0 and ``lower_bound`` 0.0 (the Wilson bound of n=0).
    """

    cutoff: float | None
    precision: float
    lower_bound: float
    coverage: float
    routed: int
    target: float


def _as_1d(name: str, a: Any, dtype: Any) -> np.ndarray:
    arr = np.asarray(a, dtype=dtype)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {arr.shape}")
    return arr


def _confidence_and_correct(confidence: Any, correct: Any) -> tuple[np.ndarray, np.ndarray]:
    conf = _as_1d("confidence", confidence, float)
    ok = _as_1d("correct", correct, bool)
    if conf.shape != ok.shape:
        raise ValueError(f"confidence and correct differ in length: {conf.shape[0]} vs {ok.shape[0]}")
    if np.isnan(conf).any():
        raise ValueError("confidence contains NaN")
    return conf, ok


def _curve(conf: np.ndarray, ok: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Distinct cutoffs (highest first), correct items and routed items at each; vectorised by cumsum."""
    if conf.shape[0] == 0:
        return np.empty(0, dtype=float), np.empty(0, dtype=np.int64), np.empty(0, dtype=np.int64)
    order = np.argsort(-conf, kind="stable")
    c_sorted = conf[order]
    hits = np.cumsum(ok[order], dtype=np.int64)
    # the last position of each run of equal confidences: routing at that value takes the whole run
    last = np.flatnonzero(np.append(c_sorted[1:] != c_sorted[:-1], True))
    return c_sorted[last].copy(), hits[last], last + 1


def precision_coverage_curve(
    confidence: np.ndarray, correct: np.ndarray, *, confidence_level: float = 0.95
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Every candidate cutoff of one queue with its precision, coverage and Wilson lower bound.

    Candidates are the distinct observed confidences, highest first; at cutoff c the routed items are
    those with confidence >= c (ties are routed together). Returns (cutoffs, precision, coverage,
    lower_bound), all of the same length; empty arrays for no items. This is the data behind a
    precision/coverage plot and the whole search space of ``solve_cutoff``.
    """
    conf, ok = _confidence_and_correct(confidence, correct)
    z = _z(confidence_level)
    cutoffs, k, routed = _curve(conf, ok)
    if routed.size == 0:
        return cutoffs, np.empty(0), np.empty(0), np.empty(0)
    lower, _ = _wilson_bounds(k, routed, z)
    return cutoffs, k / routed, routed / conf.shape[0], lower


def solve_cutoff(
    confidence: np.ndarray,
    correct: np.ndarray,
    target: float,
    *,
    confidence_level: float = 0.95,
    min_routed: int = 1,
) -> CutoffChoice:
    """The lowest cutoff whose routed items have a Wilson lower bound of precision >= target.

    Give it the items of ONE queue (those whose suggested queue is it) and whether each suggestion was
    right. Lowest means most coverage. Precision is not monotone in the cutoff, so every candidate is
    checked, not just the first that fails. The bound, not the raw precision, is compared with the target
    so a handful of lucky items cannot open a queue. ``min_routed`` demands that many routed items.
    """
    if not 0.0 <= target <= 1.0:
        raise ValueError(f"target must be in [0, 1], got {target}")
    if min_routed < 1:
        raise ValueError(f"min_routed must be >= 1, got {min_routed}")
    conf, ok = _confidence_and_correct(confidence, correct)
    z = _z(confidence_level)
    cutoffs, k, routed = _curve(conf, ok)
    if routed.size == 0:
        return CutoffChoice(None, 0.0, 0.0, 0.0, 0, float(target))
    lower, _ = _wilson_bounds(k, routed, z)
    passing = np.flatnonzero((lower >= target) & (routed >= min_routed))
    if passing.size == 0:
        return CutoffChoice(None, 0.0, 0.0, 0.0, 0, float(target))
    i = int(passing[-1])  # candidates run from high to low cutoff: the last passing one is the lowest
    return CutoffChoice(
        cutoff=float(cutoffs[i]),
        precision=float(k[i] / routed[i]),
        lower_bound=float(lower[i]),
        coverage=float(routed[i] / conf.shape[0]),
        routed=int(routed[i]),
        target=float(target),
    )


# --------------------------------------------------------------------------- scorecard


def _prf(tp: np.ndarray, predicted: np.ndarray, actual: np.ndarray) -> tuple[np.ndarray, ...]:
    """Precision, recall, F1 with zero_division=0 (as scikit-learn reports them)."""
    tp = tp.astype(float)
    precision = np.divide(tp, predicted, out=np.zeros_like(tp), where=predicted > 0)
    recall = np.divide(tp, actual, out=np.zeros_like(tp), where=actual > 0)
    s = precision + recall
    f1 = np.divide(2.0 * precision * recall, s, out=np.zeros_like(tp), where=s > 0)
    return precision, recall, f1


@dataclass(frozen=True)
class QueueScore:
    """One queue's figures, at the cutoffs and without them.

    At the cutoffs: ``precision`` is over the items auto-routed to the queue, ``recall`` is auto-routed
    correct items over ``support`` (all items truly of the queue), so held items count against recall.
    ``routed`` + ``held`` are the items suggested for the queue; ``coverage`` and ``held_share`` are their
    shares of that. The ``*_all`` figures treat every suggestion as final (no cutoff).
    """

    queue: str
    target: float | None
    cutoff: float | None
    never_auto: bool
    precision: float
    recall: float
    f1: float
    support: int
    routed: int
    held: int
    coverage: float
    held_share: float
    precision_all: float
    recall_all: float
    f1_all: float


@dataclass(frozen=True)
class Scorecard:
    """The evaluation report of one model version on one labelled set.

    ``matrix`` rows are true queues and columns suggested queues, in the order of ``queues`` (the layout
    of sklearn.metrics.confusion_matrix). ``accuracy`` and ``macro_f1`` are top-1, without cutoffs;
    ``coverage``, ``held_share`` and ``auto_precision`` describe what the cutoffs do over all items.
    ``untested`` lists the queues with no test items: their recall and F1 cannot be measured, so they are
    left out of ``macro_f1`` (a queue first seen after training would otherwise count as F1 = 0 and pull
    the average down for no fault of the model). Equal to sklearn's f1_score(average="macro",
    labels=<the tested queues>).
    """

    queues: list[str]
    matrix: list[list[int]]
    per_queue: list[QueueScore]
    n: int
    accuracy: float
    coverage: float
    held_share: float
    auto_precision: float
    macro_f1: float
    untested: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """Plain Python types only, so json.dumps takes it as it is."""
        return {
            "queues": list(self.queues),
            "matrix": [[int(v) for v in row] for row in self.matrix],
            "per_queue": [asdict(q) for q in self.per_queue],
            "n": int(self.n),
            "accuracy": float(self.accuracy),
            "coverage": float(self.coverage),
            "held_share": float(self.held_share),
            "auto_precision": float(self.auto_precision),
            "macro_f1": float(self.macro_f1),
            "untested": list(self.untested),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Scorecard:
        """Inverse of ``to_dict``."""
        return cls(
            queues=[str(q) for q in d["queues"]],
            matrix=[[int(v) for v in row] for row in d["matrix"]],
            per_queue=[QueueScore(**q) for q in d["per_queue"]],
            n=int(d["n"]),
            accuracy=float(d["accuracy"]),
            coverage=float(d["coverage"]),
            held_share=float(d["held_share"]),
            auto_precision=float(d["auto_precision"]),
            macro_f1=float(d["macro_f1"]),
            untested=[str(q) for q in d.get("untested", [])],
        )

    def row_shares(self) -> list[list[float]]:
        """Each row of the matrix as shares of its true queue (where that queue's items went); 0 rows stay 0."""
        m = np.asarray(self.matrix, dtype=float).reshape(len(self.queues), len(self.queues))
        totals = m.sum(axis=1, keepdims=True)
        shares = np.divide(m, totals, out=np.zeros_like(m), where=totals > 0)
        return shares.tolist()


def _codes(name: str, labels: Sequence[str], index: Mapping[str, int]) -> np.ndarray:
    try:
        return np.fromiter((index[v] for v in labels), dtype=np.int64, count=len(labels))
    except KeyError as e:
        raise ValueError(f"{name} holds a queue not in queues: {e.args[0]!r}") from None


def scorecard(
    y_true: Sequence[str],
    suggested: Sequence[str],
    confidence: np.ndarray,
    queues: Sequence[str],
    cutoffs: Mapping[str, float | None],
    never_auto: Collection[str] = (),
    targets: Mapping[str, float] | None = None,
) -> Scorecard:
    """Score suggestions against the truth, with and without the routing cutoffs.

    An item is auto-routed iff its suggested queue is not in ``never_auto``, that queue has a cutoff
    (a queue missing from ``cutoffs`` or mapped to None has none) and its confidence >= the cutoff;
    otherwise it is held for review. Every label must be one of ``queues``.
    """
    queue_list = [str(q) for q in queues]
    if len(set(queue_list)) != len(queue_list):
        raise ValueError("queues has duplicates")
    index = {q: i for i, q in enumerate(queue_list)}
    n = len(y_true)
    if len(suggested) != n:
        raise ValueError(f"y_true and suggested differ in length: {n} vs {len(suggested)}")
    conf = _as_1d("confidence", confidence, float)
    if conf.shape[0] != n:
        raise ValueError(f"confidence has {conf.shape[0]} entries for {n} items")
    t = _codes("y_true", y_true, index)
    s = _codes("suggested", suggested, index)
    nq = len(queue_list)

    matrix = np.zeros((nq, nq), dtype=np.int64)
    np.add.at(matrix, (t, s), 1)

    never = {str(q) for q in never_auto}
    cut = np.array(
        [
            np.nan if (q in never or cutoffs.get(q) is None) else float(cutoffs[q])  # type: ignore[arg-type]
            for q in queue_list
        ],
        dtype=float,
    )
    item_cut = cut[s] if n else np.empty(0)
    auto = ~np.isnan(item_cut) & (conf >= np.nan_to_num(item_cut, nan=np.inf))
    right = t == s

    support = np.bincount(t, minlength=nq)
    suggested_n = np.bincount(s, minlength=nq)
    tp_all = np.diag(matrix)
    routed = np.bincount(s[auto], minlength=nq)
    tp_auto = np.bincount(s[auto & right], minlength=nq)
    held = suggested_n - routed

    p_all, r_all, f_all = _prf(tp_all, suggested_n, support)
    p_cut, r_cut, f_cut = _prf(tp_auto, routed, support)
    cov_q = np.divide(routed, suggested_n, out=np.zeros(nq), where=suggested_n > 0)
    held_q = np.divide(held, suggested_n, out=np.zeros(nq), where=suggested_n > 0)

    per_queue = [
        QueueScore(
            queue=q,
            target=None if targets is None or targets.get(q) is None else float(targets[q]),
            cutoff=None if cutoffs.get(q) is None else float(cutoffs[q]),  # type: ignore[arg-type]
            never_auto=q in never,
            precision=float(p_cut[i]),
            recall=float(r_cut[i]),
            f1=float(f_cut[i]),
            support=int(support[i]),
            routed=int(routed[i]),
            held=int(held[i]),
            coverage=float(cov_q[i]),
            held_share=float(held_q[i]),
            precision_all=float(p_all[i]),
            recall_all=float(r_all[i]),
            f1_all=float(f_all[i]),
        )
        for i, q in enumerate(queue_list)
    ]
    n_auto = int(auto.sum())
    tested = support > 0
    return Scorecard(
        queues=queue_list,
        matrix=matrix.tolist(),
        per_queue=per_queue,
        n=n,
        accuracy=float(right.mean()) if n else 0.0,
        coverage=n_auto / n if n else 0.0,
        held_share=(n - n_auto) / n if n else 0.0,
        auto_precision=float(right[auto].mean()) if n_auto else 0.0,
        macro_f1=float(f_all[tested].mean()) if tested.any() else 0.0,
        untested=[q for i, q in enumerate(queue_list) if not tested[i]],
    )


# --------------------------------------------------------------------------- lift and gains


def _scores_and_positive(scores: Any, positive: Any) -> tuple[np.ndarray, np.ndarray]:
    sc = _as_1d("scores", scores, float)
    pos = _as_1d("positive", positive, bool)
    if sc.shape != pos.shape:
        raise ValueError(f"scores and positive differ in length: {sc.shape[0]} vs {pos.shape[0]}")
    return sc, pos


def lift_table(scores: np.ndarray, positive: np.ndarray, n_bins: int = 10) -> list[dict[str, Any]]:
    """Lift and cumulative gain by bins of equal size, highest scores first (deciles by default).

    For leads: how much richer in real opportunities the top of the ranking is than the whole list.
    Rows hold bin (1-based), n, positives, rate, lift (rate over the overall rate), cumulative_positives,
    cumulative_gain (share of all positives captured so far), cumulative_lift, and the bin's score_min and
    score_max. Ties are broken by input order. With no positives, lift and gain are 0.0.
    """
    if n_bins < 1:
        raise ValueError(f"n_bins must be >= 1, got {n_bins}")
    sc, pos = _scores_and_positive(scores, positive)
    n = sc.shape[0]
    if n == 0:
        return []
    order = np.argsort(-sc, kind="stable")
    total_pos = int(pos.sum())
    base_rate = total_pos / n
    rows: list[dict[str, Any]] = []
    cum_n = 0
    cum_pos = 0
    for b, idx in enumerate(np.array_split(order, min(n_bins, n)), start=1):
        k = int(pos[idx].sum())
        m = int(idx.size)
        cum_n += m
        cum_pos += k
        rate = k / m
        rows.append(
            {
                "bin": b,
                "n": m,
                "positives": k,
                "rate": rate,
                "lift": rate / base_rate if total_pos else 0.0,
                "cumulative_positives": cum_pos,
                "cumulative_gain": cum_pos / total_pos if total_pos else 0.0,
                "cumulative_lift": (cum_pos / cum_n) / base_rate if total_pos else 0.0,
                "score_min": float(sc[idx].min()),
                "score_max": float(sc[idx].max()),
            }
        )
    return rows


def captured_share(scores: np.ndarray, positive: np.ndarray, top_fraction: float) -> float:
    """Share of all positives among the top ``top_fraction`` of items by score (ceil of the count).

    The one-number version of a gains chart: "the top 20% of leads hold 61% of the deals". Ties are
    broken by input order, as in ``lift_table``; 0.0 when there are no positives.
    """
    if not 0.0 <= top_fraction <= 1.0:
        raise ValueError(f"top_fraction must be in [0, 1], got {top_fraction}")
    sc, pos = _scores_and_positive(scores, positive)
    total_pos = int(pos.sum())
    if total_pos == 0:
        return 0.0
    k = min(sc.shape[0], math.ceil(top_fraction * sc.shape[0] - 1e-9))
    order = np.argsort(-sc, kind="stable")
    return int(pos[order[:k]].sum()) / total_pos


# --------------------------------------------------------------------------- drift and dependence


def population_stability_index(expected: np.ndarray, actual: np.ndarray, eps: float = 1e-4) -> float:
    """PSI = sum((a - e) * ln(a / e)) over bins; a drift alarm for a field or for the confidences.

    Takes shares or counts (each side is normalised to sum 1). Bins empty on one side are floored at
    ``eps`` so the logarithm stays finite; the floor is applied after normalising, without renormalising.
    """
    e = np.asarray(expected, dtype=float).ravel()
    a = np.asarray(actual, dtype=float).ravel()
    if e.shape != a.shape:
        raise ValueError(f"expected and actual have different bins: {e.shape[0]} vs {a.shape[0]}")
    if (e < 0).any() or (a < 0).any():
        raise ValueError("shares or counts must be non-negative")
    if e.sum() <= 0 or a.sum() <= 0:
        raise ValueError("expected and actual must each have a positive total")
    e = np.maximum(e / e.sum(), eps)
    a = np.maximum(a / a.sum(), eps)
    return float(np.sum((a - e) * np.log(a / e)))


def conditional_mutual_information(counts: np.ndarray) -> float:
    """Plug-in estimate of I(A; B | Q) in nats from a (Q, A, B) table of counts.

    Naive Bayes assumes fields are independent given the queue; this measures how far two fields are
    from that within the queues (0 when each queue's A x B table is an outer product).
    """
    c = np.asarray(counts, dtype=float)
    if c.ndim != 3:
        raise ValueError(f"counts must have shape (Q, A, B), got {c.shape}")
    if (c < 0).any():
        raise ValueError("counts must be non-negative")
    total = c.sum()
    if total <= 0:
        return 0.0
    n_q = c.sum(axis=(1, 2), keepdims=True)
    n_qa = c.sum(axis=2, keepdims=True)
    n_qb = c.sum(axis=1, keepdims=True)
    nz = c > 0
    ratio = (c * n_q)[nz] / (n_qa * n_qb)[nz]
    value = float(np.sum(c[nz] * np.log(ratio)) / total)
    return max(value, 0.0)
