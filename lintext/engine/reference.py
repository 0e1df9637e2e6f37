"""The NumPy reference epoch: what one epoch of the compiled kernels must compute.

A plain loop over the same batches in the same order, built only from
:func:`~lintext.engine.optimizers.apply_step`, :func:`~lintext.engine.optimizers.catch_up` and
:func:`~lintext.engine.losses.scores_loss_grad`. It catches up missed steps one at a time (a
loop), while the kernels use closed forms (running log-sums, powers), so agreement also
checks those. Slow: for tests on small problems.
"""

from __future__ import annotations

import numpy as np

from .losses import example_losses_grads
from .optimizers import apply_step, catch_up
from .schedules import schedule_learning_rate


def reference_epoch(X, y, order, params, state, last_step, step, rule, loss, lr0, schedule, decay,
                    l2, batch_size, lazy, l1=0.0, example_weight=None, avg_sum=None, avg_from=0):
    """Specification of one epoch (see :mod:`lintext.engine.kernels`), in NumPy.

    ``state`` holds per-coordinate arrays shaped like ``params`` (rows = features + bias).
    ``l1`` is FTRL's ``lambda_1``; ``example_weight`` multiplies each example's loss and
    gradient; with ``avg_sum`` (shaped like ``params``) the weights after every step from
    ``avg_from`` on are added to it, the missed steps' one by one as they are caught up.
    Returns (loss_sum, new_step, stat_update_count, stat_abs_update_sum).
    """
    n_features = X.shape[1]
    bias = n_features
    stat_count = np.zeros(n_features + 1, dtype=np.int64)
    stat_abs = np.zeros(n_features + 1)
    lr_of = lambda t: schedule_learning_rate(schedule, lr0, decay, t)  # noqa: E731
    row_state = lambda j: {k: v[j] for k, v in state.items()}  # noqa: E731

    def put_state(j, new):
        for k, v in new.items():
            state[k][j] = v

    def catch_up_row(j, until):
        for s in range(last_step[j], until):  # one missed step at a time
            w, new = catch_up(rule, params[j], row_state(j), [lr_of(s)], l2)
            params[j] = w
            put_state(j, new)
            if avg_sum is not None and s >= avg_from:
                avg_sum[j] += params[j]

    loss_sum = 0.0
    for start in range(0, len(order), batch_size):
        rows = order[start:start + batch_size]
        Xb = X[rows]
        lr = lr_of(step)
        present = np.unique(Xb.indices) if lazy else np.arange(n_features)
        for j in present:  # lazy catch-up over the missed steps
            catch_up_row(j, step)
            last_step[j] = step + 1
        S = Xb @ params[:-1] + params[-1]
        per_example, grads = example_losses_grads(loss, S, y[rows])
        weight = np.ones(len(rows)) if example_weight is None else np.asarray(example_weight)[rows]
        loss_sum += float(np.dot(weight, per_example))
        dS = grads * weight[:, None] / len(rows)
        G = np.zeros_like(params)
        G[:-1] = Xb.T @ dS
        G[-1] = dS.sum(axis=0)
        for j in list(present) + [bias]:
            before = params[j].copy()
            w, new = apply_step(rule, params[j], G[j], row_state(j), lr, 0.0 if j == bias else l2,
                                0.0 if j == bias else l1)
            params[j] = w
            put_state(j, new)
            if np.any(G[j] != 0):
                stat_count[j] += 1
                stat_abs[j] += np.abs(w - before).sum()
            if avg_sum is not None and step >= avg_from:
                avg_sum[j] += params[j]
        last_step[bias] = step + 1
        step += 1
    for j in range(n_features):  # flush
        catch_up_row(j, step)
    last_step[:] = step
    return loss_sum, step, stat_count, stat_abs


# --------------------------------------------------------------------------- the papers, replayed


def cumulative_l1_replay(X, y, order, W, b, q, u, lr0, l1, loss="softmax", schedule="constant", decay=0.0,
                         step=0):
    """Tsuruoka, Tsujii & Ananiadou (2009), "Stochastic gradient descent training for
    L1-regularized log-linear models with cumulative penalty", Figure 2, replayed literally on
    one epoch with one example per step (the bias is not penalised)::

        u <- u + eta_k * C / N                       # here C / N = l1 (mean loss + l1 |w|_1)
        for each feature i of the example:
            w_i <- w_i - eta_k * d loss / d w_i
            apply_penalty(i):
                z <- w_i
                if w_i > 0: w_i <- max(0, w_i - (u + q_i))
                if w_i < 0: w_i <- min(0, w_i + (u - q_i))
                q_i <- q_i + (w_i - z)

    ``W`` (features x labels), ``b``, ``q`` (like ``W``) are updated in place; each label's
    weight of a feature is a coordinate of its own. Returns ``(u, step)``.
    """
    for i in order:
        lr = schedule_learning_rate(schedule, lr0, decay, step)
        u += lr * l1
        row = X[i]
        S = row @ W + b
        _, dS = example_losses_grads(loss, np.asarray(S).reshape(1, -1), np.array([y[i]]))
        features = row.indices
        W[features] -= lr * np.outer(row.data, dS[0])
        b -= lr * dS[0]
        for f in features:
            for lab in range(W.shape[1]):
                z = W[f, lab]
                if W[f, lab] > 0:
                    W[f, lab] = max(0.0, W[f, lab] - (u + q[f, lab]))
                elif W[f, lab] < 0:
                    W[f, lab] = min(0.0, W[f, lab] + (u - q[f, lab]))
                q[f, lab] += W[f, lab] - z
        step += 1
    return u, step


def ftrl_replay(X, y, order, z, n, alpha, beta, lambda1, lambda2, loss="softmax"):
    """McMahan et al. (2013), "Ad click prediction: a view from the trenches", Algorithm 1
    (per-coordinate FTRL-Proximal with L1 and L2), replayed on one epoch, one example per step,
    for every label's weight of a feature as a coordinate of its own; the bias is coordinate
    ``n_features`` (an always-present feature of value 1, unregularised here).

    For each example: compute ``w_i`` from ``z_i, n_i`` for its features; predict; then for
    each of them ``g_i``, ``sigma_i = (sqrt(n_i + g_i^2) - sqrt(n_i)) / alpha``,
    ``z_i += g_i - sigma_i w_i``, ``n_i += g_i^2``. ``z`` and ``n`` are
    ``(n_features + 1, n_labels)`` arrays updated in place; returns the weights from them.
    """
    n_features = X.shape[1]

    def weights(rows):
        lam1 = np.where(rows[:, None] == n_features, 0.0, lambda1)
        lam2 = np.where(rows[:, None] == n_features, 0.0, lambda2)
        zz, nn = z[rows], n[rows]
        w = -(zz - np.sign(zz) * lam1) / ((beta + np.sqrt(nn)) / alpha + lam2)
        return np.where(np.abs(zz) <= lam1, 0.0, w)

    for i in order:
        row = X[i]
        rows = np.r_[row.indices, n_features]
        values = np.r_[row.data, 1.0]
        w = weights(rows)
        S = values @ w
        _, dS = example_losses_grads(loss, S.reshape(1, -1), np.array([y[i]]))
        g = np.outer(values, dS[0])
        sigma = (np.sqrt(n[rows] + g * g) - np.sqrt(n[rows])) / alpha
        z[rows] += g - sigma * w
        n[rows] += g * g
    return weights(np.arange(n_features + 1))


def adagrad_paper_replay(grads, lr, delta):
    """Duchi, Hazan & Singer (2011), diagonal AdaGrad (Figure 1 with ``H_t = delta I +
    diag(s_t)``, ``s_t,i = ||g_{1:t,i}||_2``): the steps ``-lr * g_t / (delta + s_t)`` of one
    coordinate for the gradients ``grads``, in order."""
    steps, total = [], 0.0
    for g in grads:
        total += g * g
        steps.append(-lr * g / (delta + np.sqrt(total)))
    return np.array(steps)
