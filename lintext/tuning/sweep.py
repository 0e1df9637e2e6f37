"""Step-size sweeps and optimizer comparisons, run in parallel through joblib.

:func:`sweep` reads and featurizes the data once, writes the CSR arrays of the training
and dev matrices and the label arrays with ``np.save`` into a temporary folder, and
trains one model per (optimizer, learning rate) pair of the grid in worker processes
(joblib's ``loky`` backend). Each worker opens the arrays with
``np.load(..., mmap_mode="r")``: the operating system shares the pages between the
processes and nothing is copied per worker. The compiled kernels accept the read-only
arrays as they are, and :func:`lintext.train.fit` keeps them when they already have the
training dtype (with ``dtype="float32"`` every run converts ``data`` into its own copy).
Workers run with one thread each for numba and the BLAS libraries (joblib's
``inner_max_num_threads=1`` sets ``NUMBA_NUM_THREADS=1``, ``OMP_NUM_THREADS=1`` and the like
in them), so processes do not oversubscribe the cores.

Runs are dispatched smallest learning rate first (those tend to run every epoch), so the
long runs start early and the short ones fill the gaps at the end.

Determinism: every run is seeded by the shared options (``seed``), never by the worker
that ran it, so a sweep with one job and with several give the same weights and the same
table except the ``seconds``. A run that diverges is recorded with the status
``diverged at epoch N`` and never stops the sweep.

The best run has the best value of ``stop_metric`` at its best epoch (lowest dev loss,
or highest dev accuracy / macro-F1); ties go to the earlier run in grid order
(optimizers as listed, each over the learning rates as listed). Its model is rebuilt in
the parent process from the weights its worker saved, with the same ``info`` as a model
from :func:`lintext.pipeline.train`.
"""

from __future__ import annotations

import csv
import math
import os
import shutil
import tempfile
import time
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
from joblib import Parallel, delayed, parallel_config

from ..engine.optimizers import STEP_OPTIMIZERS
from ..engine.footprint import training_bytes, workers_that_fit
from ..engine.options import TrainOptions
from ..engine.shards import RowShards
from ..engine.sparsity import zero_weights
from ..errors import ConfigError
from ..files import atomic_directory, atomic_file, write_json
from ..model import Model, stored_weights
from ..outputs import output_kind, process_alive, remove_path
from ..pipeline import PreparedData, Progress, finish_with_dev, prepare_data
from ..report.sweep_page import SWEEP_COLUMNS, sweep_page
from ..resources import capped_processes, stop_worker_processes
from ..text.config import FeaturizerConfig
from ..text.readers import ReaderOptions
from .cluster import ClusterRunner, cluster_client
from .halving import successive_halving
from .runs import RunData, best_run, share_arrays, train_run

DEFAULT_OPTIMIZERS = ("sgd", "adagrad", "adam")
DEFAULT_LEARNING_RATES = (1e-4, 1e-3, 1e-2, 1e-1, 1.0)
TIMINGS = ("seconds", "cpu_seconds")  # the only columns that differ between repeated sweeps
SHARED_PREFIX = "lintext-sweep-"  # + process id: the temporary folder of the shared arrays


# --------------------------------------------------------------------------- grid


def parse_optimizers(text: str, option: str = "--optimizers") -> tuple[str, ...]:
    """``"sgd,adam"`` -> ``("sgd", "adam")``; a name without a learning rate is a ConfigError."""
    names = [part.strip().lower() for part in str(text).split(",")]
    for name in names:
        if name not in STEP_OPTIMIZERS:
            raise ConfigError(option, name, f"expected a comma-separated list of {', '.join(STEP_OPTIMIZERS)}")
    return _distinct(option, names)


def parse_learning_rates(text: str, option: str = "--learning-rates") -> tuple[float, ...]:
    """``"1e-3,0.1"`` -> ``(0.001, 0.1)``; anything but positive finite numbers is a ConfigError."""
    rates = []
    for part in str(text).split(","):
        try:
            value = float(part)
        except ValueError:
            raise ConfigError(option, part.strip(), "expected a comma-separated list of numbers, e.g. 1e-3,0.01,0.1") from None
        if not (math.isfinite(value) and value > 0):
            raise ConfigError(option, part.strip(), "learning rates must be positive and finite")
        rates.append(value)
    return _distinct(option, rates)


def _distinct(option, values) -> tuple:
    for i, value in enumerate(values):
        if value in values[:i]:
            raise ConfigError(option, value, "listed twice")
    return tuple(values)


def make_grid(options: TrainOptions, optimizers, learning_rates) -> list[TrainOptions]:
    """The runs of a sweep: ``options`` with each optimizer and learning rate, validated."""
    optimizers = parse_optimizers(optimizers) if isinstance(optimizers, str) else parse_optimizers(",".join(optimizers))
    rates = parse_learning_rates(learning_rates if isinstance(learning_rates, str) else ",".join(map(repr, learning_rates)))
    grid = [replace(options, optimizer=name, learning_rate=rate) for name in optimizers for rate in rates]
    for run in grid:
        run.validate()
    return grid


@dataclass
class SweepResult:
    """Rows of the sweep table (grid order), per-run histories, the best run and its model."""

    rows: list[dict]
    histories: list[list[dict]]
    stop_metric: str
    best: int | None
    model: Model | None
    settings: dict = field(default_factory=dict)

    def to_json(self) -> dict:
        return {**self.settings, "stop_metric": self.stop_metric, "best_run": self.best,
                "runs": [{**row, "history": hist} for row, hist in zip(self.rows, self.histories)]}

    def save(self, path: str | os.PathLike, force: bool = False) -> Path:
        """Write ``sweep.csv``, ``sweep.json``, ``sweep.html`` and ``best/`` (the best model, with its
        ``features.csv`` and ``report.html``) atomically.

        An existing ``path`` is replaced only when it is a lintext sweep folder, unless ``force``.
        When no run gave a model, the ``best/`` of the sweep already at ``path`` is kept (and
        ``sweep.json`` says so with ``"best_kept_from_previous_sweep": true``).
        """
        previous = Path(path).resolve() / "best"

        def fill(tmp: Path):
            keep = self.model is None and output_kind(previous) == "model"
            self.settings["best_kept_from_previous_sweep"] = keep
            atomic_file(tmp / "sweep.csv", self._write_csv)
            write_json(tmp / "sweep.json", self.to_json())
            atomic_file(tmp / "sweep.html", lambda fh: fh.write(sweep_page(self)))
            if self.model is not None:
                from ..report.writer import write_report

                self.model.save(tmp / "best", extra=lambda folder: write_report(self.model, folder))
            elif keep:  # hard links where the file system has them: no copy of the weights
                shutil.copytree(previous, tmp / "best", symlinks=True, copy_function=_link_or_copy)

        return atomic_directory(Path(path), fill, kind="sweep", force=force)

    @property
    def kept_previous_best(self) -> bool:
        """True when :meth:`save` kept the previous sweep's ``best/`` because no run gave a model."""
        return bool(self.settings.get("best_kept_from_previous_sweep"))

    def _write_csv(self, fh) -> None:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(SWEEP_COLUMNS)
        for row in self.rows:
            writer.writerow(["" if row[c] is None else (repr(row[c]) if isinstance(row[c], float) else row[c]) for c in SWEEP_COLUMNS])


def sweep(data, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
          options: TrainOptions | dict | None = None, optimizers=DEFAULT_OPTIMIZERS,
          learning_rates=DEFAULT_LEARNING_RATES, workers: int | None = None, reader: ReaderOptions | None = None,
          n_jobs: int = 1, progress: Progress | None = None, halving: int | None = None, cluster=None,
          stream: bool | None = None) -> SweepResult:
    """Train every (optimizer, learning rate) pair with early stopping, in parallel, and pick the best.

    Parameters
    ----------
    data, dev, dev_fraction, featurizer, reader, n_jobs
        As for :func:`lintext.pipeline.build_model`; a dev set is required (it ranks the runs).
        ``data`` may be a feature store (``lintext featurize``).
    options : TrainOptions or dict
        Shared options of every run; ``optimizer`` and ``learning_rate`` are replaced by the grid.
    optimizers, learning_rates : sequences, or comma-separated strings
    workers : int or None
        Runs at once, each in its own process (``None`` or 0: one per core). Runs are
        deterministic whatever the number.
    halving : int or None
        Successive halving with this factor (:mod:`lintext.tuning.halving`); ``None``: the full grid.
    cluster : str, a ``distributed.Client`` or None
        Run each run as a task on the Dask scheduler at this address (``tcp://host:port``) instead
        of local processes (:mod:`lintext.tuning.cluster`); the results are the same.
    progress : callable
        Called with ``{"stage": "reading" | "featurizing" | "run", ...}``; a ``run`` event
        carries ``done``, ``total`` and the finished run's ``row`` (on a cluster also ``running``
        and ``queued``; with halving ``rung``, ``rungs`` and ``epochs``).

    Returns
    -------
    SweepResult
    """
    report = progress or (lambda event: None)
    # no refit: a run's weights are those its dev scores describe, which rank it (and its model says so)
    base = replace(TrainOptions.from_mapping(options), refit=False).validate()
    grid = make_grid(base, optimizers, learning_rates)
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 0):
        raise ConfigError("--workers", workers, "must be a whole number of processes (0 = one per core)")
    if halving is not None and (isinstance(halving, bool) or not isinstance(halving, int) or halving < 2):
        raise ConfigError("--halving", halving, "the factor of successive halving is a whole number, at least 2")
    jobs = capped_processes(workers, cap=len(grid))
    if dev is None and not dev_fraction:
        raise ConfigError("--dev-fraction", dev_fraction, "a sweep ranks its runs on dev data; give --dev FILE or a fraction above 0")
    client = cluster_client(cluster) if cluster is not None else None  # fails fast, before featurizing
    try:
        heaviest = max(grid, key=lambda run: training_bytes(1, 1, run))  # refused up front if even it alone cannot fit
        prepared = prepare_data(data, dev, dev_fraction, featurizer, base.seed, reader, n_jobs, progress=report,
                                options=heaviest, stream=stream)
        if prepared.X_dev is None:
            raise ConfigError("--dev", None, f"{data}: a sweep ranks its runs on dev data, and the store holds none; give --dev FILE")
        n_labels = len(prepared.labels)
        jobs = workers_that_fit(jobs, prepared.X.shape[1], n_labels, heaviest)  # as many runs at once as fit in memory
        started = time.perf_counter()
        remove_shared_leftovers()
        with tempfile.TemporaryDirectory(prefix=f"{SHARED_PREFIX}{os.getpid()}-") as folder:
            shards = prepared.X if isinstance(prepared.X, RowShards) else None
            dev_shards = prepared.X_dev if isinstance(prepared.X_dev, RowShards) else None
            run_data = RunData(folder, share_arrays(Path(folder), prepared.X, prepared.y, prepared.X_dev, prepared.y_dev),
                               shards, dev_shards, labels=list(prepared.labels),
                               weights={"sample_weight": prepared.weights, "dev_weight": prepared.dev_weights})
            if client is not None:
                runner = ClusterRunner(client, run_data, n_labels)
                jobs = runner.workers
                report_run = lambda event: report(runner.annotate(event))  # noqa: E731  (+ running, queued)
            else:
                runner = local_runner(run_data, n_labels, jobs, folder)
                report_run = report
            # Smallest learning rates first: they tend to run every epoch, so the long runs start
            # early and the short ones fill the gaps at the end (longest-first scheduling).
            first = lambda task: (task[1].learning_rate, task[0])  # noqa: E731
            if halving is None:
                tasks = sorted(((i, grid[i], None, None) for i in range(len(grid))), key=first)
                results = {}
                for row, history, weights, _ in runner(tasks):
                    results[row["run"]] = (row, history, weights)
                    report_run({"stage": "run", "done": len(results), "total": len(grid), "row": row})
                rungs = None
            else:
                results, rungs = successive_halving(grid, runner, base.stop_metric, halving, report_run, order_key=first)
            if client is not None:
                runner.count_attempts(results)
                runner.close()
            rows = [results[i][0] for i in range(len(grid))]
            histories = [results[i][1] for i in range(len(grid))]
            best = best_run([r for r in rows if not r["status"].startswith("pruned")], base.stop_metric)
            model = None
            if best is not None:
                weights = results[best][2]
                if weights is None:
                    with np.load(Path(folder) / f"run-{best}.npz", allow_pickle=False) as saved:
                        weights = {k: saved[k] for k in saved.files}
                model = _best_model(prepared, grid[best], rows[best], histories[best], weights, len(grid))
    finally:
        if client is not None and isinstance(cluster, str):  # a Client given by the caller stays open
            client.close()
    settings = {
        "optimizers": list(dict.fromkeys(r.optimizer for r in grid)),
        "learning_rates": list(dict.fromkeys(r.learning_rate for r in grid)),
        "workers": jobs, "parallel_seconds": round(time.perf_counter() - started, 3),
        "training": base.to_json(), "featurizer": prepared.featurizer.config.to_json(), "data": prepared.description,
    }
    if client is not None:
        settings["cluster"] = runner.describe()
    if rungs is not None:
        settings["halving"] = {"factor": halving, "rungs": rungs,
                               "reference": "Jamieson & Talwalkar 2016 (successive halving); Li et al. 2017 (Hyperband bracket)"}
    return SweepResult(rows, histories, base.stop_metric, best, model, settings)


def _link_or_copy(source, target) -> None:
    try:
        os.link(source, target)
    except OSError:
        shutil.copy2(source, target)


def remove_shared_leftovers() -> None:
    """Remove the shared-array folders of sweeps whose process is gone (killed before its clean-up)."""
    root = Path(tempfile.gettempdir())
    for folder in root.glob(f"{SHARED_PREFIX}*"):
        pid = folder.name[len(SHARED_PREFIX):].split("-", 1)[0]
        if pid.isdigit() and int(pid) != os.getpid() and not process_alive(int(pid)):
            remove_path(folder)


def local_runner(run_data: RunData, n_labels: int, jobs: int, folder: str):
    """``runner(tasks)``: runs in ``jobs`` local processes (joblib's loky), one numba thread each, weights
    saved to ``folder``; yields results as they finish."""
    def run(tasks):
        calls = (delayed(train_run)(run_data, i, options, n_labels, epochs, folder, resume=resume)
                 for i, options, epochs, resume in tasks)
        try:
            with parallel_config(backend="loky", inner_max_num_threads=1):
                yield from Parallel(n_jobs=jobs, batch_size=1, return_as="generator_unordered")(calls)
        except BaseException:  # an error, Ctrl-C or SIGTERM: no worker runs on after the sweep
            stop_worker_processes()
            raise

    return run


def _best_model(prepared: PreparedData, options: TrainOptions, row: dict, history: list, weights: dict, n_runs: int) -> Model:
    stats = {k[len("stat_"):]: v for k, v in weights.items() if k.startswith("stat_")}
    info = {
        "training": options.to_json(),
        "best_epoch": int(row["best_epoch"]),
        "stopped_early": row["status"] == "stopped early",
        "history": history,
        "data": dict(prepared.description),
        "metrics": {},
        "sweep": {"runs": n_runs, "run": row["run"], "stop_metric": options.stop_metric},
    }
    info["sparsity"] = zero_weights(weights["coef"], prepared.featurizer.document_frequency)
    model = Model(prepared.featurizer, stored_weights(weights["coef"]), weights["intercept"], prepared.labels, options.loss,
                  info, stats)
    finish_with_dev(model, prepared)  # calibration, dev errors and dev metrics, as after train
    return model
