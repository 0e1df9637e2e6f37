"""Trainer: epochs, shuffling, dev evaluation, early stopping, plateau decay, divergence guard.

Python orchestrates and the compiled kernel (:mod:`lintext.kernels`) runs each epoch.
Decisions worth knowing:

* ``train_loss`` in the history is the *progressive* mean loss of the epoch: each
  example's loss is computed before its batch's update, without the L2 term. ``dev_loss``
  is the mean loss on the dev rows at the end of the epoch (no L2 term either).
* ``learning_rate`` in the history is the step size of the epoch's last step.
* Early stopping is on when dev data is given and ``patience > 0``: after ``patience``
  epochs without an improvement of at least ``min_improvement`` in ``stop_metric``, training
  stops and the weights of the best epoch are restored (they are also restored when the
  last epoch is not the best). Without dev data or with ``patience = 0`` every epoch runs
  and the last weights are kept. ``best_epoch`` is the epoch whose weights are returned.
* Decay-on-plateau (``schedule="plateau"``): after an epoch in which the monitored metric
  (``stop_metric`` on dev; the train loss without dev data) did not improve on its best by
  ``min_improvement``, the learning rate is multiplied by ``plateau_factor``.
* Divergence: a non-finite train loss, non-finite weights, or a train loss above 1000
  times a reference raise :class:`~lintext.errors.DivergenceError` naming the base learning
  rate. The reference is the larger of the first epoch's loss and the loss of the all-zero
  model (``log(n_labels)`` for softmax, 1 for hinge), and the first epoch is held to the
  latter: softmax and hinge grow only linearly in the weights, so a run wild from its first
  epoch would otherwise never trip the guard, and a tiny first-epoch loss (hinge on easy
  data) would make ordinary noise look like divergence. Non-finite weights are never
  returned.
* Feature statistics are accumulated over every epoch run (also after the best epoch).
  ``effective_step`` is NaN for a feature that never had a non-zero gradient.
* ``optimizer="lbfgs"`` minimises ``mean loss + (l2/2)||W||^2`` with SciPy's L-BFGS-B
  (``epochs`` = most iterations; one history row per iteration, ``learning_rate`` None).
  Early stopping works as above, per iteration; there is no plateau decay. Its
  ``update_count`` and ``abs_update_sum`` are zeros and ``effective_step`` NaN (no per-feature
  steps to report). Without L2 on separable text it overfits as iterations go: give it
  ``l2`` or dev data.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import scipy.sparse as sp
from scipy.optimize import minimize
from sklearn.metrics import accuracy_score, f1_score

from . import kernels, losses, optim
from .errors import ConfigError, DivergenceError

OPTIMIZERS = ("sgd", "adagrad", "adadelta", "rmsprop", "adam", "lbfgs")
STOP_METRICS = ("dev_loss", "accuracy", "macro_f1")
DIVERGENCE_FACTOR = 1e3


@dataclass
class TrainOptions:
    """Options of :func:`fit`; :meth:`validate` checks them.

    ``decay`` is per step (batch) of the ``inverse`` schedules; ``beta1``, ``beta2``, ``epsilon``
    and ``rho`` are the rules' hyperparameters (``None``: the rule's default, see
    :mod:`lintext.optim`); a value for a hyperparameter the optimizer does not use is an error.

    ``batch_size = 8`` was measured as the best compromise on synthetic text-like problems:
    SGD, AdaGrad and Adam reach the dev loss of batch size 1 with fewer, cheaper steps;
    RMSProp and AdaDelta do poorly with batch size 1 under lazy updates and prefer 32 or more.
    With ``l2 > 0``, only SGD and AdaGrad (any batch size) minimise the stated objective in
    lazy mode; see :mod:`lintext.kernels` for the decaying rules.

    ``threads`` is how many threads large batches, the end-of-epoch catch-up and dev scoring
    may use (``None`` or 0: all of numba's threads, ``NUMBA_NUM_THREADS``, by default one per
    core). The weights do not depend on it, bit for bit; batches of the default size run on
    one thread whatever it says (see :mod:`lintext.kernels`, "Threads").
    ``dtype="float32"`` keeps weights and optimizer state in float32 (half the memory; ``X``'s
    values are converted once); arithmetic stays float64.
    """

    loss: str = "softmax"
    optimizer: str = "sgd"
    learning_rate: float | None = None
    schedule: str = "constant"
    decay: float = 1e-4
    plateau_factor: float = 0.5
    epochs: int = 50
    batch_size: int = 8
    patience: int = 5
    min_improvement: float = 1e-4
    stop_metric: str = "dev_loss"
    l2: float = 0.0
    seed: int = 0
    lazy: bool = True
    beta1: float | None = None
    beta2: float | None = None
    epsilon: float | None = None
    rho: float | None = None
    dtype: str = "float64"
    threads: int | None = None

    def validate(self) -> None:
        """Raise :class:`~lintext.errors.ConfigError` naming the first bad option and its value."""
        _choice("loss", self.loss, tuple(losses.LOSS_CODES))
        _choice("optimizer", self.optimizer, OPTIMIZERS)
        _choice("schedule", self.schedule, tuple(optim.SCHEDULE_CODES))
        _choice("stop_metric", self.stop_metric, STOP_METRICS)
        _choice("dtype", self.dtype, ("float64", "float32"))
        if self.learning_rate is not None:
            _number("learning_rate", self.learning_rate, low=0.0, low_open=True)
        _number("decay", self.decay, low=0.0)
        _number("plateau_factor", self.plateau_factor, low=0.0, low_open=True, high=1.0)
        _integer("epochs", self.epochs, low=1)
        _integer("batch_size", self.batch_size, low=1)
        _integer("patience", self.patience, low=0)
        _number("min_improvement", self.min_improvement, low=0.0)
        _number("l2", self.l2, low=0.0)
        _integer("seed", self.seed, low=0)
        if not isinstance(self.lazy, (bool, np.bool_)):
            raise ConfigError("lazy", self.lazy, "must be true or false")
        for name in ("beta1", "beta2", "rho"):
            if getattr(self, name) is not None:
                _number(name, getattr(self, name), low=0.0, high=1.0, high_open=True)
        if self.epsilon is not None:
            _number("epsilon", self.epsilon, low=0.0, low_open=True)
        if self.threads is not None:
            _integer("threads", self.threads, low=0)
        if self.schedule in ("inverse", "inverse_sqrt") and self.optimizer != "sgd":
            raise ConfigError("schedule", self.schedule,
                              f"only for optimizer 'sgd'; {self.optimizer} adapts its own steps "
                              "(use constant or plateau)")
        if self.optimizer == "lbfgs":
            if self.learning_rate is not None:
                raise ConfigError("learning_rate", self.learning_rate, "lbfgs takes no learning rate")
            if self.schedule != "constant":
                raise ConfigError("schedule", self.schedule, "lbfgs takes no schedule")
        accepted = optim.RULE_HYPERPARAMETERS.get(self.optimizer, ())
        for name in ("beta1", "beta2", "epsilon", "rho"):
            if getattr(self, name) is not None and name not in accepted:
                raise ConfigError(name, getattr(self, name), f"not used by optimizer {self.optimizer!r}")

    def base_learning_rate(self) -> float:
        """The learning rate given, or the optimizer's default (NaN for lbfgs)."""
        if self.learning_rate is not None:
            return float(self.learning_rate)
        return optim.DEFAULT_LEARNING_RATES.get(self.optimizer, math.nan)


@dataclass
class TrainResult:
    """What :func:`fit` returns; see the module docstring for the meaning of each field."""

    coef: np.ndarray
    intercept: np.ndarray
    history: list[dict]
    best_epoch: int
    stopped_early: bool
    feature_stats: dict[str, np.ndarray]
    options: TrainOptions = field(default_factory=TrainOptions)


def fit(X, y, n_labels: int, X_dev=None, y_dev=None, options: TrainOptions | None = None,
        progress: Callable[[dict], None] | None = None) -> TrainResult:
    """Train a linear classifier on sparse features.

    Parameters
    ----------
    X : scipy.sparse matrix of shape (n, n_features)
        Training features (converted to CSR; float64 or float32).
    y : int array of shape (n,)
        Label index of each row, in ``[0, n_labels)``.
    n_labels : int
        Number of labels (at least 2).
    X_dev, y_dev : optional
        Dev rows, used for the history, early stopping and plateau decay; never for training.
    options : TrainOptions, optional
    progress : callable, optional
        Called after each epoch with the history row plus ``epochs`` (the most epochs).

    Returns
    -------
    TrainResult

    Raises
    ------
    ConfigError
        For a bad option.
    DivergenceError
        When the loss explodes or a weight becomes non-finite.
    """
    options = options if options is not None else TrainOptions()
    options.validate()
    if int(n_labels) < 2:
        raise ConfigError("n_labels", n_labels, "need at least two labels")
    n_labels = int(n_labels)
    X, y = _check_xy(X, y, n_labels, "X", "y")
    if (X_dev is None) != (y_dev is None):
        raise ValueError("give both X_dev and y_dev, or neither")
    if X_dev is not None:
        X_dev, y_dev = _check_xy(X_dev, y_dev, n_labels, "X_dev", "y_dev")
        if X_dev.shape[1] != X.shape[1]:
            raise ValueError(f"X_dev has {X_dev.shape[1]} columns, X has {X.shape[1]}")
        if X_dev.shape[0] == 0:
            X_dev = y_dev = None
    if options.optimizer == "lbfgs":
        return _fit_lbfgs(X, y, n_labels, X_dev, y_dev, options, progress)
    return _fit_stochastic(X, y, n_labels, X_dev, y_dev, options, progress)


# --------------------------------------------------------------------------- stochastic rules


def _fit_stochastic(X, y, n_labels, X_dev, y_dev, options, progress):
    dtype = np.dtype(options.dtype)
    n, n_features = X.shape
    data = np.ascontiguousarray(X.data, dtype=dtype)  # float32: converted once, here
    code = optim.OPTIMIZER_CODES[options.optimizer]
    rule = optim.make_rule(options.optimizer, beta1=options.beta1, beta2=options.beta2,
                           epsilon=options.epsilon, rho=options.rho)
    hyper = dict(beta1=getattr(rule, "beta1", 0.9), beta2=getattr(rule, "beta2", 0.999),
                 rho=getattr(rule, "rho", 0.9), epsilon=getattr(rule, "epsilon", 1e-8))
    threads = kernels.resolve_threads(options.threads)
    base_lr = options.base_learning_rate()
    lr = base_lr
    params = np.zeros((n_features + 1, n_labels), dtype=dtype)
    state = kernels.KernelState.new(n_features, n_labels, code, dtype)
    rng = np.random.default_rng(options.seed)
    schedule_code = optim.SCHEDULE_CODES[options.schedule]
    early_stopping = X_dev is not None and options.patience > 0
    dev = None if X_dev is None else (X_dev.indptr, X_dev.indices, X_dev.data)

    history: list[dict] = []
    monitor = _Monitor(options.stop_metric if X_dev is not None else "train_loss", options.min_improvement)
    best_params = None
    best_epoch = 0
    stopped_early = False
    zero_model_loss = math.log(n_labels) if options.loss == "softmax" else 1.0
    reference_loss = zero_model_loss
    last_lr = lr
    for epoch in range(1, options.epochs + 1):
        started = time.perf_counter()
        order = rng.permutation(n).astype(np.int64)
        # flush=False: the decaying rules leave the state decay of absent rows to their next
        # touch (the weights are exact after every epoch either way); flushed once below.
        loss_sum, finite = kernels.run_epoch(
            X.indptr, X.indices, data, y, order, params, state, loss_code=losses.LOSS_CODES[options.loss],
            optimizer_code=code, schedule_code=schedule_code, learning_rate=lr, decay=options.decay,
            l2=options.l2, batch_size=options.batch_size, lazy=options.lazy, flush=False, threads=threads,
            **hyper)
        train_loss = loss_sum / n
        if (not finite or not math.isfinite(train_loss) or train_loss > DIVERGENCE_FACTOR * reference_loss
                or not kernels.all_finite(params)):
            raise DivergenceError(base_lr, epoch, train_loss, options.optimizer)
        if epoch == 1:
            reference_loss = max(train_loss, zero_model_loss)
        last_lr = optim.schedule_learning_rate(schedule_code, lr, options.decay, state.step - 1)
        row = _history_row(epoch, train_loss, last_lr, params, options.loss, dev, y_dev, threads)
        improved = monitor.update(row)
        if improved:
            best_epoch = epoch
            if early_stopping:  # one buffer, reused: at most one extra copy of the weights
                if best_params is None:
                    best_params = params.copy()
                else:
                    np.copyto(best_params, params)
        row["seconds"] = time.perf_counter() - started
        history.append(row)
        if progress is not None:
            progress({**row, "epochs": options.epochs})
        if early_stopping and monitor.since_best >= options.patience:
            stopped_early = epoch < options.epochs
            break
        if options.schedule == "plateau":
            lr = optim.plateau_update(lr, improved, options.plateau_factor)

    kernels.flush(params, state, optimizer_code=code, beta1=hyper["beta1"], beta2=hyper["beta2"],
                  rho=hyper["rho"], threads=threads)
    if early_stopping and best_params is not None:
        params = best_params
    else:
        best_epoch = len(history)
    stats = _feature_stats(rule, state, code, last_lr, n_features)
    return TrainResult(np.ascontiguousarray(params[:-1]), params[-1].copy(), history, best_epoch,
                       stopped_early, stats, options)


class _Monitor:
    """Tracks the best value of the monitored metric and the epochs since it."""

    def __init__(self, metric: str, min_improvement: float):
        self.key = {"dev_loss": "dev_loss", "accuracy": "dev_accuracy", "macro_f1": "dev_macro_f1",
                    "train_loss": "train_loss"}[metric]
        self.higher_is_better = metric in ("accuracy", "macro_f1")
        self.min_improvement = min_improvement
        self.best = None
        self.since_best = 0

    def update(self, row: dict) -> bool:
        value = row[self.key]
        if self.best is None:
            improved = True
        elif self.higher_is_better:
            improved = value > self.best + self.min_improvement
        else:
            improved = value < self.best - self.min_improvement
        if improved:
            self.best = value
            self.since_best = 0
        else:
            self.since_best += 1
        return improved


def _history_row(epoch, train_loss, lr, params, loss, dev, y_dev, threads=1) -> dict:
    row = {"epoch": epoch, "train_loss": float(train_loss), "dev_loss": None, "dev_accuracy": None,
           "dev_macro_f1": None, "learning_rate": None if lr is None else float(lr)}
    if dev is not None:
        S = kernels.decision_scores(*dev, params, threads=threads)
        row.update(_metrics(S, y_dev, params.shape[1], loss))
    return row


def dev_metrics(X_dev, y_dev, W, b, loss: str) -> dict:
    """Dev loss (mean, no L2), accuracy and macro-F1 over all labels (``sklearn.metrics``)."""
    S = np.asarray(X_dev @ W.astype(np.float64, copy=False)) + b
    return _metrics(S, y_dev, W.shape[1], loss)


def _metrics(S, y_dev, n_labels, loss) -> dict:
    pred = S.argmax(axis=1)
    every = np.arange(n_labels)
    return {
        "dev_loss": losses.mean_loss(loss, S, y_dev),
        "dev_accuracy": float(accuracy_score(y_dev, pred)),
        "dev_macro_f1": float(f1_score(y_dev, pred, labels=every, average="macro", zero_division=0)),
    }


def _feature_stats(rule, state, code, lr, n_features, block=1 << 14) -> dict:
    count = state.stat_update_count[:n_features].copy()
    n_labels = state.first_moment.shape[1]
    step = np.empty(n_features)
    rule_state = state.rule_state(code)
    # Blocks of rows: the rule's effective step is computed on whole arrays, and at once its
    # temporaries would be several times the size of the weights.
    with np.errstate(divide="ignore", invalid="ignore"):
        for lo in range(0, n_features, block):
            hi = min(lo + block, n_features)
            part = np.asarray(rule.effective_step({k: v[lo:hi] for k, v in rule_state.items()}, lr),
                              dtype=np.float64)
            step[lo:hi] = np.broadcast_to(part, (hi - lo, n_labels)).mean(axis=1)
    return {"update_count": count, "abs_update_sum": state.stat_abs_update_sum[:n_features].copy(),
            "effective_step": np.where(count > 0, step, np.nan)}


# --------------------------------------------------------------------------- L-BFGS


def _fit_lbfgs(X, y, n_labels, X_dev, y_dev, options, progress):
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
    monitor = _Monitor(options.stop_metric if X_dev is not None else "train_loss", options.min_improvement)
    best = {"theta": None, "iteration": 0}
    clock = [time.perf_counter()]

    def record(theta, value):
        W, b = unpack(theta)
        data_loss = value - 0.5 * options.l2 * float(np.sum(W * W))
        dev = None if X_dev is None else (X_dev.indptr, X_dev.indices, X_dev.data)
        row = _history_row(len(history) + 1, data_loss, None, np.vstack([W, b]), options.loss, dev, y_dev)
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
    dtype = np.dtype(options.dtype)
    stats = {"update_count": np.zeros(n_features, dtype=np.int64), "abs_update_sum": np.zeros(n_features),
             "effective_step": np.full(n_features, np.nan)}
    return TrainResult(np.ascontiguousarray(W, dtype=dtype), b.astype(dtype), history, best_iteration,
                       stopped_early, stats, options)


# --------------------------------------------------------------------------- checks


def _check_xy(X, y, n_labels, xname, yname):
    if not sp.issparse(X):
        raise ValueError(f"{xname} must be a scipy sparse matrix, got {type(X).__name__}")
    X = sp.csr_matrix(X)
    if X.dtype not in (np.float64, np.float32):
        X = X.astype(np.float64)
    if not np.all(np.isfinite(X.data)):
        raise ValueError(f"{xname} holds non-finite values")
    y = np.asarray(y)
    if y.ndim != 1 or y.shape[0] != X.shape[0]:
        raise ValueError(f"{yname} must have one label per row of {xname} ({X.shape[0]}), got shape {y.shape}")
    if y.size and (not np.issubdtype(y.dtype, np.integer) or y.min() < 0 or y.max() >= n_labels):
        raise ValueError(f"{yname} must hold label indices in [0, {n_labels})")
    if X.shape[0] == 0 and xname == "X":
        raise ValueError("X has no rows")
    return X, y.astype(np.int64)


def _choice(option, value, allowed):
    if value not in allowed:
        raise ConfigError(option, value, f"expected one of {', '.join(allowed)}")


def _number(option, value, low=None, high=None, low_open=False, high_open=False):
    numeric = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
    if not numeric or not math.isfinite(value):
        raise ConfigError(option, value, "must be a finite number")
    if low is not None and (value < low or (low_open and value == low)):
        raise ConfigError(option, value, f"must be {'above' if low_open else 'at least'} {low:g}")
    if high is not None and (value > high or (high_open and value == high)):
        raise ConfigError(option, value, f"must be {'below' if high_open else 'at most'} {high:g}")


def _integer(option, value, low):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ConfigError(option, value, "must be a whole number")
    if value < low:
        raise ConfigError(option, value, f"must be at least {low}")
