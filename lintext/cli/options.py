"""Options shared by several commands, declared once.

Each group is a decorator that adds its options to a command and hands the command one
library object built from them: :func:`reader_options` gives ``reader`` (a
:class:`~lintext.text.readers.ReaderOptions`), :func:`featurizer_options` gives ``featurizer``
(a :class:`~lintext.text.config.FeaturizerConfig`), :func:`training_options` gives ``options``
(a :class:`~lintext.engine.options.TrainOptions`, whose fields are the options' names in
kebab case). Their defaults are the library's own. Values are validated when the command
runs, before any work, and a bad one is reported naming the option as typed.
"""

from __future__ import annotations

import functools
import inspect
import typing
from dataclasses import fields
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..engine.optimizers import OPTIMIZERS
from ..engine.options import PRECISIONS, STOP_METRICS, UPDATES, TrainOptions, flag
from ..engine.schedules import SCHEDULE_CODES
from ..errors import ConfigError
from ..text.config import WEIGHTINGS, FeaturizerConfig, parse_range

DataPath = Annotated[Path, typer.Argument(
    metavar="DATA", help="Labelled data: a CSV/TSV/JSON Lines file, a folder with one sub-folder per label, or a "
                         "feature store written by lintext featurize (its featurizer and dev rows are used).")]
ModelPath = Annotated[Path, typer.Argument(metavar="MODEL_DIR", help="A model directory written by lintext train.")]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="No progress display.")]
DevOpt = Annotated[Optional[Path], typer.Option("--dev", metavar="FILE", help="A dev set; then all of DATA trains.")]
DevFractionOpt = Annotated[float, typer.Option(
    "--dev-fraction", help="Share of DATA held out for dev (stratified, seeded); 0 for none. A store keeps its own split.")]
JobsOpt = Annotated[int, typer.Option("--jobs", help="Processes for featurizing large corpora (0 = one per core).")]
ForceOpt = Annotated[bool, typer.Option(
    "--force", help="Replace --out even when lintext did not write it (never the current folder or an input).")]
ClusterOpt = Annotated[Optional[str], typer.Option(
    "--cluster", metavar="ADDRESS",
    help="A running Dask scheduler, e.g. tcp://127.0.0.1:8786, to run on (needs: pip install 'lintext[cluster]').")]

WeightColumnOpt = Annotated[Optional[str], typer.Option(
    "--weight-column", metavar="NAME",
    help="Column or field of DATA holding each document's weight (a number of at least 0); the losses shown are then weighted.")]


def with_weight_column(reader, weight_column):
    """``reader`` reading per-document weights from ``weight_column`` too (when given)."""
    from dataclasses import replace

    from ..text.readers import ReaderOptions

    return replace(reader or ReaderOptions(), weight_column=weight_column).validate() if weight_column else reader


def _group(target: str, params: list, build, none_unless_typed: bool = False):
    """A decorator adding ``params`` (name, annotation, default) to a command; the command
    receives ``build(**their values)`` as ``target`` instead (``None`` when ``none_unless_typed``
    and every option of the group has its default value: none was typed, or only the defaults)."""

    def decorate(func):
        signature = inspect.signature(func)
        hints = typing.get_type_hints(func, include_extras=True)  # resolve string annotations in func's module
        own = [p.replace(annotation=hints.get(p.name, p.annotation)) for p in signature.parameters.values()
               if p.name != target]
        added = [inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=kind)
                 for name, kind, default in params]

        @functools.wraps(func)
        def wrapper(*args, **kwargs):
            values = {name: kwargs.pop(name) for name, _, _ in params}
            typed = any(values[name] != default for name, _, default in params)
            built = build(**values) if not none_unless_typed or typed else None
            return func(*args, **{target: built}, **kwargs)

        wrapper.__signature__ = signature.replace(parameters=own + added)
        return wrapper

    return decorate


# ------------------------------------------------------------------ reading

def _reader(format, text_column, label_column, id_column, header):
    from ..text.readers import ReaderOptions  # the readers load numpy only when a command runs

    return ReaderOptions(format=format, text_column=text_column, label_column=label_column, id_column=id_column,
                         header=header).validate()


reader_options = _group("reader", [
    ("format", Annotated[Optional[str], typer.Option(
        "--format", help="folder, csv, tsv, jsonl or lines (plain text, one document per line); default: from the "
                         "path (.txt is lines; - for standard input is lines).")], None),
    ("text_column", Annotated[str, typer.Option(
        "--text-column", help="Column or field holding the text (a header name, or a position from 1).")], "text"),
    ("label_column", Annotated[str, typer.Option(
        "--label-column", help="Column or field holding the label (a header name, or a position from 1).")], "label"),
    ("id_column", Annotated[Optional[str], typer.Option(
        "--id-column", help="Column or field holding an identifier, carried through to the predictions.")], None),
    ("header", Annotated[bool, typer.Option(
        "--header/--no-header", help="Whether a CSV/TSV file starts with a header line; without one, give columns "
                                     "by position (--text-column 2 --label-column 1).")], True),
], _reader)


# ------------------------------------------------------------------ featurizing

def number_or_share(option: str, text: str) -> float | int:
    """A count when written as a whole number, a share when written with a point."""
    try:
        value = float(text)
    except ValueError:
        raise ConfigError(option, text, "expected a number") from None
    return int(value) if value.is_integer() and "." not in text else value


def hash_space(text: str | None) -> int | None:
    """``--hash-space``: a number of columns, written in full (``1048576``) or as ``2^20``."""
    if text is None:
        return None
    value = str(text).strip()
    try:
        if "^" in value:
            base, power = value.split("^")
            if int(base) != 2:
                raise ValueError
            return 2 ** int(power)
        return int(value)
    except ValueError:
        raise ConfigError("--hash-space", text, "expected a number of columns such as 1048576 or 2^20") from None


_FCONFIG = FeaturizerConfig()


def _featurizer(ngrams, char_ngrams, min_df, max_df, max_features, weighting, normalize, lowercase, hash_space_):
    return FeaturizerConfig(
        ngrams=parse_range("--ngrams", ngrams),
        char_ngrams=None if char_ngrams is None else parse_range("--char-ngrams", char_ngrams),
        min_df=number_or_share("--min-df", min_df), max_df=number_or_share("--max-df", max_df),
        max_features=max_features, weighting=weighting, normalize=normalize, lowercase=lowercase,
        hash_space=hash_space(hash_space_),
    ).validate()


featurizer_options = _group("featurizer", [
    ("ngrams", Annotated[str, typer.Option("--ngrams", metavar="LOW-HIGH", help="Word n-gram range, e.g. 1-2.")], "-".join(map(str, _FCONFIG.ngrams))),
    ("char_ngrams", Annotated[Optional[str], typer.Option(
        "--char-ngrams", metavar="LOW-HIGH", help="Character n-grams inside words, e.g. 3-5 (off by default).")], None),
    ("min_df", Annotated[str, typer.Option(
        "--min-df", metavar="NUMBER", help="Keep features in at least this many documents (or this share, if written with a point).")],
     str(_FCONFIG.min_df)),
    ("max_df", Annotated[str, typer.Option(
        "--max-df", metavar="NUMBER", help="Drop features in more than this share of documents (or count, if a whole number).")],
     str(_FCONFIG.max_df)),
    ("max_features", Annotated[Optional[int], typer.Option("--max-features", help="Keep only the most frequent features.")], None),
    ("weighting", Annotated[str, typer.Option("--weighting", help=f"{', '.join(WEIGHTINGS)} (log = 1 + ln count; log-tfidf = log times idf).")],
     _FCONFIG.weighting),
    ("normalize", Annotated[bool, typer.Option("--normalize/--no-normalize", help="Scale every document to unit length.")],
     _FCONFIG.normalize),
    ("lowercase", Annotated[bool, typer.Option("--lowercase/--no-lowercase", help="Lower-case texts before tokenizing.")],
     _FCONFIG.lowercase),
    ("hash_space_", Annotated[Optional[str], typer.Option(
        "--hash-space", metavar="COLUMNS",
        help="Hash features into this many columns (e.g. 2^20) instead of keeping a vocabulary.")], None),
], _featurizer, none_unless_typed=True)  # None: the defaults, or a feature store's own featurizer


# ------------------------------------------------------------------ training

_DEFAULTS = TrainOptions()
_TRAINING_HELP = {
    "loss": "softmax (probabilities) or hinge (multiclass, Crammer-Singer).",
    "optimizer": "; ".join(f"{name}: {spec.summary}" for name, spec in OPTIMIZERS.items()) + ".",
    "learning_rate": "Step size (default: the optimizer's own: "
                     + ", ".join(f"{n} {s.default_learning_rate:g}"
                                 + (f" ({s.hinge_learning_rate:g} with the hinge)" if s.hinge_learning_rate else "")
                                 for n, s in OPTIMIZERS.items() if s.has_learning_rate)
                     + ").",
    "schedule": "constant, inverse (1/t), inverse-sqrt (1/sqrt t), both sgd only, or plateau (multiply by "
                "--plateau-factor after an epoch without improvement).",
    "decay": "Decay per step of the inverse schedules.",
    "plateau_factor": "Factor applied to the learning rate after an epoch without improvement (--schedule plateau).",
    "epochs": "Most epochs to run.",
    "batch_size": "Examples per step (1 = per-example updates).",
    "patience": "Epochs without dev improvement before stopping (0 = never stop early).",
    "min_improvement": "Smallest change of the stop metric that counts as an improvement.",
    "stop_metric": f"{', '.join(STOP_METRICS)}: watched on dev for early stopping.",
    "l2": "L2 penalty (0 = none; early stopping regularises).",
    "seed": "Seed for the dev split and the shuffling.",
    "updates": f"{' or '.join(UPDATES)}: lazy touches only the features of each batch; dense updates every "
               "coordinate every step (slow reference).",
    "precision": f"{' or '.join(PRECISIONS)}: the type of weights and optimizer state (arithmetic is float64).",
    "beta1": "Adam's first-moment decay (default 0.9).",
    "beta2": "Adam's second-moment decay (default 0.999).",
    "epsilon": "The adaptive rules' guard against division by zero (default: the rule's own).",
    "rho": "AdaDelta's and RMSProp's decay of their averages (default: 0.95 and 0.9).",
    "threads": "Threads for large batches (default: all cores); results do not depend on it.",
    "average": "Average the weights over every step from this epoch on and use the average for dev scores, "
               "early stopping and the saved model (0 = off).",
    "initial_sum_sq": "Where AdaGrad's sum of squared gradients starts, so that a rare feature's first step "
                      f"scales with its gradient (default {OPTIMIZERS['adagrad'].hyperparameters['initial_sum_sq']:g}).",
    "l1": "L1 penalty: sgd's cumulative penalty (with --l2, an elastic net), ftrl's lambda_1 (0 = none).",
    "beta": "FTRL's beta in its per-feature step alpha / (beta + sqrt(sum of squared gradients)) (default 1).",
    "label_weights": "balanced (label k weighs n / (labels x n_k)) or label=weight pairs, e.g. billing=2,other=0.5; "
                     "the losses shown are then weighted.",
    "refit": "After early stopping, train again on the training and dev documents together for the best "
             "epoch count (dev scores stay those of the first pass).",
}
_TYPES = {"learning_rate": Optional[float], "beta1": Optional[float], "beta2": Optional[float],
          "epsilon": Optional[float], "rho": Optional[float], "threads": Optional[int],
          "initial_sum_sq": Optional[float], "beta": Optional[float], "label_weights": Optional[str]}


def training_options(exclude: tuple = ()):
    """Add the options of :class:`TrainOptions` (but ``exclude``) to a command as ``options``.

    Excluded fields keep the library's default; a command fills them itself (the sweep's grid
    sets the optimizer and learning rate of each run).
    """
    params = []
    for f in fields(TrainOptions):
        if f.name in exclude:
            continue
        kind = _TYPES.get(f.name, type(f.default) if f.default is not None else str)
        annotation = Annotated[kind, typer.Option(flag(f.name), help=_TRAINING_HELP[f.name])]
        params.append((f.name, annotation, f.default))

    def build(**values):
        return TrainOptions(**values).validate()

    return _group("options", params, build)


SCHEDULES = tuple(SCHEDULE_CODES)
