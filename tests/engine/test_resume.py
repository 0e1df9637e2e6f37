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


def test_sharded_dev_scores_equal_the_in_memory_ones_with_a_label_absent():
    # Definition (lintext.engine.metrics, as sklearn's f1_score(average="macro") without labels=):
    # macro-F1 averages over the labels present in the dev truth or predictions. Dev rows of
    # label 2 only, and weights that never predict label 1: the in-memory history's scores
    # (monitor.dev_scores) and the sharded ones (shards.shard_dev_scores) must agree, and equal
    # scikit-learn's.
    from sklearn.metrics import f1_score

    from lintext.engine.monitor import history_row
    from lintext.engine.shards import shard_dev_scores

    X, y = problem(n=120, k=4)
    X_dev, y_dev = X[:60], np.where(y[:60] == 1, 2, y[:60])  # label 1 absent from the truth
    params = np.random.default_rng(3).normal(size=(X.shape[1] + 1, 4))
    params[:, 1] = -50.0  # ... and from the predictions
    parts = [(X_dev[a:a + 20], y_dev[a:a + 20]) for a in range(0, 60, 20)]
    sharded = shard_dev_scores(RowShards([20, 20, 20], X.shape[1], lambda k: parts[k]), params, "softmax")
    whole = history_row(1, 0.0, 0.1, params, "softmax", (X_dev.indptr, X_dev.indices, X_dev.data), y_dev)
    pred = (np.asarray(X_dev @ params[:-1]) + params[-1]).argmax(axis=1)
    assert 1 not in pred and 1 not in y_dev
    assert sharded["dev_macro_f1"] == pytest.approx(f1_score(y_dev, pred, average="macro"), abs=1e-12)
    assert sharded["dev_macro_f1"] == pytest.approx(whole["dev_macro_f1"], abs=1e-12)
    assert sharded["dev_accuracy"] == whole["dev_accuracy"]
    assert sharded["dev_loss"] == pytest.approx(whole["dev_loss"], rel=1e-12)


def test_a_resumed_run_is_flagged_as_diverged_where_an_uninterrupted_one_is():
    # The divergence checks read every epoch's objective (trainer._check_course): a checkpoint
    # carries them, so a run resumed after epoch 1 fails at the epoch, and with the message, of
    # the run that never stopped.
    from lintext.errors import DivergenceError

    X, y = problem()
    options = TrainOptions(loss="softmax", learning_rate=30.0, epochs=6, patience=0, refit=False)
    with pytest.raises(DivergenceError) as whole:
        fit(X, y, 3, options=options)
    first = fit(X, y, 3, options=replace(options, epochs=1), keep_checkpoint=True)
    with pytest.raises(DivergenceError) as resumed:
        fit(X, y, 3, options=options, resume=first.checkpoint)
    assert whole.value.epoch == 2 and resumed.value.epoch == 2 and str(resumed.value) == str(whole.value)


@pytest.mark.parametrize("average", [0, 1])
def test_resuming_with_no_epoch_left_returns_the_checkpointed_run(average):
    X, y = problem()
    options = TrainOptions(loss="softmax", learning_rate=0.5, epochs=3, patience=0, average=average, refit=False)
    run = fit(X, y, 3, options=options, keep_checkpoint=True)
    assert run.checkpoint["average_steps"] == (average == 1)  # SGD without L1 or L2, from step 0: kept by steps
    again = fit(X, y, 3, options=options, resume=run.checkpoint)
    assert np.array_equal(again.coef, run.coef) and np.array_equal(again.intercept, run.intercept)


def test_averaging_from_epoch_two_begins_after_the_last_step_of_epoch_one_with_shards():
    # Each shard ends in its own last batch: shards of 50 rows at batch size 40 take 2 steps each,
    # 6 an epoch (not ceil(150 / 40) = 4). Averaging from epoch 2 over a run of one epoch has
    # averaged nothing: the weights are the raw ones, bit for bit.
    X, y = problem(n=150)
    parts = [(X[a:a + 50], y[a:a + 50]) for a in range(0, 150, 50)]
    shards = RowShards([50, 50, 50], X.shape[1], lambda k: parts[k])
    options = TrainOptions(loss="softmax", learning_rate=0.5, epochs=1, patience=0, batch_size=40, refit=False)
    raw = fit(shards, None, 3, options=replace(options, average=0))
    late = fit(shards, None, 3, options=replace(options, average=2))
    assert np.array_equal(late.coef, raw.coef) and np.array_equal(late.intercept, raw.intercept)


@pytest.mark.parametrize("optimizer, weights, option", [
    ("sgd", {"options": {"label_weights": "balanced"}}, "--label-weights"),
    ("lbfgs", {"sample_weight": True}, "--weight-column"),
])
def test_weights_where_they_are_not_taken_are_refused_naming_the_option(optimizer, weights, option):
    from lintext.errors import ConfigError

    X, y = problem(n=100)
    parts = [(X[:50], y[:50]), (X[50:], y[50:])]
    data = (RowShards([50, 50], X.shape[1], lambda k: parts[k]), None) if optimizer == "sgd" else (X, y)
    options = TrainOptions(optimizer=optimizer, epochs=1, **weights.get("options", {}))
    sample_weight = np.ones(100) if weights.get("sample_weight") else None
    with pytest.raises(ConfigError, match="weights are not taken") as caught:
        fit(*data, 3, options=options, sample_weight=sample_weight)
    assert caught.value.option == option
