"""``lintext sweep`` and ``probe``: searching for a learning rate."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer
from rich import box
from rich.table import Table

from ..engine.options import TrainOptions
from ..errors import LinTextError
from ..text.config import FeaturizerConfig
from ..text.readers import ReaderOptions
from ..tuning.ladder import DEFAULT_HIGHEST_RATE, DEFAULT_LOWEST_RATE, DEFAULT_STEPS_PER_RUNG
from .app import command, out, show_progress, status
from .display import Display, print_wide
from .options import (ClusterOpt, DataPath, DevFractionOpt, DevOpt, ForceOpt, JobsOpt, QuietOpt, WeightColumnOpt,
                      featurizer_options, reader_options, training_options, with_weight_column)


@command
@training_options(exclude=("optimizer", "learning_rate", "refit"))
@featurizer_options
@reader_options
def sweep(
    data: DataPath,
    out_dir: Annotated[Path, typer.Option("--out", metavar="DIR", help="Folder for sweep.csv, sweep.json, sweep.html and best/ (a lintext sweep there is replaced atomically; any other folder is refused).")],
    dev: DevOpt = None,
    dev_fraction: DevFractionOpt = 0.1,
    optimizers: Annotated[str, typer.Option("--optimizers", help="Comma-separated optimizers: sgd, adagrad, adadelta, rmsprop, adam, ftrl.")] = "sgd,adagrad,adam",
    learning_rates: Annotated[str, typer.Option("--learning-rates", help="Comma-separated learning rates, each tried with every optimizer.")] = "1e-4,1e-3,1e-2,1e-1,1",
    workers: Annotated[int, typer.Option("--workers", help="Runs at once, each in its own process (0 = one per core); results do not depend on it.")] = 0,
    halving: Annotated[Optional[int], typer.Option(
        "--halving", metavar="FACTOR",
        help="Successive halving: train every run a few epochs, keep the best 1/FACTOR, give them FACTOR times "
             "the epochs, and repeat (e.g. 3); stopped runs show 'pruned at epoch N'.")] = None,
    cluster: ClusterOpt = None,
    reader: ReaderOptions = None,
    featurizer: FeaturizerConfig = None,
    options: TrainOptions = None,
    jobs: JobsOpt = 0,
    force: ForceOpt = False,
    weight_column: WeightColumnOpt = None,
    quiet: QuietOpt = False,
):
    """Train every optimizer with every learning rate in parallel; keep the best run as a model.

    DATA may be a feature store (lintext featurize); with --cluster every run is a task on a Dask cluster.

    Example: lintext sweep data/demo/train.csv --dev data/demo/dev.csv --optimizers sgd,adam --learning-rates 0.01,0.1,1 --out sweeps/demo
    """
    from ..report.sweep_page import HEADERS, METRIC_NAMES, TEXT_COLUMNS, cell, ranked, shown_columns
    from ..outputs import check_output_folder
    from ..tuning import sweep as sweeping

    check_output_folder(out_dir, "sweep", force, inputs=[data, dev])
    names = sweeping.parse_optimizers(optimizers, "--optimizers")
    rates = sweeping.parse_learning_rates(learning_rates, "--learning-rates")
    display = Display(show_progress(quiet))
    try:
        result = sweeping.sweep(data, dev=dev, dev_fraction=dev_fraction, featurizer=featurizer, options=options,
                                optimizers=names, learning_rates=rates, workers=workers,
                                reader=with_weight_column(reader, weight_column), n_jobs=jobs, progress=display,
                                halving=halving, cluster=cluster)
    finally:
        display.close()
    with status(f"Writing {out_dir}", quiet):
        where = result.save(out_dir, force=force)
    metric = METRIC_NAMES[result.stop_metric]
    where_run = f"{result.settings['workers']} worker(s)" + (" on the cluster" if "cluster" in result.settings else "")
    table = Table(title=f"{len(result.rows)} runs ranked by {metric} (best first), {where_run}", box=box.SIMPLE_HEAD,
                  pad_edge=False)
    columns = shown_columns(result.rows)
    for col in columns:
        table.add_column(HEADERS[col], justify="left" if col in TEXT_COLUMNS else "right", no_wrap=True)
    for row in ranked(result.rows, result.stop_metric):
        table.add_row(*[cell(row, col) for col in columns], style="bold green" if row["run"] == result.best else None)
    print_wide(table)
    if result.best is None:
        kept = f"{where / 'best'} still holds the previous sweep's model" if result.kept_previous_best else "no model saved"
        raise LinTextError(f"every run diverged; results written to {where}, {kept}; try smaller learning rates")
    best = result.rows[result.best]
    out.print(f"best: {best['optimizer']} at learning rate {best['learning_rate']:g} ({metric} {best['stop_value']:.4f}); "
              f"model written to {where / 'best'}", markup=False, soft_wrap=True)
    out.print(f"results written to {where}", markup=False, soft_wrap=True)


@command
@training_options(exclude=("learning_rate", "schedule", "decay", "plateau_factor", "epochs", "patience",
                           "min_improvement", "stop_metric", "threads", "refit"))
@featurizer_options
@reader_options
def probe(
    data: DataPath,
    out_dir: Annotated[Optional[Path], typer.Option(
        "--out", metavar="DIR", help="Folder for rungs.csv, probe.json and probe.html (the plot); only a lintext probe there is replaced.")] = None,
    lowest_rate: Annotated[float, typer.Option(
        "--lowest-rate", help="First rung of the ladder (rates 10^(k/4): 0.1, 0.178, 0.316, 0.562, 1, ...).")] = DEFAULT_LOWEST_RATE,
    highest_rate: Annotated[float, typer.Option(
        "--highest-rate", help="Last rung; the climb stops earlier once a rung's mean loss passes the untrained model's.")]
    = DEFAULT_HIGHEST_RATE,
    steps_per_rung: Annotated[int, typer.Option(
        "--steps-per-rung", help="Steps (batches) at each rate; the rung's score is their mean loss.")] = DEFAULT_STEPS_PER_RUNG,
    dev: DevOpt = None,
    dev_fraction: DevFractionOpt = 0.1,
    reader: ReaderOptions = None,
    featurizer: FeaturizerConfig = None,
    options: TrainOptions = None,
    force: ForceOpt = False,
    quiet: QuietOpt = False,
):
    """Suggest a learning rate from one short run that climbs a ladder of rates (Smith's range test, 2017).

    Each rung is held for --steps-per-rung steps and scored by its mean loss; the rung where the
    loss stops improving is the upper bound, and the suggestion is two rungs (a factor of 3.16)
    below it. When the loss has not risen by --highest-rate (still falling, or level within its
    noise) there is no suggestion: raise --highest-rate.

    Example: lintext probe data/demo/train.csv --optimizer adam --out probes/adam
    """
    from ..outputs import check_output_folder
    from ..report.probe_page import RUNG_COLUMNS, SUMMARY_KEYS, cell
    from ..tuning.probe import probe as run_probe

    if out_dir is not None:
        check_output_folder(out_dir, "probe", force, inputs=[data, dev])
    display = Display(show_progress(quiet))
    try:
        result = run_probe(data, dev=dev, dev_fraction=dev_fraction, featurizer=featurizer, options=options,
                           reader=reader, progress=display, lowest_rate=lowest_rate, highest_rate=highest_rate,
                           steps_per_rung=steps_per_rung)
    finally:
        display.close()
    settings = result.settings
    table = Table(title=f"{options.optimizer}, batch size {settings['batch_size']}: {len(result.learning_rates)} rungs "
                        f"of {steps_per_rung} steps", box=box.SIMPLE_HEAD, pad_edge=False)
    for column in RUNG_COLUMNS:
        table.add_column(column, justify="right", no_wrap=True)
    summary = result.summary()
    for row in result.rungs():
        low = row["rung"] - 1 == result.lowest_loss_rung
        table.add_row(*[cell(column, row[column]) for column in RUNG_COLUMNS], style="bold" if low else None)
    print_wide(table)
    for key in SUMMARY_KEYS:
        out.print(f"{key}: {cell(key, summary[key])}", markup=False, soft_wrap=True)
    if out_dir is not None:
        with status(f"Writing {out_dir}", quiet):
            where = result.save(out_dir, force=force)
        out.print(f"rungs.csv, probe.json and probe.html written to {where}", markup=False, soft_wrap=True)
