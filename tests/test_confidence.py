"""Temperature scaling, calibration error, reliability bins and routing (lintext.confidence).

Sources beside each check: SciPy's ``minimize_scalar`` for the fitted temperature,
scikit-learn's ``calibration_curve`` for the reliability bins, and examples worked by hand from
the published definitions (Guo, Pleiss, Sun & Weinberger 2017; Naeini, Cooper & Hauskrecht 2015).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar
from scipy.special import log_softmax as scipy_log_softmax
from sklearn.calibration import calibration_curve
from sklearn.metrics import log_loss

from lintext import confidence
from lintext.confidence import (coverage_curve, coverage_rows, expected_calibration_error, fit_temperature,
                                negative_log_likelihood, reliability, threshold_for_accuracy)


def noisy_scores(n=400, labels=5, scale=3.0, right=0.75, seed=0):
    """Random scores whose argmax is the true label for about ``right`` of the rows."""
    rng = np.random.default_rng(seed)
    s = rng.normal(size=(n, labels)) * scale
    y = np.where(rng.random(n) < right, s.argmax(axis=1), rng.integers(0, labels, n))
    return s, y


# ---------------------------------------------------------------- temperature


@pytest.mark.parametrize("scale, seed", [(0.3, 0), (3.0, 1), (30.0, 2)])
def test_fitted_temperature_equals_minimize_scalar(scale, seed):
    # Reference: SciPy's bounded Brent search on the dev negative log-likelihood, NLL(T) = mean of
    # -log softmax(s / T)[y], written here with scipy.special.log_softmax (Guo et al. 2017, sec. 4.2).
    s, y = noisy_scores(scale=scale, seed=seed)
    nll = lambda t: -scipy_log_softmax(s / t, axis=1)[np.arange(len(y)), y].mean()  # noqa: E731
    theirs = minimize_scalar(nll, bounds=confidence.TEMPERATURE_BOUNDS, method="bounded", options={"xatol": 1e-12})
    ours, at_bound = fit_temperature(s, y)
    assert not at_bound
    assert ours == pytest.approx(theirs.x, rel=1e-6)
    assert nll(ours) <= theirs.fun + 1e-12  # ours is at least as good a minimum


def test_nll_equals_sklearn_log_loss():
    # Reference: sklearn.metrics.log_loss of softmax(s / T).
    s, y = noisy_scores(seed=3)
    p = confidence.probabilities(s, 1.7)
    assert negative_log_likelihood(s, y, 1.7) == pytest.approx(log_loss(y, p, labels=range(5)), rel=1e-12)


def test_temperature_on_the_bounds_is_flagged():
    # Worked by hand: every row right by a wide margin, so the NLL keeps falling as T -> 0 and
    # the fit stops on the lower bound; scores with no signal (all labels equal) make every
    # T equally good, the derivative is 0 >= 0 at the upper bound, which is returned.
    s = np.array([[10.0, 0.0], [0.0, 10.0], [10.0, 0.0]])
    assert fit_temperature(s, np.array([0, 1, 0])) == (confidence.TEMPERATURE_BOUNDS[0], True)
    assert fit_temperature(np.zeros((3, 2)), np.array([0, 1, 0])) == (confidence.TEMPERATURE_BOUNDS[1], True)


def test_temperature_never_changes_the_ranking():
    # Definition: softmax(s / T) with T > 0 is monotone in s, so the ranking of labels is kept.
    s, _ = noisy_scores(seed=4)
    for t in (0.05, 0.9, 20.0):
        p = confidence.probabilities(s, t)
        assert (p.argmax(axis=1) == s.argmax(axis=1)).all()
        np.testing.assert_allclose(p.sum(axis=1), 1.0, rtol=0, atol=1e-12)


# ---------------------------------------------------------------- calibration error

# Worked by hand from the definition ECE = sum_m |B_m|/n * |acc(B_m) - conf(B_m)| over equal-width,
# right-closed bins (Naeini, Cooper & Hauskrecht 2015; Guo et al. 2017, eq. 3), with M = 5 bins
# (0, .2], (.2, .4], (.4, .6], (.6, .8], (.8, 1]:
#   bin (.2, .4]: 0.30 wrong                 -> acc 0,   conf 0.30,  |gap| 0.30,  weight 1/10 -> 0.030
#   bin (.4, .6]: 0.45 right, 0.60 wrong      -> acc 1/2, conf 0.525, |gap| 0.025, weight 2/10 -> 0.005
#   bin (.6, .8]: 0.65 right, 0.75 wrong, 0.80 right
#                                            -> acc 2/3, conf 2.2/3, |gap| 0.2/3, weight 3/10 -> 0.020
#   bin (.8, 1]:  0.85, 0.90, 0.95 right, 1.00 wrong
#                                            -> acc 3/4, conf 0.925, |gap| 0.175, weight 4/10 -> 0.070
#   ECE = 0.030 + 0.005 + 0.020 + 0.070 = 0.125 (0.60 and 0.80 sit on edges and go to the lower bin).
HAND_CONF = np.array([0.30, 0.45, 0.60, 0.65, 0.75, 0.80, 0.85, 0.90, 0.95, 1.00])
HAND_RIGHT = np.array([0, 1, 0, 1, 0, 1, 1, 1, 1, 0], dtype=bool)


def test_ece_on_a_hand_worked_example():
    assert expected_calibration_error(HAND_CONF, HAND_RIGHT, bins=5) == pytest.approx(0.125, abs=1e-12)
    table = reliability(HAND_CONF, HAND_RIGHT, bins=5)
    assert table["count"] == [0, 1, 2, 3, 4]
    assert table["accuracy"][0] is None and table["confidence"][0] is None
    assert table["accuracy"][1:] == pytest.approx([0.0, 0.5, 2 / 3, 0.75], abs=1e-12)
    assert table["confidence"][1:] == pytest.approx([0.30, 0.525, 2.2 / 3, 0.925], abs=1e-12)


def test_a_perfectly_calibrated_sample_has_zero_ece():
    # Worked by hand: in each bin the accuracy equals the confidence (0.5: 1 of 2 right; 1.0: all right).
    conf = np.array([0.5, 0.5, 1.0, 1.0])
    assert expected_calibration_error(conf, np.array([1, 0, 1, 1], dtype=bool)) == 0.0


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_reliability_curve_equals_sklearn_calibration_curve(seed):
    # Reference: sklearn.calibration.calibration_curve(strategy="uniform", n_bins=15) on
    # (correct, confidence of the predicted label) gives the accuracy and mean confidence of every
    # non-empty bin; ours must give the same numbers for the same bins.
    s, y = noisy_scores(seed=seed)
    summary = confidence.summary(s, y, temperature=1.3)
    prob_true, prob_pred = calibration_curve(summary["correct"].astype(int), summary["confidence"], n_bins=15,
                                             strategy="uniform")
    table = summary["reliability"]
    keep = [i for i, c in enumerate(table["count"]) if c]
    np.testing.assert_allclose([table["accuracy"][i] for i in keep], prob_true, rtol=0, atol=1e-12)
    np.testing.assert_allclose([table["confidence"][i] for i in keep], prob_pred, rtol=0, atol=1e-12)
    # and the ECE is the share-weighted gap of exactly those bins
    counts = np.array([table["count"][i] for i in keep])
    assert summary["ece"] == pytest.approx(float((counts / len(y) * np.abs(prob_true - prob_pred)).sum()), abs=1e-12)


def test_edges_shared_with_calibration_curve():
    # Reference: calibration_curve on values that sit exactly on bin edges (k/15) and on 0 and 1.
    conf = np.array([0.0, 1 / 15, 2 / 15, 0.5, 14 / 15, 1.0, 1.0, 0.2])
    right = np.array([0, 1, 0, 1, 1, 1, 0, 1])
    prob_true, prob_pred = calibration_curve(right, conf, n_bins=15, strategy="uniform")
    table = reliability(conf, right.astype(bool))
    keep = [i for i, c in enumerate(table["count"]) if c]
    np.testing.assert_allclose([table["accuracy"][i] for i in keep], prob_true, atol=1e-15)
    np.testing.assert_allclose([table["confidence"][i] for i in keep], prob_pred, atol=1e-15)


# ---------------------------------------------------------------- routing

# Worked by hand: six documents, best probabilities and whether the predicted label was right.
#   threshold 0.0:  all 6 decided, 3 right             -> coverage 1,   accuracy 0.5
#   threshold 0.75: 0.95, 0.9, 0.8 decided; 2 right     -> coverage 0.5, accuracy 2/3
#   threshold 0.9:  0.95 and 0.9 (at least 0.9); both right -> coverage 1/3, accuracy 1
#   threshold 0.99: nothing decided                    -> coverage 0,   accuracy undefined (None)
ROUTE_CONF = np.array([0.6, 0.95, 0.5, 0.8, 0.9, 0.7])
ROUTE_RIGHT = np.array([0, 1, 0, 0, 1, 1], dtype=bool)


def test_coverage_rows_by_hand():
    curve = coverage_curve(ROUTE_CONF, ROUTE_RIGHT, thresholds=(0.0, 0.75, 0.9, 0.99))
    rows = coverage_rows(curve, (0.0, 0.75, 0.9, 0.99))
    assert [r["decided"] for r in rows] == [6, 3, 2, 0]
    assert [r["coverage"] for r in rows] == pytest.approx([1.0, 0.5, 1 / 3, 0.0])
    assert [r["accuracy"] for r in rows[:3]] == pytest.approx([0.5, 2 / 3, 1.0])
    assert rows[3]["accuracy"] is None


def test_threshold_for_a_target_accuracy_by_hand():
    # Worked by hand: candidate thresholds are the probabilities themselves, lowest first:
    #   0.5 -> 3/6, 0.6 -> 3/5, 0.7 -> 3/4 = 0.75, 0.8 -> 2/3, 0.9 -> 1, 0.95 -> 1.
    # Target 0.75 is first reached at 0.7 (4 decided); target 0.9 at 0.9 (2 decided).
    at = threshold_for_accuracy(ROUTE_CONF, ROUTE_RIGHT, 0.75)
    assert (at["threshold"], at["decided"], at["coverage"], at["accuracy"]) == (0.7, 4, pytest.approx(4 / 6), 0.75)
    at = threshold_for_accuracy(ROUTE_CONF, ROUTE_RIGHT, 0.9)
    assert (at["threshold"], at["decided"], at["accuracy"]) == (0.9, 2, 1.0)
    never = threshold_for_accuracy(ROUTE_CONF, np.zeros(6, dtype=bool), 0.5)
    assert never["threshold"] is None and never["accuracy"] == 0.0


def test_ties_are_decided_together():
    # Worked by hand: two documents at 0.8 (one right, one wrong) and one at 0.9 (right): a threshold
    # decides both 0.8s or neither, so target 0.75 can only be met at 0.9 (1 of 1), not by "one 0.8".
    conf = np.array([0.8, 0.9, 0.8])
    right = np.array([1, 1, 0], dtype=bool)
    at = threshold_for_accuracy(conf, right, 0.75)
    assert (at["threshold"], at["decided"]) == (0.9, 1)
    assert coverage_curve(conf, right, thresholds=(0.8,))["decided"] == [3]


def test_calibration_record_numbers():
    # The record's before/after numbers are the functions' own at T = 1 and at the fitted T.
    s, y = noisy_scores(seed=5)
    record = confidence.calibration_record(s, y)
    t = record["temperature"]
    assert record["nll_before"] == pytest.approx(negative_log_likelihood(s, y, 1.0), abs=1e-15)
    assert record["nll_after"] == pytest.approx(negative_log_likelihood(s, y, t), abs=1e-15)
    assert record["nll_after"] <= record["nll_before"]
    assert record["ece_after"] == pytest.approx(confidence.summary(s, y, t)["ece"], abs=1e-15)
    assert sum(record["reliability_before"]["count"]) == len(y) and not math.isnan(record["ece_before"])


def test_a_separated_dev_set_leaves_the_temperature_at_one():
    # Worked by hand: both rows right by 10, so the NLL falls all the way to T -> 0; nothing can be
    # fitted, and the record keeps T = 1 (the plain softmax) and says why.
    record = confidence.calibration_record(np.array([[10.0, 0.0], [0.0, 10.0]]), np.array([0, 1]))
    assert (record["temperature"], record["at_bound"], record["separated"]) == (1.0, True, True)
    assert record["nll_after"] == record["nll_before"]
