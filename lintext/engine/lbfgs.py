"""Full-batch L-BFGS, the curvature-aware reference: SciPy's L-BFGS-B on the whole objective.

It minimises ``mean loss + (l2/2)||W||^2`` (``epochs`` = most iterations; one history row per
iteration, ``learning_rate`` None). Early stopping works as for the stochastic rules, per
iteration; there is no plateau decay. Its ``update_count`` and ``abs_update_sum`` are zeros
and ``effective_step`` NaN (no per-feature steps to report). Without L2 on separable text it
overfits as iterations go: give it ``l2`` or dev data.
"""

from __future__ import annotations

import math
import time

import numpy as np
from scipy.optimize import minimize

from ..errors import DivergenceError
from . import losses
from .monitor import Monitor, TrainResult, history_row


def fit_lbfgs(X, y, n_labels, X_dev, y_dev, options, progress):
    n, n_features = X.shape
    Xd = X.astype(np.float64)
    size = n_features * n_labels

    def unpack(theta):
        return theta[:size].reshape(n_features, n_labels), theta[size:]

    def fun(theta):
        W, b = unpack(theta)
        value, gW, gb = losses.objective(options.loss, Xd, y, W, b, options.l2)
        return value, np.concatenate([gW.ravel(), gb])

    history: list[dict] = []
    early_stopping = X_dev is not None and options.patience > 0
    monitor = Monitor(options.stop_metric if X_dev is not None else "train-loss", options.min_improvement)
    best = {"theta": None, "iteration": 0}
    clock = [time.perf_counter()]

    def record(theta, value):
        W, b = unpack(theta)
        data_loss = value - 0.5 * options.l2 * float(np.sum(W * W))
        dev = None if X_dev is None else (X_dev.indptr, X_dev.indices, X_dev.data)
        row = history_row(len(history) + 1, data_loss, None, np.vstack([W, b]), options.loss, dev, y_dev)
        now = time.perf_counter()
        row["seconds"] = now - clock[0]
        clock[0] = now
        history.append(row)
        if monitor.update(row):
            best["theta"], best["iteration"] = theta.copy(), row["epoch"]
        if progress is not None:
            progress({**row, "epochs": options.epochs})

    def callback(intermediate_result):
        record(intermediate_result.x, float(intermediate_result.fun))
        if early_stopping and monitor.since_best >= options.patience:
            raise StopIteration

    result = minimize(fun, np.zeros(size + n_labels), jac=True, method="L-BFGS-B", callback=callback,
                      options={"maxiter": options.epochs, "ftol": 1e-12, "gtol": 1e-9})
    if not history:
        record(result.x, float(result.fun))
    stopped_early = early_stopping and monitor.since_best >= options.patience and len(history) < options.epochs
    theta, best_iteration = (best["theta"], best["iteration"]) if early_stopping else (result.x, len(history))
    if not np.all(np.isfinite(theta)):
        raise DivergenceError(math.nan, len(history), float(result.fun), "lbfgs")
    W, b = unpack(theta)
    dtype = np.dtype(options.precision)
    stats = {"update_count": np.zeros(n_features, dtype=np.int64), "abs_update_sum": np.zeros(n_features),
             "effective_step": np.full(n_features, np.nan)}
    return TrainResult(np.ascontiguousarray(W, dtype=dtype), b.astype(dtype), history, best_iteration,
                       stopped_early, stats, options)
