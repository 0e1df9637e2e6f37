"""Optimizer rules and schedules against values worked by hand from the published algorithms.

The tiny dense problem is f(w) = 1/2 * ||w||^2 from w0 = [1, -2], so the gradient is g = w.
Each hand computation below follows the paper's algorithm line by line; the decimals were
worked with a calculator and are checked to 1e-9 relative.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from lintext.engine import optimizers as optim
from lintext.engine import schedules

W0 = np.array([1.0, -2.0])


def three_steps(rule, lr, w0=W0):
    w = w0.copy()
    state = rule.init_state(w.shape)
    out = []
    for _ in range(3):
        w, state = optim.apply_step(rule, w, w.copy(), state, lr)  # gradient of 1/2 w^2 is w
        out.append(w.copy())
    return np.array(out)


def test_sgd_three_steps():
    # Robbins & Monro (1951) step w <- w - lr*g with lr = 0.5 and g = w: w halves each step.
    np.testing.assert_allclose(three_steps(optim.PlainSGD(), 0.5),
                               [[0.5, -1.0], [0.25, -0.5], [0.125, -0.25]], rtol=1e-15)


def test_adagrad_three_steps():
    # Duchi, Hazan & Singer (2011), diagonal AdaGrad, lr = 0.5, G starts at 0:
    # coord 1: G=1,    w = 1   - 0.5*1/1                = 0.5
    #          G=1.25, w = 0.5 - 0.5*0.5/sqrt(1.25)     = 0.2763932023
    #          G=1.25+0.2763932^2=1.3263932, w = 0.2763932 - 0.5*0.2763932/1.1516915 = 0.1563987361
    # coord 2: G=4,    w = -2   + 0.5*2/2               = -1.5
    #          G=6.25, w = -1.5 + 0.5*1.5/2.5           = -1.2
    #          G=7.69, w = -1.2 + 0.5*1.2/sqrt(7.69)    = -0.9836344662
    # (epsilon = 1e-10 moves these by < 1e-10.)
    expected = [[0.5, -1.5], [0.2763932023, -1.2], [0.1563987361, -0.9836344662]]
    np.testing.assert_allclose(three_steps(optim.AdaGrad(initial_sum_sq=0.0), 0.5), expected, rtol=1e-9)


def test_rmsprop_three_steps():
    # Tieleman & Hinton (2012), lecture 6.5, rho = 0.9, lr = 0.1, epsilon outside the sqrt:
    # coord 1: v = 0.1,                          w = 1 - 0.1/sqrt(0.1)              = 0.6837722440
    #          v = 0.09 + 0.1*0.6837722^2 = 0.1367544, w = 0.6837722 - 0.1*0.6837722/0.3698032 = 0.4988706201
    #          v = 0.9*0.1367544 + 0.1*0.4988706^2 = 0.1479664, w = 0.3691805674
    # coord 2: v = 0.4, w = -2 + 0.1*2/sqrt(0.4) = -1.6837722390; then -1.4738753208, -1.3087178756
    expected = [[0.6837722440, -1.6837722390], [0.4988706201, -1.4738753208], [0.3691805674, -1.3087178756]]
    np.testing.assert_allclose(three_steps(optim.RMSProp(), 0.1), expected, rtol=1e-9)


def test_adam_three_steps():
    # Kingma & Ba (2015), Algorithm 1, alpha = 0.1, beta1 = 0.9, beta2 = 0.999, eps = 1e-8:
    # coord 1, t=1: m = 0.1, v = 0.001, m_hat = 1, v_hat = 1, w = 1 - 0.1/(1 + 1e-8) = 0.900000001
    #               (|step| = alpha up to epsilon); coord 2: -2 + 0.1*2/(2 + 1e-8) = -1.9000000005
    #          t=2: g = 0.9, m = 0.18, v = 0.000999 + 0.00081 = 0.001809,
    #               m_hat = 0.18/0.19 = 0.9473684, v_hat = 0.001809/0.001999 = 0.9049525,
    #               w = 0.9 - 0.1*0.9473684/0.9512899 = 0.8004122297
    #          t=3: w = 0.7015862745
    # coord 2: then -1.8001664866, -1.7006233928
    expected = [[0.900000001, -1.9000000005], [0.8004122297, -1.8001664866], [0.7015862745, -1.7006233928]]
    np.testing.assert_allclose(three_steps(optim.Adam(), 0.1), expected, rtol=1e-9)


def test_adadelta_three_steps():
    # Zeiler (2012), Algorithm 1, rho = 0.95, eps = 1e-6, no learning rate (lr = 1):
    # coord 1: E[g2] = 0.05, dx = -sqrt(0 + 1e-6)/sqrt(0.05 + 1e-6) * 1 = -0.0044720912,
    #          E[dx2] = 0.05*dx^2 = 1.0e-6, w = 0.9955279088
    #          then 0.9910087481, 0.9864645649
    # coord 2: -1.9955278752, -1.9910037209, -1.9864477726
    expected = [[0.9955279088, -1.9955278752], [0.9910087481, -1.9910037209], [0.9864645649, -1.9864477726]]
    np.testing.assert_allclose(three_steps(optim.AdaDelta(), 1.0), expected, rtol=1e-9)


def test_sgd_on_w_squared_lesson():
    # f(w) = w^2 from w = -1 (g = 2w). Common practice (from memory): with lr = 1 the step
    # overshoots to exactly -w, oscillating between -1 and 1; with lr = 0.5 = 1/L it lands
    # on the minimum in one step.
    rule = optim.PlainSGD()
    w, state, seen = np.array([-1.0]), {}, []
    for _ in range(10):
        w, state = optim.apply_step(rule, w, 2 * w, state, 1.0)
        seen.append(float(w[0]))
    assert seen == [1.0, -1.0] * 5
    w, _ = optim.apply_step(rule, np.array([-1.0]), np.array([-2.0]), {}, 0.5)
    assert w[0] == 0.0


def test_update_is_pure():
    grad = np.array([0.3, -0.1])
    for name in optim.STEP_OPTIMIZERS:
        rule = optim.make_rule(name)
        state = rule.init_state(grad.shape)
        before = {k: v.copy() for k, v in state.items()}
        optim.apply_step(rule, np.array([0.2, 0.4]), grad, state, 0.1, l2=0.1, l1=0.01)
        for k in state:
            np.testing.assert_array_equal(state[k], before[k])


def test_proximal_l2_step_by_hand():
    # w <- (w - eta*g)/(1 + eta*l2): w = 1, g = 0.5, eta = 0.1, l2 = 1 -> 0.95/1.1.
    w, _ = optim.apply_step(optim.PlainSGD(), np.array([1.0]), np.array([0.5]), {}, 0.1, l2=1.0)
    assert w[0] == pytest.approx(0.95 / 1.1, rel=1e-15)
    # AdaGrad uses its own step eta = lr/(sqrt(G)+eps) with G including this gradient:
    # G = 0.25, eta = 0.1/0.5 = 0.2 -> (1 - 0.2*0.5)/(1 + 0.2*1) = 0.9/1.2 = 0.75.
    w, _ = optim.apply_step(optim.AdaGrad(), np.array([1.0]), np.array([0.5]),
                            {"sum_sq_grad": np.zeros(1)}, 0.1, l2=1.0)
    assert w[0] == pytest.approx(0.75, rel=1e-9)


@pytest.mark.parametrize("name", ["sgd", "adagrad"])
def test_proximal_fixed_point_minimises_regularised_objective(name):
    # Loss 1/2 (w - 3)^2 plus (l2/2) w^2 with l2 = 0.5: optimum (w - 3) + 0.5 w = 0 -> w = 2
    # (worked by hand). Iterating the prox step must converge there.
    rule = optim.make_rule(name)
    w, state = np.array([0.0]), rule.init_state((1,))
    for _ in range(3000):
        w, state = optim.apply_step(rule, w, w - 3.0, state, 0.3, l2=0.5)
    assert w[0] == pytest.approx(2.0, abs=1e-6)


@pytest.mark.parametrize("name", ["rmsprop", "adadelta"])
def test_catch_up_equals_zero_gradient_steps_for_decaying_averages(name):
    # Without L2 a missed step of RMSProp/AdaDelta is a step with g = 0: averages times rho,
    # update 0. catch_up does it in closed form (rho^k).
    rule = optim.make_rule(name)
    w, state = np.array([0.7, -0.2]), rule.init_state((2,))
    w, state = optim.apply_step(rule, w, np.array([0.4, -1.0]), state, 0.1)
    dense_w, dense_state = w, state
    for _ in range(5):
        dense_w, dense_state = optim.apply_step(rule, dense_w, np.zeros(2), dense_state, 0.1)
    lazy_w, lazy_state = optim.catch_up(rule, w, state, [0.1] * 5)
    np.testing.assert_allclose(lazy_w, dense_w, rtol=1e-15)
    for k in state:
        np.testing.assert_allclose(lazy_state[k], dense_state[k], rtol=1e-13)


def test_adam_catch_up_decays_moments_but_keeps_weight_and_count():
    # Documented approximation: moments decay as beta^k, the weight and count stay put.
    rule = optim.Adam()
    w, state = optim.apply_step(rule, np.array([0.5]), np.array([1.0]), rule.init_state((1,)), 0.1)
    new_w, new_state = optim.catch_up(rule, w, state, [0.1] * 4)
    assert new_w[0] == w[0]
    assert new_state["first_moment"][0] == pytest.approx(0.1 * 0.9**4, rel=1e-14)
    assert new_state["second_moment"][0] == pytest.approx(0.001 * 0.999**4, rel=1e-14)
    assert new_state["update_count"][0] == 1


def test_sgd_catch_up_shrinks_by_each_missed_step():
    # By hand: lrs 0.1 and 0.2, l2 = 1 -> w / (1.1 * 1.2).
    w, _ = optim.catch_up(optim.PlainSGD(), np.array([2.0]), {}, [0.1, 0.2], l2=1.0)
    assert w[0] == pytest.approx(2.0 / 1.32, rel=1e-15)


def test_schedules_by_hand():
    assert schedules.schedule_learning_rate("constant", 0.3, 5.0, 100) == 0.3
    assert schedules.schedule_learning_rate("inverse", 1.0, 0.5, 2) == 0.5          # 1/(1 + 0.5*2)
    assert schedules.schedule_learning_rate("inverse-sqrt", 1.0, 0.5, 6) == 0.5     # 1/sqrt(1 + 0.5*6)
    assert schedules.schedule_learning_rate("plateau", 0.3, 5.0, 100) == 0.3
    assert schedules.schedule_learning_rate(schedules.SCHEDULE_INVERSE, 2.0, 1.0, 3) == 0.5
    assert schedules.plateau_update(0.4, improved=False, factor=0.5) == 0.2
    assert schedules.plateau_update(0.4, improved=True, factor=0.5) == 0.4


def test_effective_steps_by_hand():
    # AdaGrad: lr/(sqrt(G)+eps) with G = 4 -> 0.5*0.1 = 0.05.
    assert optim.AdaGrad().effective_step({"sum_sq_grad": np.array([4.0])}, 0.1)[0] == pytest.approx(0.05)
    # Adam with its own count n = 1: v_hat = v/(1 - 0.999) -> v = 0.001*4 gives v_hat = 4, step 0.1/2.
    st = {"first_moment": np.zeros(1), "second_moment": np.array([0.004]), "update_count": np.array([1])}
    assert optim.Adam().effective_step(st, 0.1)[0] == pytest.approx(0.05, rel=1e-6)
    # AdaDelta: lr*sqrt(E[dx2]+eps)/sqrt(E[g2]+eps) = sqrt(0.01)/sqrt(1) = 0.1 (eps = 0 here).
    st = {"second_moment": np.array([1.0]), "avg_sq_update": np.array([0.01])}
    assert optim.AdaDelta(epsilon=0.0).effective_step(st, 1.0)[0] == pytest.approx(0.1)


def test_make_rule_checks_hyperparameters():
    assert optim.make_rule("adam", beta1=0.5).beta1 == 0.5
    assert optim.make_rule("rmsprop", rho=0.5).rho == 0.5
    with pytest.raises(ValueError, match="beta1"):
        optim.make_rule("sgd", beta1=0.5)
    # One registry: every optimizer with a learning rate has a rule, a kernel code and a default rate;
    # codes are distinct; each rule's hyperparameters are its dataclass fields.
    codes = [spec.code for spec in optim.OPTIMIZERS.values() if spec.code is not None]
    assert len(codes) == len(set(codes)) == len(optim.STEP_OPTIMIZERS) == 6
    assert all(optim.OPTIMIZERS[n].rule is not None and optim.OPTIMIZERS[n].default_learning_rate > 0
               for n in optim.STEP_OPTIMIZERS)
    assert optim.OPTIMIZERS["adadelta"].hyperparameters == {"rho": 0.95, "epsilon": 1e-6}  # Zeiler 2012's defaults
    assert optim.OPTIMIZERS["lbfgs"].hyperparameters == {} and not optim.OPTIMIZERS["lbfgs"].has_learning_rate
    assert math.isclose(optim.AdaGrad().epsilon, 1e-10)
