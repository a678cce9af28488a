"""The measuring core checked against scikit-learn, statsmodels, scipy and published or hand-computed values."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import entropy
from sklearn.metrics import (
    accuracy_score,
    confusion_matrix,
    f1_score,
    mutual_info_score,
    precision_recall_fscore_support,
    precision_score,
)
from statsmodels.stats.proportion import proportion_confint

from triage.core.metrics import (
    CutoffChoice,
    Scorecard,
    captured_share,
    conditional_mutual_information,
    lift_table,
    population_stability_index,
    precision_coverage_curve,
    scorecard,
    solve_cutoff,
    wilson_interval,
)

QUEUES = ["billing", "install", "fault", "safety"]
HELD = "__held__"


# --------------------------------------------------------------------------- wilson_interval


def test_wilson_published_value() -> None:
    # Newcombe (1998), Statistics in Medicine 17:857, example 81/263 -> 0.2553 to 0.3662 (from memory),
    # and statsmodels proportion_confint(method="wilson") agrees to 4 decimals.
    lo, hi = wilson_interval(81, 263)
    assert (round(lo, 4), round(hi, 4)) == (0.2553, 0.3662)
    sm_lo, sm_hi = proportion_confint(81, 263, alpha=0.05, method="wilson")
    assert lo == pytest.approx(sm_lo, abs=1e-12)
    assert hi == pytest.approx(sm_hi, abs=1e-12)


@settings(max_examples=300, deadline=None)
@given(
    n=st.integers(min_value=1, max_value=5000),
    share=st.floats(min_value=0.0, max_value=1.0),
    confidence=st.sampled_from([0.8, 0.9, 0.95, 0.99]),
)
def test_wilson_equals_statsmodels(n: int, share: float, confidence: float) -> None:
    # Reference: statsmodels.stats.proportion.proportion_confint(method="wilson").
    k = int(round(share * n))
    lo, hi = wilson_interval(k, n, confidence)
    sm_lo, sm_hi = proportion_confint(k, n, alpha=1 - confidence, method="wilson")
    assert lo == pytest.approx(sm_lo, abs=1e-12)
    assert hi == pytest.approx(sm_hi, abs=1e-12)


def test_wilson_no_items_and_bad_input() -> None:
    # Definition chosen in the API: n == 0 excludes nothing.
    assert wilson_interval(0, 0) == (0.0, 1.0)
    with pytest.raises(ValueError):
        wilson_interval(5, 3)
    with pytest.raises(ValueError):
        wilson_interval(1, 3, confidence=1.0)


# --------------------------------------------------------------------------- solve_cutoff


def _sm_lower(k: int, n: int, level: float = 0.95) -> float:
    return float(proportion_confint(k, n, alpha=1 - level, method="wilson")[0])


def test_solve_cutoff_lands_on_the_boundary() -> None:
    # Constructed: 20 correct items at confidences 0.99..0.80, then 10 wrong ones below. The Wilson lower
    # bound (statsmodels) peaks at 20/20; with the target just below it, the cutoff must be the 20th item's
    # confidence, and one step lower (20/21) must fail the bound.
    conf = np.round(np.linspace(0.99, 0.70, 30), 6)
    correct = np.array([True] * 20 + [False] * 10)
    target = _sm_lower(20, 20) - 1e-9
    assert _sm_lower(20, 21) < target  # the next step fails, per statsmodels
    choice = solve_cutoff(conf, correct, target)
    assert choice.cutoff == pytest.approx(conf[19])
    assert choice.routed == 20
    assert choice.precision == 1.0
    assert choice.coverage == pytest.approx(20 / 30)
    assert choice.lower_bound >= target
    assert choice.lower_bound == pytest.approx(_sm_lower(20, 20), abs=1e-12)
    # Raising the target past the best bound closes the queue.
    closed = solve_cutoff(conf, correct, _sm_lower(20, 20) + 1e-9)
    assert closed == CutoffChoice(None, 0.0, 0.0, 0.0, 0, _sm_lower(20, 20) + 1e-9)


def test_solve_cutoff_not_monotone() -> None:
    # Precision is not monotone in the cutoff: one wrong item at the very top makes every high cutoff fail,
    # yet 60 correct items below it pass. A scan that stops at the first failure would return None.
    conf = np.linspace(1.0, 0.5, 71)
    correct = np.array([False] + [True] * 60 + [False] * 10)
    target = 0.90
    # statsmodels: the top item alone fails, 60/61 passes, 60/62 (one more wrong) fails
    assert _sm_lower(0, 1) < target and _sm_lower(60, 61) >= target and _sm_lower(60, 62) < target
    choice = solve_cutoff(conf, correct, target)
    assert choice.routed == 61
    assert choice.cutoff == pytest.approx(conf[60])
    assert choice.precision == pytest.approx(60 / 61)


def test_solve_cutoff_none_when_unreachable() -> None:
    # 7 of 10 right: the Wilson lower bound (statsmodels) is far below 0.95 at every cutoff.
    conf = np.linspace(0.9, 0.6, 10)
    correct = np.array([1, 0, 1, 1, 0, 1, 1, 0, 1, 1], dtype=bool)
    assert max(_sm_lower(int(correct[:m].sum()), m) for m in range(1, 11)) < 0.95
    choice = solve_cutoff(conf, correct, 0.95)
    assert choice.cutoff is None and choice.routed == 0 and choice.coverage == 0.0
    assert solve_cutoff(np.array([]), np.array([], dtype=bool), 0.5).cutoff is None


def test_solve_cutoff_min_routed() -> None:
    # 5 correct items reach a 0.5 bound (statsmodels: 5/5 -> 0.566), but not if 6 items are demanded.
    conf = np.array([0.9, 0.8, 0.7, 0.6, 0.5])
    correct = np.ones(5, dtype=bool)
    assert _sm_lower(5, 5) >= 0.5
    assert solve_cutoff(conf, correct, 0.5).routed == 5
    assert solve_cutoff(conf, correct, 0.5, min_routed=6).cutoff is None


@settings(max_examples=200, deadline=None)
@given(
    data=st.lists(
        st.tuples(st.sampled_from([0.2, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 1.0]), st.booleans()),
        min_size=0,
        max_size=60,
    ),
    target=st.floats(min_value=0.0, max_value=0.95),
    level=st.sampled_from([0.9, 0.95]),
)
def test_solve_cutoff_equals_brute_force(data: list[tuple[float, bool]], target: float, level: float) -> None:
    # Reference: try every observed confidence as the cutoff, bound each with statsmodels' Wilson interval,
    # keep the lowest passing one. Ties in confidence are frequent here on purpose.
    conf = np.array([c for c, _ in data], dtype=float)
    correct = np.array([k for _, k in data], dtype=bool)
    best = None
    for c in sorted(set(conf.tolist())):
        routed = conf >= c
        if _sm_lower(int(correct[routed].sum()), int(routed.sum()), level) >= target + 1e-12:
            best = c
            break
    choice = solve_cutoff(conf, correct, target + 1e-12, confidence_level=level)
    assert choice.cutoff == best
    if best is not None:
        routed = conf >= best
        assert choice.routed == int(routed.sum())
        assert choice.precision == pytest.approx(correct[routed].mean())
        assert choice.coverage == pytest.approx(routed.mean())


def test_precision_coverage_curve() -> None:
    # Hand-computed: confidences 0.9, 0.9, 0.5, 0.3 with correctness T, F, T, T; the two 0.9s go together.
    cutoffs, precision, coverage, lower = precision_coverage_curve(
        np.array([0.5, 0.9, 0.3, 0.9]), np.array([True, True, True, False])
    )
    np.testing.assert_allclose(cutoffs, [0.9, 0.5, 0.3])
    np.testing.assert_allclose(precision, [1 / 2, 2 / 3, 3 / 4])
    np.testing.assert_allclose(coverage, [2 / 4, 3 / 4, 4 / 4])
    # lower bounds per statsmodels
    np.testing.assert_allclose(lower, [_sm_lower(1, 2), _sm_lower(2, 3), _sm_lower(3, 4)], atol=1e-12)


# --------------------------------------------------------------------------- scorecard

item = st.tuples(
    st.sampled_from(QUEUES),
    st.sampled_from(QUEUES),
    st.sampled_from([0.1, 0.3, 0.5, 0.6, 0.75, 0.9, 1.0]),
)
cutoff_value = st.one_of(st.none(), st.sampled_from([0.0, 0.3, 0.5, 0.6, 0.8, 0.95]))


@settings(max_examples=200, deadline=None)
@given(
    items=st.lists(item, min_size=1, max_size=80),
    cut=st.fixed_dictionaries({q: cutoff_value for q in QUEUES}),
    never=st.sets(st.sampled_from(QUEUES), max_size=2),
)
def test_scorecard_equals_sklearn(items: list[tuple[str, str, float]], cut: dict, never: set[str]) -> None:
    y_true = [t for t, _, _ in items]
    suggested = [s for _, s, _ in items]
    conf = np.array([c for _, _, c in items])
    card = scorecard(y_true, suggested, conf, QUEUES, cut, never_auto=never, targets={"billing": 0.9})

    # Reference: sklearn.metrics without cutoffs.
    assert card.matrix == confusion_matrix(y_true, suggested, labels=QUEUES).tolist()
    p, r, f, support = precision_recall_fscore_support(y_true, suggested, labels=QUEUES, zero_division=0)
    assert card.accuracy == pytest.approx(accuracy_score(y_true, suggested))
    # Reference: sklearn's macro F1 over the queues that have test items (labels=); a queue with none is
    # reported apart in `untested`, not averaged in as F1 = 0.
    tested = [q for q in QUEUES if q in y_true]
    assert card.macro_f1 == pytest.approx(
        f1_score(y_true, suggested, labels=tested, average="macro", zero_division=0)
    )
    assert card.untested == [q for q in QUEUES if q not in y_true]
    assert card.n == len(items)

    # The routing rule, restated item by item.
    auto = np.array(
        [s not in never and cut[s] is not None and c >= cut[s] for s, c in zip(suggested, conf, strict=True)]
    )
    routed_pred = [s if a else HELD for s, a in zip(suggested, auto, strict=True)]
    # Reference: sklearn with held items as a prediction of no queue (recall counts them as misses).
    pc, rc, fc, _ = precision_recall_fscore_support(y_true, routed_pred, labels=QUEUES, zero_division=0)
    # Reference: sklearn precision on the routed subset alone.
    yt_auto = [y for y, a in zip(y_true, auto, strict=True) if a]
    ys_auto = [s for s, a in zip(suggested, auto, strict=True) if a]
    if yt_auto:
        p_sub = precision_score(yt_auto, ys_auto, labels=QUEUES, average=None, zero_division=0)
    else:
        p_sub = np.zeros(len(QUEUES))

    for i, qs in enumerate(card.per_queue):
        assert qs.queue == QUEUES[i]
        assert qs.precision_all == pytest.approx(p[i])
        assert qs.recall_all == pytest.approx(r[i])
        assert qs.f1_all == pytest.approx(f[i])
        assert qs.support == support[i]
        assert qs.precision == pytest.approx(pc[i])
        assert qs.precision == pytest.approx(p_sub[i])
        assert qs.recall == pytest.approx(rc[i])
        assert qs.f1 == pytest.approx(fc[i])
        n_suggested = suggested.count(QUEUES[i])
        assert qs.routed == ys_auto.count(QUEUES[i])
        assert qs.routed + qs.held == n_suggested
        if n_suggested:
            assert qs.coverage == pytest.approx(qs.routed / n_suggested)
            assert qs.held_share == pytest.approx(1 - qs.coverage)
        assert qs.never_auto == (QUEUES[i] in never)
        assert qs.cutoff == cut[QUEUES[i]]
        assert qs.target == (0.9 if QUEUES[i] == "billing" else None)

    assert card.coverage == pytest.approx(auto.mean())
    assert card.held_share == pytest.approx(1 - auto.mean())
    if yt_auto:
        assert card.auto_precision == pytest.approx(accuracy_score(yt_auto, ys_auto))
    else:
        assert card.auto_precision == 0.0

    # JSON round trip and row shares (reference: sklearn confusion_matrix(normalize="true")).
    again = Scorecard.from_dict(json.loads(json.dumps(card.to_dict())))
    assert again == card
    expected_shares = np.nan_to_num(confusion_matrix(y_true, suggested, labels=QUEUES, normalize="true"))
    np.testing.assert_allclose(card.row_shares(), expected_shares, atol=1e-12)


def test_scorecard_rejects_unknown_queue() -> None:
    with pytest.raises(ValueError, match="not in queues"):
        scorecard(["billing"], ["nowhere"], np.array([0.9]), QUEUES, {})


def test_scorecard_missing_cutoff_holds() -> None:
    # Design rule: a queue with no cutoff auto-routes nothing, and never_auto overrides a cutoff.
    card = scorecard(
        ["billing", "safety", "fault"],
        ["billing", "safety", "fault"],
        np.array([0.99, 0.99, 0.99]),
        QUEUES,
        {"safety": 0.0, "fault": 0.5},
        never_auto={"safety"},
    )
    by = {q.queue: q for q in card.per_queue}
    assert (by["billing"].routed, by["safety"].routed, by["fault"].routed) == (0, 0, 1)
    assert card.coverage == pytest.approx(1 / 3)


# --------------------------------------------------------------------------- lift and gains


def test_lift_hand_computed() -> None:
    # Hand-computed: 100 items, the 10 positives hold the 10 highest scores. Base rate 0.1, so the top
    # decile has rate 1.0 and lift 10, and the gain is complete after it.
    scores = np.arange(100, 0, -1, dtype=float)
    positive = np.zeros(100, dtype=bool)
    positive[:10] = True
    rows = lift_table(scores, positive)
    assert len(rows) == 10
    assert rows[0]["rate"] == 1.0 and rows[0]["lift"] == pytest.approx(10.0)
    assert rows[0]["cumulative_gain"] == 1.0
    assert [r["positives"] for r in rows[1:]] == [0] * 9
    assert rows[4]["cumulative_lift"] == pytest.approx(2.0)  # 10/50 over 0.1
    assert rows[0]["score_max"] == 100 and rows[0]["score_min"] == 91
    assert captured_share(scores, positive, 0.05) == pytest.approx(0.5)


def test_lift_of_random_score_is_about_one() -> None:
    # A score independent of the outcome carries no lift. With 10,000 items per decile and a 30% rate the
    # standard error of a decile's lift is about 0.015, so 0.08 is more than 5 standard errors.
    rng = np.random.default_rng(7)
    n = 100_000
    rows = lift_table(rng.random(n), rng.random(n) < 0.3)
    assert all(abs(r["lift"] - 1) < 0.08 for r in rows)
    assert rows[-1]["cumulative_gain"] == pytest.approx(1.0)


@settings(max_examples=100, deadline=None)
@given(
    m=st.integers(min_value=1, max_value=30),
    seed=st.integers(min_value=0, max_value=2**31 - 1),
    n_bins=st.integers(min_value=1, max_value=12),
)
def test_lift_table_properties(m: int, seed: int, n_bins: int) -> None:
    # Definitions: bins partition the items; cumulative gain ends at 1; a gain curve with the decile
    # boundaries on whole items equals captured_share at those fractions.
    rng = np.random.default_rng(seed)
    n = 10 * m
    scores = rng.integers(0, 5, n).astype(float)  # many ties
    positive = rng.random(n) < 0.4
    if not positive.any():
        positive[0] = True
    rows = lift_table(scores, positive, n_bins)
    assert sum(r["n"] for r in rows) == n
    assert sum(r["positives"] for r in rows) == positive.sum()
    assert rows[-1]["cumulative_gain"] == pytest.approx(1.0)
    assert rows[-1]["cumulative_lift"] == pytest.approx(1.0)
    deciles = lift_table(scores, positive, 10)
    for j, r in enumerate(deciles, start=1):
        assert captured_share(scores, positive, j / 10) == pytest.approx(r["cumulative_gain"])


# --------------------------------------------------------------------------- PSI


def test_psi_identical_is_zero() -> None:
    e = np.array([0.1, 0.2, 0.3, 0.4])
    assert population_stability_index(e, e) == 0.0
    assert population_stability_index(e * 50, e * 7) == pytest.approx(0.0, abs=1e-15)  # counts, normalised


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.tuples(st.integers(1, 1000), st.integers(1, 1000)), min_size=2, max_size=12),
)
def test_psi_formula(pairs: list[tuple[int, int]]) -> None:
    # Formula: PSI = sum((a - e) * ln(a / e)) on shares (the usual definition, e.g. Siddiqi 2006, Credit
    # Risk Scorecards; from memory). It is also the symmetrised Kullback-Leibler divergence, checked with
    # scipy.stats.entropy.
    e = np.array([p for p, _ in pairs], dtype=float)
    a = np.array([q for _, q in pairs], dtype=float)
    es, as_ = e / e.sum(), a / a.sum()
    psi = population_stability_index(e, a)
    assert psi == pytest.approx(np.sum((as_ - es) * np.log(as_ / es)), rel=1e-12, abs=1e-15)
    assert psi == pytest.approx(entropy(as_, es) + entropy(es, as_), rel=1e-9, abs=1e-12)


def test_psi_empty_bin_uses_floor() -> None:
    # Hand-computed with the documented floor eps=1e-4 on an empty bin.
    e = np.array([0.5, 0.5, 0.0])
    a = np.array([0.4, 0.4, 0.2])
    expected = 2 * (0.4 - 0.5) * math.log(0.4 / 0.5) + (0.2 - 1e-4) * math.log(0.2 / 1e-4)
    assert population_stability_index(e, a) == pytest.approx(expected)


# --------------------------------------------------------------------------- CMI


def test_cmi_zero_when_conditionally_independent() -> None:
    # Each queue's A x B table is an outer product of its margins: A and B are independent given Q,
    # yet dependent overall (the margins differ across queues).
    a1, b1 = np.array([1.0, 3.0, 6.0]), np.array([2.0, 8.0])
    a2, b2 = np.array([5.0, 4.0, 1.0]), np.array([9.0, 1.0])
    counts = np.stack([np.outer(a1, b1), 3 * np.outer(a2, b2)])
    assert conditional_mutual_information(counts) == pytest.approx(0.0, abs=1e-12)
    # ...but the pooled table is not independent (sklearn mutual_info_score on the sum over queues).
    assert mutual_info_score(None, None, contingency=counts.sum(axis=0)) > 0.01


@settings(max_examples=100, deadline=None)
@given(
    q=st.integers(1, 4),
    a=st.integers(1, 5),
    b=st.integers(1, 5),
    seed=st.integers(0, 2**31 - 1),
)
def test_cmi_equals_weighted_mutual_information(q: int, a: int, b: int, seed: int) -> None:
    # Reference: I(A;B|Q) = sum_q P(q) I(A;B | Q=q), with sklearn.metrics.mutual_info_score (nats) per queue.
    rng = np.random.default_rng(seed)
    counts = rng.integers(0, 20, size=(q, a, b)).astype(float)
    counts[rng.random(counts.shape) < 0.2] = 0  # some empty cells
    if counts.sum() == 0:
        counts[0, 0, 0] = 1
    total = counts.sum()
    expected = sum(
        counts[k].sum() / total * mutual_info_score(None, None, contingency=counts[k])
        for k in range(q)
        if counts[k].sum() > 0
    )
    assert conditional_mutual_information(counts) == pytest.approx(expected, abs=1e-12)


def test_a_queue_without_test_items_is_left_out_of_macro_f1() -> None:
    # one queue ("refunds") is only suggested, never true: before, it counted as F1 = 0 in the average
    y_true = ["billing", "billing", "network", "network"]
    suggested = ["billing", "refunds", "network", "network"]
    queues = ["billing", "network", "refunds"]
    card = scorecard(y_true, suggested, np.ones(4), queues, {})
    assert card.untested == ["refunds"]
    # Reference: sklearn.metrics.f1_score with labels= the tested queues (billing 2/3, network 1.0)
    assert card.macro_f1 == pytest.approx(
        f1_score(y_true, suggested, labels=["billing", "network"], average="macro", zero_division=0))
    assert card.macro_f1 == pytest.approx((2 / 3 + 1.0) / 2)
    assert Scorecard.from_dict(card.to_dict()).untested == ["refunds"]
