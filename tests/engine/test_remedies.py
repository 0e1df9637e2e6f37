"""Remedies for rare features, each against its published definition on small problems.

Sources: Polyak & Juditsky (1992) for averaging (the mean of the iterates); Duchi, Hazan &
Singer (2011) for AdaGrad's delta; Tsuruoka, Tsujii & Ananiadou (2009) for the cumulative L1
penalty; McMahan et al. (2013), Algorithm 1, for FTRL-Proximal; scikit-learn's
``compute_class_weight`` for balanced label weights. The NumPy replays of the papers are in
:mod:`lintext.engine.reference`.
"""

from __future__ import annotations

import hashlib
import math

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.utils.class_weight import compute_class_weight

from lintext.engine import kernels, schedules
from lintext.engine import optimizers as optim
from lintext.engine.options import TrainOptions
from lintext.engine.reference import adagrad_paper_replay, cumulative_l1_replay, ftrl_replay, reference_epoch
from lintext.engine.trainer import fit, label_weight_vector
from lintext.errors import ConfigError, DivergenceError

from .test_kernels import LRS, random_problem



def kernel_run(name, X, y, epochs=3, batch_size=2, lazy=True, l2=0.0, l1=0.0, schedule="constant", decay=0.0,
               average=False, avg_from=0, weights=None, n_labels=3, loss=0, seed=1, initial_sum_sq=None):
    code = optim.OPTIMIZERS[name].code
    hyper = optim.kernel_hyperparameters(optim.make_rule(name))
    params = np.zeros((X.shape[1] + 1, n_labels))
    state = kernels.KernelState.new(X.shape[1], n_labels, code, initial_sum_sq=initial_sum_sq,
                                    l1=l1 > 0 and name == "sgd", average=average)
    rng = np.random.default_rng(seed)
    orders = []
    for _ in range(epochs):
        order = rng.permutation(X.shape[0]).astype(np.int64)
        orders.append(order)
        _, finite = kernels.run_epoch(
            X.indptr, X.indices, X.data, y, order, params, state, loss_code=loss, optimizer_code=code,
            schedule_code=schedules.SCHEDULE_CODES[schedule], learning_rate=LRS[name], decay=decay, l2=l2, l1=l1,
            batch_size=batch_size, lazy=lazy, example_weight=weights, avg_from=avg_from, **hyper)
        assert finite
    return params, state, orders


# --------------------------------------------------------------------------- remedies off


def fingerprint_problem():
    rng = np.random.default_rng(0)
    X = sp.random(300, 50, density=0.1, format="csr", random_state=0, data_rvs=lambda k: rng.random(k) + 0.5)
    W = rng.normal(size=(50, 3)) * 2
    y = (X @ W + rng.gumbel(size=(300, 3))).argmax(axis=1)
    X = X.multiply(1 / np.maximum(1e-9, np.sqrt(X.multiply(X).sum(axis=1))).A).tocsr()
    return X[:250], y[:250], X[250:], y[250:]


# SHA-256 (first 16 hex digits) of coef and intercept bytes, computed with the kernels as they were
# before the remedies were added (commit 7964460), on this machine kind (x86-64, numba 0.6x):
# with every remedy off, the weights must be the same bits.
BEFORE_REMEDIES = {
    "sgd-softmax-0.0": "0c7a6a017ce8af67", "sgd-softmax-0.01": "6626d1543a694ccf", "sgd-hinge-0.0": "67e20f4c95f77761",
    "sgd-hinge-0.01": "ea4271a77cdccb79", "adagrad-softmax-0.0": "3631e84724dcc856",
    "adagrad-softmax-0.01": "a22a7b3324da6cdc", "adagrad-hinge-0.0": "144620c5616b1a3f",
    "adagrad-hinge-0.01": "cd9b59376ba0d45d", "adadelta-softmax-0.0": "9cabd45bfb63bbe5",
    "adadelta-softmax-0.01": "d52b424134c0ebfe", "adadelta-hinge-0.0": "e4369814562c69db",
    "adadelta-hinge-0.01": "89dc0a4f13f6eb0e", "rmsprop-softmax-0.0": "a300e64dcf2eb762",
    "rmsprop-softmax-0.01": "b0c9b4c9d82c3e6b", "rmsprop-hinge-0.0": "777285da2065fa2c",
    "rmsprop-hinge-0.01": "e34c003b21537a6b", "adam-softmax-0.0": "f0b69bf11c4037e7",
    "adam-softmax-0.01": "101f266f79bb05be", "adam-hinge-0.0": "00875e86e6e786e9", "adam-hinge-0.01": "56f12cd21ffca3d7",
}


def test_with_every_remedy_off_the_weights_are_the_bits_of_before():
    X, y, Xd, yd = fingerprint_problem()
    for key, expected in BEFORE_REMEDIES.items():
        opt, loss, l2 = key.split("-")
        rate = {"sgd": 0.5, "adagrad": 0.2}.get(opt)  # (0.2: AdaGrad's default then)
        options = TrainOptions(optimizer=opt, learning_rate=rate, loss=loss, l2=float(l2),
                               epochs=4, batch_size=4, patience=2, initial_sum_sq=0.0 if opt == "adagrad" else None,
                               average=0, stop_metric="dev-loss", refit=False)
        r = fit(X, y, 3, Xd, yd, options)
        assert hashlib.sha256(r.coef.tobytes() + r.intercept.tobytes()).hexdigest()[:16] == expected, key


# --------------------------------------------------------------------------- averaging


@pytest.mark.parametrize("name,schedule,l2,loss", [("sgd", "constant", 0.0, 0), ("sgd", "constant", 0.05, 0),
                                                   ("sgd", "inverse", 0.05, 0), ("adagrad", "constant", 0.0, 0),
                                                   ("adagrad", "constant", 0.05, 0), ("ftrl", "constant", 0.05, 0),
                                                   ("sgd", "constant", 0.0, 1), ("adagrad", "constant", 0.0, 1)])
@pytest.mark.parametrize("avg_from", [0, 17])
def test_lazy_average_equals_dense_average(name, schedule, l2, loss, avg_from):
    # Exactness claimed for SGD, AdaGrad and FTRL (lintext.engine.state): lazy iterates equal dense
    # ones, and the closed-form sums over missed steps (L2 shrinkage included) equal the dense sum.
    X, y = random_problem(n=30, n_features=40, density=0.08, seed=5)
    decay = 0.1 if schedule == "inverse" else 0.0
    # loss 1, the hinge: SGD and AdaGrad step only the labels some example moves (the active ones)
    lazy_p, lazy_s, _ = kernel_run(name, X, y, l2=l2, schedule=schedule, decay=decay, average=True, avg_from=avg_from,
                                   loss=loss, n_labels=5)
    dense_p, dense_s, _ = kernel_run(name, X, y, lazy=False, l2=l2, schedule=schedule, decay=decay, average=True,
                                     avg_from=avg_from, loss=loss, n_labels=5)
    np.testing.assert_allclose(lazy_p, dense_p, rtol=0, atol=1e-12)
    # without L2, SGD and AdaGrad keep their lazy average by steps (state.averages_by_steps):
    # the sum of the weights is then T * w - avg_sum, equal to the dense sum to rounding
    assert lazy_s.average_steps == (name in ("sgd", "adagrad") and l2 == 0.0 and avg_from == 0)
    assert not dense_s.average_steps
    np.testing.assert_allclose(lazy_s.weight_sum(lazy_p), dense_s.avg_sum, rtol=1e-11, atol=1e-12)
    assert np.abs(dense_s.avg_sum).max() > 1e-2


@pytest.mark.parametrize("name", ["sgd", "adagrad", "adadelta", "rmsprop", "adam", "ftrl"])
def test_average_matches_the_specification_for_every_rule(name):
    # Oracle: reference_epoch adds the weights after every step, missed steps caught up one at a
    # time: the average of the lazy iterates, whatever the rule.
    X, y = random_problem(n=24, n_features=30, density=0.1, seed=2)
    params, state, orders = kernel_run(name, X, y, l2=0.05, average=True, avg_from=5)
    rule = optim.make_rule(name)
    ref_p, ref_s = np.zeros_like(params), rule.init_state(params.shape)
    last, step, avg = np.zeros(params.shape[0], dtype=np.int64), 0, np.zeros_like(params)
    for order in orders:
        _, step, _, _ = reference_epoch(X, y, order, ref_p, ref_s, last, step, rule, "softmax", LRS[name], "constant",
                                        0.0, 0.05, 2, True, avg_sum=avg, avg_from=5)
    np.testing.assert_allclose(params, ref_p, rtol=0, atol=1e-10)
    np.testing.assert_allclose(state.weight_sum(params), avg, rtol=1e-9, atol=1e-10)


def test_trainer_average_is_the_mean_of_the_iterates():
    # Polyak & Juditsky (1992): the averaged estimate is the arithmetic mean of the iterates. With
    # full batches there is one step per epoch, so averaging from epoch 2 over 4 epochs is the mean
    # of the weights after epochs 2, 3 and 4 of the same run without averaging.
    X, y = random_problem(n=60, n_features=20, density=0.2, seed=3)
    base = dict(optimizer="adagrad", batch_size=1000, patience=0)
    each = [fit(X, y, 3, options=TrainOptions(epochs=e, average=0, **base)) for e in (2, 3, 4)]
    averaged = fit(X, y, 3, options=TrainOptions(epochs=4, average=2, **base))
    np.testing.assert_allclose(averaged.coef, np.mean([r.coef for r in each], axis=0), rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(averaged.intercept, np.mean([r.intercept for r in each], axis=0), rtol=1e-12, atol=1e-14)


def test_averaged_weights_drive_dev_scores_and_early_stopping():
    # The dev loss of the best epoch is that of the returned (averaged) weights, scored here by
    # SciPy's log-softmax; and they are not the raw iterates (a run without averaging differs).
    from dataclasses import replace

    from scipy.special import log_softmax

    X, y = random_problem(n=200, n_features=30, density=0.2, seed=4)
    options = TrainOptions(epochs=6, average=1, patience=3, learning_rate=0.3, loss="softmax", stop_metric="dev-loss",
                           refit=False)
    result = fit(X[:150], y[:150], 3, X[150:], y[150:], options)
    raw = fit(X[:150], y[:150], 3, X[150:], y[150:], replace(options, average=0))
    best = result.history[result.best_epoch - 1]
    scores = np.asarray(X[150:] @ result.coef) + result.intercept
    assert -log_softmax(scores, axis=1)[np.arange(50), y[150:]].mean() == pytest.approx(best["dev_loss"], rel=1e-12)
    assert not np.allclose(result.coef, raw.coef)
    assert [r["dev_loss"] for r in result.history] != [r["dev_loss"] for r in raw.history]


# --------------------------------------------------------------------------- AdaGrad's start


def test_adagrad_matches_the_paper_and_its_start_scales_the_first_step():
    # Duchi, Hazan & Singer (2011): with the accumulator started at 0, our rule is the paper's
    # diagonal update with delta = epsilon, step for step.
    grads = np.array([0.02, -0.5, 0.1, 0.0, 0.3])
    paper_rule = optim.AdaGrad(epsilon=0.1, initial_sum_sq=0.0)
    rule, state, ours = paper_rule, paper_rule.init_state((1,)), []
    for g in grads:
        delta, state = rule.update(np.array([g]), state, 0.2)
        ours.append(delta[0])
    np.testing.assert_allclose(ours, adagrad_paper_replay(grads, 0.2, 0.1), rtol=1e-15)
    # Started at delta^2: the denominator sqrt(delta^2 + G) lies between (delta + sqrt G)/sqrt(2)
    # and delta + sqrt(G), the paper's, for every step ((a + b)^2 <= 2(a^2 + b^2)).
    smooth, state, ours = optim.AdaGrad(initial_sum_sq=0.01), optim.AdaGrad(initial_sum_sq=0.01).init_state((1,)), []
    for g in grads:
        delta, state = smooth.update(np.array([g]), state, 0.2)
        ours.append(delta[0])
    paper = adagrad_paper_replay(grads, 0.2, 0.1)
    nonzero = grads != 0
    ratio = np.asarray(ours)[nonzero] / paper[nonzero]
    assert np.all(ratio >= 1 - 1e-12) and np.all(ratio <= math.sqrt(2) + 1e-12)
    # First step by hand: -0.2 * 0.02 / sqrt(0.01 + 0.0004) = -0.039223; without the start it is
    # -0.2 * 0.02 / 0.02 = -0.2 whatever the gradient.
    assert ours[0] == pytest.approx(-0.2 * 0.02 / math.sqrt(0.0104), rel=1e-8)  # (epsilon 1e-10 aside)


def test_adagrad_start_in_the_kernel_matches_the_rule():
    X, y = random_problem(seed=6)
    params, state, orders = kernel_run("adagrad", X, y, initial_sum_sq=0.1)
    rule = optim.AdaGrad(initial_sum_sq=0.1)
    ref_p, ref_s = np.zeros_like(params), rule.init_state(params.shape)
    last, step = np.zeros(params.shape[0], dtype=np.int64), 0
    for order in orders:
        _, step, _, _ = reference_epoch(X, y, order, ref_p, ref_s, last, step, rule, "softmax", LRS["adagrad"],
                                        "constant", 0.0, 0.0, 2, True)
    np.testing.assert_allclose(params, ref_p, rtol=0, atol=1e-12)
    np.testing.assert_allclose(state.sum_sq_grad, ref_s["sum_sq_grad"], rtol=0, atol=1e-12)
    assert state.sum_sq_grad.min() >= 0.1


# --------------------------------------------------------------------------- L1 and FTRL


@pytest.mark.parametrize("schedule,decay", [("constant", 0.0), ("inverse", 0.05)])
def test_cumulative_l1_penalty_matches_the_paper(schedule, decay):
    # Tsuruoka, Tsujii & Ananiadou (2009), Figure 2, replayed literally: one example per step,
    # the penalty applied to the example's features after their gradient step.
    X, y = random_problem(n=30, n_features=25, density=0.15, seed=7)
    l1 = 0.01
    params, state, orders = kernel_run("sgd", X, y, batch_size=1, l1=l1, schedule=schedule, decay=decay)
    W, b, q, u, step = np.zeros((25, 3)), np.zeros(3), np.zeros((25, 3)), 0.0, 0
    for order in orders:
        u, step = cumulative_l1_replay(X, y, order, W, b, q, u, LRS["sgd"], l1, schedule=schedule, decay=decay, step=step)
    np.testing.assert_allclose(params[:-1], W, rtol=0, atol=1e-12)
    np.testing.assert_allclose(params[-1], b, rtol=0, atol=1e-12)
    np.testing.assert_allclose(state.l1_applied[:-1], q, rtol=0, atol=1e-12)
    assert state.l1_total == pytest.approx(u, rel=1e-12)
    assert np.sum(W == 0) > 5 and np.sum(W != 0) > 5  # some weights were clipped to exactly zero


@pytest.mark.parametrize("lambda1,lambda2", [(0.0, 0.0), (0.05, 0.1), (1.5, 0.0)])
def test_ftrl_matches_algorithm_1(lambda1, lambda2):
    # McMahan et al. (2013), Algorithm 1, per coordinate, replayed with one example per step.
    X, y = random_problem(n=30, n_features=25, density=0.15, seed=8)
    params, state, orders = kernel_run("ftrl", X, y, batch_size=1, l1=lambda1, l2=lambda2)
    z, n = np.zeros((26, 3)), np.zeros((26, 3))
    for order in orders:
        w = ftrl_replay(X, y, order, z, n, LRS["ftrl"], 1.0, lambda1, lambda2)
    np.testing.assert_allclose(params, w, rtol=0, atol=1e-12)
    np.testing.assert_allclose(state.shifted_grad_sum, z, rtol=0, atol=1e-12)
    np.testing.assert_allclose(state.sum_sq_grad, n, rtol=0, atol=1e-12)
    if lambda1 >= 1.0:
        assert np.sum(params[:-1] == 0) > 10  # lambda_1 keeps features exactly at zero
    dense, _, _ = kernel_run("ftrl", X, y, batch_size=1, l1=lambda1, l2=lambda2, lazy=False)
    assert dense.tobytes() == params.tobytes()  # lazy == dense, bit for bit: a zero gradient changes nothing


def test_l1_is_refused_where_it_has_no_meaning():
    with pytest.raises(ConfigError, match="--l1"):
        TrainOptions(optimizer="adam", l1=0.1).validate()
    TrainOptions(optimizer="sgd", l1=1e-4, l2=1e-4).validate()


# --------------------------------------------------------------------------- weights


def test_balanced_label_weights_are_scikit_learns():
    y = np.array([0, 0, 0, 0, 1, 1, 2, 2, 2, 2, 2, 2, 2])
    ours = label_weight_vector("balanced", y, 3)
    theirs = compute_class_weight("balanced", classes=np.arange(3), y=y)  # n / (K * n_k)
    np.testing.assert_allclose(ours, theirs, rtol=1e-15)
    np.testing.assert_allclose(label_weight_vector("b=2.5", y, 3, ["a", "b", "c"]), [1.0, 2.5, 1.0])
    with pytest.raises(ConfigError, match="--label-weights"):
        label_weight_vector("d=2", y, 3, ["a", "b", "c"])
    with pytest.raises(ConfigError, match="--label-weights"):
        TrainOptions(label_weights="a=0").validate()


@pytest.mark.parametrize("name", ["sgd", "adagrad", "adam", "ftrl"])
def test_example_weights_in_the_kernel_match_the_specification(name):
    # reference_epoch multiplies each example's loss and gradient by its weight.
    X, y = random_problem(n=24, seed=9)
    weights = np.random.default_rng(0).uniform(0.2, 3.0, size=24)
    params, state, orders = kernel_run(name, X, y, weights=weights, batch_size=3)
    rule = optim.make_rule(name)
    ref_p, ref_s = np.zeros_like(params), rule.init_state(params.shape)
    last, step = np.zeros(params.shape[0], dtype=np.int64), 0
    for order in orders:
        _, step, _, _ = reference_epoch(X, y, order, ref_p, ref_s, last, step, rule, "softmax", LRS[name], "constant",
                                        0.0, 0.0, 3, True, example_weight=weights)
    np.testing.assert_allclose(params, ref_p, rtol=0, atol=1e-10)


def test_weight_two_is_counting_an_example_twice_in_the_loss():
    # The weighted loss is sum(w_i * loss_i) / sum(w_i): with weights 2 and 1 it equals the mean
    # over the rows with the first repeated (worked example of the definition).
    # Checked at the second epoch of full-batch steps, whose losses are taken at the weights after
    # the first (read from a one-epoch run), by SciPy's log-softmax over the rows with the first repeated.
    from scipy.special import log_softmax

    X, y = random_problem(n=10, seed=10)
    w = np.ones(10)
    w[0] = 2.0
    options = TrainOptions(epochs=2, patience=0, batch_size=1000, loss="softmax", average=0, learning_rate=0.5)
    weighted = fit(X, y, 3, options=options, sample_weight=w)
    after_one = fit(X, y, 3, options=TrainOptions(**{**options.to_json(), "epochs": 1}), sample_weight=w)
    rows = np.r_[0, np.arange(10)]
    S = np.asarray(X[rows] @ after_one.coef) + after_one.intercept
    expected = -log_softmax(S, axis=1)[np.arange(11), y[rows]].mean()
    assert abs(expected - np.log(3)) > 1e-3  # not the all-zero model's loss, which any weights give
    assert weighted.history[1]["train_loss"] == pytest.approx(expected, rel=1e-12)
    assert weighted.history[1]["weighted_loss"] is True


# --------------------------------------------------------------------------- divergence


def test_loss_above_the_untrained_model_is_divergence():
    rng = np.random.default_rng(0)
    X = sp.csr_matrix(rng.normal(size=(200, 5)) * 3)
    y = rng.integers(0, 3, size=200)
    with pytest.raises(DivergenceError, match="above the untrained model") as err:
        fit(X, y, 3, options=TrainOptions(optimizer="sgd", learning_rate=30.0, epochs=5, patience=0))
    assert err.value.epoch == 2 and "learning rate 30" in str(err.value)
