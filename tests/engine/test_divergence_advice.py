"""The divergence hint proposes a rate from the run's own numbers, and that rate trains."""

from __future__ import annotations

import math

import pytest

import lintext
from lintext.engine.monitor import suggest_learning_rate
from lintext.errors import DivergenceError

from ..conftest import small_corpus_rows


def test_suggestion_worked_by_hand():
    # loss 7.862e4 against the all-zero model's ln(7) = 1.9459: 1e6 * 1.9459 / 7.862e4 = 24.75 -> 20 (1-2-5 series)
    rate, reason = suggest_learning_rate(1e6, 7.862e4, math.log(7), [])
    assert rate == 20 and "times that of the all-zero model" in reason
    # non-finite loss after two good epochs: a third of the rate, 3 / 3 = 1 -> 1
    assert suggest_learning_rate(3.0, math.inf, 1.0, [{}, {}])[0] == 1
    # non-finite in the first epoch: a thousandth, 0.5 -> 5e-4
    assert suggest_learning_rate(0.5, math.nan, 1.0, [])[0] == pytest.approx(5e-4)
    # never at or above the rate that failed: a loss barely above the reference still halves it (10 -> 5)
    assert suggest_learning_rate(10.0, 1.1, 1.0, [])[0] == 5


@pytest.mark.slow
def test_the_suggested_rate_trains_where_the_tenth_would_not():
    rows = small_corpus_rows()
    texts, labels = [t for t, _ in rows], [y for _, y in rows]
    with pytest.raises(DivergenceError) as caught:
        lintext.build_model(texts, labels, options={"learning_rate": 1e7, "epochs": 3})
    error = caught.value
    assert error.suggestion is not None and error.suggestion <= 1e7 / 100
    assert f"try {error.suggestion:g}" in str(error)
    model = lintext.build_model(texts, labels, options={"learning_rate": error.suggestion, "epochs": 3})
    assert model.info["metrics"]["dev"]["accuracy"] > 0.5
    # the old advice, a tenth of the rate, still diverges on this data
    with pytest.raises(DivergenceError):
        lintext.build_model(texts, labels, options={"learning_rate": 1e6, "epochs": 3})
