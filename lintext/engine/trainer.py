"""Trainer: epochs, shuffling, dev evaluation, early stopping, plateau decay, divergence guard.

Python orchestrates and the compiled kernel (:mod:`lintext.engine.kernels`) runs each epoch.
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
  returned. Divergence as a user means it raises the same error: from the second epoch on,
  a train loss above the all-zero model's (by more than ``ABOVE_ZERO_MARGIN``: the model
  learnt less than nothing), or a train
  loss (plus the L1 and L2 terms) that rose in each of ``RISING_EPOCHS`` epochs in a row, by
  more than ``RISING_MARGIN`` times the all-zero model's loss in all.
* Weights: ``label_weights`` and per-document ``sample_weight`` multiply each example's loss
  and gradient. ``train_loss`` and ``dev_loss`` are then weighted means (sum of weight times
  loss over the sum of the weights; the dev rows weighted by their labels' weights and
  ``dev_weight``), and the history says so (``weighted_loss``); accuracy and macro-F1 are not
  weighted.
* Averaging (``average = E > 0``): from the first step of epoch ``E`` on, the trainer keeps the
  mean of the weights after every step; each epoch's dev scores, early stopping, the best
  epoch's weights and the returned weights are the averaged ones (the raw weights before
  epoch ``E``). The train loss stays that of the raw iterates (computed as they train).
* Refit (``refit=True``, the default, when early stopping ran on dev rows in memory): once the
  dev set has chosen the best epoch, the model is trained again from zero on the training and dev
  rows together for that many epochs, same options and seed, and those are the weights returned.
  The history, ``best_epoch`` and the dev scores are the first pass's (``dev_coef`` and
  ``dev_intercept`` keep its weights, which they describe); ``refit`` says how many epochs and
  documents the second pass had. Not with feature-store shards, nor when resuming or keeping a
  checkpoint (the sweep's runs). Measured to help on every corpus of ``scripts/bench_quality.py``.
* Feature statistics are accumulated over every epoch run (also after the best epoch); after a
  refit, those of the second pass.
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
from dataclasses import replace
from typing import Callable

import numpy as np
import scipy.sparse as sp

from ..errors import ConfigError, DivergenceError
from . import kernels, losses
from .lbfgs import fit_lbfgs
from .monitor import Monitor, TrainResult, history_row, suggest_learning_rate
from .optimizers import kernel_hyperparameters
from .options import TrainOptions, parse_label_weights
from .schedules import SCHEDULE_CODES, plateau_update, schedule_learning_rate
from .resume import restore, snapshot
from .shards import RowShards, epoch_pieces, shard_dev_scores

DIVERGENCE_FACTOR = 1e3
# A train loss that rose in this many epochs in a row (each above the one before) is divergence.
RISING_EPOCHS = 5
# From the second epoch, a train loss this share above the all-zero model's is divergence (on
# labels without signal a model's progressive loss hovers around the untrained model's, a
# little above it: measured up to 18% above on scikit-learn's estimator checks, 20 random rows).
ABOVE_ZERO_MARGIN = 0.25
# ... by more than this share of the all-zero model's loss in all: a converged run's loss may
# creep up by rounding, and with L2 the data loss may rise a little while the objective falls.
RISING_MARGIN = 0.01


def fit(X, y, n_labels: int, X_dev=None, y_dev=None, options: TrainOptions | None = None,
        progress: Callable[[dict], None] | None = None, sample_weight=None, dev_weight=None,
        label_names=None, resume: dict | None = None, keep_checkpoint: bool = False) -> TrainResult:
    """Train a linear classifier on sparse features.

    Parameters
    ----------
    X : scipy.sparse matrix of shape (n, n_features), or :class:`~lintext.engine.shards.RowShards`
        Training features (converted to CSR; float64 or float32); shards are read one at a time
        and shuffled shard-wise (see :mod:`lintext.engine.shards`).
    y : int array of shape (n,)
        Label index of each row, in ``[0, n_labels)`` (``None`` with shards: they carry their labels).
    n_labels : int
        Number of labels (at least 2).
    X_dev, y_dev : optional
        Dev rows, used for the history, early stopping and plateau decay; never for training
        (``X_dev`` may be RowShards, with ``y_dev`` None).
    options : TrainOptions, optional
    progress : callable, optional
        Called after each epoch with the history row plus ``epochs`` (the most epochs).
    sample_weight, dev_weight : arrays of shape (n,) and (n_dev,), optional
        Per-document weights (positive, finite) of the training and dev rows.
    label_names : list of str, optional
        The labels' names, for ``options.label_weights`` given per label.
    resume, keep_checkpoint : optional
        Go on from the ``checkpoint`` of an earlier result of the same data and options with fewer
        ``epochs``; keep one in the result (:mod:`lintext.engine.resume`; not for L-BFGS).

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
    if options.optimizer == "lbfgs":  # full batch: shards are stacked in memory
        X, y = X.concatenated() if isinstance(X, RowShards) else (X, y)
        X_dev, y_dev = X_dev.concatenated() if isinstance(X_dev, RowShards) else (X_dev, y_dev)
    if isinstance(X_dev, RowShards):
        y_dev = X_dev.labels()
    if not isinstance(X, RowShards):
        X, y = check_training_arrays(X, y, n_labels, "X", "y")
    if (X_dev is None) != (y_dev is None):
        raise ValueError("give both X_dev and y_dev, or neither")
    if X_dev is not None:
        if not isinstance(X_dev, RowShards):
            X_dev, y_dev = check_training_arrays(X_dev, y_dev, n_labels, "X_dev", "y_dev")
        if X_dev.shape[1] != X.shape[1]:
            raise ValueError(f"X_dev has {X_dev.shape[1]} columns, X has {X.shape[1]}")
        if X_dev.shape[0] == 0:
            X_dev = y_dev = None
    if options.label_weights is not None or sample_weight is not None:  # refused before anything is computed
        where = "lbfgs" if options.optimizer == "lbfgs" else "a sharded feature store" if isinstance(X, RowShards) else None
        if where is not None:
            option, value = (("--label-weights", options.label_weights) if options.label_weights is not None
                             else ("--weight-column", "a weight per document"))
            raise ConfigError(option, value, f"weights are not taken with {where}; train without them")
    weights = example_weights(options.label_weights, y, n_labels, label_names, sample_weight, "sample_weight")
    dev_weights = None
    if X_dev is not None and (weights is not None or dev_weight is not None):
        per_label = label_weight_vector(options.label_weights, y, n_labels, label_names)
        dev_weights = per_label[y_dev] * (1.0 if dev_weight is None else _checked_weights(dev_weight, len(y_dev), "dev_weight"))
    if options.optimizer == "lbfgs":
        result = fit_lbfgs(X, y, n_labels, X_dev, y_dev, options, progress)
    else:
        result = _fit_stochastic(X, y, n_labels, X_dev, y_dev, options, progress, weights, dev_weights, resume,
                                 keep_checkpoint)
    if (options.refit and X_dev is not None and options.patience > 0 and resume is None and not keep_checkpoint
            and not isinstance(X, RowShards) and not isinstance(X_dev, RowShards)):
        return _refit(result, X, y, n_labels, X_dev, y_dev, options, progress, sample_weight, dev_weight, label_names)
    result.dev_coef, result.dev_intercept = result.coef, result.intercept
    return result


def _refit(first: TrainResult, X, y, n_labels, X_dev, y_dev, options, progress, sample_weight, dev_weight,
           label_names) -> TrainResult:
    """Train again from zero on the training and dev rows together, for the first pass's best
    number of epochs (the dev set has chosen when to stop; then its documents are worth more as
    training data). Same options and seed, no dev scores; the result keeps the first pass's
    history and best epoch, and its weights as ``dev_coef`` / ``dev_intercept``."""
    X_all, y_all = sp.vstack([X, X_dev], format="csr"), np.concatenate([y, y_dev])  # both checked by fit
    own = None
    if sample_weight is not None or dev_weight is not None:
        own = np.concatenate([np.ones(len(y)) if sample_weight is None else np.asarray(sample_weight, dtype=np.float64),
                              np.ones(len(y_dev)) if dev_weight is None else np.asarray(dev_weight, dtype=np.float64)])
    again = replace(options, epochs=max(int(first.best_epoch), 1), refit=False)
    report = None if progress is None else (lambda row: progress({**row, "refit": True}))
    if options.optimizer == "lbfgs":
        final = fit_lbfgs(X_all, y_all, n_labels, None, None, again, report)
    else:
        weights = example_weights(options.label_weights, y_all, n_labels, label_names, own, "sample_weight")
        final = _fit_stochastic(X_all, y_all, n_labels, None, None, again, report, weights)
    return replace(first, coef=final.coef, intercept=final.intercept, feature_stats=final.feature_stats,
                   refit={"epochs": again.epochs, "documents": int(X_all.shape[0])},
                   dev_coef=first.coef, dev_intercept=first.intercept)


# --------------------------------------------------------------------------- stochastic rules


def _fit_stochastic(X, y, n_labels, X_dev, y_dev, options, progress, weights=None, dev_weights=None, resume=None,
                    keep_checkpoint=False):
    dtype = np.dtype(options.precision)
    n, n_features = X.shape
    # float32: converted once, here (shards: as each is read)
    data = None if isinstance(X, RowShards) else np.ascontiguousarray(X.data, dtype=dtype)
    check = lambda Xk, yk: check_training_arrays(Xk, yk, n_labels, "X", "y")  # noqa: E731  (each shard as read)
    code = options.spec.code
    rule = options.make_rule()
    hyper = kernel_hyperparameters(rule)
    threads = kernels.resolve_threads(options.threads)
    base_lr = options.base_learning_rate()
    lr = base_lr
    params = np.zeros((n_features + 1, n_labels), dtype=dtype)
    state = kernels.KernelState.new(n_features, n_labels, code, dtype,
                                    initial_sum_sq=float(getattr(rule, "initial_sum_sq", 0.0)),
                                    l1=options.l1 > 0 and options.optimizer == "sgd", average=options.average > 0)
    sizes = X.sizes if isinstance(X, RowShards) else [n]  # each shard ends in its own last batch
    steps_per_epoch = sum(-(-size // options.batch_size) for size in sizes)
    avg_from = (options.average - 1) * steps_per_epoch if options.average else 0
    averaged = np.empty_like(params) if options.average else None
    total_weight = float(n if weights is None else weights.sum())
    rng = np.random.default_rng(options.seed)
    schedule_code = SCHEDULE_CODES[options.schedule]
    early_stopping = X_dev is not None and options.patience > 0
    dev = None if X_dev is None or isinstance(X_dev, RowShards) else (X_dev.indptr, X_dev.indices, X_dev.data)

    history: list[dict] = []
    monitor = Monitor(options.stop_metric if X_dev is not None else "train-loss", options.min_improvement)
    best_params = None
    best_epoch = 0
    stopped_early = False
    zero_model_loss = math.log(n_labels) if options.loss == "softmax" else 1.0
    reference_loss = zero_model_loss
    train_losses: list[float] = []
    last_lr = lr
    if resume is not None:  # go on where an earlier run of these options stopped (engine/resume.py)
        lr, best_params, best_epoch, history, reference_loss, last_lr, train_losses = restore(
            resume, params, state, rng, monitor)

    def current_weights():
        """The weights dev scores and the result use: the averaged ones once averaging has begun."""
        if averaged is not None and state.step > avg_from:
            # float64 weights: the sum is formed in ``averaged`` itself (the same operations in the
            # same order, without two model-sized temporaries per epoch)
            scratch = averaged if averaged.dtype == np.float64 else None
            np.divide(state.weight_sum(params, out=scratch), state.step - avg_from, out=averaged, casting="unsafe")
            return averaged
        return params

    current = current_weights()  # (a resumed run may have no epoch left)
    for epoch in range(len(history) + 1, options.epochs + 1):
        started = time.perf_counter()
        loss_sum, finite = 0.0, True
        # One piece in memory; one per shard for RowShards (engine/shards.py: how they are shuffled).
        for piece in epoch_pieces(X, y, rng, dtype, check, data):
            # flush=False: the decaying rules leave the state decay of absent rows to their next
            # touch (the weights are exact after every epoch either way); flushed once below.
            part, finite = kernels.run_epoch(
                *piece.arrays(), params, state, loss_code=losses.LOSS_CODES[options.loss],
                optimizer_code=code, schedule_code=schedule_code, learning_rate=lr, decay=options.decay,
                l2=options.l2, batch_size=options.batch_size, lazy=options.lazy, flush=False, threads=threads,
                l1=options.l1, example_weight=weights, avg_from=avg_from, **hyper)
            loss_sum += part
            if not finite:
                break
        train_loss = loss_sum / total_weight
        if (not finite or not math.isfinite(train_loss) or train_loss > DIVERGENCE_FACTOR * reference_loss
                or not kernels.all_finite(params)):
            suggestion, basis = suggest_learning_rate(base_lr, train_loss, zero_model_loss, history)
            raise DivergenceError(base_lr, epoch, train_loss, options.optimizer, suggestion, basis)
        train_losses.append(train_loss + _penalty(params, options))
        _check_course(train_losses, train_loss, zero_model_loss, base_lr, options.optimizer, history)
        if epoch == 1:
            reference_loss = max(train_loss, zero_model_loss)
        last_lr = schedule_learning_rate(schedule_code, lr, options.decay, state.step - 1)
        current = current_weights()
        row = history_row(epoch, train_loss, last_lr, current, options.loss, dev, y_dev, threads, dev_weights)
        if weights is not None or dev_weights is not None:
            row["weighted_loss"] = True
        if isinstance(X_dev, RowShards):
            row.update(shard_dev_scores(X_dev, current, options.loss, threads, check))
        improved = monitor.update(row)
        if improved:
            best_epoch = epoch
            if early_stopping:  # one buffer, reused: at most one extra copy of the weights
                if best_params is None:
                    best_params = current.copy()
                else:
                    np.copyto(best_params, current)
        row["seconds"] = time.perf_counter() - started
        history.append(row)
        if progress is not None:
            progress({**row, "epochs": options.epochs})
        if early_stopping and monitor.since_best >= options.patience:
            stopped_early = epoch < options.epochs
            break
        if options.schedule == "plateau":
            lr = plateau_update(lr, improved, options.plateau_factor)

    checkpoint = None
    if keep_checkpoint and not stopped_early:
        checkpoint = snapshot(params, state, rng, lr, monitor, best_params, best_epoch, history, reference_loss, last_lr,
                              train_losses)
    kernels.flush(params, state, optimizer_code=code, beta1=hyper["beta1"], beta2=hyper["beta2"],
                  rho=hyper["rho"], threads=threads)
    if early_stopping and best_params is not None:
        params = best_params
    else:
        best_epoch = len(history)
        params = current
    stats = _feature_stats(rule, state, code, last_lr, n_features)
    return TrainResult(np.ascontiguousarray(params[:-1]), params[-1].copy(), history, best_epoch,
                       stopped_early, stats, options, checkpoint)


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


def _penalty(params, options) -> float:
    """The regularisation term of the objective SGD-like rules minimise (0 for FTRL, whose
    lambdas weigh the sum of the losses, and without L1 and L2)."""
    if options.optimizer == "ftrl" or (options.l2 == 0 and options.l1 == 0):
        return 0.0
    W = params[:-1]
    return 0.5 * options.l2 * float(np.vdot(W, W)) + options.l1 * float(np.abs(W).sum())


def _check_course(objectives, loss, zero_model_loss, base_lr, optimizer, history=()) -> None:
    """Divergence as a user means it (see the module docstring): raise DivergenceError.
    ``objectives`` are the epochs' train losses plus the penalty at the epoch's end (with L2 the
    data loss may rise while the objective falls), ``loss`` the last train loss."""
    epoch = len(objectives)
    train_losses = objectives
    suggestion, basis = suggest_learning_rate(base_lr, loss, zero_model_loss, list(history))
    if epoch >= 2 and loss > (1.0 + ABOVE_ZERO_MARGIN) * zero_model_loss:
        raise DivergenceError(base_lr, epoch, loss, optimizer, suggestion, basis,
                              reason=f"train loss {loss:.4g} above the untrained model's {zero_model_loss:.4g}")
    recent = train_losses[-(RISING_EPOCHS + 1):]
    if (len(recent) == RISING_EPOCHS + 1 and all(b > a for a, b in zip(recent, recent[1:]))
            and recent[-1] - recent[0] > RISING_MARGIN * zero_model_loss):
        raise DivergenceError(base_lr, epoch, loss, optimizer, suggestion, basis,
                              reason=f"train loss rose {RISING_EPOCHS} epochs in a row")


# --------------------------------------------------------------------------- weights


def label_weight_vector(label_weights, y, n_labels, label_names=None) -> np.ndarray:
    """One weight per label: ones, ``"balanced"`` (``n / (n_labels * n_k)`` over the training rows
    ``y``, scikit-learn's ``class_weight="balanced"``; a label without rows weighs 1), or the
    ``label=weight`` pairs of :func:`lintext.engine.options.parse_label_weights`."""
    out = np.ones(n_labels)
    if label_weights is None:
        return out
    parsed = parse_label_weights(label_weights)
    if parsed == "balanced":
        counts = np.bincount(np.asarray(y), minlength=n_labels).astype(np.float64)
        present = counts > 0
        out[present] = len(y) / (n_labels * counts[present])
        return out
    names = list(label_names) if label_names is not None else [str(k) for k in range(n_labels)]
    for name, weight in parsed.items():
        if name not in names:
            raise ConfigError("--label-weights", label_weights, f"{name!r} is not a label of the training data")
        out[names.index(name)] = weight
    return out


def example_weights(label_weights, y, n_labels, label_names, sample_weight, name="sample_weight"):
    """Each training row's weight (its label's times its own), or None when every weight is 1."""
    if label_weights is None and sample_weight is None:
        return None
    out = label_weight_vector(label_weights, y, n_labels, label_names)[y]
    if sample_weight is not None:
        out = out * _checked_weights(sample_weight, len(y), name)
    if not out.sum() > 0:
        raise ValueError(f"the training rows' weights add up to {out.sum():g}: nothing to learn from")
    return np.ascontiguousarray(out, dtype=np.float64)


def _checked_weights(weights, n, name) -> np.ndarray:
    weights = np.asarray(weights, dtype=np.float64)
    if weights.shape != (n,):
        raise ValueError(f"{name} must have one weight per row ({n}), got shape {weights.shape}")
    if not np.all(np.isfinite(weights)) or np.any(weights < 0):
        raise ValueError(f"{name} must hold finite weights of at least 0")
    return weights


# --------------------------------------------------------------------------- checks


def check_training_arrays(X, y, n_labels, xname="X", yname="y"):
    """``X`` as CSR (float64 or float32, finite) and ``y`` as int64 label indices in
    ``[0, n_labels)``, one per row; ``ValueError`` naming the argument otherwise."""
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
