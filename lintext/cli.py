"""Command line: one thin function per command over the library.

Errors from the library become one line on stderr and exit status 2; anything
unexpected is exit status 1 (set LINTEXT_DEBUG=1 for the traceback).
"""

from __future__ import annotations

import contextlib
import csv
import json
import functools
import os
import sys
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
from .report import write_report
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
def stats(
    data: DataPath,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    ngrams: NgramsOpt = "1-2",
    char_ngrams: CharNgramsOpt = None,
    min_df: MinDfOpt = DEFAULT_MIN_DF,
    max_df: MaxDfOpt = "1.0",
    max_features: MaxFeaturesOpt = None,
    weighting: WeightingOpt = "tfidf",
    normalize: NormalizeOpt = True,
    lowercase: LowercaseOpt = True,
    hash_bits: HashBitsOpt = None,
    quiet: QuietOpt = False,
):
    """Describe a labelled corpus: documents, labels, and the feature space it gives.

    Example: lintext stats data/demo/train.csv --ngrams 1-2 --min-df 2
    """
    config = featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits)
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
def train(
    data: DataPath,
    out_dir: Annotated[Path, typer.Option("--out", help="Model directory to write (replaced atomically).")],
    dev: Annotated[Optional[Path], typer.Option("--dev", help="A dev set; then all of DATA trains.")] = None,
    dev_fraction: Annotated[float, typer.Option("--dev-fraction", help="Share of DATA held out for dev (stratified, seeded); 0 for none.")] = 0.1,
    test: Annotated[Optional[Path], typer.Option("--test", help="A test set, evaluated once at the end.")] = None,
    fmt: FormatOpt = None,
    text_column: TextColumnOpt = "text",
    label_column: LabelColumnOpt = "label",
    ngrams: NgramsOpt = "1-2",
    char_ngrams: CharNgramsOpt = None,
    min_df: MinDfOpt = DEFAULT_MIN_DF,
    max_df: MaxDfOpt = "1.0",
    max_features: MaxFeaturesOpt = None,
    weighting: WeightingOpt = "tfidf",
    normalize: NormalizeOpt = True,
    lowercase: LowercaseOpt = True,
    hash_bits: HashBitsOpt = None,
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
    jobs: Annotated[int, typer.Option("--jobs", help="Processes for featurizing (0 = all cores).")] = 1,
    no_report: Annotated[bool, typer.Option("--no-report", help="Skip features.csv and report.html.")] = False,
    quiet: QuietOpt = False,
):
    """Train a classifier and write a model directory (with features.csv and report.html).

    Example: lintext train data/demo/train.csv --dev data/demo/dev.csv --test data/demo/test.csv --out models/demo
    """
    fconfig = featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits)
    options = TrainOptions(
        loss=loss, optimizer=optimizer, learning_rate=learning_rate, schedule=schedule.replace("-", "_"), epochs=epochs,
        batch_size=batch_size, patience=patience, min_improvement=min_improvement, stop_metric=stop_metric.replace("-", "_"),
        l2=l2, seed=seed, lazy=not dense, dtype="float32" if float32 else "float64",
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


# ------------------------------------------------------------------ report / compare / inspect


@command
def report(
    model_dir: ModelPath,
    top: Annotated[int, typer.Option("--top", help="Features shown per label.")] = 10,
    rare_top: Annotated[int, typer.Option("--rare-top", help="Rows of the table of rare features with large weights.")] = 15,
    quiet: QuietOpt = False,
):
    """Write features.csv and report.html (self-contained, printable) into a model directory.

    Example: lintext report models/demo
    """
    from .report import write_report

    model = load_model(model_dir)
    with status("Writing the report", quiet):
        written = write_report(model, model_dir, top=top, rare_top=rare_top)
    if not quiet:
        out.print(f"report written to {written['report']}", markup=False)
        out.print(f"feature table written to {written['features']}", markup=False)


@command
def compare(
    model_dirs: Annotated[list[Path], typer.Argument(help="Model directories to show side by side.")],
    out_file: Annotated[Path, typer.Option("--out", help="HTML file to write (replaced atomically).")],
    name: Annotated[Optional[list[str]], typer.Option("--name", help="Display name of each model, in order (repeat the option).")] = None,
    quiet: QuietOpt = False,
):
    """Write one page comparing models: update magnitude per frequency bin and learning curves on shared axes.

    Example: lintext compare models/sgd models/adagrad models/adam --out compare.html
    """
    from .report import write_comparison

    if name and len(name) != len(model_dirs):
        raise ConfigError("--name", ", ".join(name), f"give one name per model directory ({len(model_dirs)})")
    with status(f"Comparing {len(model_dirs)} models", quiet):
        where = write_comparison(model_dirs, out_file, names=name or None)
    if not quiet:
        out.print(f"comparison written to {where}", markup=False)


def _cell(value, digits: int = 4) -> str:
    from .report_layout import fmt

    return fmt(value, digits)


@command
def inspect(
    model_dir: ModelPath,
    label: Annotated[Optional[str], typer.Option("--label", help="Only this label.")] = None,
    rare: Annotated[bool, typer.Option("--rare", help="Show rare features (in at most 2 training documents) with large weights.")] = False,
    top: Annotated[int, typer.Option("--top", help="Rows per table.")] = 10,
):
    """Print a model's strongest features per label (or, with --rare, its likely memorised ones) and its frequency bins.

    Example: lintext inspect models/demo --label billing --top 15
    """
    from rich.text import Text

    from . import report as rep

    model = load_model(model_dir)
    rep.check_label(model, label)
    if top < 1:
        raise ConfigError("--top", top, "must be at least 1")
    table = rep.feature_table(model)
    if rare:
        rows = rep.rare_heavy(model, top=top, label=label, table=table)
        title = f"rare features (in at most {rep.RARE_DF} training documents) with the largest weight norms"
        grid = Table(title=title + (f", strongest toward {label}" if label else ""), show_lines=True)
        for col in ("feature", "docs", "weight norm", "rank", "strongest label", "training documents"):
            grid.add_column(col, justify="right" if col in ("docs", "weight norm", "rank") else "left")
        for r in rows:
            docs = "\n".join(f"{d.get('source', '')}" + (f" ({d['label']})" if d.get("label") else "") + f": {d.get('snippet', '')}"
                             for d in r["documents"]) or "–"
            grid.add_row(Text(r["feature"]), str(r["document_frequency"]), _cell(r["weight_norm"], 3),
                         f"{r['norm_rank']} of {len(table['column'])}", Text(f"{r['max_weight_label']} ({_cell(r['max_weight'], 3)})"),
                         Text(docs))
        out.print(grid)
        if rows and not any(r["documents"] for r in rows):
            out.print("training documents not recorded for this model", markup=False)
    else:
        for name_, rows in rep.top_features(model, top=top, label=label, table=table).items():
            grid = Table(title=Text(f"strongest features toward {name_}"))
            for col in ("feature", "weight", "documents"):
                grid.add_column(col, justify="left" if col == "feature" else "right")
            for r in rows:
                grid.add_row(Text(r["feature"]), _cell(r["weight"], 3), f"{r['document_frequency']:,}")
            out.print(grid)
    grid = Table(title="features per document-frequency bin")
    for col in ("documents", "features", "share", "share of |Δw|", "median weight norm", "median sum |Δw|", "median effective step"):
        grid.add_column(col, justify="right")
    for b in rep.frequency_bins(table):
        share_update = "–" if b["update_share"] != b["update_share"] else f"{b['update_share']:.1%}"
        grid.add_row(b["label"], f"{b['features']:,}", f"{b['feature_share']:.1%}", share_update,
                     _cell(b["median_weight_norm"], 3), _cell(b["median_update"], 3), _cell(b["median_effective_step"], 3))
    out.print(grid)


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
    ngrams: NgramsOpt = "1-2",
    char_ngrams: CharNgramsOpt = None,
    min_df: MinDfOpt = DEFAULT_MIN_DF,
    max_df: MaxDfOpt = "1.0",
    max_features: MaxFeaturesOpt = None,
    weighting: WeightingOpt = "tfidf",
    normalize: NormalizeOpt = True,
    lowercase: LowercaseOpt = True,
    hash_bits: HashBitsOpt = None,
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

    fconfig = featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits)
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
    ngrams: NgramsOpt = "1-2",
    char_ngrams: CharNgramsOpt = None,
    min_df: MinDfOpt = DEFAULT_MIN_DF,
    max_df: MaxDfOpt = "1.0",
    max_features: MaxFeaturesOpt = None,
    weighting: WeightingOpt = "tfidf",
    normalize: NormalizeOpt = True,
    lowercase: LowercaseOpt = True,
    hash_bits: HashBitsOpt = None,
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

    fconfig = featurizer_config(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_bits)
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


def run():  # pragma: no cover - console entry point
    app(prog_name="lintext")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(run())
