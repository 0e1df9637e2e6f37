"""Compiled epoch kernel versus the NumPy specification in lintext.optim / lintext.losses.

The oracle is :func:`lintext.engine.reference.reference_epoch`, a plain NumPy loop over the
same batches built only from the rules of ``lintext.engine.optimizers``.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from lintext.engine import kernels, losses, numba_setup
from lintext.engine import optimizers as optim
from lintext.engine import schedules
from lintext.engine.reference import reference_epoch
from lintext.engine.compiled import schedule_lr

OPTIMIZERS = ["sgd", "adagrad", "adadelta", "rmsprop", "adam", "ftrl"]
LRS = {"sgd": 0.3, "adagrad": 0.3, "adadelta": 1.0, "rmsprop": 0.01, "adam": 0.02, "ftrl": 0.3}


def run_epoch(*args, optimizer_code, **kwargs):
    """``kernels.run_epoch`` with the rule's own hyperparameters (the registry's defaults) unless given."""
    hyper = optim.kernel_hyperparameters(optim.BY_CODE[optimizer_code].make_rule())
    return kernels.run_epoch(*args, optimizer_code=optimizer_code, **{**hyper, **kwargs})


def random_problem(n=24, n_features=9, n_labels=3, density=0.3, seed=0):
    rng = np.random.default_rng(seed)
    X = sp.random(n, n_features, density=density, format="csr", random_state=seed,
                  data_rvs=lambda k: rng.normal(size=k))
    y = rng.integers(0, n_labels, size=n).astype(np.int64)
    return X, y


def run_both(name, loss, batch_size, lazy, l2, schedule="constant", decay=0.0, epochs=2, seed=0,
             X=None, y=None, n_labels=3):
    if X is None:
        X, y = random_problem(seed=seed, n_labels=n_labels)
    n, n_features = X.shape
    rule = optim.make_rule(name)
    code = optim.OPTIMIZERS[name].code
    hp = optim.kernel_hyperparameters(rule)
    lr0 = LRS[name]
    # kernel
    params_k = np.zeros((n_features + 1, n_labels))
    ks = kernels.KernelState.new(n_features, n_labels, code)
    # reference
    params_r = np.zeros((n_features + 1, n_labels))
    rs = rule.init_state(params_r.shape)
    last = np.zeros(n_features + 1, dtype=np.int64)
    step = 0
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(epochs):
        order = rng.permutation(n).astype(np.int64)
        lk, finite = run_epoch(
            X.indptr, X.indices, X.data, y, order, params_k, ks, loss_code=losses.LOSS_CODES[loss],
            optimizer_code=code, schedule_code=schedules.SCHEDULE_CODES[schedule], learning_rate=lr0,
            decay=decay, l2=l2, batch_size=batch_size, lazy=lazy, **hp)
        assert finite
        lr_, step, cnt, ab = reference_epoch(X, y, order, params_r, rs, last, step, rule, loss, lr0,
                                             schedule, decay, l2, batch_size, lazy)
        out.append((lk, lr_, cnt, ab))
    return params_k, ks, params_r, rs, step, out


@pytest.mark.parametrize("batch_size", [1, 4])
@pytest.mark.parametrize("loss", ["softmax", "hinge"])
@pytest.mark.parametrize("name", OPTIMIZERS)
def test_kernel_matches_numpy_specification(name, loss, batch_size):
    # Oracle: reference_epoch (optim.py rules). Lazy mode, L2 on, SGD with the inverse schedule.
    schedule, decay = ("inverse", 0.1) if name == "sgd" else ("constant", 0.0)
    pk, ks, pr, rs, step, out = run_both(name, loss, batch_size, lazy=True, l2=0.05,
                                         schedule=schedule, decay=decay)
    assert ks.step == step == 2 * -(-24 // batch_size)
    np.testing.assert_allclose(pk, pr, rtol=0, atol=1e-10)
    assert np.abs(pk).max() > 1e-3  # it did train
    for key, arr in rs.items():
        kernel_arr = ks.rule_state(optim.OPTIMIZERS[name].code)[key]
        np.testing.assert_allclose(np.broadcast_to(kernel_arr, arr.shape), arr, rtol=0, atol=1e-10)
    stat_count = np.zeros_like(ks.stat_update_count)
    stat_abs = np.zeros_like(ks.stat_abs_update_sum)
    for lk, lr_, cnt, ab in out:
        assert lk == pytest.approx(lr_, abs=1e-10)
        stat_count += cnt
        stat_abs += ab
    np.testing.assert_array_equal(ks.stat_update_count, stat_count)
    np.testing.assert_allclose(ks.stat_abs_update_sum, stat_abs, rtol=0, atol=1e-10)


@pytest.mark.parametrize("l2", [0.0, 0.05], ids=["no-l2", "l2"])
@pytest.mark.parametrize("name", OPTIMIZERS)
def test_kernel_matches_specification_through_long_gaps_with_deferred_flush(name, l2):
    # The path the trainer takes: run_epoch(..., flush=False) every epoch, one kernels.flush at
    # the end. Rows 0-3 sit out epochs 2 to 5 (orders may leave rows out), so their features miss
    # more than two epochs of steps: beyond the kernels' table of powers, which is then computed
    # directly. Oracle: reference_epoch (lintext.engine.reference), which catches up one missed
    # step at a time; weights, state and statistics must agree.
    X, y = random_problem(n=24, n_features=40, density=0.08, seed=5)
    n, n_features = X.shape
    rule = optim.make_rule(name)
    code = optim.OPTIMIZERS[name].code
    hp = optim.kernel_hyperparameters(rule)
    params_k, ks = np.zeros((n_features + 1, 3)), kernels.KernelState.new(n_features, 3, code)
    params_r, rs = np.zeros((n_features + 1, 3)), rule.init_state((n_features + 1, 3))
    last, step = np.zeros(n_features + 1, dtype=np.int64), 0
    rng = np.random.default_rng(2)
    for epoch in range(7):
        order = rng.permutation(n).astype(np.int64)
        if 1 <= epoch <= 4:
            order = order[order >= 4]
        run_epoch(X.indptr, X.indices, X.data, y, order, params_k, ks, loss_code=0, optimizer_code=code,
                  schedule_code=0, learning_rate=LRS[name], l2=l2, batch_size=2, flush=False, **hp)
        _, step, _, _ = reference_epoch(X, y, order, params_r, rs, last, step, rule, "softmax", LRS[name],
                                        "constant", 0.0, l2, 2, True)
    kernels.flush(params_k, ks, optimizer_code=code, beta1=hp["beta1"], beta2=hp["beta2"], rho=hp["rho"])
    only_early = np.setdiff1d(X[:4].indices, X[4:].indices)
    assert only_early.size > 0  # features that really missed the long gap
    np.testing.assert_allclose(params_k, params_r, rtol=0, atol=1e-10, err_msg=name)
    for key, arr in rs.items():
        np.testing.assert_allclose(np.broadcast_to(ks.rule_state(code)[key], arr.shape), arr, rtol=1e-9, atol=1e-12,
                                   err_msg=f"{name} {key}")


@pytest.mark.parametrize("l2", [0.0, 0.05])
@pytest.mark.parametrize("batch_size", [1, 2])
@pytest.mark.parametrize("name", ["sgd", "adagrad"])
def test_hinge_step_on_active_labels_matches_specification(name, batch_size, l2):
    # With the hinge loss and 8 labels a batch of one or two examples has at most 4 labels with
    # a non-zero gradient: SGD and AdaGrad then step on those only (rows without L2; the bias
    # always), which must equal the full step of the specification.
    schedule, decay = ("inverse", 0.1) if name == "sgd" else ("constant", 0.0)
    pk, ks, pr, rs, step, out = run_both(name, "hinge", batch_size, lazy=True, l2=l2, schedule=schedule,
                                         decay=decay, n_labels=8)
    np.testing.assert_allclose(pk, pr, rtol=0, atol=1e-10)
    assert np.abs(pk).max() > 1e-3
    for key, arr in rs.items():
        np.testing.assert_allclose(ks.rule_state(optim.OPTIMIZERS[name].code)[key], arr, rtol=0, atol=1e-10)
    count = sum(c for _, _, c, _ in out)
    np.testing.assert_array_equal(ks.stat_update_count, count)
    np.testing.assert_allclose(ks.stat_abs_update_sum, sum(a for _, _, _, a in out), rtol=0, atol=1e-10)


@pytest.mark.parametrize("name", OPTIMIZERS)
def test_kernel_dense_mode_matches_numpy_specification(name):
    # Oracle: reference_epoch with every row updated every step (absent features: g = 0).
    pk, ks, pr, rs, _, out = run_both(name, "softmax", 4, lazy=False, l2=0.05)
    np.testing.assert_allclose(pk, pr, rtol=0, atol=1e-10)
    for lk, lr_, _, _ in out:
        assert lk == pytest.approx(lr_, abs=1e-10)


def _kernel_params(name, lazy, l2, batch_size, schedule="constant", decay=0.0, X=None, y=None, epochs=3):
    X, y = (X, y) if X is not None else random_problem(n=30, seed=3)
    code = optim.OPTIMIZERS[name].code
    params = np.zeros((X.shape[1] + 1, 3))
    st = kernels.KernelState.new(X.shape[1], 3, code)
    rng = np.random.default_rng(1)
    for _ in range(epochs):
        run_epoch(X.indptr, X.indices, X.data, y, rng.permutation(X.shape[0]), params, st,
                          loss_code=0, optimizer_code=code, schedule_code=schedules.SCHEDULE_CODES[schedule],
                          learning_rate=LRS[name], decay=decay, l2=l2, batch_size=batch_size, lazy=lazy)
    return params, st


@pytest.mark.parametrize("name,schedule", [("sgd", "constant"), ("sgd", "inverse"), ("sgd", "inverse-sqrt"),
                                           ("adagrad", "constant")])
@pytest.mark.parametrize("l2", [0.0, 0.1])
def test_lazy_equals_dense_for_sgd_and_adagrad(name, schedule, l2):
    # Semantics (kernels docstring): zero gradient changes nothing; L2 prox catch-up is closed form.
    decay = 0.05 if schedule != "constant" else 0.0
    lazy, _ = _kernel_params(name, True, l2, 1, schedule, decay)
    dense, _ = _kernel_params(name, False, l2, 1, schedule, decay)
    np.testing.assert_allclose(lazy, dense, rtol=0, atol=1e-10)
    assert np.abs(lazy).max() > 1e-2


@pytest.mark.parametrize("name", ["adadelta", "rmsprop", "adam"])
def test_lazy_equals_dense_when_every_feature_is_present(name):
    # Full batch: every feature is in every batch, so no step is ever missed.
    X, y = random_problem(n=30, seed=3)
    lazy, _ = _kernel_params(name, True, 0.1, 1000, X=X, y=y)
    dense, _ = _kernel_params(name, False, 0.1, 1000, X=X, y=y)
    np.testing.assert_allclose(lazy, dense, rtol=0, atol=1e-12)
    # Dense data (every feature in every example) with per-example steps.
    Xd = sp.csr_matrix(np.random.default_rng(2).normal(size=(12, 4)))
    yd = np.arange(12, dtype=np.int64) % 3
    lazy, _ = _kernel_params(name, True, 0.1, 1, X=Xd, y=yd)
    dense, _ = _kernel_params(name, False, 0.1, 1, X=Xd, y=yd)
    np.testing.assert_allclose(lazy, dense, rtol=0, atol=1e-12)


def test_lazy_adam_differs_from_dense_on_sparse_data():
    # Documented approximation: dense Adam keeps moving absent features by momentum.
    lazy, _ = _kernel_params("adam", True, 0.0, 1)
    dense, _ = _kernel_params("adam", False, 0.0, 1)
    assert np.abs(lazy - dense).max() > 1e-4


def test_schedule_in_optim_and_kernel_agree():
    for name, code in schedules.SCHEDULE_CODES.items():
        for t in [0, 1, 7, 1000, 123456]:
            for decay in [0.0, 0.01, 2.5]:
                assert schedule_lr(code, 0.3, decay, t) == pytest.approx(
                    schedules.schedule_learning_rate(name, 0.3, decay, t), rel=1e-15)
    # Worked by hand: 1/(1 + 0.5*2) = 0.5; 1/sqrt(1 + 0.5*6) = 0.5.
    assert schedule_lr(schedules.SCHEDULE_INVERSE, 1.0, 0.5, 2) == 0.5
    assert schedule_lr(schedules.SCHEDULE_INVERSE_SQRT, 1.0, 0.5, 6) == 0.5


def test_adam_count_is_per_feature_in_lazy_mode_and_global_in_dense_mode():
    X, y = random_problem(n=30, seed=3)
    _, lazy = _kernel_params("adam", True, 0.0, 1, X=X, y=y, epochs=2)
    _, dense = _kernel_params("adam", False, 0.0, 1, X=X, y=y, epochs=2)
    # lazy: touches = number of examples containing the feature, per epoch (softmax gradients
    # are never exactly 0, so it equals the statistic too); bias row: every step.
    np.testing.assert_array_equal(lazy.update_count[:-1], 2 * X.getnnz(axis=0))
    np.testing.assert_array_equal(lazy.update_count[:-1], lazy.stat_update_count[:-1])
    assert lazy.update_count[-1] == 60
    np.testing.assert_array_equal(dense.update_count, np.full(X.shape[1] + 1, 60))


def test_float32_kernel_agrees_with_float64():
    X, y = random_problem(n=30, seed=4)
    out = {}
    for dt in (np.float64, np.float32):
        params = np.zeros((X.shape[1] + 1, 3), dtype=dt)
        st = kernels.KernelState.new(X.shape[1], 3, optim.ADAGRAD, dt)
        for e in range(3):
            run_epoch(X.indptr, X.indices, X.data.astype(dt), y, np.arange(30), params, st,
                              loss_code=0, optimizer_code=optim.ADAGRAD, schedule_code=0,
                              learning_rate=0.3, epsilon=1e-10, batch_size=1)
        out[dt] = params
    assert out[np.float32].dtype == np.float32
    np.testing.assert_allclose(out[np.float32], out[np.float64], atol=1e-5)


def test_nonfinite_loss_is_reported():
    X, y = random_problem(n=30, seed=4)
    params = np.zeros((X.shape[1] + 1, 3))
    params[0, 0] = np.inf
    st = kernels.KernelState.new(X.shape[1], 3, optim.SGD)
    X = X.copy()
    X.data[:] = 1.0
    _, finite = run_epoch(X.indptr, X.indices, X.data, y, np.arange(30), params, st,
                                  loss_code=0, optimizer_code=optim.SGD, schedule_code=0,
                                  learning_rate=0.1)
    assert finite is False


def test_adam_first_update_of_a_late_feature():
    # Feature 1 appears only in the last of 50 examples (batch size 1). Kingma & Ba (2015),
    # Algorithm 1, applied by hand to its first non-zero gradient g (per label):
    # lazy, own count n = 1: m_hat = g, v_hat = g^2 -> |dw| = lr*|g|/(|g| + eps) ~ lr;
    # dense, global count n = 50: m = 0.1 g, v = 0.001 g^2 ->
    #   |dw| = lr * (0.1/(1 - 0.9^50)) / sqrt(0.001/(1 - 0.999^50)) = 0.70216 lr.
    n, lr = 50, 0.01
    rows = np.r_[np.arange(n), n - 1]
    cols = np.r_[np.zeros(n, dtype=int), 1]
    X = sp.csr_matrix((np.ones(n + 1), (rows, cols)), shape=(n, 2))
    y = np.arange(n, dtype=np.int64) % 3
    out = {}
    for lazy in (True, False):
        params = np.zeros((3, 3))
        st = kernels.KernelState.new(2, 3, optim.ADAM)
        run_epoch(X.indptr, X.indices, X.data, y, np.arange(n), params, st, loss_code=0,
                          optimizer_code=optim.ADAM, schedule_code=0, learning_rate=lr, batch_size=1,
                          lazy=lazy)
        assert st.stat_update_count[1] == 1
        out[lazy] = st.stat_abs_update_sum[1]
    assert out[True] == pytest.approx(3 * lr, rel=1e-6)
    dense_factor = (0.1 / (1 - 0.9**50)) / np.sqrt(0.001 / (1 - 0.999**50))
    assert dense_factor == pytest.approx(0.70216, rel=1e-4)
    assert out[False] == pytest.approx(3 * lr * dense_factor, rel=1e-6)


def test_inverse_schedule_is_refused_for_adaptive_rules():
    X, y = random_problem()
    st = kernels.KernelState.new(X.shape[1], 3, optim.ADAGRAD)
    with pytest.raises(ValueError, match="SGD only"):
        run_epoch(X.indptr, X.indices, X.data, y, np.arange(24), np.zeros((10, 3)), st,
                          loss_code=0, optimizer_code=optim.ADAGRAD,
                          schedule_code=schedules.SCHEDULE_INVERSE, learning_rate=0.1)


def test_batch_size_at_least_n_is_one_full_batch_step():
    # Full batch: one step per epoch whose gradient is the mean over all rows, so it equals
    # one plain gradient step on the mean loss (lintext.losses.objective with l2 = 0).
    X, y = random_problem()
    params = np.zeros((X.shape[1] + 1, 3))
    st = kernels.KernelState.new(X.shape[1], 3, optim.SGD)
    run_epoch(X.indptr, X.indices, X.data, y, np.arange(24), params, st, loss_code=0,
                      optimizer_code=optim.SGD, schedule_code=0, learning_rate=0.5, batch_size=1000)
    assert st.step == 1
    _, gW, gb = losses.objective("softmax", X, y, np.zeros((X.shape[1], 3)), np.zeros(3), 0.0)
    np.testing.assert_allclose(params[:-1], -0.5 * gW, atol=1e-14)
    np.testing.assert_allclose(params[-1], -0.5 * gb, atol=1e-14)


# --------------------------------------------------------------------------- speed work: same results


def _epochs(name, threads, batch_size, lazy=True, l2=0.0, epochs=2, flush=True, n=400, n_features=120,
            n_labels=5, loss=0, dtype=np.float64):
    X, y = random_problem(n=n, n_features=n_features, n_labels=n_labels, density=0.08, seed=11)
    X = X.astype(dtype)
    code = optim.OPTIMIZERS[name].code
    params = np.zeros((n_features + 1, n_labels), dtype=dtype)
    st = kernels.KernelState.new(n_features, n_labels, code, dtype)
    rng = np.random.default_rng(5)
    losses_ = []
    for _ in range(epochs):
        loss_sum, finite = run_epoch(
            X.indptr, X.indices, X.data, y, rng.permutation(n), params, st, loss_code=loss,
            optimizer_code=code, schedule_code=0, learning_rate=LRS[name], l2=l2,
            batch_size=batch_size, lazy=lazy, flush=flush, threads=threads)
        assert finite
        losses_.append(loss_sum)
    return params, st, losses_


@pytest.mark.parametrize("name", OPTIMIZERS)
@pytest.mark.parametrize("batch_size,lazy,l2", [(1, True, 0.0), (16, True, 0.0), (16, True, 0.05),
                                                (1000, True, 0.0), (16, False, 0.05)])
def test_parallel_and_single_thread_give_identical_weights(monkeypatch, name, batch_size, lazy, l2):
    # Determinism across thread counts (lintext.kernels, "Threads"): with the threshold at 0,
    # every batch and the flush take the parallel path on two threads; the weights, the state,
    # the statistics and the losses must be the same bits as on one thread.
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK", 0)
    p1, s1, l1 = _epochs(name, 1, batch_size, lazy, l2)
    p2, s2, l2_ = _epochs(name, 2, batch_size, lazy, l2)
    assert np.abs(p1).max() > 1e-4  # it did train
    assert p1.tobytes() == p2.tobytes()
    assert s1.info.tobytes() == s2.info.tobytes()
    for key in ("sum_sq_grad", "first_moment", "second_moment", "avg_sq_update"):
        assert getattr(s1, key).tobytes() == getattr(s2, key).tobytes()
    assert l1 == l2_


@pytest.mark.parametrize("name", ["sgd", "adagrad"])
def test_parallel_hinge_step_on_active_labels_is_identical(monkeypatch, name):
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK", 0)
    p1, s1, l1 = _epochs(name, 1, 2, loss=1, n_labels=12)
    p2, s2, l2_ = _epochs(name, 2, 2, loss=1, n_labels=12)
    assert p1.tobytes() == p2.tobytes() and s1.info.tobytes() == s2.info.tobytes() and l1 == l2_


def _remedy_epochs(name, l1, threads=1, avg_from=10, loss=0):
    X, y = random_problem(n=300, n_features=80, n_labels=6, density=0.08, seed=13)
    code = optim.OPTIMIZERS[name].code
    params = np.zeros((81, 6))
    st = kernels.KernelState.new(80, 6, code, l1=l1 > 0 and name == "sgd", average=True)
    weights = np.random.default_rng(2).uniform(0.5, 2.0, size=300)
    rng = np.random.default_rng(5)
    for _ in range(3):
        _, finite = run_epoch(X.indptr, X.indices, X.data, y, rng.permutation(300), params, st, loss_code=loss,
                              optimizer_code=code, schedule_code=0, learning_rate=LRS[name], batch_size=4, l1=l1,
                              example_weight=weights, avg_from=avg_from, threads=threads)
        assert finite
    return params, st


@pytest.mark.parametrize("name,l1,avg_from,loss", [("sgd", 0.01, 10, 0), ("adagrad", 0.0, 10, 0), ("adam", 0.0, 10, 0),
                                                   ("ftrl", 0.01, 10, 0), ("sgd", 0.0, 0, 1), ("adagrad", 0.0, 0, 0)])
def test_prefetching_and_threads_leave_the_remedies_bits_alone(monkeypatch, name, l1, avg_from, loss):
    # The remedies' arrays (averaging's sums, SGD's L1 record, FTRL's z) are prefetched with the
    # next batch's rows at batch sizes up to PREFETCH_MAX_EXAMPLES. A prefetch is only a hint: a
    # run without prefetching, and one whose batches all take the parallel path (which does not
    # prefetch), must give the same bits in every array, statistics included.
    # The last two cases keep the average by steps (state.averages_by_steps; the hinge, loss 1,
    # on its active labels).
    runs = [_remedy_epochs(name, l1, avg_from=avg_from, loss=loss)]
    with monkeypatch.context() as m:
        m.setattr(kernels, "PREFETCH_MAX_EXAMPLES", 0)
        runs.append(_remedy_epochs(name, l1, avg_from=avg_from, loss=loss))
    with monkeypatch.context() as m:
        m.setattr(kernels, "PARALLEL_MIN_WORK", 0)
        runs.append(_remedy_epochs(name, l1, threads=2, avg_from=avg_from, loss=loss))
    assert runs[0][1].average_steps == (avg_from == 0)
    (p0, s0), others = runs[0], runs[1:]
    assert np.abs(p0).max() > 1e-3 and np.abs(s0.avg_sum).max() > 1e-3  # it trained and averaged
    for p, s in others:
        assert p.tobytes() == p0.tobytes()
        for key in ("avg_sum", "l1_applied", "shifted_grad_sum", "sum_sq_grad", "first_moment", "second_moment", "info"):
            assert getattr(s, key).tobytes() == getattr(s0, key).tobytes(), key


def test_parallel_path_is_taken_and_scores_match(monkeypatch):
    # The threshold decides: 0 sends every batch to the parallel functions (watched here).
    import lintext.engine.compiled as kc

    if kernels.max_threads() < 2:
        pytest.skip("numba has one thread here")
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK", 0)
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK_OUTSIDE_BATCHES", 0)
    X, y = random_problem(n=200, n_features=50, n_labels=4, density=0.1, seed=2)
    params = np.random.default_rng(0).normal(size=(51, 4))
    serial = kernels.decision_scores(X.indptr, X.indices, X.data, params, threads=1)
    parallel = kernels.decision_scores(X.indptr, X.indices, X.data, params, threads=2)
    assert serial.tobytes() == parallel.tobytes()
    np.testing.assert_allclose(serial, X @ params[:-1] + params[-1], rtol=1e-13, atol=1e-13)
    calls = []
    real = kc.run_batch_threads

    def watch(*args):
        calls.append(args[-1])  # n_threads
        return real(*args)

    monkeypatch.setattr(kernels, "run_batch_threads", watch)
    st = kernels.KernelState.new(50, 4, optim.ADAM)
    run_epoch(X.indptr, X.indices, X.data, y, np.arange(200), np.zeros((51, 4)), st, loss_code=0,
                      optimizer_code=optim.ADAM, schedule_code=0, learning_rate=0.01, batch_size=50, threads=2)
    assert calls == [2, 2, 2, 2]  # four batches of 50, each on two threads
    calls.clear()
    monkeypatch.setattr(kernels, "PARALLEL_MIN_WORK", 1 << 40)
    run_epoch(X.indptr, X.indices, X.data, y, np.arange(200), np.zeros((51, 4)), st, loss_code=0,
                      optimizer_code=optim.ADAM, schedule_code=0, learning_rate=0.01, batch_size=50, threads=2)
    assert calls == []  # below the threshold: one thread, epoch_kernel


@pytest.mark.parametrize("name", ["adadelta", "rmsprop", "adam"])
def test_deferred_flush_keeps_the_weights_and_settles_the_state(name):
    # flush=False (lintext.kernels): the decay owed by absent rows waits for their next touch.
    # After one epoch the weights are the same bits (the flush never moves these rules'
    # weights); after more, the same up to rounding (rho^a * rho^b against rho^(a+b)); the
    # state after kernels.flush agrees with the flushed one.
    one_f, st_f, _ = _epochs(name, 1, 4, epochs=1, flush=True)
    one_d, st_d, _ = _epochs(name, 1, 4, epochs=1, flush=False)
    assert one_f.tobytes() == one_d.tobytes()
    assert st_d.pending and not st_f.pending
    p_f, s_f, l_f = _epochs(name, 1, 4, epochs=3, flush=True)
    p_d, s_d, l_d = _epochs(name, 1, 4, epochs=3, flush=False)
    np.testing.assert_allclose(p_d, p_f, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(l_d, l_f, rtol=1e-12)
    code = optim.OPTIMIZERS[name].code
    hyper = optim.kernel_hyperparameters(optim.make_rule(name))
    kernels.flush(p_d, s_d, optimizer_code=code, beta1=hyper["beta1"], beta2=hyper["beta2"], rho=hyper["rho"])
    assert not s_d.pending and np.all(s_d.last_step == s_d.step)
    for key, arr in s_f.rule_state(code).items():
        np.testing.assert_allclose(s_d.rule_state(code)[key], arr, rtol=1e-9, atol=1e-15)


def test_pending_state_is_refused_by_rules_that_must_flush():
    _, st, _ = _epochs("adam", 1, 4, epochs=1, flush=False)
    with pytest.raises(ValueError, match="not flushed"):
        X, y = random_problem(n=400, n_features=120, n_labels=5, density=0.08, seed=11)
        run_epoch(X.indptr, X.indices, X.data, y, np.arange(400), np.zeros((121, 5)), st,
                          loss_code=0, optimizer_code=optim.SGD, schedule_code=0, learning_rate=0.1)


def test_float32_state_and_weights_agree_with_float64():
    for name in OPTIMIZERS:
        p64, s64, _ = _epochs(name, 1, 8)
        p32, s32, _ = _epochs(name, 1, 8, dtype=np.float32)
        assert p32.dtype == np.float32
        assert all(a.dtype == np.float32 for a in s32.rule_state(optim.OPTIMIZERS[name].code).values()
                   if a.dtype.kind == "f")
        np.testing.assert_allclose(p32, p64, atol=2e-4 * np.abs(p64).max())


def test_long_runs_keep_subnormal_numbers_out():
    # Adam's beta1 ** count falls below 1e-100 after 2186 updates (0.9^2186 = 1e-100): it is
    # then stored as 0 (1 - 0 == 1 - 1e-100 exactly), never as a subnormal number, whose
    # arithmetic is very slow; the same for the decay of long-absent rows.
    n = 2400
    rows = np.r_[np.arange(n), 0]
    cols = np.r_[np.zeros(n, dtype=int) + 1, 0]  # feature 0 only in the first example
    X = sp.csr_matrix((np.ones(n + 1), (rows, cols)), shape=(n, 2))
    y = np.arange(n, dtype=np.int64) % 3
    params = np.zeros((3, 3))
    st = kernels.KernelState.new(2, 3, optim.ADAM)
    run_epoch(X.indptr, X.indices, X.data, y, np.arange(n), params, st, loss_code=0,
                      optimizer_code=optim.ADAM, schedule_code=0, learning_rate=0.01, batch_size=1)
    assert st.info_f[-1, kc_pow1()] == 0.0 and st.update_count[-1] == n
    for arr in (st.first_moment, st.second_moment, params):
        assert not np.any((arr != 0) & (np.abs(arr) < np.finfo(np.float64).tiny))
    assert np.all(st.first_moment[0] == 0.0)  # 0.9^2399 * m: below 1e-100, so 0


def kc_pow1():
    from lintext.engine.compiled import POW1
    return POW1


def test_numba_cache_folder(tmp_path, monkeypatch):
    # Beside the package when it is writable; else the user's cache folder, unless the user
    # chose one with NUMBA_CACHE_DIR.
    monkeypatch.delenv("NUMBA_CACHE_DIR", raising=False)
    writable = tmp_path / "pkg"
    writable.mkdir()
    assert numba_setup.numba_cache_folder(writable) is None
    monkeypatch.setattr(numba_setup.os, "access", lambda path, mode: False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert numba_setup.numba_cache_folder(writable) == str(tmp_path / "cache" / "lintext" / "numba")
    monkeypatch.delenv("XDG_CACHE_HOME")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert numba_setup.numba_cache_folder(writable) == str(tmp_path / "home" / ".cache" / "lintext" / "numba")
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path / "mine"))
    assert numba_setup.numba_cache_folder(writable) is None
