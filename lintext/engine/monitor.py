"""What the trainer watches after each epoch (dev scores, the history row, the best epoch so far) and what it returns.

Shared by the stochastic trainer and L-BFGS. The monitored metric is spelled as the command
line's ``--stop-metric`` (``dev-loss``, ``accuracy``, ``macro-f1``), or ``train-loss`` when there
is no dev set; history rows keep the keys ``train_loss``, ``dev_loss``, ``dev_accuracy``,
``dev_macro_f1``, ``learning_rate``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from . import kernels, losses
from .metrics import macro_f1
from .options import TrainOptions

# History key of each monitored metric.
METRIC_KEYS = {"dev-loss": "dev_loss", "accuracy": "dev_accuracy", "macro-f1": "dev_macro_f1", "train-loss": "train_loss"}


class Monitor:
    """Tracks the best value of the monitored metric and the epochs since it."""

    def __init__(self, metric: str, min_improvement: float):
        self.key = METRIC_KEYS[metric]
        self.higher_is_better = metric in ("accuracy", "macro-f1")
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


def history_row(epoch, train_loss, lr, params, loss, dev, y_dev, threads=1, dev_weights=None) -> dict:
    row = {"epoch": epoch, "train_loss": float(train_loss), "dev_loss": None, "dev_accuracy": None,
           "dev_macro_f1": None, "learning_rate": None if lr is None else float(lr)}
    if dev is not None:
        S = kernels.decision_scores(*dev, params, threads=threads)
        row.update(dev_scores(S, y_dev, loss, dev_weights))
    return row


def dev_scores(S, y_dev, loss, weights=None) -> dict:
    """Dev loss (mean, no L2 term; with ``weights`` the weighted mean), accuracy and macro-F1 of
    scores ``S`` (not weighted).

    Macro-F1 averages over the labels present in the dev truth or predictions
    (:mod:`lintext.engine.metrics`), as ``lintext evaluate`` does.
    """
    pred = S.argmax(axis=1)
    if weights is None:
        dev_loss = losses.mean_loss(loss, S, y_dev)
    else:
        dev_loss = float(np.dot(weights, losses.example_losses_grads(loss, S, y_dev)[0]) / np.sum(weights))
    return {
        "dev_loss": dev_loss,
        "dev_accuracy": float(np.mean(pred == y_dev)),
        "dev_macro_f1": macro_f1(y_dev, pred, S.shape[1]),
    }


def suggest_learning_rate(learning_rate: float, loss: float, zero_model_loss: float, history: list) -> tuple:
    """A learning rate to propose after a divergence, from the run's own numbers, and why.

    Softmax and hinge losses grow about linearly with the size of the weights, and in a run that
    blows up the weights grow with the step: a rate ``learning_rate * zero_model_loss / loss``
    would have kept the loss near that of the all-zero model. With a non-finite loss there is no
    such scale: after epochs that went well the rate was near the edge (a third of it); from the
    first epoch on, it was far off (a thousandth). Rounded down to 1, 2 or 5 times a power of ten,
    and always below ``learning_rate``. Returns ``(rate, reason)``.
    """
    finite = math.isfinite(loss) and loss > 0
    if finite:
        rate, reason = learning_rate * zero_model_loss / loss, f"the loss reached {loss / zero_model_loss:.3g} times " \
            "that of the all-zero model, and it grows about in proportion to the step size"
    elif history:
        rate, reason = learning_rate / 3, f"{len(history)} epoch(s) went well before the loss overflowed"
    else:
        rate, reason = learning_rate / 1000, "the loss overflowed in the first epoch; lintext probe can narrow it down"
    rate = min(rate, learning_rate / 2)
    if not rate > 0:
        return None, ""
    power = 10.0 ** math.floor(math.log10(rate))
    step = max(m for m in (1, 2, 5) if m * power <= rate * (1 + 1e-12))
    return step * power, reason


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
    checkpoint: dict | None = None  # fit(..., keep_checkpoint=True): where to go on from (engine/resume.py)
    # options.refit: {"epochs", "documents"} of the second pass on train and dev together (None without
    # one); dev_coef and dev_intercept: the weights the dev scores in the history describe, the first
    # pass's at its best epoch (fit sets them: coef and intercept themselves without a refit)
    refit: dict | None = None
    dev_coef: np.ndarray | None = None
    dev_intercept: np.ndarray | None = None
