"""Trainer: optima against scikit-learn, early stopping, plateau, divergence, determinism."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.linear_model import LogisticRegression

from lintext.engine import kernels, losses
from lintext.errors import ConfigError, DivergenceError
from lintext.engine.monitor import Monitor, TrainResult
from lintext.engine.options import TrainOptions
from lintext.engine.trainer import fit


def problem(n=300, n_features=50, n_labels=3, density=0.1, seed=0):
    rng = np.random.default_rng(seed)
    X = sp.random(n, n_features, density=density, format="csr", random_state=seed,
                  data_rvs=lambda k: rng.random(k) + 0.5)
    W = rng.normal(size=(n_features, n_labels)) * 2
    y = (X @ W + rng.gumbel(size=(n, n_labels))).argmax(axis=1)
    return X, y


@pytest.fixture(scope="module")
def sklearn_optimum():
    # scikit-learn's multinomial LogisticRegression minimises C * sum_i loss_i + 1/2 ||W||^2
    # (intercept not penalised). With C = 1/(l2 * n) that is
    #   (1/(l2 n)) * sum_i loss_i + 1/2 ||W||^2 = (1/l2) * [mean loss + (l2/2) ||W||^2],
    # i.e. 1/l2 times our objective, so both have the same minimiser; we compare our
    # objective evaluated at sklearn's solution with ours at our solution.
    X, y = problem()
    l2 = 1e-2
    clf = LogisticRegression(C=1.0 / (l2 * X.shape[0]), tol=1e-12, max_iter=10_000).fit(X, y)
    value = losses.objective("softmax", X, y, clf.coef_.T, clf.intercept_, l2)[0]
    return X, y, l2, value, clf


SOLVER_SETTINGS = {
    "lbfgs": dict(epochs=500),
    # Per-example SGD with eta_t = eta0/(1 + eta0*l2*t) (eta0 = 1, decay = eta0*l2 = 0.01), the
    # 1/(lambda t) step for strongly convex objectives (Bottou, "Stochastic Gradient Descent
    # Tricks", 2012). 100 epochs reach ~2e-5 relative, measured (averaged from epoch 2; from epoch 1,
    # 7e-5: the first epoch's weights weigh in the mean).
    "sgd": dict(batch_size=1, learning_rate=1.0, schedule="inverse", decay=0.01, epochs=100, average=2),
    # Full batch: deterministic gradient steps; measured ~1e-14 relative after 1000 steps.
    "adagrad": dict(batch_size=10_000, learning_rate=0.5, epochs=1000),
    "adam": dict(batch_size=10_000, learning_rate=0.05, epochs=1000),
}


@pytest.mark.parametrize("optimizer", list(SOLVER_SETTINGS))
def test_reaches_the_sklearn_logistic_regression_objective(sklearn_optimum, optimizer):
    X, y, l2, best, _ = sklearn_optimum
    result = fit(X, y, 3, options=TrainOptions(loss="softmax", optimizer=optimizer, l2=l2, patience=0,
                                                 **SOLVER_SETTINGS[optimizer]))
    value = losses.objective("softmax", X, y, result.coef, result.intercept, l2)[0]
    assert abs(value - best) / best <= 1e-4
    assert value > 0.3  # sanity: the optimum is a real, non-trivial value (~0.60)


def test_lbfgs_matches_sklearn_coefficients(sklearn_optimum):
    X, y, l2, _, clf = sklearn_optimum
    result = fit(X, y, 3, options=TrainOptions(loss="softmax", optimizer="lbfgs", l2=l2, epochs=500))
    np.testing.assert_allclose(result.coef, clf.coef_.T, atol=1e-4)
    np.testing.assert_allclose(result.intercept, clf.intercept_, atol=1e-4)
    assert len(result.history) == result.best_epoch >= 5
    assert np.all(result.feature_stats["update_count"] == 0)
    assert np.all(np.isnan(result.feature_stats["effective_step"]))


def rising_dev(X, y, n_labels=3):
    """Dev rows whose labels are shifted by one: fitting the training labels raises dev loss."""
    return X, (y + 1) % n_labels


def test_early_stopping_restores_best_epoch():
    X, y = problem()
    X_dev, y_dev = rising_dev(X, y)
    opts = TrainOptions(loss="softmax", stop_metric="dev-loss", refit=False, optimizer="adagrad", epochs=20, patience=2, batch_size=4)
    result = fit(X, y, 3, X_dev, y_dev, opts)
    dev = [row["dev_loss"] for row in result.history]
    assert all(b > a for a, b in zip(dev, dev[1:]))  # the construction works: dev loss rises
    assert result.best_epoch == 1 and len(result.history) == 3 and result.stopped_early
    one_epoch = fit(X, y, 3, options=TrainOptions(loss="softmax", optimizer="adagrad", epochs=1, batch_size=4))
    np.testing.assert_array_equal(result.coef, one_epoch.coef)
    np.testing.assert_array_equal(result.intercept, one_epoch.intercept)


def test_patience_zero_runs_every_epoch_and_dev_never_trains():
    X, y = problem()
    X_dev, y_dev = rising_dev(X, y)
    opts = TrainOptions(epochs=6, patience=0)
    with_dev = fit(X, y, 3, X_dev, y_dev, opts)
    without_dev = fit(X, y, 3, options=opts)
    assert len(with_dev.history) == 6 and not with_dev.stopped_early and with_dev.best_epoch == 6
    np.testing.assert_array_equal(with_dev.coef, without_dev.coef)
    assert without_dev.history[0]["dev_loss"] is None and without_dev.best_epoch == 6


def test_min_improvement_and_metric_direction():
    m = Monitor("dev-loss", 1e-4)
    assert [m.update({"dev_loss": v}) for v in (1.0, 0.99995, 0.5)] == [True, False, True]
    m = Monitor("accuracy", 0.01)
    assert [m.update({"dev_accuracy": v}) for v in (0.5, 0.505, 0.7, 0.6)] == [True, False, True, False]
    assert m.since_best == 1


def test_plateau_halves_the_learning_rate_when_dev_does_not_improve():
    X, y = problem()
    X_dev, y_dev = rising_dev(X, y)
    opts = TrainOptions(optimizer="adagrad", learning_rate=0.4, schedule="plateau", epochs=4, patience=0)
    result = fit(X, y, 3, X_dev, y_dev, opts)
    # Epoch 1 improves (first value); epochs 2, 3, 4 do not, each halving the next epoch's rate.
    assert [row["learning_rate"] for row in result.history] == [0.4, 0.4, 0.2, 0.1]


def test_divergence_names_the_learning_rate():
    X, y = problem()
    with pytest.raises(DivergenceError, match=r"learning rate 1e\+06") as err:
        fit(X, y, 3, options=TrainOptions(optimizer="sgd", learning_rate=1e6, epochs=5, patience=0))
    assert err.value.learning_rate == 1e6 and err.value.epoch == 1
    with pytest.raises(DivergenceError):  # overflow to inf/NaN
        fit(X, y, 3, options=TrainOptions(optimizer="sgd", learning_rate=1e306, epochs=5, patience=0))


def test_same_seed_gives_bit_identical_weights():
    X, y = problem()
    opts = dict(optimizer="adam", batch_size=4, epochs=3, patience=0)
    a = fit(X, y, 3, options=TrainOptions(seed=7, **opts))
    b = fit(X, y, 3, options=TrainOptions(seed=7, **opts))
    c = fit(X, y, 3, options=TrainOptions(seed=8, **opts))
    assert a.coef.tobytes() == b.coef.tobytes() and a.intercept.tobytes() == b.intercept.tobytes()
    assert not np.array_equal(a.coef, c.coef)


def test_float32_agrees_with_float64():
    X, y = problem()
    X_dev, y_dev = problem(seed=1)
    r64 = fit(X, y, 3, X_dev, y_dev, TrainOptions(loss="softmax", epochs=5, patience=0))
    r32 = fit(X.astype(np.float32), y, 3, X_dev, y_dev, TrainOptions(loss="softmax", epochs=5, patience=0, precision="float32"))
    assert r32.coef.dtype == np.float32 and r32.intercept.dtype == np.float32
    np.testing.assert_allclose(r32.coef, r64.coef, atol=1e-4 * np.abs(r64.coef).max())
    assert r32.history[-1]["dev_loss"] == pytest.approx(r64.history[-1]["dev_loss"], rel=1e-4)


def test_feature_stats_and_progress():
    # A feature in no document is never updated (count 0, NaN step); with softmax every
    # present feature has a non-zero gradient, so with batch size 1 its count is the number
    # of documents containing it times the epochs (worked by hand from the definition).
    X, y = problem()
    X = sp.hstack([X, sp.csr_matrix((X.shape[0], 1))], format="csr")
    rows = []
    # (learning rate 0.3: these rows are not unit length, and at the default 3 SGD diverges here)
    result = fit(X, y, 3, options=TrainOptions(loss="softmax", epochs=2, patience=0, batch_size=1, learning_rate=0.3),
                 progress=rows.append)
    stats = result.feature_stats
    assert set(stats) == {"update_count", "abs_update_sum", "effective_step"}
    np.testing.assert_array_equal(stats["update_count"], 2 * X.getnnz(axis=0))
    assert stats["update_count"][-1] == 0 and math.isnan(stats["effective_step"][-1])
    assert np.all(stats["abs_update_sum"][:-1] > 0) and stats["abs_update_sum"][-1] == 0
    # AdaGrad's step lr/(sqrt(G)+eps) is below lr/|g| <= ... and positive; default lr applies.
    assert np.all((stats["effective_step"][:-1] > 0) & np.isfinite(stats["effective_step"][:-1]))
    assert [r["epoch"] for r in rows] == [1, 2] and rows[0]["epochs"] == 2
    assert isinstance(result, TrainResult) and result.coef.shape == (51, 3) and result.coef.flags.c_contiguous


@pytest.mark.parametrize("loss", ["softmax", "hinge"])
@pytest.mark.parametrize("optimizer", ["sgd", "adagrad", "adadelta", "rmsprop", "adam", "ftrl"])
def test_every_rule_learns_with_its_default_learning_rate(optimizer, loss):
    # Measured on this problem: the generating weights score 0.88 on rows 500-599 and the
    # majority label is 0.45 of them. Every default must get well above the majority rate.
    X, y = problem(n=600)
    result = fit(X[:500], y[:500], 3, X[500:], y[500:],
                 TrainOptions(optimizer=optimizer, loss=loss, epochs=10, batch_size=8))
    assert max(row["dev_accuracy"] for row in result.history) > 0.7


@pytest.mark.parametrize("field,value", [
    ("optimizer", "nesterov"), ("loss", "squared"), ("schedule", "cosine"), ("learning_rate", -1.0),
    ("learning_rate", float("nan")), ("epochs", 0), ("batch_size", 0), ("patience", -1),
    ("stop_metric", "f2"), ("precision", "float16"), ("updates", "sometimes"), ("plateau_factor", 1.5), ("l2", -0.1),
    ("beta1", 1.0), ("epochs", 2.5), ("seed", -3), ("threads", -1), ("threads", 1.5),
])
def test_bad_options_raise_config_error_naming_them(field, value):
    with pytest.raises(ConfigError) as err:
        TrainOptions(**{field: value}).validate()
    # the option as typed on the command line (one spelling everywhere)
    flag = "--" + field.replace("_", "-")
    assert err.value.option == flag and str(err.value).startswith(f"{flag}=")


def test_option_combinations_are_checked():
    with pytest.raises(ConfigError, match="schedule"):
        TrainOptions(optimizer="adam", schedule="inverse").validate()
    with pytest.raises(ConfigError, match="beta1"):
        TrainOptions(optimizer="sgd", beta1=0.5).validate()
    with pytest.raises(ConfigError, match="--learning-rate"):
        TrainOptions(optimizer="lbfgs", learning_rate=0.1).validate()
    TrainOptions(optimizer="adam", beta1=0.5, beta2=0.9, epsilon=1e-6).validate()
    TrainOptions(optimizer="sgd", schedule="inverse-sqrt").validate()
    with pytest.raises(ConfigError, match="n_labels"):
        fit(*problem(), 1)


def test_lbfgs_early_stopping_restores_best_iteration():
    X, y = problem()
    X_dev, y_dev = rising_dev(X, y)
    result = fit(X, y, 3, X_dev, y_dev, TrainOptions(loss="softmax", stop_metric="dev-loss", refit=False, optimizer="lbfgs", epochs=50, patience=2))
    assert result.best_epoch == 1 and len(result.history) == 3 and result.stopped_early
    first = fit(X, y, 3, options=TrainOptions(loss="softmax", optimizer="lbfgs", epochs=1))
    np.testing.assert_array_equal(result.coef, first.coef)


@pytest.mark.parametrize("optimizer,batch_size", [("adagrad", 8), ("adam", 8), ("sgd", 64), ("rmsprop", 10_000)])
def test_threads_do_not_change_the_weights(monkeypatch, optimizer, batch_size):
    # With the threshold at 0 every batch, the flush and the dev scoring run on two threads
    # (lintext.kernels, "Threads"); the model and its history must be the same bits as on one.
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK", 0)
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK_OUTSIDE_BATCHES", 0)
    X, y = problem(n=400)
    X_dev, y_dev = problem(n=100, seed=1)
    opts = dict(optimizer=optimizer, batch_size=batch_size, epochs=3, patience=2)
    one = fit(X, y, 3, X_dev, y_dev, TrainOptions(threads=1, **opts))
    two = fit(X, y, 3, X_dev, y_dev, TrainOptions(threads=2, **opts))
    assert one.coef.tobytes() == two.coef.tobytes() and one.intercept.tobytes() == two.intercept.tobytes()
    strip = lambda h: [{k: v for k, v in row.items() if k != "seconds"} for row in h]  # noqa: E731
    assert strip(one.history) == strip(two.history)
    for key in one.feature_stats:
        np.testing.assert_array_equal(one.feature_stats[key], two.feature_stats[key])


def test_float32_mode_halves_weights_and_state_and_converts_x_once(monkeypatch):
    # What the kernel receives: float32 weights and optimizer state (half the bytes of float64),
    # and one float32 copy of X's values made before the first epoch, reused by every epoch.
    seen = []
    real = kernels.run_epoch

    def watch(indptr, indices, data, y, order, params, state, **kwargs):
        seen.append((id(data), data.dtype, params.dtype, state.second_moment.dtype, state.first_moment.nbytes))
        return real(indptr, indices, data, y, order, params, state, **kwargs)

    monkeypatch.setattr(kernels, "run_epoch", watch)
    X, y = problem()
    r32 = fit(X, y, 3, options=TrainOptions(optimizer="adam", epochs=3, patience=0, precision="float32"))
    r64 = fit(X, y, 3, options=TrainOptions(optimizer="adam", epochs=3, patience=0))
    first32, first64 = seen[0], seen[3]
    assert len({s[0] for s in seen[:3]}) == 1  # the same converted array every epoch
    assert first32[1:4] == (np.float32, np.float32, np.float32)
    assert first64[1:4] == (np.float64, np.float64, np.float64)
    assert first32[4] * 2 == first64[4] == 51 * 3 * 8
    assert r32.coef.nbytes * 2 == r64.coef.nbytes


@pytest.mark.parametrize("extra", [{}, {"label_weights": "balanced", "loss": "hinge"}])
def test_refit_is_a_second_run_on_train_and_dev_for_the_best_epoch_count(extra):
    # Definition (engine/trainer.py, "Refit"): the returned weights are those of a run from zero
    # on the training and dev rows together, same options and seed, for the first pass's best
    # epoch count, with no dev rows; the history and best epoch are the first pass's.
    from dataclasses import replace

    X, y = problem(n=400)
    X_tr, y_tr, X_dev, y_dev = X[:320], y[:320], X[320:], y[320:]
    weight, dev_weight = np.linspace(0.5, 1.5, 320), np.linspace(1.5, 0.5, 80)
    options = TrainOptions(learning_rate=0.5, epochs=40, patience=3, **extra)
    result = fit(X_tr, y_tr, 3, X_dev, y_dev, options, sample_weight=weight, dev_weight=dev_weight)
    first = fit(X_tr, y_tr, 3, X_dev, y_dev, replace(options, refit=False), sample_weight=weight, dev_weight=dev_weight)
    alone = fit(sp.vstack([X_tr, X_dev], format="csr"), np.concatenate([y_tr, y_dev]), 3,
                options=replace(options, epochs=first.best_epoch, refit=False),
                sample_weight=np.concatenate([weight, dev_weight]))
    assert 1 < first.best_epoch < 40 and first.refit is None
    assert result.refit == {"epochs": first.best_epoch, "documents": 400}
    timeless = lambda history: [{k: v for k, v in row.items() if k != "seconds"} for row in history]  # noqa: E731
    assert result.best_epoch == first.best_epoch and timeless(result.history) == timeless(first.history)
    np.testing.assert_array_equal(result.dev_coef, first.coef)
    np.testing.assert_array_equal(result.coef, alone.coef)
    np.testing.assert_array_equal(result.intercept, alone.intercept)
    assert not np.allclose(result.coef, first.coef)


def test_no_refit_without_early_stopping():
    X, y = problem()
    no_dev = fit(X, y, 3, options=TrainOptions(epochs=3))
    no_patience = fit(X[:250], y[:250], 3, X[250:], y[250:], TrainOptions(epochs=3, patience=0))
    assert no_dev.refit is None and no_patience.refit is None and no_patience.dev_coef is no_patience.coef
