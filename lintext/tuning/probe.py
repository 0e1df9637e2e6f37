"""Learning-rate probe: a short run with a geometrically growing step size.

The "LR range test" of L. N. Smith, "Cyclical Learning Rates for Training Neural
Networks" (WACV 2017, arXiv:1506.01186), section 3.3: train for a few hundred steps while
the learning rate grows from tiny to large, and read off the range in which the loss
falls. :func:`probe_learning_rate` runs the engine's own compiled kernel
(:func:`lintext.kernels.run_epoch`) one minibatch per call, with that call's step size,
so the probe trains exactly as :func:`lintext.train.fit` would with that rate.

Procedure, for step ``t = 0 .. steps-1``:

* learning rate ``eta_t = min_lr * (max_lr / min_lr) ** (t / (steps - 1))``;
* ``loss_t``: the mean loss of the step's minibatch before its update (minibatches are
  consecutive slices of a seeded permutation of the rows, reshuffled when exhausted);
* smoothed loss, an exponential moving average with bias correction (as in Adam's
  moment estimates, Kingma & Ba 2015): ``a_t = beta * a_{t-1} + (1 - beta) * loss_t``,
  ``smooth_t = a_t / (1 - beta^(t+1))``;
* stop when ``smooth_t > blowup * min_{s<=t} smooth_s`` or the loss is not finite.

Suggestion rule (exact): let ``slope_t`` be :func:`numpy.gradient` of ``smooth`` against
``log10(eta)`` over the steps before the stop (central differences), ``m`` the step of the
lowest smoothed loss, and ``t*`` the step of the most negative slope among steps
``0 .. m``. The suggestion is the rate of the fractional step ``t* - lag(t*)``, i.e.
``eta_{t*}`` divided by ``(max_lr / min_lr) ** (lag / (steps - 1))``, where ``lag`` is the
mean lag of the bias-corrected moving average (:func:`smoothing_lag`, about
``beta / (1 - beta)`` = 49 steps for 0.98). No suggestion when the smoothed loss never falls.

Why this rule. Steepest descent rather than the lowest loss: by the lowest point the
rate is already where the loss is about to turn up, too large for a whole training run;
where the loss falls fastest per decade, every step helps most and the rate is still
clear of the blow-up (Smith reads a range off the test, from where accuracy starts to
rise to where it slows or turns ragged; the steepest point lies inside it). Only the descent up to the lowest point is
searched, because past it the curve is dominated by noise whose dips are not descents.
The division by the lag factor is not an arbitrary safety margin: a moving average
reports at step ``t`` the losses of about ``lag`` steps earlier, taken at rates
``(max_lr / min_lr) ** (lag / (steps - 1))`` times smaller (about 15 times for the
defaults), so without it the suggestion would belong to the curve of a later, larger
rate. Checked against brute force in ``tests/test_sweep.py``: on a synthetic problem the
suggestion lies among the constant rates that reduce the training loss most in the same
number of steps.

Caveat: on sparse text with ``batch_size=1``, 300 steps see only 300 documents, and the
loss before each update is close to a held-out loss; the curve is noisy and the
suggestion is a starting point for a sweep, not a replacement for one.

The probe reads and featurizes through :func:`lintext.pipeline.prepare_data`, as training
does; its page is :mod:`lintext.report.probe_page`.
"""

from __future__ import annotations

import csv
import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..engine import kernels, losses
from ..engine.optimizers import STEP_OPTIMIZERS, kernel_hyperparameters
from ..engine.options import TrainOptions
from ..engine.schedules import SCHEDULE_CONSTANT
from ..engine.trainer import check_training_arrays
from ..errors import ConfigError
from ..files import atomic_directory, atomic_file, write_json
from ..pipeline import Progress, prepare_data
from ..report.probe_page import probe_page
from ..text.featurizer import FeaturizerConfig
from ..text.readers import ReaderOptions


@dataclass
class ProbeResult:
    """Rates tried, raw and smoothed losses, the suggestion and why the probe stopped."""

    learning_rates: np.ndarray
    losses: np.ndarray
    smoothed: np.ndarray
    slopes: np.ndarray
    suggestion: float | None
    steepest_step: int | None
    stop_reason: str
    settings: dict = field(default_factory=dict)

    def to_json(self) -> dict:
        return {**self.settings, "suggestion": self.suggestion, "steepest_step": self.steepest_step,
                "stop_reason": self.stop_reason, "steps_run": int(len(self.learning_rates))}

    def save(self, path: str | os.PathLike, force: bool = False) -> Path:
        """Write ``probe.csv`` (one row per step), ``probe.json`` and ``probe.html`` (the plot) atomically.

        An existing ``path`` is replaced only when it is a lintext probe folder, unless ``force``.
        """

        def table(fh):
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(["step", "learning_rate", "loss", "smoothed_loss", "slope"])
            for t, row in enumerate(zip(self.learning_rates, self.losses, self.smoothed, self.slopes)):
                writer.writerow([t] + ["" if not math.isfinite(v) else repr(float(v)) for v in row])

        def fill(tmp: Path):
            atomic_file(tmp / "probe.csv", table)
            write_json(tmp / "probe.json", self.to_json())
            atomic_file(tmp / "probe.html", lambda fh: fh.write(probe_page(self)))

        return atomic_directory(Path(path), fill, kind="probe", force=force)


def smoothing_lag(beta: float, count: int) -> float:
    """Mean lag, in steps, of the bias-corrected moving average after ``count`` values.

    Its weights are ``(1 - beta) * beta^s / (1 - beta^count)`` on the value ``s`` steps back
    (``s = 0 .. count-1``), so the mean lag is ``beta / (1 - beta) - count * beta^count / (1 - beta^count)``:
    0 for the first value, tending to ``beta / (1 - beta)`` (49 steps for 0.98).
    """
    if beta == 0:
        return 0.0
    return beta / (1.0 - beta) - count * beta**count / (1.0 - beta**count)


def probe_learning_rate(X, y, n_labels: int, options: TrainOptions | dict | None = None, *, min_lr: float = 1e-6,
                        max_lr: float = 10.0, steps: int = 300, smoothing: float = 0.98, blowup: float = 4.0,
                        progress: Progress | None = None) -> ProbeResult:
    """Run the learning-rate probe (see the module docstring) on a featurized training set.

    Parameters
    ----------
    X : scipy.sparse CSR matrix; y : int array of label indices; n_labels : int
    options : TrainOptions or dict
        Loss, optimizer (not lbfgs), batch size, L2, lazy mode, dtype, seed and the rule's
        hyperparameters are used; ``learning_rate``, ``schedule`` and ``epochs`` are not.
    min_lr, max_lr : float
        First and last step size (``0 < min_lr < max_lr``).
    steps : int
        Most steps (at least 10).
    smoothing : float
        ``beta`` of the moving average, in ``[0, 1)``.
    blowup : float
        Stop when the smoothed loss exceeds ``blowup`` times its minimum so far (> 1).
    progress : callable
        Called after every step with ``{"stage": "probe", "step", "steps", "learning_rate", "smoothed_loss"}``.
    """
    options = TrainOptions.from_mapping(options).validate()
    if options.optimizer not in STEP_OPTIMIZERS:
        raise ConfigError("--optimizer", options.optimizer, f"the probe needs a rule with a learning rate: {', '.join(STEP_OPTIMIZERS)}")
    if not (0 < min_lr < max_lr and math.isfinite(max_lr)):
        raise ConfigError("--min-lr", min_lr, f"must be positive and below --max-lr ({max_lr:g})")
    if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) or steps < 10:
        raise ConfigError("--steps", steps, "must be a whole number of at least 10")
    if not 0 <= smoothing < 1:
        raise ConfigError("--smoothing", smoothing, "must be at least 0 and below 1")
    if not blowup > 1:
        raise ConfigError("--blowup", blowup, "must be above 1")
    X, y = check_training_arrays(X, y, int(n_labels))
    n, n_features = X.shape
    dtype = np.dtype(options.precision)
    data = np.ascontiguousarray(X.data, dtype=dtype)
    code = options.spec.code
    hyper = kernel_hyperparameters(options.make_rule())
    params = np.zeros((n_features + 1, int(n_labels)), dtype=dtype)
    state = kernels.KernelState.new(n_features, int(n_labels), code, dtype)
    rng = np.random.default_rng(options.seed)
    batch = min(options.batch_size, n)
    rates = min_lr * (max_lr / min_lr) ** (np.arange(steps) / (steps - 1))

    order, pos = rng.permutation(n).astype(np.int64), 0
    raw, smooth = [], []
    average, best, reason, stopped = 0.0, math.inf, "reached --max-lr", False
    for t, rate in enumerate(rates):
        if pos + batch > n:
            order, pos = rng.permutation(n).astype(np.int64), 0
        rows = order[pos:pos + batch]
        pos += batch
        loss_sum, finite = kernels.run_epoch(
            X.indptr, X.indices, data, y, rows, params, state, loss_code=losses.LOSS_CODES[options.loss],
            optimizer_code=code, schedule_code=SCHEDULE_CONSTANT, learning_rate=float(rate), decay=0.0,
            l2=options.l2, batch_size=len(rows), lazy=options.lazy, **hyper)
        loss = loss_sum / len(rows)
        average = smoothing * average + (1.0 - smoothing) * loss
        value = average / (1.0 - smoothing ** (t + 1))
        raw.append(loss)
        smooth.append(value)
        if progress is not None:
            progress({"stage": "probe", "step": t + 1, "steps": steps, "learning_rate": float(rate), "smoothed_loss": value})
        if not finite or not math.isfinite(value) or not np.isfinite(params).all():
            reason, stopped = f"loss not finite at learning rate {rate:.3g}", True
            break
        best = min(best, value)
        if value > blowup * best:
            reason, stopped = f"smoothed loss above {blowup:g} x its minimum at learning rate {rate:.3g}", True
            break

    k = len(smooth)
    lr, raw, smooth = rates[:k], np.asarray(raw, dtype=np.float64), np.asarray(smooth, dtype=np.float64)
    slopes = np.full(k, np.nan)
    usable = k - 1 if stopped else k  # the step that stopped the probe is not a candidate
    steepest = None
    if usable >= 2:
        slopes[:usable] = np.gradient(smooth[:usable], np.log10(lr[:usable]))
        lowest = int(np.argmin(smooth[:usable]))  # candidates: the descent up to the lowest smoothed loss
        if lowest >= 1 and slopes[:lowest + 1].min() < 0:
            steepest = int(np.argmin(slopes[:lowest + 1]))
    suggestion = None
    if steepest is not None:  # read the rate where the smoothed value comes from: its mean lag earlier
        lag = smoothing_lag(smoothing, steepest + 1)
        suggestion = float(min_lr * (max_lr / min_lr) ** (max(0.0, steepest - lag) / (steps - 1)))
    settings = {"optimizer": options.optimizer, "loss": options.loss, "batch_size": batch, "min_lr": min_lr, "max_lr": max_lr,
                "steps": steps, "smoothing": smoothing, "blowup": blowup, "seed": options.seed,
                "reference": "L. N. Smith, Cyclical Learning Rates for Training Neural Networks, 2017 (LR range test)"}
    return ProbeResult(lr, raw, smooth, slopes, suggestion, steepest, reason, settings)


def probe(data, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
          options: TrainOptions | dict | None = None, reader: ReaderOptions | None = None,
          progress: Progress | None = None, **probe_options) -> ProbeResult:
    """Read and featurize ``data`` as :func:`lintext.pipeline.train` does, then probe on its training rows.

    ``dev`` / ``dev_fraction`` only decide which rows are held out (the probe never
    looks at dev rows), so it sees the rows a ``train`` run with the same options trains on.
    ``probe_options`` go to :func:`probe_learning_rate`.
    """
    options = TrainOptions.from_mapping(options).validate()
    prepared = prepare_data(data, dev, dev_fraction, featurizer, options.seed, reader, progress=progress, options=options)
    result = probe_learning_rate(prepared.X, prepared.y, len(prepared.labels), options, progress=progress, **probe_options)
    result.settings["data"] = prepared.description
    return result
