"""Going on from a checkpoint equals never stopping: the reference is the same run trained in one go
(same data, options and seed), compared bit for bit, for every rule with a learning rate, with L2,
with early stopping, with plateau decay and with rows read in shards."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import scipy.sparse as sp

from lintext.engine.options import TrainOptions
from lintext.engine.shards import RowShards
from lintext.engine.trainer import fit


def problem(n=300, d=40, k=3, seed=0):
    rng = np.random.default_rng(seed)
    X = sp.random(n, d, density=0.15, random_state=seed, format="csr")
    w = rng.normal(size=(d, k))
    y = np.asarray(X @ w).argmax(axis=1)
    flip = rng.random(n) < 0.2  # noise, so that runs do not separate the data at once
    y[flip] = rng.integers(0, k, flip.sum())
    return X, y


def strip(history):
    return [{k: v for k, v in row.items() if k != "seconds"} for row in history]


@pytest.mark.parametrize("options", [
    TrainOptions(optimizer="sgd", learning_rate=0.5, l2=1e-3),
    TrainOptions(optimizer="adagrad", learning_rate=0.3),
    TrainOptions(optimizer="adam", learning_rate=0.05),
    TrainOptions(optimizer="rmsprop", learning_rate=0.01, batch_size=16),
    TrainOptions(optimizer="sgd", learning_rate=2.0, schedule="plateau", patience=0),
], ids=["sgd-l2", "adagrad", "adam", "rmsprop", "sgd-plateau"])
@pytest.mark.parametrize("sharded", [False, True])
def test_resuming_equals_one_uninterrupted_run(options, sharded):
    X, y = problem()
    X_dev, y_dev = problem(n=60, seed=1)
    options = replace(options, epochs=9, patience=options.patience if options.patience == 0 else 50, refit=False)
    if sharded:
        parts = [(X[a:a + 100], y[a:a + 100]) for a in range(0, 300, 100)]
        X, y = RowShards([100, 100, 100], X.shape[1], lambda k: parts[k]), None
    whole = fit(X, y, 3, X_dev, y_dev, options)
    first = fit(X, y, 3, X_dev, y_dev, replace(options, epochs=3), keep_checkpoint=True)
    second = fit(X, y, 3, X_dev, y_dev, replace(options, epochs=6), resume=first.checkpoint, keep_checkpoint=True)
    last = fit(X, y, 3, X_dev, y_dev, options, resume=second.checkpoint)
    assert strip(last.history) == strip(whole.history) and last.best_epoch == whole.best_epoch
    assert np.array_equal(last.coef, whole.coef) and np.array_equal(last.intercept, whole.intercept)
    for name in whole.feature_stats:
        assert np.array_equal(last.feature_stats[name], whole.feature_stats[name], equal_nan=True)
    assert last.checkpoint is None and first.checkpoint is not None


def test_no_checkpoint_after_early_stopping():
    X, y = problem()
    X_dev, y_dev = problem(n=60, seed=1)
    result = fit(X, y, 3, X_dev, y_dev, TrainOptions(learning_rate=3.0, epochs=40, patience=1), keep_checkpoint=True)
    assert result.stopped_early and result.checkpoint is None
