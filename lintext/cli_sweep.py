"""Commands that search for a step size: sweep and probe."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from .cli import (DEFAULTS, DataPath, EpochDisplay, FormatOpt, LabelColumnOpt, QuietOpt, TextColumnOpt, command, err,
                  featurizer_options, out, show_progress, status, validate_options)
from .features import FeaturizerConfig
from .errors import ConfigError, LinTextError
from .train import TrainOptions


# ------------------------------------------------------------------ sweep / probe


class SweepDisplay(EpochDisplay):
    """Reading and featurizing as for train, then one bar over the runs of a sweep or the steps of a probe."""

    def __call__(self, event: dict) -> None:
        stage = event.get("stage")
        if not self.enabled or stage not in ("run", "probe"):
            return super().__call__(event)
        self._stop_spinner()
        total = event["total"] if stage == "run" else event["steps"]
        if self.progress is None:
            self.progress = Progress(TextColumn("{task.description} {task.completed}/{task.total}"), BarColumn(),
                                     TextColumn("{task.fields[info]}"), TimeElapsedColumn(), console=err)
            self.progress.start()
            self.task = self.progress.add_task("run" if stage == "run" else "step", total=total, info="")
        if stage == "run":
            row = event["row"]
            info = f"{row['optimizer']} {row['learning_rate']:g}: {row['status']}"
            self.progress.update(self.task, completed=event["done"], info=info)
        else:
            info = f"learning rate {event['learning_rate']:.3g}  smoothed loss {event['smoothed_loss']:.4f}"
            self.progress.update(self.task, completed=event["step"], info=info)


@command
@featurizer_options
def sweep(
    data: DataPath,
    out_dir: Annotated[Path, typer.Option("--out", help="Folder for sweep.csv, sweep.json, sweep.html and best/ (replaced atomically).")],
    dev: Annotated[Optional[Path], typer.Option("--dev", help="A dev set; then all of DATA trains.")] = None,
    dev_fraction: Annotated[float, typer.Option("--dev-fraction", help="Share of DATA held out for dev (stratified, seeded).")] = 0.1,
    optimizers: Annotated[str, typer.Option("--optimizers", help="Comma-separated optimizers: sgd, adagrad, adadelta, rmsprop, adam.")] = "sgd,adagrad,adam",
    learning_rates: Annotated[str, typer.Option("--learning-rates", help="Comma-separated learning rates, each tried with every optimizer.")] = "1e-4,1e-3,1e-2,1e-1,1",
    jobs: Annotated[int, typer.Option("--jobs", help="Worker processes (0 = all cores); results do not depend on it.")] = 0,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    featurizer: FeaturizerConfig = None,
    loss: Annotated[str, typer.Option("--loss", help="softmax (probabilities) or hinge (multiclass, Crammer-Singer).")] = DEFAULTS.loss,
    schedule: Annotated[str, typer.Option("--schedule", help="constant or plateau (inverse, inverse-sqrt: sgd only).")] = DEFAULTS.schedule,
    epochs: Annotated[int, typer.Option("--epochs", help="Most epochs per run.")] = DEFAULTS.epochs,
    batch_size: Annotated[int, typer.Option("--batch-size", help="Examples per step (1 = per-example updates).")] = DEFAULTS.batch_size,
    patience: Annotated[int, typer.Option("--patience", help="Epochs without dev improvement before a run stops (0 = never early).")] = DEFAULTS.patience,
    min_improvement: Annotated[float, typer.Option("--min-improvement", help="Smallest change that counts as an improvement.")] = DEFAULTS.min_improvement,
    stop_metric: Annotated[str, typer.Option("--stop-metric", help="dev-loss, accuracy or macro-f1: stops each run and ranks the runs.")] = DEFAULTS.stop_metric.replace("_", "-"),
    l2: Annotated[float, typer.Option("--l2", help="L2 penalty (0 = none).")] = DEFAULTS.l2,
    seed: Annotated[int, typer.Option("--seed", help="Seed for the dev split and the shuffling, the same for every run.")] = DEFAULTS.seed,
    dense: Annotated[bool, typer.Option("--dense", help="Update every coordinate every step (slow reference mode).")] = False,
    float32: Annotated[bool, typer.Option("--float32", help="Keep weights and optimizer state in float32.")] = False,
    quiet: QuietOpt = False,
):
    """Train every optimizer with every learning rate in parallel; keep the best run as a model.

    Example: lintext sweep data/demo/train.csv --dev data/demo/dev.csv --optimizers sgd,adam --learning-rates 0.01,0.1,1 --out sweeps/demo
    """
    from rich import box

    from . import sweep as sweeping

    fconfig = featurizer
    names = sweeping.parse_optimizers(optimizers, "--optimizers")
    rates = sweeping.parse_learning_rates(learning_rates, "--learning-rates")
    options = TrainOptions(
        loss=loss, optimizer=names[0], learning_rate=rates[0], schedule=schedule.replace("-", "_"), epochs=epochs,
        batch_size=batch_size, patience=patience, min_improvement=min_improvement, stop_metric=stop_metric.replace("-", "_"),
        l2=l2, seed=seed, lazy=not dense, dtype="float32" if float32 else "float64",
    )
    validate_options(options)
    if not 0 <= dev_fraction < 1:
        raise ConfigError("--dev-fraction", dev_fraction, "must be at least 0 and below 1")
    if jobs < 0:
        raise ConfigError("--jobs", jobs, "must be 0 (all cores) or a number of processes")
    display = SweepDisplay(show_progress(quiet))
    try:
        result = sweeping.sweep(
            data, dev=dev, dev_fraction=0 if dev is not None else dev_fraction, featurizer=fconfig, options=options,
            optimizers=names, learning_rates=rates, n_jobs=jobs, fmt=fmt, text_column=text_column,
            label_column=label_column, progress=display,
        )
    finally:
        display.close()
    with status(f"Writing {out_dir}", quiet):
        where = result.save(out_dir)
    metric = sweeping.METRIC_NAMES[result.stop_metric]
    table = Table(title=f"{len(result.rows)} runs ranked by {metric}, {result.settings['jobs']} job(s)",
                  box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("optimizer", "rate", "status", "dev loss", "accuracy", "macro-F1", "best", "epochs", "s"):
        table.add_column(col, justify="left" if col in ("optimizer", "status") else "right", no_wrap=True)
    for row in result.rows:
        table.add_row(row["optimizer"], f"{row['learning_rate']:g}", row["status"],
                      "" if row["dev_loss"] is None else f"{row['dev_loss']:.4g}", sweeping.format_cell(row["dev_accuracy"]),
                      sweeping.format_cell(row["dev_macro_f1"]), sweeping.format_cell(row["best_epoch"]), str(row["epochs_run"]),
                      f"{row['seconds']:.1f}", style="bold green" if row["run"] == result.best else None)
    # Never cut a cell: when the table is wider than the terminal (or piped), print it at its own width.
    needed = Console(width=400).measure(table).maximum
    wide = out if out.is_terminal and out.width >= needed else Console(file=out.file, width=needed, highlight=False,
                                                                       force_terminal=out.is_terminal)
    wide.print(table)
    if result.best is None:
        raise LinTextError(f"every run diverged; results written to {where}, no model saved; try smaller learning rates")
    best = result.rows[result.best]
    out.print(f"best: {best['optimizer']} at learning rate {best['learning_rate']:g} ({metric} {best['stop_value']:.4f}); "
              f"model written to {where / 'best'}", markup=False, soft_wrap=True)
    out.print(f"results written to {where}", markup=False, soft_wrap=True)


@command
@featurizer_options
def probe(
    data: DataPath,
    out_dir: Annotated[Optional[Path], typer.Option("--out", help="Folder for probe.csv, probe.json and probe.html (the plot).")] = None,
    optimizer: Annotated[str, typer.Option("--optimizer", help="sgd, adagrad, adadelta, rmsprop or adam.")] = DEFAULTS.optimizer,
    steps: Annotated[int, typer.Option("--steps", help="Most steps; the learning rate grows geometrically over them.")] = 300,
    min_lr: Annotated[float, typer.Option("--min-lr", help="Learning rate of the first step.")] = 1e-6,
    max_lr: Annotated[float, typer.Option("--max-lr", help="Learning rate of the last step (the probe stops earlier on blow-up).")] = 10.0,
    smoothing: Annotated[float, typer.Option("--smoothing", help="Factor of the moving average of the loss.")] = 0.98,
    dev: Annotated[Optional[Path], typer.Option("--dev", help="A dev set; then all of DATA is probed on.")] = None,
    dev_fraction: Annotated[float, typer.Option("--dev-fraction", help="Share of DATA held out (not probed on), as for train.")] = 0.1,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    featurizer: FeaturizerConfig = None,
    loss: Annotated[str, typer.Option("--loss", help="softmax or hinge.")] = DEFAULTS.loss,
    batch_size: Annotated[int, typer.Option("--batch-size", help="Examples per step, as you will train.")] = DEFAULTS.batch_size,
    l2: Annotated[float, typer.Option("--l2", help="L2 penalty (0 = none).")] = DEFAULTS.l2,
    seed: Annotated[int, typer.Option("--seed", help="Seed for the dev split and the order of the rows.")] = DEFAULTS.seed,
    dense: Annotated[bool, typer.Option("--dense", help="Update every coordinate every step.")] = False,
    float32: Annotated[bool, typer.Option("--float32", help="Keep weights and optimizer state in float32.")] = False,
    quiet: QuietOpt = False,
):
    """Suggest a learning rate from one short run whose learning rate grows step by step (Smith's range test, 2017).

    Example: lintext probe data/demo/train.csv --optimizer adam --out probes/adam
    """
    from .probe import probe as run_probe

    fconfig = featurizer
    options = TrainOptions(loss=loss, optimizer=optimizer, batch_size=batch_size, l2=l2, seed=seed, lazy=not dense,
                           dtype="float32" if float32 else "float64")
    options.validate()
    if not 0 <= dev_fraction < 1:
        raise ConfigError("--dev-fraction", dev_fraction, "must be at least 0 and below 1")
    display = SweepDisplay(show_progress(quiet))
    try:
        result = run_probe(data, dev=dev, dev_fraction=0 if dev is not None else dev_fraction, featurizer=fconfig,
                           options=options, fmt=fmt, text_column=text_column, label_column=label_column, progress=display,
                           steps=steps, min_lr=min_lr, max_lr=max_lr, smoothing=smoothing)
    finally:
        display.close()
    last = result.learning_rates[-1]
    out.print(f"{optimizer}: {len(result.learning_rates)} steps, learning rate {min_lr:g} to {last:.3g}; "
              f"stopped: {result.stop_reason}", markup=False, soft_wrap=True)
    if result.suggestion is None:
        out.print("no suggestion: the smoothed loss never fell; try a larger --max-lr or more --steps", markup=False)
    else:
        out.print(f"suggested learning rate: {result.suggestion:.3g}", markup=False)
    if out_dir is not None:
        with status(f"Writing {out_dir}", quiet):
            where = result.save(out_dir)
        out.print(f"plot and table written to {where}", markup=False, soft_wrap=True)
