"""Classification scores against scikit-learn's definitions (``sklearn.metrics``), including labels
absent from the truth, never predicted, or neither."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.metrics import accuracy_score, f1_score, precision_recall_fscore_support

from lintext.engine.metrics import confused_pairs, confusion_counts, label_scores, macro_f1, summary_scores

CASES = [
    # (truth, predictions, number of labels): label 3 is absent from both in the first case
    ([0, 0, 1, 1, 2], [0, 1, 1, 1, 0], 4),
    ([0, 1, 2, 2, 2], [0, 0, 0, 2, 2], 3),  # label 1 never predicted
    ([0, 0, 0, 1], [0, 2, 2, 1], 3),  # label 2 predicted but absent from the truth
    ([1, 1, 1], [1, 1, 1], 5),  # one label only, four absent
]


def sklearn_quiet(function, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # undefined precision/recall warnings
        return function(*args, **kwargs)


@pytest.mark.parametrize("truth, pred, n", CASES)
def test_summary_equals_scikit_learn_without_labels_argument(truth, pred, n):
    ours = summary_scores(confusion_counts(truth, pred, n))
    # Source: scikit-learn's f1_score(average="macro"/"weighted") with `labels` not given averages
    # over the labels present in y_true or y_pred.
    assert ours["macro_f1"] == pytest.approx(sklearn_quiet(f1_score, truth, pred, average="macro"), abs=1e-15)
    assert ours["weighted_f1"] == pytest.approx(sklearn_quiet(f1_score, truth, pred, average="weighted"), abs=1e-15)
    assert ours["accuracy"] == pytest.approx(accuracy_score(truth, pred), abs=1e-15)
    assert ours["averaged_over"] == len(set(truth) | set(pred))
    assert macro_f1(truth, pred, n) == ours["macro_f1"]


def test_the_label_absent_from_both_changes_nothing():
    # Worked example of the issue: adding an absent label must not pull the average down.
    with_absent = summary_scores(confusion_counts([0, 0, 1, 1, 2], [0, 1, 1, 1, 0], 4))
    without = summary_scores(confusion_counts([0, 0, 1, 1, 2], [0, 1, 1, 1, 0], 3))
    assert with_absent["macro_f1"] == without["macro_f1"]
    # By hand: F1 = 2TP/(2TP+FP+FN): label 0 2/(2+1+1)=0.5, label 1 4/(4+1+0)=0.8, label 2 0 -> mean 1.3/3
    assert without["macro_f1"] == pytest.approx(1.3 / 3, abs=1e-15)


@pytest.mark.parametrize("truth, pred, n", CASES)
def test_per_label_undefined_where_scikit_learn_divides_by_zero(truth, pred, n):
    scores = label_scores(confusion_counts(truth, pred, n))
    p, r, f, s = sklearn_quiet(precision_recall_fscore_support, truth, pred, labels=list(range(n)), zero_division=np.nan)
    np.testing.assert_allclose(scores["precision"], p, equal_nan=True)
    np.testing.assert_allclose(scores["recall"], r, equal_nan=True)
    np.testing.assert_array_equal(scores["support"], s)
    present = scores["present"]
    np.testing.assert_allclose(scores["f1"][present], sklearn_quiet(
        precision_recall_fscore_support, truth, pred, labels=list(np.flatnonzero(present)), zero_division=0)[2])
    assert np.isnan(scores["f1"][~present]).all()


def test_confused_pairs_by_count_then_share():
    counts = np.array([[5, 3, 0], [1, 2, 3], [0, 3, 9]])
    pairs = confused_pairs(counts, ["a", "b", "c"])
    # by hand: (a->b 3, share 3/8), (b->c 3, 3/6), (c->b 3, 3/12), (b->a 1): equal counts by larger share
    assert [(p["true"], p["predicted"], p["count"]) for p in pairs] == [("b", "c", 3), ("a", "b", 3), ("c", "b", 3), ("b", "a", 1)]
    assert pairs[0]["share"] == pytest.approx(0.5)
