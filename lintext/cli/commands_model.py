"""``lintext train``, ``predict`` and ``evaluate``: the main job."""

from __future__ import annotations

import csv
import json
import shutil
import sys
import tempfile
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table
from rich.text import Text

from ..engine.options import TrainOptions
from ..text.config import FeaturizerConfig
from ..text.readers import ReaderOptions
from .app import command, err, out, show_progress, status
from .display import Display
from .options import (DataPath, DevFractionOpt, DevOpt, ForceOpt, JobsOpt, ModelPath, QuietOpt, WeightColumnOpt,
                      featurizer_options, reader_options, training_options, with_weight_column)


@command
@training_options()
@featurizer_options
@reader_options
def train(
    data: DataPath,
    out_dir: Annotated[Path, typer.Option("--out", metavar="MODEL_DIR", help="Model directory to write (a lintext model there is replaced atomically; any other folder is refused).")],
    dev: DevOpt = None,
    dev_fraction: DevFractionOpt = 0.1,
    test: Annotated[Optional[Path], typer.Option("--test", metavar="FILE", help="A test set, evaluated once at the end.")] = None,
    reader: ReaderOptions = None,
    featurizer: FeaturizerConfig = None,
    options: TrainOptions = None,
    jobs: JobsOpt = 0,
    weight_column: WeightColumnOpt = None,
    no_report: Annotated[bool, typer.Option("--no-report", help="Skip features.csv and report.html.")] = False,
    force: ForceOpt = False,
    quiet: QuietOpt = False,
):
    """Train a classifier and write a model directory (with features.csv and report.html).

    Example: lintext train data/demo/train.csv --dev data/demo/dev.csv --test data/demo/test.csv --out models/demo
    """
    from ..outputs import check_output_folder
    from ..pipeline import build_model

    check_output_folder(out_dir, "model", force, inputs=[data, dev, test])
    display = Display(show_progress(quiet))
    try:
        model = build_model(data, dev=dev, test=test, dev_fraction=dev_fraction, featurizer=featurizer,
                            options=options, reader=with_weight_column(reader, weight_column), n_jobs=jobs,
                            progress=display)
    finally:
        display.close()

    def report(folder, spinner):
        from ..report.writer import write_report

        if spinner is not None:
            spinner.update("Writing the report")
        write_report(model, folder)

    with status("Writing the model", quiet) as spinner:
        where = model.save(out_dir, extra=None if no_report else (lambda folder: report(folder, spinner)), force=force)
    print_training_summary(model)
    warn_about_inputs({"empty_texts": model.info["data"].get("empty_texts")}, quiet)
    out.print(f"model written to {where}", markup=False, soft_wrap=True)


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


@command
@reader_options
def predict(
    model_dir: ModelPath,
    data: Annotated[Path, typer.Argument(metavar="DATA", help="Texts to label: CSV/TSV/JSON Lines, plain text (.txt, one "
                                         "document per line), a folder, or - for standard input (a label column is optional).")],
    out_file: Annotated[Optional[Path], typer.Option("--out", metavar="FILE", help="CSV file to write (default: standard output); only a predictions file is replaced.")] = None,
    top_labels: Annotated[int, typer.Option("--top-labels", help="Give the K best labels of each text, best first.")] = 1,
    min_probability: Annotated[Optional[float], typer.Option(
        "--min-probability", metavar="P",
        help="Leave the label empty, and mark the row for review, when the best calibrated probability is below P.")] = None,
    reader: ReaderOptions = None,
    force: ForceOpt = False,
    quiet: QuietOpt = False,
):
    """Label texts with a trained model; one CSV row per input record.

    Example: lintext predict models/demo data/demo/test.csv --top-labels 3 --min-probability 0.8 --out predictions.csv
    """
    from ..files import atomic_file
    from ..model import open_model
    from ..outputs import check_output_file
    from ..predictions import prediction_rows

    if out_file is not None:
        check_output_file(out_file, "predictions", force, inputs=[data, model_dir])
    model = open_model(model_dir)
    counts: dict = {}
    rows = prediction_rows(model, str(data), top_labels=top_labels, reader=reader, min_probability=min_probability,
                           counts=counts)
    header = next(rows)  # validates --top-labels before any output

    def write(fh):
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)

    with status(f"Predicting {data}", quiet or out_file is None):
        if out_file is None:  # nothing reaches standard output before the whole input has been read
            with tempfile.SpooledTemporaryFile(max_size=2**23, mode="w+", encoding="utf-8", newline="") as spool:
                write(spool)
                spool.seek(0)
                shutil.copyfileobj(spool, sys.stdout)
        else:
            atomic_file(out_file, write, kind="predictions", force=force)
    warn_about_inputs(counts, quiet)
    if out_file is not None and not quiet:
        err.print(f"predictions written to {out_file}")


@command
@reader_options
def evaluate(
    model_dir: ModelPath,
    data: Annotated[Path, typer.Argument(metavar="DATA", help="Labelled test data (- for standard input, with --format).")],
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object instead of tables.")] = False,
    target_accuracy: Annotated[Optional[float], typer.Option(
        "--target-accuracy", metavar="A",
        help="Find the lowest probability threshold whose decided documents reach this accuracy.")] = None,
    skip_unknown: Annotated[bool, typer.Option(
        "--skip-unknown-labels", help="Leave out documents whose label the model never saw (default: count them as errors).")] = False,
    reader: ReaderOptions = None,
    quiet: QuietOpt = False,
):
    """Score a model on labelled data: accuracy, F1, per-label table, confusions, calibration error and
    the share decided against accuracy for a range of probability thresholds.

    Example: lintext evaluate models/demo data/demo/test.csv --target-accuracy 0.97
    """
    from ..confidence import coverage_rows
    from ..engine.metrics import AVERAGE_NOTE
    from ..model import open_model
    from ..pipeline import evaluate as evaluate_model

    model = open_model(model_dir)
    with status(f"Evaluating on {data}", quiet or as_json):
        result = evaluate_model(model, str(data), reader, target_accuracy=target_accuracy,
                                unknown_labels="skip" if skip_unknown else "count")
    warn_about_inputs(result, quiet)
    rows = coverage_rows(result["coverage"]) if result.get("coverage") else None
    if as_json:
        keys = ("documents", "accuracy", "macro_f1", "weighted_f1", "averaged_over", "per_label", "absent_labels",
                "unknown_labels", "empty_texts", "labels", "confusion")
        extra = {k: result.get(k) for k in ("ece", "ece_uncalibrated", "nll", "nll_uncalibrated", "temperature")}
        extra.update({"coverage": rows, **({"target": result["target"]} if "target" in result else {})})
        out.print_json(json.dumps({**{k: result[k] for k in keys}, **extra}))
        return
    out.print(f"{data}: {result['documents']} documents  accuracy {result['accuracy']:.4f}  "
              f"macro-F1 {result['macro_f1']:.4f}  weighted-F1 {result['weighted_f1']:.4f}  "
              f"(averaged over {result['averaged_over']} labels)", markup=False, soft_wrap=True)
    table = Table(title="per label")
    for col in ("label", "precision", "recall", "F1", "documents", "predicted"):
        table.add_column(col, justify="left" if col == "label" else "right")
    for name, m in result["per_label"].items():
        table.add_row(Text(name + ("" if m["known"] else " (unknown)")), _score(m["precision"]),
                      _score(m["recall"]), f"{m['f1']:.3f}", str(m["support"]), str(m["predicted"]))
    out.print(table)
    out.print(AVERAGE_NOTE, markup=False)
    if result["absent_labels"]:
        out.print(f"not in this data and never predicted (left out of the averages): {', '.join(result['absent_labels'])}",
                  markup=False, soft_wrap=True)
    print_confusions(result["confusion"], result["labels"])

    if "temperature" in result:
        print_confidence(result, rows)


def print_confidence(result: dict, rows) -> None:
    """Calibration error, and the share decided against accuracy per threshold (routing)."""
    if result["temperature"] is None:
        out.print("calibration: absent (this model was written without one); ECE of the plain softmax "
                  f"{result['ece_uncalibrated']:.4f}", markup=False, soft_wrap=True)
    else:
        out.print(f"calibration: temperature {result['temperature']:.4g}; expected calibration error (15 bins) "
                  f"{result['ece']:.4f} (uncalibrated {result['ece_uncalibrated']:.4f}); negative log-likelihood "
                  f"{result['nll']:.4f} (uncalibrated {result['nll_uncalibrated']:.4f})", markup=False, soft_wrap=True)
    if rows is None:
        return
    table = Table(title="routing: documents decided when the best probability is at least the threshold")
    for col in ("threshold", "decided", "share decided", "accuracy on decided"):
        table.add_column(col, justify="right")
    for r in rows:
        table.add_row(f"{r['threshold']:g}", str(r["decided"]), f"{r['coverage']:.1%}",
                      "–" if r["accuracy"] is None else f"{r['accuracy']:.4f}")
    out.print(table)
    target = result.get("target")
    if target is None:
        return
    if target["threshold"] is None:
        out.print(f"no threshold reaches accuracy {target['target']:g}; the best is {target['accuracy']:.4f} "
                  f"on {target['decided']} documents ({target['coverage']:.1%})", markup=False, soft_wrap=True)
    else:
        out.print(f"accuracy {target['target']:g}: decide when the best probability is at least {target['threshold']:.4g} "
                  f"(predict --min-probability {target['threshold']!r}); {target['decided']} documents decided "
                  f"({target['coverage']:.1%}), accuracy on them {target['accuracy']:.4f}", markup=False, soft_wrap=True)


PAIRS_SHOWN = 20
MATRIX_MAX_LABELS = 12  # beyond this a matrix does not fit a terminal: the most confused pairs instead


def _score(value) -> str:
    return "—" if value is None else f"{value:.3f}"


def warn_about_inputs(result: dict, quiet: bool) -> None:
    """One line on stderr for documents with labels the model never saw and for empty texts."""
    unknown = result.get("unknown_labels") or {}
    if unknown.get("documents"):
        labels = ", ".join(f"{k} ({v})" for k, v in unknown["labels"].items())
        err.print(f"warning: {unknown['documents']} document(s) have a label the model never saw, {unknown['handling']}: "
                  f"{labels}", markup=False, soft_wrap=True)
    if result.get("empty_texts"):
        err.print(f"warning: {result['empty_texts']} document(s) have an empty text: they carry no features, only the biases speak for them",
                  markup=False, soft_wrap=True)


def print_confusions(matrix, labels) -> None:
    """The confusion matrix up to MATRIX_MAX_LABELS labels, else the most confused pairs."""
    from ..engine.metrics import confused_pairs

    if len(labels) <= MATRIX_MAX_LABELS:
        confusion = Table(title="confusion (rows: true label, columns: predicted, numbered as the rows)")
        confusion.add_column("true \\ predicted")
        for j in range(len(labels)):
            confusion.add_column(str(j), justify="right")
        for i, name in enumerate(labels):
            confusion.add_row(Text(f"{i} {name}"), *[str(v) for v in matrix[i]])
        out.print(confusion)
        return
    pairs = confused_pairs(matrix, labels)
    grid = Table(title=f"the {min(PAIRS_SHOWN, len(pairs))} most confused pairs of {len(pairs)} "
                       f"({len(labels)} labels: too many for a matrix)")
    for col in ("true label", "predicted as", "documents", "share of the true label"):
        grid.add_column(col, justify="right" if col in ("documents", "share of the true label") else "left")
    for p in pairs[:PAIRS_SHOWN]:
        grid.add_row(Text(p["true"]), Text(p["predicted"]), str(p["count"]), f"{p['share']:.1%}")
    out.print(grid)
