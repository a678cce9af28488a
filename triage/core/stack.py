"""The score layer: stacked generalisation over the model's class scores (Wolpert 1992, Neural Networks 5(2)).

Naive Bayes counts correlated evidence as independent, so one queue's scores run hot and another's cold in ways
a single temperature cannot undo. The layer is a multinomial logistic regression (scikit-learn's) whose inputs
are the K class scores of an item, centred on the item's mean score and divided by one constant:

    z = (s - mean(s)) / scale          f = W z + b          (W: K x K, b: K)

It is fitted on *out-of-fold* scores only (each item scored by a model that never counted it): scores of items
the model has counted are over-confident, and a layer fitted on them would learn to trust that confidence
(tests/test_stack.py fails on in-fold fitting). Because f is linear in s, and s is linear in the counts, each
piece of evidence (a token, a field value, the prior) still has an exact additive share of f_a - f_b:
u . v_t / scale with u = (W_a - W_b) - mean(W_a - W_b) and v_t the piece's K-vector of scores
(see evidence.py). A correction changes the counts, hence s, at once; W and b wait for the next `train`.

Stored as plain arrays (W, b, scale) and the queue names it was fitted on; no pickle.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

# Fewer out-of-fold items than this per queue and the K x K weights are mostly noise: the layer stays off
# (common practice, no source: about ten items per parameter of a queue's row of W).
MIN_ITEMS_PER_QUEUE = 10
MIN_ITEMS = 500
DEFAULT_C = 1.0  # inverse regularisation strength of the logistic regression (scikit-learn's default)


def too_small(labels: Sequence[Any], n_queues: int) -> str | None:
    """Why the data is too small for the layer, or None when it is large enough."""
    n = len(labels)
    need = max(MIN_ITEMS, MIN_ITEMS_PER_QUEUE * n_queues * 1)
    if n < need:
        return (f"{n} items, fewer than the {need} the score layer needs for {n_queues} queues "
                f"({MIN_ITEMS_PER_QUEUE} a queue, at least {MIN_ITEMS}); the model's own scores are used")
    return None


def _finite(s: np.ndarray) -> np.ndarray:
    """Scores with -inf (a queue ruled out) replaced by the row's lowest finite score, so centring stays finite."""
    s = np.atleast_2d(np.asarray(s, dtype=np.float64))
    bad = ~np.isfinite(s)
    if not bad.any():
        return s
    s = s.copy()
    lows = np.where(bad, np.inf, s).min(axis=1)
    lows[~np.isfinite(lows)] = 0.0
    s[bad] = np.broadcast_to(lows[:, None], s.shape)[bad]
    return s


@dataclass(frozen=True)
class ScoreLayer:
    """A fitted layer: f = W ((s - mean s) / scale) + b over the queues it was fitted on, in that order."""

    queues: tuple[str, ...]
    weights: np.ndarray  # (K, K): row q holds how queue q's final score reads every queue's centred score
    intercept: np.ndarray  # (K,)
    scale: float
    n_items: int = 0
    C: float = DEFAULT_C
    # False when the solver stopped at max_iter before its tolerance: the layer is still used (its weights are a
    # valid, if less sharp, combination of the scores), and train and the model's info say so
    converged: bool = True

    @classmethod
    def fit(cls, scores: np.ndarray, y: np.ndarray, queues: Sequence[str], *, C: float = DEFAULT_C,
            max_iter: int = 100) -> ScoreLayer:
        """Fit on OUT-OF-FOLD class scores (n, K) with true queue indices y (every queue present)."""
        from sklearn.linear_model import LogisticRegression

        s = _finite(scores)
        centred = s - s.mean(axis=1, keepdims=True)
        scale = float(centred.std())
        scale = scale if np.isfinite(scale) and scale > 0 else 1.0
        y = np.asarray(y, dtype=np.int64)
        K = len(queues)
        if s.shape[1] != K or np.unique(y).size != K:
            raise ValueError(f"the score layer needs scores and items of all {K} queues")
        # tol 1e-3: on 16k items of 54 queues the fit takes seconds instead of most of a minute, and routes the
        # same test items to the same queues within 0.1% (bench/quality.py measures the layer's effect)
        from sklearn.exceptions import ConvergenceWarning

        lr = LogisticRegression(C=C, max_iter=max_iter, tol=1e-3)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", ConvergenceWarning)  # recorded and reported, never dropped
            lr.fit(centred / scale, y)
        converged = not any(issubclass(w.category, ConvergenceWarning) for w in caught)
        for w in caught:  # anything else is not ours to hide
            if not issubclass(w.category, ConvergenceWarning):
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        W = np.asarray(lr.coef_, dtype=np.float64)
        b = np.asarray(lr.intercept_, dtype=np.float64)
        if K == 2:  # scikit-learn keeps one row for two classes: f_1 - f_0 = w z + b; split it symmetrically
            W = np.vstack([-W[0] / 2, W[0] / 2])
            b = np.array([-b[0] / 2, b[0] / 2])
        return cls(tuple(queues), W, b, scale, int(len(y)), float(C), converged)

    def applies_to(self, queues: Sequence[str]) -> bool:
        """Whether the layer reads these queues (a queue added by a correction switches it off until `train`)."""
        return tuple(queues) == self.queues

    def transform(self, scores: np.ndarray) -> np.ndarray:
        """Final class scores (n, K); a queue the model rules out (-inf) stays ruled out."""
        raw = np.atleast_2d(np.asarray(scores, dtype=np.float64))
        s = _finite(raw)
        z = (s - s.mean(axis=1, keepdims=True)) / self.scale
        out = z @ self.weights.T + self.intercept
        out[np.isneginf(raw)] = -np.inf
        return out

    def direction(self, a: int, b: int) -> np.ndarray:
        """u / scale: the K-vector that turns a piece's score vector v into its share of f_a - f_b (u . v)."""
        d = self.weights[a] - self.weights[b]
        return (d - d.mean()) / self.scale

    def to_arrays(self) -> dict[str, np.ndarray]:
        return {"layer_weights": self.weights, "layer_intercept": self.intercept}

    def to_manifest(self) -> dict[str, Any]:
        return {"queues": list(self.queues), "scale": self.scale, "n_items": self.n_items, "C": self.C,
                "converged": self.converged}

    @classmethod
    def from_parts(cls, manifest: Mapping[str, Any], arrays: Mapping[str, np.ndarray]) -> ScoreLayer:
        K = len(manifest["queues"])
        W = np.asarray(arrays["layer_weights"], dtype=np.float64)
        b = np.asarray(arrays["layer_intercept"], dtype=np.float64)
        if W.shape != (K, K) or b.shape != (K,) or not (np.isfinite(W).all() and np.isfinite(b).all()):
            raise ValueError(f"score layer arrays must be ({K}, {K}) and ({K},) finite numbers")
        return cls(tuple(manifest["queues"]), W, b, float(manifest["scale"]), int(manifest.get("n_items", 0)),
                   float(manifest.get("C", DEFAULT_C)), bool(manifest.get("converged", True)))

    def note(self) -> str | None:
        """What a user should know about this fit, or None: a layer whose solver stopped early says so."""
        if self.converged:
            return None
        return (f"the score layer's solver stopped at its iteration limit before converging (C {self.C:g}, "
                f"{self.n_items} items); it is used as fitted: a larger C or more history may help")
