"""Command line: one thin function per command over the library.

Errors from the library become one line on stderr and exit status 2; anything
unexpected is exit status 1 (set LINTEXT_DEBUG=1 for the traceback).
"""

from __future__ import annotations

import contextlib
import csv
import json
import functools
import inspect
import os
import sys
import typing
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from . import __version__
from .errors import ConfigError, LinTextError
from .features import FeaturizerConfig, corpus_stats, parse_range
from .io import read_corpus
from . import pipeline
from .model import atomic_file, load_model
from .train import TrainOptions

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="Train, explain and use sparse linear text classifiers.",
)
out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


def command(func):
    """Register a command whose library errors print one line and exit 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except LinTextError as exc:
            err.print(f"error: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(exc.exit_code) from None
        except KeyboardInterrupt:
            err.print("interrupted", markup=False)
            raise typer.Exit(130) from None
        except (typer.Exit, typer.Abort):
            raise
        except Exception as exc:  # an internal fault, not bad input
            if os.environ.get("LINTEXT_DEBUG"):
                raise
            err.print(f"internal error: {type(exc).__name__}: {exc}", markup=False, soft_wrap=True)
            raise typer.Exit(1) from None

    return app.command()(wrapper)


def show_progress(quiet: bool) -> bool:
    """Progress goes to a terminal only, and never with --quiet."""
    return not quiet and err.is_terminal


def status(message: str, quiet: bool):
    return err.status(message) if show_progress(quiet) else contextlib.nullcontext()


# ------------------------------------------------------------------ shared options

DataPath = Annotated[Path, typer.Argument(help="Labelled data: a CSV/TSV/JSON Lines file or a folder with one sub-folder per label.")]
FormatOpt = Annotated[Optional[str], typer.Option("--format", help="folder, csv, tsv or jsonl (default: from the path).")]
TextColumnOpt = Annotated[str, typer.Option("--text-column", help="Column or field holding the text.")]
LabelColumnOpt = Annotated[str, typer.Option("--label-column", help="Column or field holding the label.")]
NgramsOpt = Annotated[str, typer.Option("--ngrams", help="Word n-gram range, e.g. 1-2.")]
CharNgramsOpt = Annotated[Optional[str], typer.Option("--char-ngrams", help="Character n-grams inside words, e.g. 3-5 (off by default).")]
DEFAULT_MIN_DF = str(FeaturizerConfig().min_df)
MinDfOpt = Annotated[str, typer.Option("--min-df", help="Keep features in at least this many documents (or this share, if < 1).")]
MaxDfOpt = Annotated[str, typer.Option("--max-df", help="Drop features in more than this share of documents (or count, if > 1).")]
MaxFeaturesOpt = Annotated[Optional[int], typer.Option("--max-features", help="Keep only the most frequent features.")]
WeightingOpt = Annotated[str, typer.Option("--weighting", help="binary, count, log (1 + ln count) or tfidf.")]
NormalizeOpt = Annotated[bool, typer.Option("--normalize/--no-normalize", help="Scale every document to unit length.")]
LowercaseOpt = Annotated[bool, typer.Option("--lowercase/--keep-case", help="Lower-case texts before tokenizing.")]
HashBitsOpt = Annotated[Optional[int], typer.Option("--hash-bits", help="Hash features into 2^BITS columns instead of keeping a vocabulary.")]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="No progress display.")]


def _number(option: str, text: str) -> float | int:
    """A count when written as a whole number, a share when written with a point."""
    try:
        value = float(text)
    except ValueError:
        raise ConfigError(option, text, "expected a number") from None
    return int(value) if value.is_integer() and "." not in text else value


FEATURIZER_OPTIONS = [
    ("ngrams", NgramsOpt, "1-2"), ("char_ngrams", CharNgramsOpt, None), ("min_df", MinDfOpt, DEFAULT_MIN_DF),
    ("max_df", MaxDfOpt, "1.0"), ("max_features", MaxFeaturesOpt, None), ("weighting", WeightingOpt, "tfidf"),
    ("normalize", NormalizeOpt, True), ("lowercase", LowercaseOpt, True), ("hash_bits", HashBitsOpt, None),
]


def featurizer_options(func):
    """Give a command the featurizer options; it receives them as ``featurizer``, a validated FeaturizerConfig."""
    signature = inspect.signature(func)
    hints = typing.get_type_hints(func, include_extras=True)  # resolve string annotations in func's module
    own = [p.replace(annotation=hints.get(p.name, p.annotation)) for p in signature.parameters.values()
           if p.name != "featurizer"]
    added = [inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=kind)
             for name, kind, default in FEATURIZER_OPTIONS]

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        values = {name: kwargs.pop(name) for name, _, _ in FEATURIZER_OPTIONS}
        return func(*args, featurizer=featurizer_config(**values), **kwargs)

    wrapper.__signature__ = signature.replace(parameters=own + added)
    return wrapper


def featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits):
    """Build and validate a featurizer configuration from command-line values."""
    return FeaturizerConfig(
        ngrams=parse_range("--ngrams", ngrams),
        char_ngrams=None if char_ngrams is None else parse_range("--char-ngrams", char_ngrams),
        min_df=_number("--min-df", min_df),
        max_df=_number("--max-df", max_df),
        max_features=max_features,
        weighting=weighting,
        normalize=normalize,
        lowercase=lowercase,
        hash_bits=hash_bits,
    ).validate()


# ------------------------------------------------------------------ commands


def _version(value: bool):
    if value:
        out.print(f"lintext {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version.")] = False,
):
    """Train, explain and use sparse linear text classifiers."""


@command
@featurizer_options
def stats(
    data: DataPath,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    featurizer: FeaturizerConfig = None,
    quiet: QuietOpt = False,
):
    """Describe a labelled corpus: documents, labels, and the feature space it gives.

    Example: lintext stats data/demo/train.csv --ngrams 1-2 --min-df 2
    """
    config = featurizer
    with status(f"Reading {data}", quiet):
        corpus = read_corpus(data, fmt, text_column, label_column)
    with status("Featurizing", quiet):
        info = corpus_stats(corpus, config)
    table = Table(title=f"{data}: {info['documents']} documents, {len(info['labels'])} labels")
    table.add_column("label")
    table.add_column("documents", justify="right")
    table.add_column("share", justify="right")
    for label, count in sorted(info["labels"].items(), key=lambda kv: (-kv[1], kv[0])):
        table.add_row(label, str(count), f"{count / info['documents']:.1%}")
    out.print(table)
    out.print(f"features: {info['features']:,} (columns {info['columns']:,})")
    out.print(f"non-zeros: {info['nonzeros']:,} ({info['nonzeros_per_document']:.1f} per document)")
    out.print(f"features in 1 document: {info['share_df1']:.1%}; in 2 documents: {info['share_df2']:.1%}")


# ------------------------------------------------------------------ train / predict / evaluate

DEFAULTS = TrainOptions()


def validate_options(options: TrainOptions) -> None:
    """Validate training options, naming the command-line option in the message."""
    try:
        options.validate()
    except ConfigError as exc:
        if exc.option.startswith("--"):
            raise
        flag = "--" + exc.option.replace("_", "-")
        raise ConfigError(flag, exc.value, exc.problem) from None


class EpochDisplay:
    """Shows reading, featurizing and a per-epoch bar with losses; silent when not wanted."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.progress = None
        self.task = None
        self.spinner = None

    def __call__(self, event: dict) -> None:
        if not self.enabled:
            return
        stage = event.get("stage")
        if stage in ("reading", "featurizing", "evaluating"):
            self._stop_spinner()
            text = {"reading": f"Reading {event.get('path')}", "featurizing": f"Featurizing {event.get('documents', '')} documents",
                    "evaluating": f"Evaluating on {event.get('path')}"}[stage]
            self.spinner = err.status(text)
            self.spinner.start()
        elif stage == "epoch":
            self._stop_spinner()
            if self.progress is None:
                self.progress = Progress(
                    TextColumn("epoch {task.completed}/{task.total}"), BarColumn(), TextColumn("{task.fields[info]}"),
                    TimeElapsedColumn(), console=err, transient=False,
                )
                self.progress.start()
                self.task = self.progress.add_task("train", total=event["epochs"], info="")
            info = f"train loss {event['train_loss']:.4f}"
            if event.get("dev_loss") is not None:
                info += f"  dev loss {event['dev_loss']:.4f}  dev acc {event['dev_accuracy']:.3f}  macro-F1 {event['dev_macro_f1']:.3f}"
            self.progress.update(self.task, completed=event["epoch"], info=info)

    def _stop_spinner(self):
        if self.spinner is not None:
            self.spinner.stop()
            self.spinner = None

    def close(self):
        self._stop_spinner()
        if self.progress is not None:
            self.progress.stop()


@command
@featurizer_options
def train(
    data: DataPath,
    out_dir: Annotated[Path, typer.Option("--out", help="Model directory to write (replaced atomically).")],
    dev: Annotated[Optional[Path], typer.Option("--dev", help="A dev set; then all of DATA trains.")] = None,
    dev_fraction: Annotated[float, typer.Option("--dev-fraction", help="Share of DATA held out for dev (stratified, seeded); 0 for none.")] = 0.1,
    test: Annotated[Optional[Path], typer.Option("--test", help="A test set, evaluated once at the end.")] = None,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    featurizer: FeaturizerConfig = None,
    loss: Annotated[str, typer.Option("--loss", help="softmax (probabilities) or hinge (multiclass, Crammer-Singer).")] = DEFAULTS.loss,
    optimizer: Annotated[str, typer.Option("--optimizer", help="sgd, adagrad, adadelta, rmsprop, adam or lbfgs.")] = DEFAULTS.optimizer,
    learning_rate: Annotated[Optional[float], typer.Option("--learning-rate", help="Step size (default: the optimizer's own).")] = None,
    schedule: Annotated[str, typer.Option("--schedule", help="constant, inverse (1/t), inverse-sqrt (1/sqrt t) or plateau.")] = DEFAULTS.schedule,
    epochs: Annotated[int, typer.Option("--epochs", help="Most epochs to run.")] = DEFAULTS.epochs,
    batch_size: Annotated[int, typer.Option("--batch-size", help="Examples per step (1 = per-example SGD).")] = DEFAULTS.batch_size,
    patience: Annotated[int, typer.Option("--patience", help="Epochs without dev improvement before stopping (0 = never stop early).")] = DEFAULTS.patience,
    min_improvement: Annotated[float, typer.Option("--min-improvement", help="Smallest change that counts as an improvement.")] = DEFAULTS.min_improvement,
    stop_metric: Annotated[str, typer.Option("--stop-metric", help="dev-loss, accuracy or macro-f1.")] = DEFAULTS.stop_metric.replace("_", "-"),
    l2: Annotated[float, typer.Option("--l2", help="L2 penalty (0 = none; early stopping regularises).")] = DEFAULTS.l2,
    seed: Annotated[int, typer.Option("--seed", help="Seed for the dev split and the shuffling.")] = DEFAULTS.seed,
    dense: Annotated[bool, typer.Option("--dense", help="Update every coordinate every step (slow reference mode).")] = False,
    float32: Annotated[bool, typer.Option("--float32", help="Keep weights and optimizer state in float32.")] = False,
    threads: Annotated[Optional[int], typer.Option("--threads", help="Threads for large batches (default: all cores); results do not depend on it.")] = None,
    jobs: Annotated[int, typer.Option("--jobs", help="Processes for featurizing large corpora (0 = all cores).")] = 0,
    no_report: Annotated[bool, typer.Option("--no-report", help="Skip features.csv and report.html.")] = False,
    quiet: QuietOpt = False,
):
    """Train a classifier and write a model directory (with features.csv and report.html).

    Example: lintext train data/demo/train.csv --dev data/demo/dev.csv --test data/demo/test.csv --out models/demo
    """
    fconfig = featurizer
    options = TrainOptions(
        loss=loss, optimizer=optimizer, learning_rate=learning_rate, schedule=schedule.replace("-", "_"), epochs=epochs,
        batch_size=batch_size, patience=patience, min_improvement=min_improvement, stop_metric=stop_metric.replace("-", "_"),
        l2=l2, seed=seed, lazy=not dense, dtype="float32" if float32 else "float64", threads=threads,
    )
    validate_options(options)
    if not 0 <= dev_fraction < 1:
        raise ConfigError("--dev-fraction", dev_fraction, "must be at least 0 and below 1")
    display = EpochDisplay(show_progress(quiet))
    try:
        model = pipeline.train(
            data, dev=dev, test=test, dev_fraction=0 if dev is not None else dev_fraction, featurizer=fconfig, options=options,
            fmt=fmt, text_column=text_column, label_column=label_column, n_jobs=jobs, progress=display,
        )
    finally:
        display.close()
    from .report import write_report  # matplotlib loads only when a report is written

    with status("Writing the model and its report", quiet):
        where = model.save(out_dir, extra=None if no_report else (lambda folder: write_report(model, folder)))
    print_training_summary(model)
    out.print(f"model written to {where}", soft_wrap=True)


def print_training_summary(model) -> None:
    metrics = model.info.get("metrics", {})
    table = Table(title=f"{model.info['training']['optimizer']}, best epoch {model.info['best_epoch']} of {len(model.info['history'])}")
    for col in ("set", "documents", "accuracy", "macro-F1", "weighted-F1"):
        table.add_column(col, justify="left" if col == "set" else "right")
    for name in ("dev", "test"):
        if name in metrics:
            m = metrics[name]
            table.add_row(name, str(m["documents"]), f"{m['accuracy']:.4f}", f"{m['macro_f1']:.4f}", f"{m['weighted_f1']:.4f}")
    out.print(table)


ModelPath = Annotated[Path, typer.Argument(help="A model directory written by lintext train.")]


@command
def predict(
    model_dir: ModelPath,
    data: Annotated[Path, typer.Argument(help="Texts to label: CSV/TSV/JSON Lines or a folder (a label column is optional).")],
    out_file: Annotated[Optional[Path], typer.Option("--out", help="CSV file to write (default: standard output).")] = None,
    top: Annotated[int, typer.Option("--top", help="Also give the K best labels.")] = 1,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    quiet: QuietOpt = False,
):
    """Label texts with a trained model; one CSV row per input record.

    Example: lintext predict models/demo data/demo/test.csv --top 3 --out predictions.csv
    """
    model = load_model(model_dir)
    rows = pipeline.predict_rows(model, data, top=top, fmt=fmt, text_column=text_column, label_column=label_column)
    header = next(rows)  # validates --top before any output

    def write(fh):
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)

    with status(f"Predicting {data}", quiet or out_file is None):
        if out_file is None:
            write(sys.stdout)
        else:
            atomic_file(out_file, write)
    if out_file is not None and not quiet:
        err.print(f"predictions written to {out_file}")


@command
def evaluate(
    model_dir: ModelPath,
    data: Annotated[Path, typer.Argument(help="Labelled test data.")],
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object instead of tables.")] = False,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    quiet: QuietOpt = False,
):
    """Score a model on labelled data: accuracy, F1, per-label table, confusion matrix.

    Example: lintext evaluate models/demo data/demo/test.csv
    """
    model = load_model(model_dir)
    with status(f"Evaluating on {data}", quiet or as_json):
        result = pipeline.evaluate(model, data, fmt=fmt, text_column=text_column, label_column=label_column)
    if as_json:
        keys = ("accuracy", "macro_f1", "weighted_f1", "per_label", "confusion", "labels", "documents")
        out.print_json(json.dumps({k: result[k] for k in keys}))
        return
    out.print(f"{data}: {result['documents']} documents  accuracy {result['accuracy']:.4f}  "
              f"macro-F1 {result['macro_f1']:.4f}  weighted-F1 {result['weighted_f1']:.4f}")
    table = Table(title="per label")
    for col in ("label", "precision", "recall", "F1", "support"):
        table.add_column(col, justify="left" if col == "label" else "right")
    for name, m in result["per_label"].items():
        table.add_row(name, f"{m['precision']:.3f}", f"{m['recall']:.3f}", f"{m['f1']:.3f}", str(m["support"]))
    out.print(table)
    confusion = Table(title="confusion (rows: true label, columns: predicted)")
    confusion.add_column("true \\ predicted")
    for j in range(len(result["labels"])):
        confusion.add_column(str(j), justify="right")
    for i, name in enumerate(result["labels"]):
        confusion.add_row(f"{i} {name}", *[str(v) for v in result["confusion"][i]])
    out.print(confusion)


# Commands in their own modules register themselves on import.
from . import cli_explain, cli_sweep  # noqa: E402,F401


def run():  # pragma: no cover - console entry point
    app(prog_name="lintext")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(run())
