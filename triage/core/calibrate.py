"""Calibration of routing confidences, and figures that show how trustworthy they are.

Naive Bayes pushes posteriors towards 0 and 1 because it counts correlated evidence as independent, so a raw
"0.99" is often right far less than 99% of the time. Cutoffs compare confidences with precision targets,
which only makes sense once confidence means "probability of being right". Two tools: a one-parameter
temperature on the joint log-likelihood (keeps the ranking, safe on small sets) and an isotonic map from
top-class confidence to accuracy (flexible, needs many items). Both serialise to plain JSON, never pickle.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import logsumexp
from sklearn.isotonic import IsotonicRegression

from triage.core.model import log_posterior  # the model owns the log-sum-exp normalisation

__all__ = [
    "IsotonicCalibrator",
    "ReliabilityBin",
    "SmallSampleWarning",
    "TemperatureScaler",
    "expected_calibration_error",
    "log_loss",
    "reliability_table",
    "softmax_rows",
    "temperature_softmax",
]


class SmallSampleWarning(UserWarning):
    """A calibrator was fitted on fewer items than it needs to be trusted."""


def _as_2d(name: str, a: Any) -> np.ndarray:
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 2:
        raise ValueError(f"{name} must have shape (n, Q), got {arr.shape}")
    return arr


def softmax_rows(logits: np.ndarray) -> np.ndarray:
    """Row-wise softmax through log-sum-exp, so log-likelihoods of -5000 do not underflow to 0/0.

    -inf entries (a queue ruled out) get probability 0; a row with no finite entry is an error.
    """
    z = _as_2d("logits", logits)
    if z.shape[1] == 0:
        raise ValueError("logits has no columns")
    if z.shape[0] and not np.isfinite(z).any(axis=1).all():
        raise ValueError("a row of logits has no finite entry")
    return np.exp(z - logsumexp(z, axis=1, keepdims=True))


def temperature_softmax(jll: np.ndarray, temperature: float) -> np.ndarray:
    """softmax(jll / T) by log-sum-exp: the one temperature softmax, used by the scaler and by routing.

    A row impossible under every queue (all -inf, possible without smoothing) becomes uniform, not NaN."""
    return np.exp(log_posterior(np.atleast_2d(jll) / temperature))


def _labels(y: Any, n: int, q: int) -> np.ndarray:
    idx = np.asarray(y)
    if idx.ndim != 1 or idx.shape[0] != n:
        raise ValueError(f"y must be one class index per row ({n}), got shape {idx.shape}")
    if idx.size and not np.issubdtype(idx.dtype, np.integer):
        raise ValueError("y must hold integer class indices")
    idx = idx.astype(np.int64)
    if idx.size and (idx.min() < 0 or idx.max() >= q):
        raise ValueError(f"class indices must be in [0, {q})")
    return idx


class TemperatureScaler:
    """p = softmax(jll / T) with one parameter T > 0 fitted by maximum likelihood on items the model was not fitted on.

    T > 1 softens an over-confident model, T < 1 sharpens; the ranking of queues is unchanged, so the
    suggested queue never changes, only how sure the model says it is (Guo et al. 2017).
    """

    def __init__(self, temperature: float = 1.0, bounds: tuple[float, float] = (1e-3, 1e4)) -> None:
        if not temperature > 0:
            raise ValueError(f"temperature must be > 0, got {temperature}")
        if not 0 < bounds[0] < bounds[1]:
            raise ValueError(f"bounds must satisfy 0 < low < high, got {bounds}")
        self.temperature = float(temperature)
        self.bounds = (float(bounds[0]), float(bounds[1]))

    @staticmethod
    def _shifted(jll: np.ndarray) -> np.ndarray:
        """Subtract each row's max: softmax is shift-invariant and dividing small numbers by T is safer."""
        finite = np.isfinite(jll).any(axis=1)
        if jll.shape[0] and not finite.all():
            raise ValueError("a row of jll has no finite entry")
        return jll - np.max(jll, axis=1, keepdims=True)

    def fit(self, jll: np.ndarray, y: np.ndarray) -> TemperatureScaler:
        """Minimise the mean negative log likelihood over log T (bounded Brent search).

        Items whose true queue has jll -inf have infinite loss at every T and say nothing about T, so they
        are left out; the search is over log T because the loss is far better behaved there.
        """
        z = self._shifted(_as_2d("jll", jll))
        idx = _labels(y, z.shape[0], z.shape[1])
        rows = np.arange(z.shape[0])
        usable = np.isfinite(z[rows, idx])
        if not usable.any():
            raise ValueError("no item has a finite joint log-likelihood for its true queue")
        z, idx = z[usable], idx[usable]
        true_z = z[np.arange(z.shape[0]), idx]

        def nll(log_t: float) -> float:
            s = z / math.exp(log_t)
            return float(np.mean(logsumexp(s, axis=1) - true_z / math.exp(log_t)))

        res = minimize_scalar(
            nll,
            bounds=(math.log(self.bounds[0]), math.log(self.bounds[1])),
            method="bounded",
            options={"xatol": 1e-6},
        )
        self.temperature = float(math.exp(res.x))
        return self

    def transform(self, jll: np.ndarray) -> np.ndarray:
        """Calibrated probabilities, shape (n, Q)."""
        return temperature_softmax(self._shifted(_as_2d("jll", jll)), self.temperature)

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "temperature", "temperature": self.temperature, "bounds": list(self.bounds)}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> TemperatureScaler:
        if d.get("kind", "temperature") != "temperature":
            raise ValueError(f"not a temperature scaler: kind={d.get('kind')!r}")
        bounds = d.get("bounds", (1e-3, 1e4))
        return cls(float(d["temperature"]), (float(bounds[0]), float(bounds[1])))


class IsotonicCalibrator:
    """A monotone map from top-class confidence to the probability that the suggestion is right.

    Fitted with scikit-learn's IsotonicRegression; applied with np.interp on its thresholds, which is what
    the fitted regression does with out_of_bounds='clip', so a saved calibrator needs no sklearn object.
    """

    # Below this, isotonic regression overfits its steps (common practice, no source; Niculescu-Mizil &
    # Caruana 2005 found isotonic worse than Platt scaling below about 1000 items).
    MIN_ITEMS = 1000

    def __init__(self) -> None:
        self.x_thresholds_: np.ndarray | None = None
        self.y_thresholds_: np.ndarray | None = None
        self.n_items_: int = 0

    @property
    def is_reliable(self) -> bool:
        """Whether it was fitted on at least MIN_ITEMS items; a front end shows a caution otherwise."""
        return self.n_items_ >= self.MIN_ITEMS

    def fit(self, confidence: np.ndarray, correct: np.ndarray) -> IsotonicCalibrator:
        """Fit on items the model was not fitted on; warns (SmallSampleWarning) below MIN_ITEMS."""
        conf = np.asarray(confidence, dtype=float).ravel()
        ok = np.asarray(correct, dtype=bool).ravel().astype(float)
        if conf.shape != ok.shape:
            raise ValueError(f"confidence and correct differ in length: {conf.shape[0]} vs {ok.shape[0]}")
        if conf.size == 0:
            raise ValueError("cannot calibrate on no items")
        if conf.size < self.MIN_ITEMS:
            warnings.warn(
                f"isotonic calibration on {conf.size} items (< {self.MIN_ITEMS}) is likely to overfit; "
                "temperature scaling is the safer choice",
                SmallSampleWarning,
                stacklevel=2,
            )
        iso = IsotonicRegression(out_of_bounds="clip", y_min=0.0, y_max=1.0, increasing=True)
        iso.fit(conf, ok)
        self.x_thresholds_ = np.asarray(iso.X_thresholds_, dtype=float).copy()
        self.y_thresholds_ = np.asarray(iso.y_thresholds_, dtype=float).copy()
        self.n_items_ = int(conf.size)
        return self

    def transform(self, confidence: np.ndarray) -> np.ndarray:
        """Calibrated probability of being right, same shape as ``confidence``."""
        if self.x_thresholds_ is None or self.y_thresholds_ is None:
            raise RuntimeError("IsotonicCalibrator is not fitted")
        conf = np.asarray(confidence, dtype=float)
        return np.interp(conf, self.x_thresholds_, self.y_thresholds_)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready thresholds, so a model artifact holds the calibrator without pickle."""
        if self.x_thresholds_ is None or self.y_thresholds_ is None:
            raise RuntimeError("IsotonicCalibrator is not fitted")
        return {
            "kind": "isotonic",
            "x_thresholds": self.x_thresholds_.tolist(),
            "y_thresholds": self.y_thresholds_.tolist(),
            "n_items": self.n_items_,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> IsotonicCalibrator:
        if d.get("kind", "isotonic") != "isotonic":
            raise ValueError(f"not an isotonic calibrator: kind={d.get('kind')!r}")
        x = np.asarray(d["x_thresholds"], dtype=float)
        y = np.asarray(d["y_thresholds"], dtype=float)
        if x.ndim != 1 or x.shape != y.shape or x.size == 0:
            raise ValueError("thresholds must be two non-empty lists of equal length")
        if np.any(np.diff(x) < 0):
            raise ValueError("x_thresholds must be sorted")
        out = cls()
        out.x_thresholds_, out.y_thresholds_ = x, y
        out.n_items_ = int(d.get("n_items", 0))
        return out


@dataclass(frozen=True)
class ReliabilityBin:
    """One bar of a reliability diagram: confidences in (lo, hi] (the first bin also takes 0)."""

    lo: float
    hi: float
    n: int
    mean_confidence: float
    accuracy: float


def reliability_table(confidence: np.ndarray, correct: np.ndarray, n_bins: int = 10) -> list[ReliabilityBin]:
    """Equal-width bins on [0, 1] with mean confidence and accuracy in each; empty bins are left out.

    Bins are (lo, hi] as in Guo et al. 2017, so a confidence of exactly 1.0 is in the top bin.
    """
    if n_bins < 1:
        raise ValueError(f"n_bins must be >= 1, got {n_bins}")
    conf = np.asarray(confidence, dtype=float).ravel()
    ok = np.asarray(correct, dtype=bool).ravel()
    if conf.shape != ok.shape:
        raise ValueError(f"confidence and correct differ in length: {conf.shape[0]} vs {ok.shape[0]}")
    if conf.size and (np.isnan(conf).any() or conf.min() < 0 or conf.max() > 1):
        raise ValueError("confidence must be in [0, 1]")
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    which = np.clip(np.digitize(conf, edges, right=True) - 1, 0, n_bins - 1)
    counts = np.bincount(which, minlength=n_bins)
    conf_sum = np.bincount(which, weights=conf, minlength=n_bins)
    ok_sum = np.bincount(which, weights=ok.astype(float), minlength=n_bins)
    return [
        ReliabilityBin(
            lo=float(edges[b]),
            hi=float(edges[b + 1]),
            n=int(counts[b]),
            mean_confidence=float(conf_sum[b] / counts[b]),
            accuracy=float(ok_sum[b] / counts[b]),
        )
        for b in range(n_bins)
        if counts[b] > 0
    ]


def expected_calibration_error(confidence: np.ndarray, correct: np.ndarray, n_bins: int = 10) -> float:
    """ECE = sum over bins of (n_b / n) * |accuracy_b - mean_confidence_b| (Guo et al. 2017); 0.0 for no items."""
    bins = reliability_table(confidence, correct, n_bins)
    total = sum(b.n for b in bins)
    if total == 0:
        return 0.0
    return float(sum(b.n * abs(b.accuracy - b.mean_confidence) for b in bins) / total)


def log_loss(probs: np.ndarray, y: np.ndarray) -> float:
    """Mean negative log probability of the true queue, clipped to [eps, 1 - eps] as scikit-learn does."""
    p = _as_2d("probs", probs)
    idx = _labels(y, p.shape[0], p.shape[1])
    if p.shape[0] == 0:
        raise ValueError("log loss of no items")
    eps = np.finfo(p.dtype).eps
    true_p = np.clip(p[np.arange(p.shape[0]), idx], eps, 1.0 - eps)
    return float(-np.mean(np.log(true_p)))
