"""Cutoffs that borrow strength across queues: an empirical-Bayes (beta-binomial) precision estimate.

A queue with 40 out-of-fold items can never show a 95% Wilson lower bound on its own (even 40 right out of 40
gives 0.91), so on its own it would auto-route nothing however good the model is there. But the queues are
not unrelated: they share one model and one calibrated confidence, so what the other queues show at a cutoff
says a lot about this one. At each candidate cutoff c:

  1. every queue q has k_q(c) right out of n_q(c) routed; the pooled precision m(c) = sum k / sum n;
  2. the spread of the queues' precisions beyond binomial noise gives a prior Beta(m s, (1 - m) s): the
     method-of-moments estimate of the beta-binomial (Kleinman 1973, JASA 68(341), from memory):
         var_between = max(0, (sum_q n_q (p_q - m)^2 - (Q - 1) m (1 - m)) / (N - sum_q n_q^2 / N))
         s = m (1 - m) / var_between - 1  (clipped to [S_MIN, S_MAX]);
  3. queue q's precision then has the posterior Beta(k_q + m s, n_q - k_q + (1 - m) s) (Casella 1985, The
     American Statistician 39(2): empirical Bayes for many proportions); its 2.5% quantile (a one-sided 97.5%
     bound, as the Wilson rule) must reach the target.

A small queue thus leans on the pooled precision; a large queue's own counts outweigh the prior. The queue's
own promise is always checked as well: its own out-of-fold precision at the cutoff must reach the target too
(the prior may lift the bound of a queue that is right on all it routes, never open one that is not); the other queues' pooled precision at the cutoff must reach the target as well (a
neighbourhood that does not keep the promise lends nothing, however widely spread), and from OWN_ONLY routed
items on the pooled estimate is not used at all (the queue's own Wilson bound decides, as without pooling: measure.fit_policy takes the lower cutoff). A queue where no cutoff passes says why and what would help.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.stats import beta as beta_dist

S_MIN, S_MAX = 2.0, 100.0  # prior strength in pseudo-items: the other queues never count for more than 100 of
# this queue's own items, so a large queue is judged mostly on its own (common practice, no source)
OWN_ONLY = 200  # routed items from which the queue's own Wilson bound alone decides (its data suffices)
LEVEL = 0.025  # the posterior quantile compared with the target (one-sided 97.5%, as the Wilson bound used)
POOL_MIN_QUEUES = 3  # fewer queues than this say too little about the spread: no pooling


@dataclass(frozen=True)
class PooledChoice:
    """One queue's cutoff by the pooled estimate (None: no cutoff passes), with the figures behind it."""

    cutoff: float | None
    routed: int
    precision: float  # the queue's own out-of-fold precision at the cutoff
    lower_bound: float  # the posterior 2.5% quantile at the cutoff
    prior_mean: float
    prior_strength: float
    coverage: float
    why: str | None = None  # when no cutoff passes: why, and what would help


def _prior(k: np.ndarray, n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pooled mean m and prior strength s per row of (cutoffs, queues) counts (the method of moments above)."""
    N = n.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        m = np.where(N > 0, k.sum(axis=1) / np.maximum(N, 1), 0.0)
        p = np.where(n > 0, k / np.maximum(n, 1), 0.0)
        active = (n > 0).sum(axis=1)
        spread = (n * (p - m[:, None]) ** 2).sum(axis=1) - (active - 1) * m * (1 - m)
        denom = N - (n ** 2).sum(axis=1) / np.maximum(N, 1)
        var_b = np.where(denom > 0, np.maximum(spread, 0.0) / np.maximum(denom, 1e-12), 0.0)
        s = np.where(var_b > 0, m * (1 - m) / np.maximum(var_b, 1e-300) - 1.0, S_MAX)
    return m, np.clip(np.nan_to_num(s, nan=S_MIN, posinf=S_MAX), S_MIN, S_MAX)


def pooled_cutoffs(conf: np.ndarray, top: np.ndarray, correct: np.ndarray, queues: Sequence[str],
                   targets: Mapping[str, float], skip: Collection[str] = ()) -> dict[str, PooledChoice]:
    """Per queue (index in `queues`), the lowest cutoff on `conf` whose pooled posterior bound reaches its target.

    `conf`, `top`, `correct`: each out-of-fold item's routing confidence, suggested queue index and whether the
    suggestion was right. `skip` (never-auto, pinned) queues get no cutoff and take no part in the pooling."""
    conf = np.asarray(conf, dtype=float)
    top = np.asarray(top, dtype=np.int64)
    correct = np.asarray(correct, dtype=bool)
    pool = [i for i, q in enumerate(queues) if q not in skip]
    out: dict[str, PooledChoice] = {}
    if len(pool) < POOL_MIN_QUEUES:
        return out
    grid = np.unique(conf[np.isin(top, pool)])[::-1]  # every candidate cutoff, highest first
    if grid.size == 0:
        return out
    # per queue: items routed (conf >= c) and right among them, at every candidate c, via sorted confidences
    k = np.zeros((grid.size, len(pool)))
    n = np.zeros((grid.size, len(pool)))
    for j, qi in enumerate(pool):
        mine = top == qi
        c_sorted = np.sort(conf[mine])[::-1]
        ok_sorted = correct[mine][np.argsort(-conf[mine], kind="stable")]
        cum = np.concatenate(([0], np.cumsum(ok_sorted)))
        at = np.searchsorted(-c_sorted, -grid, side="right")  # how many have conf >= c
        n[:, j], k[:, j] = at, cum[at]
    m, s = _prior(k, n)
    a0, b0 = m * s, (1 - m) * s
    for j, qi in enumerate(pool):
        q = queues[qi]
        target = float(targets[q])
        total = int((top == qi).sum())
        own = np.where(n[:, j] > 0, k[:, j] / np.maximum(n[:, j], 1), 0.0)
        # only cutoffs this queue's own items take (a new item routes at its own confidence), below OWN_ONLY
        cand = np.concatenate(([True], n[1:, j] != n[:-1, j])) & (n[:, j] > 0) & (n[:, j] < OWN_ONLY)
        cand &= own >= target  # the queue's own precision keeps the promise at every cutoff it opens
        # borrow only from neighbours that keep the promise themselves: the other queues' precision at the cutoff
        # must reach the target. A poor neighbourhood spread wide makes the prior weak (few pseudo-failures), and
        # its posterior quantile would then open a queue more readily than the queue's own Wilson bound does.
        rest_n, rest_k = n.sum(axis=1) - n[:, j], k.sum(axis=1) - k[:, j]
        cand &= (rest_n > 0) & (rest_k >= target * rest_n)
        lower = np.full(grid.size, -np.inf)
        lower[cand] = beta_dist.ppf(LEVEL, k[cand, j] + a0[cand], n[cand, j] - k[cand, j] + b0[cand])
        ok = cand & (lower >= target)
        passing = np.flatnonzero(ok)
        if passing.size == 0:
            best = int(np.argmax(lower)) if np.isfinite(lower).any() else int(np.argmax(n[:, j]))
            out[q] = PooledChoice(None, 0, 0.0, 0.0, float(m[best]), float(s[best]), 0.0,
                                  _why(total, int(n[best, j]), int(k[best, j]), float(lower[best]), target))
            continue
        i = int(passing[-1])
        out[q] = PooledChoice(float(grid[i]), int(n[i, j]), float(own[i]), float(lower[i]), float(m[i]),
                              float(s[i]), float(n[i, j] / total) if total else 0.0)
    return out


def _why(total: int, routed: int, right: int, lower: float, target: float) -> str:
    """Why no cutoff meets the target, and what would help."""
    if total == 0:
        return ("no out-of-fold item was suggested for this queue; add labelled history for it, or run "
                "`triage tune`")
    return (f"{total} out-of-fold items were suggested here; at best {right} of the {routed} most confident were "
            f"right, a pooled lower bound of {lower:.1%} < the {target:.0%} target. What would help: a lower "
            "target for this queue, more labelled history, or `triage tune`")
