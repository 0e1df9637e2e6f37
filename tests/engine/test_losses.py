"""Losses against finite differences (SciPy), scikit-learn's metrics and values worked by hand."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.optimize import check_grad
from scipy.special import expit
from sklearn.metrics import hinge_loss, log_loss

from lintext.engine import losses


def random_problem(n=40, n_features=12, n_labels=4, seed=0):
    rng = np.random.default_rng(seed)
    X = sp.random(n, n_features, density=0.3, format="csr", random_state=seed,
                  data_rvs=lambda k: rng.normal(size=k))
    y = rng.integers(0, n_labels, size=n)
    return X, y, rng


@pytest.mark.parametrize("loss", ["softmax", "hinge"])
def test_score_gradient_matches_finite_differences(loss):
    # Source: scipy.optimize.check_grad (forward differences). Random scores keep the hinge
    # away from its kinks (probability 1).
    rng = np.random.default_rng(1)
    S0 = rng.normal(size=(15, 4))
    y = rng.integers(0, 4, size=15)
    f = lambda s: losses.scores_loss_grad(loss, s.reshape(S0.shape), y)[0]  # noqa: E731
    g = lambda s: losses.scores_loss_grad(loss, s.reshape(S0.shape), y)[1].ravel()  # noqa: E731
    assert check_grad(f, g, S0.ravel()) <= 1e-6
    assert np.abs(g(S0.ravel())).max() > 1e-3  # a real gradient, not zeros


@pytest.mark.parametrize("l2", [0.0, 0.3])
@pytest.mark.parametrize("loss", ["softmax", "hinge"])
def test_objective_gradient_matches_finite_differences(loss, l2):
    # Source: scipy.optimize.check_grad on the flattened [W, b].
    X, y, rng = random_problem()
    F, L = X.shape[1], 4
    theta0 = rng.normal(size=F * L + L)

    def unpack(theta):
        return theta[: F * L].reshape(F, L), theta[F * L:]

    f = lambda th: losses.objective(loss, X, y, *unpack(th), l2)[0]  # noqa: E731

    def g(th):
        _, gW, gb = losses.objective(loss, X, y, *unpack(th), l2)
        return np.concatenate([gW.ravel(), gb])

    assert check_grad(f, g, theta0) <= 1e-6


def test_softmax_matches_sklearn_log_loss():
    # Source: sklearn.metrics.log_loss on the softmax probabilities.
    rng = np.random.default_rng(2)
    S = rng.normal(size=(30, 5)) * 3
    y = rng.integers(0, 5, size=30)
    P = np.exp(S - S.max(axis=1, keepdims=True))
    P /= P.sum(axis=1, keepdims=True)
    assert losses.mean_loss("softmax", S, y) == pytest.approx(log_loss(y, P, labels=range(5)), rel=1e-12)


def test_two_label_softmax_is_binary_logistic_loss():
    # Source: sklearn.metrics.log_loss with p(y=1) = sigmoid(s1 - s0).
    rng = np.random.default_rng(3)
    S = rng.normal(size=(50, 2)) * 2
    y = rng.integers(0, 2, size=50)
    expected = log_loss(y, expit(S[:, 1] - S[:, 0]), labels=[0, 1])
    assert losses.mean_loss("softmax", S, y) == pytest.approx(expected, rel=1e-12)


def test_two_label_hinge_is_binary_hinge():
    # Source: sklearn.metrics.hinge_loss with the decision value s1 - s0 (labels 0/1 -> -1/+1).
    rng = np.random.default_rng(4)
    S = rng.normal(size=(50, 2))
    y = rng.integers(0, 2, size=50)
    assert losses.mean_loss("hinge", S, y) == pytest.approx(hinge_loss(y, S[:, 1] - S[:, 0]), rel=1e-12)


def test_values_worked_by_hand():
    # Softmax at equal scores: log(3). Crammer-Singer: 1 + max(2, 0.5) - 1 = 2, with
    # gradient +1 at the rival (label 1), -1 at the true label; mean over 2 rows with the
    # second row at margin 1 + 0 - 3 < 0 (loss 0, gradient 0).
    assert losses.mean_loss("softmax", np.zeros((1, 3)), np.array([2])) == pytest.approx(math.log(3))
    S = np.array([[1.0, 2.0, 0.5], [3.0, 0.0, -1.0]])
    value, dS = losses.scores_loss_grad("hinge", S, np.array([0, 0]))
    assert value == pytest.approx(1.0)
    np.testing.assert_array_equal(dS, [[-0.5, 0.5, 0.0], [0.0, 0.0, 0.0]])
    # Ties among rivals go to the lowest label index (our convention, documented).
    _, dS = losses.scores_loss_grad("hinge", np.zeros((1, 3)), np.array([0]))
    np.testing.assert_array_equal(dS, [[-1.0, 1.0, 0.0]])


def test_objective_adds_half_l2_norm_and_leaves_bias_alone():
    # By hand: W = 0 except W[0,0] = 2, l2 = 0.5 -> penalty (0.5/2)*4 = 1; b is not penalised.
    X, y, _ = random_problem(n=10, n_features=3, n_labels=2)
    W = np.zeros((3, 2))
    b = np.array([5.0, -5.0])
    base = losses.objective("softmax", X, y, W, b, 0.0)[0]
    W[0, 0] = 2.0
    S = X @ W + b
    assert losses.objective("softmax", X, y, W, b, 0.5)[0] == pytest.approx(losses.mean_loss("softmax", S, y) + 1.0)
    assert losses.objective("softmax", X, y, np.zeros((3, 2)), b, 0.5)[0] == pytest.approx(base)


def test_unknown_loss_is_rejected():
    with pytest.raises(ValueError, match="unknown loss"):
        losses.loss_code("squared")
