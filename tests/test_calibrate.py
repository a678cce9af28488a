"""Calibration checked against scipy, scikit-learn and hand-computed values."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.special
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.calibration import calibration_curve
from sklearn.isotonic import IsotonicRegression
from sklearn.metrics import log_loss as sk_log_loss

from triage.core.calibrate import (
    IsotonicCalibrator,
    SmallSampleWarning,
    TemperatureScaler,
    expected_calibration_error,
    log_loss,
    reliability_table,
    softmax_rows,
)

# --------------------------------------------------------------------------- softmax and log loss


@settings(max_examples=100, deadline=None)
@given(
    n=st.integers(1, 20),
    q=st.integers(1, 6),
    scale=st.sampled_from([1.0, 50.0, 2000.0]),
    seed=st.integers(0, 2**31 - 1),
)
def test_softmax_rows_equals_scipy(n: int, q: int, scale: float, seed: int) -> None:
    # Reference: scipy.special.softmax along rows; large magnitudes must not overflow or underflow to NaN.
    logits = np.random.default_rng(seed).normal(size=(n, q)) * scale - 3 * scale
    ours = softmax_rows(logits)
    np.testing.assert_allclose(ours, scipy.special.softmax(logits, axis=1), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(ours.sum(axis=1), 1.0)


def test_softmax_rows_minus_infinity() -> None:
    # Definition: exp(-inf) = 0, so a ruled-out queue gets probability 0 and the rest renormalise.
    p = softmax_rows(np.array([[0.0, -np.inf, np.log(3.0)]]))
    np.testing.assert_allclose(p, [[0.25, 0.0, 0.75]])
    with pytest.raises(ValueError):
        softmax_rows(np.array([[-np.inf, -np.inf]]))


def test_log_loss_equals_sklearn() -> None:
    # Reference: sklearn.metrics.log_loss, including probabilities of exactly 0 and 1 (clipped alike)
    # and a class that never occurs in y.
    rng = np.random.default_rng(3)
    probs = rng.dirichlet(np.ones(4), size=50)
    probs[0] = [1.0, 0.0, 0.0, 0.0]
    probs[1] = [0.0, 1.0, 0.0, 0.0]
    y = rng.integers(0, 3, 50)
    y[0], y[1] = 0, 0
    assert log_loss(probs, y) == pytest.approx(sk_log_loss(y, probs, labels=[0, 1, 2, 3]), rel=1e-12)
    # The sklearn docstring example: 0.21616 (sklearn.metrics.log_loss documentation).
    assert log_loss(np.array([[0.1, 0.9], [0.9, 0.1], [0.8, 0.2], [0.35, 0.65]]), np.array([1, 0, 0, 1])) == (
        pytest.approx(0.21616, abs=5e-6)
    )


# --------------------------------------------------------------------------- temperature


def _overconfident(n: int, q: int, factor: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Labels drawn from softmax(L); the 'model' reports factor * L, i.e. it is over-confident by `factor`."""
    rng = np.random.default_rng(seed)
    logits = rng.normal(scale=1.5, size=(n, q))
    p = scipy.special.softmax(logits, axis=1)
    y = (p.cumsum(axis=1) > rng.random((n, 1))).argmax(axis=1)
    return factor * logits - 40.0, y  # a constant shift per row, like a joint log-likelihood


def test_temperature_one_is_plain_softmax() -> None:
    # Reference: scipy.special.softmax; T = 1 must change nothing.
    jll, _ = _overconfident(200, 5, 3.0, seed=1)
    np.testing.assert_allclose(
        TemperatureScaler(1.0).transform(jll), scipy.special.softmax(jll, axis=1), rtol=1e-12
    )


def test_temperature_reduces_log_loss_on_overconfident_scores() -> None:
    jll, y = _overconfident(20_000, 5, 4.0, seed=2)
    before = sk_log_loss(y, scipy.special.softmax(jll, axis=1), labels=range(5))
    scaler = TemperatureScaler().fit(jll, y)
    after_probs = scaler.transform(jll)
    after = sk_log_loss(y, after_probs, labels=range(5))  # reference: sklearn.metrics.log_loss
    assert after < before - 0.1
    # The data were made over-confident by exactly 4, so the maximum-likelihood T is near 4 (20,000 items).
    assert scaler.temperature == pytest.approx(4.0, rel=0.05)
    # It is the minimum: a grid of temperatures scored by sklearn's log loss does no better.
    grid = scaler.temperature * np.array([0.8, 0.9, 0.97, 1.03, 1.1, 1.25])
    losses = [sk_log_loss(y, scipy.special.softmax(jll / t, axis=1), labels=range(5)) for t in grid]
    assert min(losses) >= after - 1e-9
    # Temperature never changes the suggested queue.
    np.testing.assert_array_equal(after_probs.argmax(axis=1), jll.argmax(axis=1))


def test_temperature_sharpens_underconfident_scores() -> None:
    # The same construction with factor 0.5: the fitted T should be about 0.5.
    jll, y = _overconfident(20_000, 4, 0.5, seed=4)
    assert TemperatureScaler().fit(jll, y).temperature == pytest.approx(0.5, rel=0.05)


def test_temperature_handles_minus_infinity() -> None:
    # A queue ruled out (jll = -inf) stays at probability 0 and does not break the fit; an item whose true
    # queue is ruled out has infinite loss at every T and is left out of the fit.
    jll, y = _overconfident(2_000, 4, 3.0, seed=5)
    jll[::7, 3] = -np.inf
    y[::7][y[::7] == 3] = 0
    jll[1, y[1]] = -np.inf
    scaler = TemperatureScaler().fit(jll, y)
    assert np.isfinite(scaler.temperature) and scaler.temperature > 1.0
    p = scaler.transform(jll)
    assert np.all(p[::7, 3] == 0.0)
    assert np.all(np.isfinite(p))
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    again = TemperatureScaler.from_dict(json.loads(json.dumps(scaler.to_dict())))
    assert again.temperature == scaler.temperature
    np.testing.assert_array_equal(again.transform(jll), p)


# --------------------------------------------------------------------------- isotonic


def _confidences(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    conf = rng.uniform(0.2, 1.0, n)
    correct = rng.random(n) < conf**2  # over-confident: right less often than it claims
    return conf, correct


def test_isotonic_equals_sklearn_and_survives_json() -> None:
    # Reference: sklearn.isotonic.IsotonicRegression with the same settings, predicting new points inside
    # and outside the training range.
    conf, correct = _confidences(3000, seed=11)
    ours = IsotonicCalibrator().fit(conf, correct)
    ref = IsotonicRegression(out_of_bounds="clip", y_min=0, y_max=1, increasing=True).fit(conf, correct)
    new = np.concatenate(
        [np.random.default_rng(12).uniform(0, 1, 500), [0.0, 0.2, 1.0, conf.min(), conf.max()]]
    )
    np.testing.assert_allclose(ours.transform(new), ref.predict(new), rtol=0, atol=1e-12)
    loaded = IsotonicCalibrator.from_dict(json.loads(json.dumps(ours.to_dict())))
    np.testing.assert_allclose(loaded.transform(new), ref.predict(new), rtol=0, atol=1e-12)
    assert ours.is_reliable and loaded.is_reliable
    # Monotone and within [0, 1] by construction.
    out = loaded.transform(np.linspace(0, 1, 101))
    assert np.all(np.diff(out) >= 0) and out.min() >= 0 and out.max() <= 1


def test_isotonic_warns_on_small_sets() -> None:
    # Threshold MIN_ITEMS = 1000 (common practice, no source; see the constant's comment).
    conf, correct = _confidences(200, seed=13)
    with pytest.warns(SmallSampleWarning):
        cal = IsotonicCalibrator().fit(conf, correct)
    assert not cal.is_reliable
    ref = IsotonicRegression(out_of_bounds="clip", y_min=0, y_max=1).fit(conf, correct)
    np.testing.assert_allclose(cal.transform(conf), ref.predict(conf), atol=1e-12)


def test_isotonic_unfitted() -> None:
    with pytest.raises(RuntimeError):
        IsotonicCalibrator().transform(np.array([0.5]))


# --------------------------------------------------------------------------- reliability and ECE


def test_ece_hand_computed() -> None:
    # Hand-computed, 10 equal-width bins:
    #   (0.1, 0.2]: 0.15 wrong          -> n 1, conf 0.15, acc 0.0, gap 0.15
    #   (0.2, 0.3]: 0.25 right, 0.25 wrong -> n 2, conf 0.25, acc 0.5, gap 0.25
    #   (0.8, 0.9]: 0.85 right          -> n 1, conf 0.85, acc 1.0, gap 0.15
    #   (0.9, 1.0]: 0.95 right, 0.95 wrong -> n 2, conf 0.95, acc 0.5, gap 0.45
    # ECE = (1*0.15 + 2*0.25 + 1*0.15 + 2*0.45) / 6 = 1.7 / 6
    conf = np.array([0.15, 0.25, 0.25, 0.85, 0.95, 0.95])
    correct = np.array([0, 1, 0, 1, 1, 0], dtype=bool)
    bins = reliability_table(conf, correct)
    assert [(b.n, round(b.lo, 1), round(b.hi, 1)) for b in bins] == [
        (1, 0.1, 0.2),
        (2, 0.2, 0.3),
        (1, 0.8, 0.9),
        (2, 0.9, 1.0),
    ]
    assert [b.accuracy for b in bins] == [0.0, 0.5, 1.0, 0.5]
    assert expected_calibration_error(conf, correct) == pytest.approx(1.7 / 6)
    # A confidence of exactly 1.0 belongs to the top bin, 0.0 to the bottom one (bins are (lo, hi]).
    edge = reliability_table(np.array([0.0, 1.0]), np.array([True, True]))
    assert [(round(b.lo, 1), round(b.hi, 1)) for b in edge] == [(0.0, 0.1), (0.9, 1.0)]


def test_ece_of_perfectly_calibrated_values() -> None:
    # Definition: if every bin's accuracy equals its mean confidence, ECE is 0. Five items at 0.8 with
    # four right, and two at 0.5 with one right.
    conf = np.array([0.8] * 5 + [0.5] * 2)
    correct = np.array([1, 1, 1, 1, 0, 1, 0], dtype=bool)
    assert expected_calibration_error(conf, correct) == pytest.approx(0.0, abs=1e-12)


@settings(max_examples=50, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), n_bins=st.integers(2, 15))
def test_reliability_equals_sklearn_calibration_curve(seed: int, n_bins: int) -> None:
    # Reference: sklearn.calibration.calibration_curve(strategy="uniform"), which also drops empty bins.
    conf, correct = _confidences(400, seed)
    if correct.all() or not correct.any():
        return
    prob_true, prob_pred = calibration_curve(correct, conf, n_bins=n_bins, strategy="uniform")
    bins = reliability_table(conf, correct, n_bins)
    np.testing.assert_allclose([b.accuracy for b in bins], prob_true, atol=1e-12)
    np.testing.assert_allclose([b.mean_confidence for b in bins], prob_pred, atol=1e-12)
    assert sum(b.n for b in bins) == conf.size
