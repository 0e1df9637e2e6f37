"""The NumPy reference epoch: what one epoch of the compiled kernels must compute.

A plain loop over the same batches in the same order, built only from
:func:`~lintext.engine.optimizers.apply_step`, :func:`~lintext.engine.optimizers.catch_up` and
:func:`~lintext.engine.losses.scores_loss_grad`. It catches up missed steps one at a time (a
loop), while the kernels use closed forms (running log-sums, powers), so agreement also
checks those. Slow: for tests on small problems.
"""

from __future__ import annotations

import numpy as np

from .losses import scores_loss_grad
from .optimizers import apply_step, catch_up
from .schedules import schedule_learning_rate


def reference_epoch(X, y, order, params, state, last_step, step, rule, loss, lr0, schedule, decay,
                    l2, batch_size, lazy):
    """Specification of one epoch (see :mod:`lintext.engine.kernels`), in NumPy.

    ``state`` holds per-coordinate arrays shaped like ``params`` (rows = features + bias).
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

    loss_sum = 0.0
    for start in range(0, len(order), batch_size):
        rows = order[start:start + batch_size]
        Xb = X[rows]
        lr = lr_of(step)
        present = np.unique(Xb.indices) if lazy else np.arange(n_features)
        for j in present:  # lazy catch-up over the missed steps, one by one
            missed = [lr_of(s) for s in range(last_step[j], step)]
            w, new = catch_up(rule, params[j], row_state(j), missed, l2)
            params[j] = w
            put_state(j, new)
            last_step[j] = step + 1
        S = Xb @ params[:-1] + params[-1]
        mean, dS = scores_loss_grad(loss, S, y[rows])
        loss_sum += mean * len(rows)
        G = np.zeros_like(params)
        G[:-1] = Xb.T @ dS
        G[-1] = dS.sum(axis=0)
        for j in list(present) + [bias]:
            before = params[j].copy()
            w, new = apply_step(rule, params[j], G[j], row_state(j), lr, 0.0 if j == bias else l2)
            params[j] = w
            put_state(j, new)
            if np.any(G[j] != 0):
                stat_count[j] += 1
                stat_abs[j] += np.abs(w - before).sum()
        last_step[bias] = step + 1
        step += 1
    for j in range(n_features):  # flush
        missed = [lr_of(s) for s in range(last_step[j], step)]
        w, new = catch_up(rule, params[j], row_state(j), missed, l2)
        params[j] = w
        put_state(j, new)
    last_step[:] = step
    return loss_sum, step, stat_count, stat_abs
