"""Learning-rate probe: one short run that climbs a ladder of learning rates (Smith's range test).

Smith, "Cyclical Learning Rates for Training Neural Networks" (WACV 2017), section 3.3. The
ladder, the scoring of a rung, the stop, the reading and where each constant comes from are
in :mod:`lintext.tuning.ladder`. :func:`probe_learning_rate` runs the engine's own compiled
kernel (:func:`lintext.engine.kernels.run_epoch`) on a few minibatches per call (a rung's
steps in up to ten blocks), so the probe trains exactly as :func:`lintext.engine.trainer.fit`
would at each rate; minibatches are consecutive slices of a seeded permutation of the rows,
reshuffled when used up, and each example's loss is taken before its batch's update (no L2
term).

The probe reads and featurizes through :func:`lintext.pipeline.prepare_data`, as training
does (a feature store too: a store of several shards is stacked in memory, in file order); its files (``rungs.csv``, ``probe.json``, ``probe.html``) and page are described in
:mod:`lintext.report.probe_page`.
"""

from __future__ import annotations

import csv
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import ClassVar

import numpy as np

from ..engine import kernels, losses
from ..engine.optimizers import STEP_OPTIMIZERS, kernel_hyperparameters
from ..engine.options import TrainOptions
from ..engine.schedules import SCHEDULE_CONSTANT
from ..engine.shards import RowShards
from ..engine.trainer import check_training_arrays
from ..errors import ConfigError
from ..files import atomic_directory, atomic_file, csv_value, write_json
from ..from_store import stacked
from ..pipeline import Progress, prepare_data
from ..report.probe_page import RUNG_COLUMNS, SUMMARY_KEYS, probe_page, rate_text
from ..text.config import FeaturizerConfig
from ..text.readers import ReaderOptions
from .ladder import (BLOCKS_PER_RUNG, DEFAULT_HIGHEST_RATE, DEFAULT_LOWEST_RATE, DEFAULT_STEPS_PER_RUNG,
                     MAX_STEPS_PER_RUNG, METHOD, NOISE_MULTIPLE, RUNGS_BELOW_UPPER, RUNGS_PER_DECADE, ladder,
                     ladder_index, ladder_rate, read_ladder, suggestion_below)


@dataclass
class ProbeResult:
    """The rungs climbed and what they say; :meth:`summary` holds the reading."""

    learning_rates: np.ndarray
    mean_losses: np.ndarray
    standard_errors: np.ndarray
    steps: np.ndarray
    untrained_loss: float
    stopped_by: str
    verdict: str
    lowest_loss_rung: int | None
    settings: dict = field(default_factory=dict)
    noise_multiple: ClassVar[float] = NOISE_MULTIPLE
    rungs_below: ClassVar[int] = RUNGS_BELOW_UPPER

    @property
    def upper_bound(self) -> float | None:
        """Rate of the rung with the lowest mean loss, when the loss fell to it and rose after it."""
        return None if self.verdict != "suggested" else float(self.learning_rates[self.lowest_loss_rung])

    @property
    def suggested_rate(self) -> float | None:
        """Two rungs (a factor of 3.16) below the upper bound (:func:`lintext.tuning.ladder.suggestion_below`)."""
        upper = self.upper_bound
        return None if upper is None else suggestion_below(upper)

    def summary(self) -> dict:
        """The reading, under the keys of :data:`lintext.report.probe_page.SUMMARY_KEYS`."""
        low = self.lowest_loss_rung
        values = {
            "verdict": self.verdict,
            "suggested_rate": self.suggested_rate,
            "upper_bound": self.upper_bound,
            "lowest_loss_rate": None if low is None else float(self.learning_rates[low]),
            "lowest_mean_loss": None if low is None else float(self.mean_losses[low]),
            "untrained_loss": float(self.untrained_loss),
            "stopped_by": self.stopped_by,
            "stopped_at": float(self.learning_rates[-1]) if len(self.learning_rates) else None,
            "rungs_run": int(len(self.learning_rates)),
            "advice": advice(self),
        }
        return {key: values[key] for key in SUMMARY_KEYS}

    def rungs(self) -> list[dict]:
        """One row per rung, under the names of :data:`lintext.report.probe_page.RUNG_COLUMNS`."""
        return [{"rung": i + 1, "learning_rate": float(rate), "steps": int(steps), "mean_loss": float(loss),
                 "standard_error": float(error)}
                for i, (rate, steps, loss, error) in enumerate(zip(self.learning_rates, self.steps, self.mean_losses,
                                                                   self.standard_errors))]

    def to_json(self) -> dict:
        return {**self.settings, **self.summary()}

    def save(self, path: str | os.PathLike, force: bool = False) -> Path:
        """Write ``rungs.csv`` (one row per rung), ``probe.json`` and ``probe.html`` into a folder, atomically.

        An existing ``path`` is replaced only when it is a lintext probe folder, unless ``force``.
        """

        def table(fh):
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(RUNG_COLUMNS)
            for row in self.rungs():
                writer.writerow([csv_value(row[column]) for column in RUNG_COLUMNS])

        def fill(tmp: Path):
            atomic_file(tmp / "rungs.csv", table)
            write_json(tmp / "probe.json", self.to_json())
            atomic_file(tmp / "probe.html", lambda fh: fh.write(probe_page(self)))

        return atomic_directory(Path(path), fill, kind="probe", force=force)


class Minibatches:
    """Consecutive slices of ``batch`` rows of a seeded permutation, drawn afresh when used up
    (a remainder too short for a whole batch is skipped), as the trainer's epochs draw them."""

    def __init__(self, n: int, batch: int, rng: np.random.Generator):
        self.n, self.batch, self.rng = n, batch, rng
        self.order, self.pos = rng.permutation(n).astype(np.int64), 0

    def take(self, steps: int) -> np.ndarray:
        """The rows of the next ``steps`` batches, in order."""
        parts = []
        for _ in range(steps):
            if self.pos + self.batch > self.n:
                self.order, self.pos = self.rng.permutation(self.n).astype(np.int64), 0
            parts.append(self.order[self.pos:self.pos + self.batch])
            self.pos += self.batch
        return np.concatenate(parts)


def block_sizes(steps: int) -> list[int]:
    """A rung's steps in :data:`BLOCKS_PER_RUNG` near-equal blocks (one kernel call each), or one step per block."""
    blocks = min(steps, BLOCKS_PER_RUNG)
    return [steps // blocks + (1 if i < steps % blocks else 0) for i in range(blocks)]


def rung_score(block_sums, block_rows) -> tuple[float, float]:
    """Mean loss per example over a rung's blocks, and its standard error from the blocks' own means
    (their spread over the square root of their number)."""
    sums, rows = np.asarray(block_sums, dtype=np.float64), np.asarray(block_rows, dtype=np.float64)
    means = sums / rows
    with np.errstate(over="ignore", invalid="ignore"):  # losses near float64's largest: an infinite spread
        return float(sums.sum() / rows.sum()), float(means.std(ddof=1) / math.sqrt(len(means)))


def untrained_loss(loss: str, n_labels: int) -> float:
    """Mean loss of the all-zero model (every score 0): ``ln K`` for softmax, 1 for the hinge."""
    value, _ = losses.example_losses_grads(loss, np.zeros((1, int(n_labels))), np.zeros(1, dtype=np.int64))
    return float(value[0])


def advice(result: ProbeResult) -> str:
    """What to do next, in one line naming options as typed."""
    if result.verdict == "suggested":
        rate = result.suggested_rate
        near = ",".join(rate_text(ladder_rate(ladder_index(rate) + k)) for k in (-4, -2, 0, RUNGS_BELOW_UPPER))
        return (f"train with --learning-rate {rate_text(rate)}, or compare on dev data with lintext sweep "
                f"--optimizers {result.settings.get('optimizer')} --learning-rates {near}")
    top = rate_text(result.learning_rates[-1]) if len(result.learning_rates) else ""
    if result.verdict == "still-falling":
        return (f"the loss was still falling at the highest rate tried ({top}), so the upper bound lies above it: "
                "raise --highest-rate and probe again")
    if result.verdict == "level-at-top":
        return (f"the loss was lowest at {rate_text(result.learning_rates[result.lowest_loss_rung])} but had not risen "
                f"beyond its noise by the highest rate tried ({top}), so the upper bound may lie above it: "
                "raise --highest-rate and probe again")
    steps = result.settings.get("steps_per_rung")
    return (f"give the loss more steps to move (--steps-per-rung above {steps}), "
            "or start lower (--lowest-rate) if the first rungs already rose")


def check_probe_options(options: TrainOptions, lowest_rate, highest_rate, steps_per_rung) -> None:
    """Raise :class:`~lintext.errors.ConfigError` naming the first bad probe option as typed."""
    if options.optimizer not in STEP_OPTIMIZERS:
        raise ConfigError("--optimizer", options.optimizer,
                          f"the probe needs a rule with a learning rate: {', '.join(STEP_OPTIMIZERS)}")
    for option, value in (("--lowest-rate", lowest_rate), ("--highest-rate", highest_rate)):
        numeric = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
        if not numeric or not math.isfinite(value) or value <= 0:
            raise ConfigError(option, value, "must be a positive finite number")
    if not highest_rate >= 10 * lowest_rate * (1 - 1e-9):
        raise ConfigError("--highest-rate", highest_rate,
                          f"must be at least 10 times --lowest-rate ({lowest_rate:g}): the ladder needs a decade")
    if (isinstance(steps_per_rung, bool) or not isinstance(steps_per_rung, (int, np.integer))
            or not 2 <= steps_per_rung <= MAX_STEPS_PER_RUNG):
        raise ConfigError("--steps-per-rung", steps_per_rung,
                          f"must be a whole number from 2 (a rung's standard error needs two steps) to {MAX_STEPS_PER_RUNG}")


def probe_learning_rate(X, y, n_labels: int, options: TrainOptions | dict | None = None, *,
                        lowest_rate: float = DEFAULT_LOWEST_RATE, highest_rate: float = DEFAULT_HIGHEST_RATE,
                        steps_per_rung: int = DEFAULT_STEPS_PER_RUNG,
                        progress: Progress | None = None) -> ProbeResult:
    """Climb the ladder of learning rates (see the module docstring) on a featurized training set.

    Parameters
    ----------
    X : scipy.sparse CSR matrix; y : int array of label indices; n_labels : int
    options : TrainOptions or dict
        Loss, optimizer (not lbfgs), batch size, L2, updates, precision, seed and the rule's
        hyperparameters are used; ``learning_rate``, ``schedule`` and ``epochs`` are not.
    lowest_rate, highest_rate : float
        Ends of the ladder (rounded into it; at least a decade apart).
    steps_per_rung : int
        Steps at each rate (at least 2).
    progress : callable
        Called after every rung with ``{"stage": "probe", "rung", "rungs", "learning_rate", "mean_loss"}``.

    Returns
    -------
    ProbeResult
    """
    options = TrainOptions.from_mapping(options).validate()
    check_probe_options(options, lowest_rate, highest_rate, steps_per_rung)
    X, y = check_training_arrays(X, y, int(n_labels))
    n, n_features = X.shape
    dtype = np.dtype(options.precision)
    data = np.ascontiguousarray(X.data, dtype=dtype)
    hyper = kernel_hyperparameters(options.make_rule())
    params = np.zeros((n_features + 1, int(n_labels)), dtype=dtype)
    state = kernels.KernelState.new(n_features, int(n_labels), options.spec.code, dtype)
    rng = np.random.default_rng(options.seed)
    batch = min(options.batch_size, n)
    rates = ladder(lowest_rate, highest_rate)
    zero_loss = untrained_loss(options.loss, n_labels)

    draw = Minibatches(n, batch, rng)
    means, errors, steps_run, stopped_by = [], [], [], "highest-rate-reached"
    for index, rate in enumerate(rates):
        block_sums, block_rows, finite = [], [], True
        for steps in block_sizes(steps_per_rung):
            rows = draw.take(steps)
            # flush=False: the decaying rules catch an absent row's state up when it is next
            # touched, as the trainer does between epochs; SGD and AdaGrad owe nothing.
            loss_sum, finite = kernels.run_epoch(
                X.indptr, X.indices, data, y, rows, params, state, loss_code=losses.LOSS_CODES[options.loss],
                optimizer_code=options.spec.code, schedule_code=SCHEDULE_CONSTANT, learning_rate=float(rate),
                l2=options.l2, batch_size=batch, lazy=options.lazy, flush=False, **hyper)
            block_sums.append(loss_sum)
            block_rows.append(len(rows))
            if not finite or not math.isfinite(loss_sum):
                finite = False
                break
        mean, error = rung_score(block_sums, block_rows) if finite else (math.inf, math.inf)
        means.append(mean)
        errors.append(error)
        steps_run.append(sum(block_rows) // batch)
        if progress is not None:
            progress({"stage": "probe", "rung": index + 1, "rungs": len(rates), "learning_rate": float(rate),
                      "mean_loss": mean})
        if not finite:
            stopped_by = "loss-not-finite"
            break
        if mean > zero_loss:
            stopped_by = "mean-loss-above-untrained"
            break
    if stopped_by == "highest-rate-reached" and not kernels.all_finite(params):
        means[-1] = errors[-1] = math.inf
        stopped_by = "loss-not-finite"

    means, errors = np.asarray(means), np.asarray(errors)
    verdict, low = read_ladder(means, errors, stopped_by != "highest-rate-reached")
    settings = {"optimizer": options.optimizer, "loss": options.loss, "batch_size": batch,
                "lowest_rate": float(rates[0]), "highest_rate": float(rates[-1]), "steps_per_rung": steps_per_rung,
                "rungs_per_decade": RUNGS_PER_DECADE, "seed": options.seed, "method": METHOD}
    return ProbeResult(rates[:len(means)], means, errors, np.asarray(steps_run), zero_loss, stopped_by, verdict, low,
                       settings)


def probe(data, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
          options: TrainOptions | dict | None = None, reader: ReaderOptions | None = None,
          progress: Progress | None = None, **probe_options) -> ProbeResult:
    """Read and featurize ``data`` as :func:`lintext.pipeline.train` does, then probe on its training rows.

    ``dev`` / ``dev_fraction`` only decide which rows are held out (the probe never
    looks at dev rows), so it sees the rows a ``train`` run with the same options trains on.
    ``probe_options`` (``lowest_rate``, ``highest_rate``, ``steps_per_rung``) go to
    :func:`probe_learning_rate`; they are checked before the data is read.
    """
    options = TrainOptions.from_mapping(options).validate()
    check_probe_options(options, probe_options.get("lowest_rate", DEFAULT_LOWEST_RATE),
                        probe_options.get("highest_rate", DEFAULT_HIGHEST_RATE),
                        probe_options.get("steps_per_rung", DEFAULT_STEPS_PER_RUNG))
    prepared = prepare_data(data, dev, dev_fraction, featurizer, options.seed, reader, progress=progress, options=options)
    X, y = stacked(prepared.X) if isinstance(prepared.X, RowShards) else (prepared.X, prepared.y)  # a sharded store
    result = probe_learning_rate(X, y, len(prepared.labels), options, progress=progress, **probe_options)
    result.settings["data"] = prepared.description
    return result
