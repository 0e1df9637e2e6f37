"""Compiled (numba) code of the training loop; semantics in :mod:`lintext.kernels`.

Every ``@njit(cache=True)`` function of the training loop lives in this one file on
purpose: numba's on-disk cache is invalidated by changes to the file that defines a
function, not by changes to the functions it calls in other files, nor by changes to
the integer codes imported from :mod:`lintext.optim` and :mod:`lintext.losses` (treat those
codes as frozen). Keep it that way.

Arguments are flat: arrays, integer codes and numbers. A "row" is one feature's weights
across all labels (``params[j, :]``); the last row of ``params`` is the bias. The per-example
and per-row functions are the compiled twins of :mod:`lintext.losses` and
:mod:`lintext.optim`, which document the maths; tests check that they agree.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .losses import HINGE
from .optim import ADADELTA, ADAGRAD, ADAM, RMSPROP, SCHEDULE_INVERSE, SCHEDULE_INVERSE_SQRT, SGD

# --------------------------------------------------------------------------- per example, per row


@njit(cache=True)
def schedule_lr(schedule_code, lr0, decay, step):
    """Compiled twin of :func:`lintext.optim.schedule_learning_rate`."""
    if schedule_code == SCHEDULE_INVERSE:
        return lr0 / (1.0 + decay * step)
    if schedule_code == SCHEDULE_INVERSE_SQRT:
        return lr0 / np.sqrt(1.0 + decay * step)
    return lr0  # constant, and plateau (constant within an epoch)


@njit(cache=True)
def example_loss_grad(loss_code, scores, label, dscores):
    """Loss of one example and ``d loss / d scores`` written into ``dscores``.

    Compiled twin of :func:`lintext.losses.example_losses_grads` for one row.
    A non-finite score gives a non-finite loss (never hidden).
    """
    n_labels = scores.shape[0]
    if loss_code == HINGE:
        rival = -1
        best = 0.0
        for l in range(n_labels):
            dscores[l] = 0.0
            if l != label and (rival < 0 or scores[l] > best):
                best = scores[l]
                rival = l
        margin = 1.0 + best - scores[label]
        if margin > 0.0:
            dscores[rival] = 1.0
            dscores[label] = -1.0
            return margin
        if margin <= 0.0:
            return 0.0
        return margin  # NaN
    m = scores[0]
    for l in range(1, n_labels):
        if scores[l] > m:
            m = scores[l]
    z = 0.0
    for l in range(n_labels):
        z += np.exp(scores[l] - m)
    log_z = np.log(z)
    for l in range(n_labels):
        dscores[l] = np.exp(scores[l] - m - log_z)
    dscores[label] -= 1.0
    return m + log_z - scores[label]


# Per-coordinate rules: scalar in, scalar out (no arrays, so no call overhead once
# LLVM inlines them). Each returns the new weight and the new state values.


@njit(cache=True)
def sgd_coord(w, g, lr, l2):
    """Proximal SGD step (:class:`lintext.optim.PlainSGD`)."""
    return (w - lr * g) / (1.0 + lr * l2)


@njit(cache=True)
def adagrad_coord(w, g, sum_sq_grad, lr, l2, epsilon):
    """Proximal AdaGrad step (:class:`lintext.optim.AdaGrad`)."""
    s = sum_sq_grad + g * g
    eta = lr / (np.sqrt(s) + epsilon)
    return (w - eta * g) / (1.0 + eta * l2), s


@njit(cache=True)
def rmsprop_coord(w, g, second_moment, lr, l2, rho, epsilon):
    """RMSProp step on ``g + l2*w`` (:class:`lintext.optim.RMSProp`)."""
    gg = g + l2 * w
    v = rho * second_moment + (1.0 - rho) * gg * gg
    return w - lr * gg / (np.sqrt(v) + epsilon), v


@njit(cache=True)
def adadelta_coord(w, g, second_moment, avg_sq_update, lr, l2, rho, epsilon):
    """AdaDelta step on ``g + l2*w`` (:class:`lintext.optim.AdaDelta`)."""
    gg = g + l2 * w
    eg2 = rho * second_moment + (1.0 - rho) * gg * gg
    dx = -np.sqrt(avg_sq_update + epsilon) / np.sqrt(eg2 + epsilon) * gg
    edx2 = rho * avg_sq_update + (1.0 - rho) * dx * dx
    return w + lr * dx, eg2, edx2


@njit(cache=True)
def adam_coord(w, g, first_moment, second_moment, lr, l2, beta1, beta2, c1, c2, epsilon):
    """Adam step on ``g + l2*w`` with bias corrections ``c1 = 1 - beta1^n``, ``c2 = 1 - beta2^n``
    (:class:`lintext.optim.Adam`)."""
    gg = g + l2 * w
    m = beta1 * first_moment + (1.0 - beta1) * gg
    v = beta2 * second_moment + (1.0 - beta2) * gg * gg
    return w - lr * (m / c1) / (np.sqrt(v / c2) + epsilon), m, v


# --------------------------------------------------------------------------- per batch, per epoch


@njit(cache=True)
def catch_up_rows(rows, n_rows, now, t0, cum, opt_code, lr, l2, params, sum_sq_grad, first_moment,
                  second_moment, avg_sq_update, last_step, beta1, beta2, rho, epsilon):
    """Bring rows ``rows[:n_rows]`` from ``last_step`` up to step ``now`` in closed form.

    Compiled twin of :func:`lintext.optim.catch_up` over ``k = now - last_step[j]`` missed
    steps: SGD multiplies by ``exp(cum[a] - cum[now])`` (``cum`` is the running sum of
    ``log(1 + eta_s*l2)`` from the epoch's first step ``t0``); AdaGrad divides by
    ``(1 + eta*l2)^k`` (its accumulator is unchanged while absent; ``lr`` is constant within an
    epoch); the decaying rules scale their state by ``rho^k`` / ``beta^k`` and leave ``w`` alone.
    """
    n_labels = params.shape[1]
    for q in range(n_rows):
        j = rows[q]
        k = now - last_step[j]
        if k <= 0:
            continue
        last_step[j] = now
        if opt_code == SGD:
            if l2 > 0.0:
                factor = np.exp(cum[now - k - t0] - cum[now - t0])
                for l in range(n_labels):
                    params[j, l] = params[j, l] * factor
        elif opt_code == ADAGRAD:
            if l2 > 0.0:
                for l in range(n_labels):
                    eta = lr / (np.sqrt(sum_sq_grad[j, l]) + epsilon)
                    params[j, l] = params[j, l] / (1.0 + eta * l2) ** k
        elif opt_code == RMSPROP:
            f = rho**k
            for l in range(n_labels):
                second_moment[j, l] = f * second_moment[j, l]
        elif opt_code == ADADELTA:
            f = rho**k
            for l in range(n_labels):
                second_moment[j, l] = f * second_moment[j, l]
                avg_sq_update[j, l] = f * avg_sq_update[j, l]
        elif opt_code == ADAM:
            f1 = beta1**k
            f2 = beta2**k
            for l in range(n_labels):
                first_moment[j, l] = f1 * first_moment[j, l]
                second_moment[j, l] = f2 * second_moment[j, l]


@njit(cache=True)
def score_batch(indptr, indices, data, y, order, start, stop, params, loss_code, grad, slot,
                bias_slot, scores, dscores):
    """Score examples ``order[start:stop]`` and accumulate the mean gradient of the batch.

    Feature ``j``'s gradient goes to ``grad[slot[j]]``, the bias gradient to
    ``grad[bias_slot]`` (rows zeroed by the caller). Returns the sum of the per-example
    losses; stops at the first non-finite one and returns it.
    """
    n_labels = params.shape[1]
    bias = params.shape[0] - 1
    inv_batch = 1.0 / (stop - start)
    loss_sum = 0.0
    for p in range(start, stop):
        i = order[p]
        for l in range(n_labels):
            scores[l] = params[bias, l]
        for q in range(indptr[i], indptr[i + 1]):
            j = indices[q]
            x = data[q]
            for l in range(n_labels):
                scores[l] += x * params[j, l]
        loss = example_loss_grad(loss_code, scores, y[i], dscores)
        loss_sum += loss
        if not np.isfinite(loss):
            return loss_sum
        for l in range(n_labels):
            dscores[l] *= inv_batch
            grad[bias_slot, l] += dscores[l]
        for q in range(indptr[i], indptr[i + 1]):
            s = slot[indices[q]]
            x = data[q]
            for l in range(n_labels):
                grad[s, l] += x * dscores[l]
    return loss_sum


@njit(cache=True)
def apply_updates(touched, n_touched, grad, opt_code, lr, l2, params, sum_sq_grad, first_moment,
                  second_moment, avg_sq_update, update_count, stat_update_count,
                  stat_abs_update_sum, beta1, beta2, rho, epsilon):
    """One step of the rule on rows ``touched[:n_touched]`` (gradient ``grad[q]``) and on the
    bias (gradient ``grad[n_touched]``, no L2).

    Compiled twin of :func:`lintext.optim.apply_step`. ``update_count`` is Adam's per-row
    bias-correction count; the statistics count rows with a non-zero loss gradient.
    """
    n_labels = params.shape[1]
    bias = params.shape[0] - 1
    for q in range(n_touched + 1):
        j = touched[q] if q < n_touched else bias
        reg = l2 if q < n_touched else 0.0
        c1 = 1.0
        c2 = 1.0
        if opt_code == ADAM:
            update_count[j] += 1
            c1 = 1.0 - beta1 ** update_count[j]
            c2 = 1.0 - beta2 ** update_count[j]
        nonzero = False
        moved = 0.0
        for l in range(n_labels):
            g = grad[q, l]
            nonzero = nonzero or g != 0.0
            w = params[j, l] * 1.0
            if opt_code == SGD:
                new_w = sgd_coord(w, g, lr, reg)
            elif opt_code == ADAGRAD:
                new_w, sum_sq_grad[j, l] = adagrad_coord(w, g, sum_sq_grad[j, l], lr, reg, epsilon)
            elif opt_code == RMSPROP:
                new_w, second_moment[j, l] = rmsprop_coord(w, g, second_moment[j, l], lr, reg, rho, epsilon)
            elif opt_code == ADADELTA:
                new_w, second_moment[j, l], avg_sq_update[j, l] = adadelta_coord(
                    w, g, second_moment[j, l], avg_sq_update[j, l], lr, reg, rho, epsilon)
            else:
                new_w, first_moment[j, l], second_moment[j, l] = adam_coord(
                    w, g, first_moment[j, l], second_moment[j, l], lr, reg, beta1, beta2, c1, c2, epsilon)
            params[j, l] = new_w
            moved += abs(params[j, l] - w)
        if nonzero:
            stat_update_count[j] += 1
            stat_abs_update_sum[j] += moved


@njit(cache=True)
def epoch_kernel(indptr, indices, data, y, order, params, sum_sq_grad, first_moment,
                 second_moment, avg_sq_update, update_count, last_step, stat_update_count,
                 stat_abs_update_sum, loss_code, opt_code, schedule_code, lr0, decay, l2,
                 beta1, beta2, rho, epsilon, batch_size, lazy, step):
    """Run one epoch; see :mod:`lintext.kernels`. Returns ``(loss_sum, new_step, finite)``.

    Precondition: every ``last_step`` equals ``step`` (rows flushed by the previous epoch).
    """
    n = order.shape[0]
    n_rows, n_labels = params.shape
    n_features = n_rows - 1
    n_batches = (n + batch_size - 1) // batch_size
    t0 = step

    # SGD with L2: running sum of log(1 + eta_s*l2) over this epoch's steps, so the
    # shrinkage of the missed steps a..b-1 is exp(-(cum[b] - cum[a])).
    cum = np.zeros(n_batches + 1)
    if opt_code == SGD and l2 > 0.0:
        for b in range(n_batches):
            cum[b + 1] = cum[b] + np.log1p(schedule_lr(schedule_code, lr0, decay, t0 + b) * l2)
    # Rules for which a missed step does something (state decay or L2 shrinkage).
    needs_catch_up = lazy and (l2 > 0.0 or (opt_code != SGD and opt_code != ADAGRAD))

    if lazy:
        cap = 0
        for b in range(n_batches):
            nnz = 0
            for p in range(b * batch_size, min(n, (b + 1) * batch_size)):
                nnz += indptr[order[p] + 1] - indptr[order[p]]
            cap = max(cap, nnz)
        cap = min(cap, n_features)
    else:
        cap = n_features
    grad = np.zeros((cap + 1, n_labels))  # one row per touched feature, then the bias
    touched = np.empty(max(cap, n_features), dtype=np.int64)
    slot = np.zeros(n_features, dtype=np.int64)
    mark = np.full(n_features, -1, dtype=np.int64)
    for j in range(n_features):  # dense mode: every row, in order; also the flush list
        touched[j] = j
        slot[j] = j
    scores = np.zeros(n_labels)
    dscores = np.zeros(n_labels)

    loss_sum = 0.0
    for b in range(n_batches):
        t = t0 + b
        start = b * batch_size
        stop = min(n, start + batch_size)
        lr = schedule_lr(schedule_code, lr0, decay, t)
        n_touched = n_features
        if lazy:  # collect the distinct features of the batch
            n_touched = 0
            for p in range(start, stop):
                i = order[p]
                for q in range(indptr[i], indptr[i + 1]):
                    j = indices[q]
                    if mark[j] != t:
                        mark[j] = t
                        slot[j] = n_touched
                        touched[n_touched] = j
                        n_touched += 1
            if needs_catch_up:
                catch_up_rows(touched, n_touched, t, t0, cum, opt_code, lr, l2, params, sum_sq_grad,
                              first_moment, second_moment, avg_sq_update, last_step, beta1, beta2,
                              rho, epsilon)
        grad[: n_touched + 1, :] = 0.0
        batch_loss = score_batch(indptr, indices, data, y, order, start, stop, params, loss_code,
                                 grad, slot, n_touched, scores, dscores)
        loss_sum += batch_loss
        if not np.isfinite(batch_loss):
            return loss_sum, t + 1, False
        apply_updates(touched, n_touched, grad, opt_code, lr, l2, params, sum_sq_grad, first_moment,
                      second_moment, avg_sq_update, update_count, stat_update_count,
                      stat_abs_update_sum, beta1, beta2, rho, epsilon)
        if needs_catch_up:
            for q in range(n_touched):
                last_step[touched[q]] = t + 1

    end = t0 + n_batches
    if needs_catch_up:  # flush: bring every row up to date (lr is constant within the epoch
        # for the adaptive rules; SGD's shrinkage comes from cum)
        for j in range(n_features):
            touched[j] = j
        catch_up_rows(touched, n_features, end, t0, cum, opt_code, lr0, l2, params, sum_sq_grad,
                      first_moment, second_moment, avg_sq_update, last_step, beta1, beta2, rho,
                      epsilon)
    for j in range(n_rows):
        last_step[j] = end
    return loss_sum, end, True
