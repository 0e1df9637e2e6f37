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
import html
import json
import math
import os
import tempfile
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable

import numpy as np
import scipy.sparse as sp
from joblib import Parallel, cpu_count, delayed, parallel_config

from .errors import ConfigError, DivergenceError, LinTextError
from .features import FeaturizerConfig
from .model import Model, _json_default, atomic_directory, atomic_file
from .pipeline import _as, _options_json, evaluate
from .pipeline import PreparedData, prepare_data
from .probe import STEP_OPTIMIZERS, figure_svg, format_cell, html_page
from .train import TrainOptions, fit

Progress = Callable[[dict], None]

DEFAULT_OPTIMIZERS = ("sgd", "adagrad", "adam")
DEFAULT_LEARNING_RATES = (1e-4, 1e-3, 1e-2, 1e-1, 1.0)
METRIC_KEYS = {"dev_loss": "dev_loss", "accuracy": "dev_accuracy", "macro_f1": "dev_macro_f1"}
METRIC_NAMES = {"dev_loss": "dev loss", "accuracy": "dev accuracy", "macro_f1": "dev macro-F1"}
CSV_COLUMNS = ("run", "optimizer", "learning_rate", "status", "stop_metric", "stop_value", "dev_accuracy",
               "dev_macro_f1", "dev_loss", "best_epoch", "epochs_run", "diverged_epoch", "seconds", "cpu_seconds")
TIMINGS = ("seconds", "cpu_seconds")  # the only columns that differ between repeated sweeps
_SHARED = ("data", "indices", "indptr", "y", "dev_data", "dev_indices", "dev_indptr", "dev_y")


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


# --------------------------------------------------------------------------- shared arrays


def share_arrays(folder: Path, X, y, X_dev, y_dev) -> dict:
    """Write the arrays workers open memory-mapped; returns the matrix shapes."""
    arrays = dict(data=X.data, indices=X.indices, indptr=X.indptr, y=y, dev_data=X_dev.data,
                  dev_indices=X_dev.indices, dev_indptr=X_dev.indptr, dev_y=y_dev)
    for name, array in arrays.items():
        np.save(folder / f"{name}.npy", np.ascontiguousarray(array), allow_pickle=False)
    return {"X": X.shape, "X_dev": X_dev.shape}


def open_shared(folder: Path, shapes: dict):
    """Open the shared arrays read-only and memory-mapped: ``(X, y, X_dev, y_dev)``, no copies."""
    a = {name: np.load(folder / f"{name}.npy", mmap_mode="r", allow_pickle=False) for name in _SHARED}
    X = sp.csr_matrix((a["data"], a["indices"], a["indptr"]), shape=shapes["X"], copy=False)
    X_dev = sp.csr_matrix((a["dev_data"], a["dev_indices"], a["dev_indptr"]), shape=shapes["X_dev"], copy=False)
    return X, a["y"], X_dev, a["dev_y"]


# --------------------------------------------------------------------------- runs


def _run(folder: str, shapes: dict, index: int, options: TrainOptions, n_labels: int) -> tuple[dict, list[dict]]:
    """Train run ``index`` in a worker; save its weights as ``run-<index>.npz`` in ``folder``."""
    folder = Path(folder)
    X, y, X_dev, y_dev = open_shared(folder, shapes)
    seen: list[dict] = []
    started, cpu = time.perf_counter(), time.process_time()
    try:
        result = fit(X, y, n_labels, X_dev, y_dev, options,
                     progress=lambda row: seen.append({k: v for k, v in row.items() if k != "epochs"}))
    except DivergenceError as exc:
        return run_row(index, options, seen, None, f"diverged at epoch {exc.epoch}", time.perf_counter() - started,
                       time.process_time() - cpu, diverged_epoch=exc.epoch), seen
    except LinTextError as exc:  # re-raised with a message only: typed errors need not unpickle
        raise LinTextError(str(exc)) from None
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    np.savez(folder / f"run-{index}.npz", coef=result.coef, intercept=result.intercept,
             **{f"stat_{k}": v for k, v in result.feature_stats.items()})
    status = "stopped early" if result.stopped_early else "finished"
    return run_row(index, options, result.history, result.best_epoch, status, seconds, cpu), result.history


def run_row(index: int, options: TrainOptions, history: list[dict], best_epoch: int | None, status: str,
            seconds: float, cpu_seconds: float, diverged_epoch: int | None = None) -> dict:
    """One row of the sweep table; metrics are those of the epoch whose weights were kept.

    ``seconds`` is the run's wall time, ``cpu_seconds`` the processor time of its process
    (the two differ when other processes compete for the cores).
    """
    best = history[best_epoch - 1] if best_epoch else {}
    return {
        "run": index, "optimizer": options.optimizer, "learning_rate": float(options.learning_rate), "status": status,
        "stop_metric": options.stop_metric, "stop_value": best.get(METRIC_KEYS[options.stop_metric]),
        "dev_accuracy": best.get("dev_accuracy"), "dev_macro_f1": best.get("dev_macro_f1"), "dev_loss": best.get("dev_loss"),
        "best_epoch": best_epoch, "epochs_run": diverged_epoch or len(history), "diverged_epoch": diverged_epoch,
        "seconds": round(seconds, 4), "cpu_seconds": round(cpu_seconds, 4),
    }


def best_run(rows: list[dict], stop_metric: str) -> int | None:
    """Index of the best row by ``stop_metric`` (first in grid order on ties); None when every run diverged."""
    sign = 1.0 if stop_metric == "dev_loss" else -1.0
    scored = [(sign * r["stop_value"], r["run"]) for r in rows if r["stop_value"] is not None and math.isfinite(r["stop_value"])]
    return min(scored)[1] if scored else None


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

    def save(self, path: str | os.PathLike) -> Path:
        """Write ``sweep.csv``, ``sweep.json``, ``sweep.html`` and ``best/`` (the best model) atomically."""
        def fill(tmp: Path):
            atomic_file(tmp / "sweep.csv", self._write_csv)
            atomic_file(tmp / "sweep.json", lambda fh: (json.dump(self.to_json(), fh, indent=2, allow_nan=False,
                                                                  default=_json_default), fh.write("\n")))
            atomic_file(tmp / "sweep.html", lambda fh: fh.write(sweep_page(self)))
            if self.model is not None:
                self.model.save(tmp / "best")

        return atomic_directory(Path(path), fill)

    def _write_csv(self, fh) -> None:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(CSV_COLUMNS)
        for row in self.rows:
            writer.writerow(["" if row[c] is None else (repr(row[c]) if isinstance(row[c], float) else row[c]) for c in CSV_COLUMNS])


def sweep(data, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
          options: TrainOptions | dict | None = None, optimizers=DEFAULT_OPTIMIZERS,
          learning_rates=DEFAULT_LEARNING_RATES, n_jobs: int | None = None, fmt: str | None = None,
          text_column: str = "text", label_column: str = "label", progress: Progress | None = None) -> SweepResult:
    """Train every (optimizer, learning rate) pair with early stopping, in parallel, and pick the best.

    Parameters
    ----------
    data, dev, dev_fraction, featurizer, fmt, text_column, label_column
        As for :func:`lintext.pipeline.train`; a dev set is required (it ranks the runs).
    options : TrainOptions or dict
        Shared options of every run; ``optimizer`` and ``learning_rate`` are replaced by the grid.
    optimizers, learning_rates : sequences, or comma-separated strings
    n_jobs : int or None
        Worker processes (``None`` or 0: every core). Runs are deterministic whatever the number.
    progress : callable
        Called with ``{"stage": "reading" | "featurizing" | "run", ...}``; a ``run`` event
        carries ``done``, ``total`` and the finished run's ``row``.

    Returns
    -------
    SweepResult
    """
    report = progress or (lambda event: None)
    base = _as(TrainOptions, options)
    base.validate()
    grid = make_grid(base, optimizers, learning_rates)
    if n_jobs is not None and (isinstance(n_jobs, bool) or not isinstance(n_jobs, int) or n_jobs < 0):
        raise ConfigError("--jobs", n_jobs, "must be a whole number of processes (0 = every core)")
    jobs = min(len(grid), n_jobs or cpu_count())
    if dev is None and not dev_fraction:
        raise ConfigError("--dev-fraction", dev_fraction, "a sweep ranks its runs on dev data; give --dev FILE or a fraction above 0")
    prepared = prepare_data(data, dev, dev_fraction, featurizer, base.seed, fmt, text_column, label_column, progress=report)
    n_labels = len(prepared.labels)
    started = time.perf_counter()
    found: dict[int, tuple[dict, list]] = {}
    with tempfile.TemporaryDirectory(prefix="lintext-sweep-") as folder:
        shapes = share_arrays(Path(folder), prepared.X, prepared.y, prepared.X_dev, prepared.y_dev)
        # Smallest learning rates first: they tend to run every epoch, so the long runs start
        # early and the short ones fill the gaps at the end (longest-first scheduling).
        order = sorted(range(len(grid)), key=lambda i: (grid[i].learning_rate, i))
        tasks = (delayed(_run)(folder, shapes, i, grid[i], n_labels) for i in order)
        with parallel_config(backend="loky", inner_max_num_threads=1):
            for row, history in Parallel(n_jobs=jobs, batch_size=1, return_as="generator_unordered")(tasks):
                found[row["run"]] = (row, history)
                report({"stage": "run", "done": len(found), "total": len(grid), "row": row})
        rows = [found[i][0] for i in range(len(grid))]
        histories = [found[i][1] for i in range(len(grid))]
        best = best_run(rows, base.stop_metric)
        model = None
        if best is not None:
            with np.load(Path(folder) / f"run-{best}.npz", allow_pickle=False) as saved:
                weights = {k: saved[k] for k in saved.files}
            model = _best_model(prepared, grid[best], rows[best], histories[best], weights, len(grid))
    settings = {
        "optimizers": list(dict.fromkeys(r.optimizer for r in grid)),
        "learning_rates": list(dict.fromkeys(r.learning_rate for r in grid)),
        "jobs": jobs, "parallel_seconds": round(time.perf_counter() - started, 3),
        "training": _options_json(base), "featurizer": prepared.featurizer.config.to_json(), "data": prepared.description,
    }
    return SweepResult(rows, histories, base.stop_metric, best, model, settings)


def _best_model(prepared: PreparedData, options: TrainOptions, row: dict, history: list, weights: dict, n_runs: int) -> Model:
    stats = {k[len("stat_"):]: v for k, v in weights.items() if k.startswith("stat_")}
    info = {
        "training": _options_json(options),
        "best_epoch": int(row["best_epoch"]),
        "stopped_early": row["status"] == "stopped early",
        "history": history,
        "data": dict(prepared.description),
        "metrics": {},
        "sweep": {"runs": n_runs, "run": row["run"], "stop_metric": options.stop_metric},
    }
    model = Model(prepared.featurizer, weights["coef"], weights["intercept"], prepared.labels, options.loss, info, stats)
    model.info["metrics"]["dev"] = evaluate(model, prepared.dev_set)
    return model


# --------------------------------------------------------------------------- page


def sweep_page(result: SweepResult) -> str:
    """``sweep.html``: the table, the stop metric against the learning rate, and every learning curve."""
    from matplotlib import colormaps
    from matplotlib.figure import Figure  # no pyplot: no global state, no display
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    metric = result.stop_metric
    optimizers = result.settings.get("optimizers") or list(dict.fromkeys(r["optimizer"] for r in result.rows))
    rates = sorted({r["learning_rate"] for r in result.rows})
    colours = {name: f"C{i}" for i, name in enumerate(optimizers)}

    fig = Figure(figsize=(7, 4.2))  # x is log10(rate) on a linear axis: works up to float64's largest rate
    ax = fig.add_subplot()
    for name in optimizers:
        runs = [r for r in result.rows if r["optimizer"] == name]
        ok = [r for r in runs if r["stop_value"] is not None]
        ax.plot([math.log10(r["learning_rate"]) for r in ok], [r["stop_value"] for r in ok], "o-", color=colours[name], label=name)
        bad = [math.log10(r["learning_rate"]) for r in runs if r["diverged_epoch"] is not None]
        if bad:  # drawn at the bottom edge: a diverged run has no dev value
            ax.scatter(bad, [0.03] * len(bad), marker="x", s=70, color=colours[name], transform=ax.get_xaxis_transform(),
                       label=f"{name}: diverged", clip_on=False)
    if result.best is not None:
        best = result.rows[result.best]
        ax.plot([math.log10(best["learning_rate"])], [best["stop_value"]], "*", ms=16, color="gold", mec="black", label="best run")
    ax.set_xlim(math.log10(rates[0]) - 0.3, math.log10(rates[-1]) + 0.3)
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"$10^{{{v:.0f}}}$"))
    ax.set_xlabel("learning rate (log scale)")
    ax.set_ylabel(f"{METRIC_NAMES[metric]} at the best epoch")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize="small")

    curves = Figure(figsize=(4.2 * len(optimizers), 3.6))
    axes = curves.subplots(1, len(optimizers), squeeze=False, sharey=True)[0]
    shades = {rate: colormaps["viridis"](0.9 * i / max(1, len(rates) - 1)) for i, rate in enumerate(rates)}
    positive = all(h["dev_loss"] > 0 for hist in result.histories for h in hist if h.get("dev_loss") is not None)
    for ax2, name in zip(axes, optimizers):
        for row, hist in zip(result.rows, result.histories):
            if row["optimizer"] != name:
                continue
            epochs = [h["epoch"] for h in hist]
            values = [h["dev_loss"] for h in hist]
            line, = ax2.plot(epochs, values, "-", color=shades[row["learning_rate"]], label=f"{row['learning_rate']:g}")
            if row["diverged_epoch"] is not None:
                ax2.plot([row["diverged_epoch"]], [values[-1] if values else np.nan], "x", ms=9, color=line.get_color())
            elif row["best_epoch"]:
                ax2.plot([row["best_epoch"]], [values[row["best_epoch"] - 1]], "o", ms=4, color=line.get_color())
        ax2.set_title(name)
        ax2.set_xlabel("epoch")
        ax2.grid(True, alpha=0.3)
        if positive:
            ax2.set_yscale("log")
            for axis in (ax2.yaxis.set_major_formatter, ax2.yaxis.set_minor_formatter):
                axis(FuncFormatter(lambda v, _: f"{v:g}"))
    axes[0].set_ylabel("dev loss")
    axes[-1].legend(title="learning rate", fontsize="small")

    head = "".join(f"<th>{c}</th>" for c in ("optimizer", "learning rate", "status", "dev loss", "dev accuracy",
                                              "dev macro-F1", "best epoch", "epochs run", "seconds"))
    body = []
    for row in result.rows:
        cells = (row["optimizer"], f"{row['learning_rate']:g}", row["status"], "" if row["dev_loss"] is None else f"{row['dev_loss']:.4g}",
                 *(format_cell(row[k]) for k in ("dev_accuracy", "dev_macro_f1", "best_epoch", "epochs_run")),
                 format_cell(row["seconds"], 2))
        cls = ' class="best"' if row["run"] == result.best else ""
        body.append(f"<tr{cls}>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in cells) + "</tr>")
    data = result.settings.get("data", {})
    intro = (f"<p>{len(result.rows)} runs on {html.escape(str(data.get('train', '')))} "
             f"({data.get('train_documents', '?')} documents, dev: {html.escape(str(data.get('dev', '')))}, "
             f"{data.get('dev_documents', '?')} documents); ranked by {METRIC_NAMES[metric]}. "
             "Best run in bold; its model is in <code>best/</code>.</p>")
    return html_page("lintext sweep", intro + f"<table><tr>{head}</tr>{''.join(body)}</table>"
                     f"<h2>{METRIC_NAMES[metric].capitalize()} against the learning rate</h2>"
                     "<p>Crosses on the bottom edge: runs that diverged.</p>" + figure_svg(fig)
                     + "<h2>Learning curves</h2><p>Dev loss per epoch; a dot marks the best epoch, a cross the "
                     "epoch at which a run diverged.</p>" + figure_svg(curves))
