"""The main job end to end: read, split, featurize, train, evaluate.

:func:`build_model` is the Python entry point behind ``lintext train``; :func:`evaluate`
behind ``lintext evaluate`` (:func:`lintext.predictions.prediction_rows` behind ``lintext predict``).
None prints: progress goes to the callable given, as dictionaries (:data:`Progress`).
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
import scipy.sparse as sp

from . import confidence
from .engine.footprint import check_fits
from .engine.metrics import confusion_counts, label_scores, summary_scores
from .engine.options import TrainOptions
from .engine.sparsity import zero_weights
from .errors import ConfigError, InputError
from .evidence import training_extras
from .explanation import dev_errors, require_calibration
from .from_store import (StorePart, dev_sample, is_store_data, store_data, store_dev_errors, store_evaluation,
                         store_evidence)
from .model import Model, stored_weights
from .text.featurizer import Featurizer, FeaturizerConfig
from .text.readers import Corpus, ReaderOptions, read_corpus
from .text.split import split_dev
from .text.store import FeatureStore

# Progress callback: receives ``{"stage": ...}`` dictionaries (reading, featurizing, training,
# epoch, evaluating, run, probe); the command line turns them into a display.
Progress = Callable[[dict], None]


def featurizer_config(value) -> FeaturizerConfig:
    """``None`` (the defaults), a FeaturizerConfig, or a dict of its fields; validated."""
    if value is None:
        return FeaturizerConfig()
    if isinstance(value, FeaturizerConfig):
        return value.validate()
    if isinstance(value, dict):
        unknown = sorted(set(value) - set(FeaturizerConfig.__dataclass_fields__))
        if unknown:
            raise ConfigError(unknown[0], value[unknown[0]], "not a featurizer option")
        return FeaturizerConfig(**value).validate()
    raise TypeError(f"expected FeaturizerConfig or dict, got {type(value).__name__}")


def check_dev_fraction(dev_fraction, dev=None) -> float:
    """The share of the data held out for dev: 0 when a dev set is given, else in [0, 1)."""
    if dev is not None:
        return 0.0
    if isinstance(dev_fraction, bool) or not isinstance(dev_fraction, (int, float)) or not 0 <= dev_fraction < 1:
        raise ConfigError("--dev-fraction", dev_fraction, "must be at least 0 and below 1")
    return float(dev_fraction)


@dataclass
class PreparedData:
    """Read, split and featurized data, shared by :func:`train`, the probe and the sweep."""

    featurizer: Featurizer
    labels: list[str]
    X: sp.csr_matrix
    y: np.ndarray
    X_dev: sp.csr_matrix | None
    y_dev: np.ndarray | None
    train_set: Corpus | None  # None when read from a feature store
    dev_set: Corpus | StorePart | None
    description: dict
    store: FeatureStore | None = None

    @property
    def weights(self) -> np.ndarray | None:
        """Per-document weights of the training rows (from the reader's weight column), or None."""
        weights = getattr(self.train_set, "weights", None)  # a feature store keeps no weights
        return None if weights is None else np.asarray(weights, dtype=np.float64)

    @property
    def dev_weights(self) -> np.ndarray | None:
        """Per-document weights of the dev rows, when the dev rows have them."""
        weights = getattr(self.dev_set, "weights", None)
        return None if weights is None else np.asarray(weights, dtype=np.float64)


def prepare_data(data, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
                 seed: int = 0, reader: ReaderOptions | None = None, n_jobs: int = 1,
                 progress: Progress | None = None, options: TrainOptions | None = None,
                 stream: bool | None = None) -> PreparedData:
    """Read ``data``, hold out a dev set and featurize once.

    The dev set is ``dev`` when given, else a stratified ``dev_fraction`` of ``data``
    seeded by ``seed`` (none when ``dev_fraction`` is 0). ``description`` is the ``data``
    part of a model's ``info``. With ``options``, a training run that cannot fit in memory
    is refused before featurizing (hashed space) or right after (vocabulary), never midway.

    ``data`` may be a feature store (``lintext featurize``): then its featurizer and its dev
    rows are used (``dev_fraction`` does not apply; ``dev`` only for a store without dev rows),
    ``featurizer`` must be ``None`` or the store's, and a part of several shards is read shard by
    shard (``stream``: see :func:`lintext.from_store.store_data`).
    """
    report = progress or (lambda event: None)
    if is_store_data(data):  # the store's featurizer and split; featurizer options must agree with it
        report({"stage": "reading", "path": str(data)})
        fields = store_data(data, dev, reader, None if featurizer is None else featurizer_config(featurizer), stream)
        return PreparedData(**fields)
    fconfig = featurizer_config(featurizer)
    dev_fraction = check_dev_fraction(dev_fraction, dev)
    report({"stage": "reading", "path": str(data) if is_path(data) else getattr(data, "path", "in-memory data")})
    corpus = as_corpus(data, reader=reader)
    if dev is not None:
        train_set = corpus
        dev_set = as_corpus(dev, reader=_unweighted(reader), min_labels=1)  # weights only in DATA
    elif dev_fraction and dev_fraction > 0:
        train_set, dev_set = split_dev(corpus, dev_fraction, seed=seed)
    else:
        train_set, dev_set = corpus, None
    labels = train_set.label_names
    if options is not None and fconfig.hashing:  # the columns are known before featurizing
        check_fits(fconfig.hash_space, len(labels), options, fconfig.hash_space, data, featurizing=True)
    report({"stage": "featurizing", "documents": len(train_set)})
    started = time.perf_counter()
    feat = Featurizer(fconfig, n_jobs=n_jobs)
    X = feat.fit_transform(train_set.texts).tocsr()
    if options is not None and not fconfig.hashing:
        check_fits(X.shape[1], len(labels), options, None, getattr(data, "path", data))
    X_dev = feat.transform(dev_set.texts).tocsr() if dev_set is not None else None
    description = {
        "train": corpus.path,
        "train_documents": len(train_set),
        "empty_texts": count_empty(train_set.texts),
        "dev": None if dev_set is None else (dev_set.path if dev is not None else f"{dev_fraction:g} of train"),
        "dev_documents": 0 if dev_set is None else len(dev_set),
        "features": int(X.shape[1]),
        "nonzeros": int(X.nnz),
        "featurize_seconds": round(time.perf_counter() - started, 3),
    }
    if train_set.weights is not None:
        description["weight_column"] = reader.weight_column
    y_dev = dev_set.label_indices(labels) if dev_set is not None else None
    return PreparedData(feat, labels, X, train_set.label_indices(labels), X_dev, y_dev, train_set, dev_set, description)


def build_model(
    data: str | os.PathLike | Corpus | tuple | list,
    dev: str | os.PathLike | Corpus | tuple | None = None,
    test: str | os.PathLike | Corpus | tuple | None = None,
    dev_fraction: float = 0.1,
    featurizer: FeaturizerConfig | dict | None = None,
    options: TrainOptions | dict | None = None,
    reader: ReaderOptions | None = None,
    n_jobs: int = 1,
    progress: Progress | None = None,
    labels: list | None = None,
) -> Model:
    """Train a model from labelled data.

    Parameters
    ----------
    data : training file, folder, :class:`~lintext.text.readers.Corpus`, a ``(texts, labels)``
        pair of lists, or a list of texts with ``labels`` (``build_model(texts, labels)`` works
        too: a list as the second argument, as long as ``texts``, is read as their labels).
    dev : a dev set (the same kinds, lists as a ``(texts, labels)`` pair); when ``None``, a stratified ``dev_fraction`` of ``data``
        (seeded by ``options.seed``) is held out; ``dev_fraction=0`` trains on
        everything with no early stopping.
    test : optional test set, evaluated once at the end (never used in training).
    featurizer, options : configurations (objects or dictionaries of their fields).
    reader : how to read the files (format, text and label columns).
    progress : called with ``{"stage": ...}`` dictionaries as each phase starts (reading,
        featurizing, training, evaluating the dev and the test set) and after each epoch.

    Returns
    -------
    Model, with ``info`` holding options, history, best epoch and metrics.
    """
    from .engine.trainer import fit  # numba loads here, not when predicting

    report = progress or (lambda event: None)
    if labels is None and isinstance(dev, list) and isinstance(data, (list, tuple)) and len(dev) == len(data) \
            and not (isinstance(data, tuple) and len(data) == 2 and not isinstance(data[0], str)):
        labels, dev = dev, None  # build_model(texts, labels)
    if labels is not None:
        data = (data, labels)
    topts = TrainOptions.from_mapping(options).validate()
    prep = prepare_data(data, dev, dev_fraction, featurizer, topts.seed, reader, n_jobs, report, options=topts)
    report({"stage": "training", "documents": int(prep.X.shape[0]), "epochs": topts.epochs})
    result = fit(prep.X, prep.y, len(prep.labels), prep.X_dev, prep.y_dev, topts,
                 progress=lambda row: report({"stage": "epoch", **row}), sample_weight=prep.weights,
                 dev_weight=prep.dev_weights, label_names=prep.labels)
    info = {
        "training": topts.to_json(),
        "best_epoch": int(result.best_epoch),
        "stopped_early": bool(result.stopped_early),
        "history": result.history,
        "data": prep.description,
        "metrics": {},
        **({} if result.refit is None else {"refit": result.refit}),
    }
    train_set = prep.train_set
    info["sparsity"] = zero_weights(result.coef, prep.featurizer.document_frequency)
    # the weights as the model directory keeps them (float32), so the metrics below are those of the saved model
    model = Model(prep.featurizer, stored_weights(result.coef), result.intercept, prep.labels, topts.loss, info,
                  result.feature_stats)
    if train_set is None:
        model.info["explain"] = store_evidence(model, prep.store)
    else:
        model.info["explain"] = training_extras(model, train_set.texts, train_set.sources, prep.X, train_labels=train_set.labels)
    if prep.dev_set is not None:
        report({"stage": "evaluating", "path": "the dev set", "set": "dev"})
    # after a refit the dev documents are training data: the temperature, dev errors and metrics are the first pass's
    first = model if result.refit is None else Model(prep.featurizer, stored_weights(result.dev_coef),
                                                     result.dev_intercept, prep.labels, topts.loss)
    first.info = model.info  # one record: what finish_with_dev writes lands in the model's
    finish_with_dev(first, prep)
    model.calibration = first.calibration
    if test is not None:
        report({"stage": "evaluating", "path": str(test), "set": "test"})
        test_set = as_corpus(test, reader=_unweighted(reader), min_labels=1)
        model.info["data"]["test"] = test_set.path
        model.info["metrics"]["test"] = evaluate(model, test_set)
    return model


def finish_with_dev(model: Model, prep: PreparedData) -> None:
    """After training, while the dev set is at hand: fit the temperature on it
    (:func:`lintext.confidence.calibration_record`), record its most confident errors
    (:func:`lintext.explanation.dev_errors`) and its metrics. Nothing without a dev set.
    A feature store's dev part of several shards gives the temperature and the errors of its first
    shard, a random sample of ``--shard-rows`` rows (:func:`lintext.from_store.dev_sample`), and its
    metrics over every row, computed shard by shard."""
    if prep.dev_set is None:
        return
    X_dev, y_dev = prep.X_dev, prep.y_dev
    if isinstance(prep.dev_set, StorePart):  # its first shard: all of it, or a random sample (bounded memory)
        X_dev, y_dev = dev_sample(prep.dev_set, prep.labels)
    raw = model.matrix_scores(X_dev)  # scored once: the dev rows are featurized already
    model.calibration = confidence.calibration_record(raw, y_dev)
    if isinstance(prep.dev_set, StorePart):
        model.info["dev_errors"] = store_dev_errors(model, prep.dev_set, X_dev, y_dev)
        model.info["metrics"]["dev"] = evaluate(model, prep.dev_set)
    else:
        model.info["dev_errors"] = dev_errors(model, prep.dev_set, X_dev, scores=raw)
        model.info["metrics"]["dev"] = evaluate(model, prep.dev_set, scores=raw)


UNKNOWN_LABELS = ("count", "skip")


def evaluate(model: Model, data: str | os.PathLike | Corpus | tuple, reader: ReaderOptions | None = None,
             summary_only: bool = False, target_accuracy: float | None = None, unknown_labels: str = "count",
             scores: np.ndarray | None = None) -> dict:
    """Accuracy, macro- and weighted-F1, per-label precision/recall/F1/support and the confusion
    matrix; then calibration and routing numbers.

    The definitions are in :mod:`lintext.engine.metrics`: averages over the labels present in
    the truth or the predictions (as ``sklearn.metrics.f1_score(average="macro")``), an
    undefined precision or recall as ``None``.

    Parameters
    ----------
    model : the model to score.
    data : labelled file, folder, :class:`Corpus` or ``(texts, labels)``.
    reader : how to read ``data``.
    summary_only : only ``documents``, ``accuracy``, ``macro_f1``, ``weighted_f1``, ``averaged_over``.
    target_accuracy : (needs a calibrated model) adds ``target``, the lowest threshold whose
        decided documents reach that accuracy.
    unknown_labels : what to do with documents whose label the model never saw: ``"count"``
        them as errors (their label joins the averages with recall 0 and F1 0) or ``"skip"`` them.
    scores : the model's scores of ``data``'s documents (one row per document, in order) when they are
        at hand: used instead of featurizing and scoring the texts again (not for a feature store).

    Returns
    -------
    dict with, besides the scores, ``per_label`` (labels in the averages: ``precision``,
    ``recall`` (``None`` when undefined), ``f1``, ``support``, ``predicted``, ``known``),
    ``absent_labels`` (model labels neither true nor predicted in ``data``: left out of the
    averages), ``unknown_labels`` (``{"handling", "documents", "labels": {label: count}}``),
    ``empty_texts``, ``labels`` (rows and columns of ``confusion``: the model's labels, then
    the unknown ones when counted) and ``confusion``. Then (see :mod:`lintext.confidence`, 15
    equal-width bins, over the documents whose label the model knows): ``ece`` and ``nll`` of
    the model's probabilities (``None`` for a hinge model without calibration),
    ``ece_uncalibrated`` and ``nll_uncalibrated`` of the plain softmax of the scores,
    ``temperature`` (``None`` without calibration), ``reliability`` (``calibrated`` and
    ``uncalibrated`` bin tables) and ``coverage`` (documents decided and correct per threshold
    of the model's probability).
    """
    if target_accuracy is not None:
        confidence.check_probability("--target-accuracy", target_accuracy)
        require_calibration(model, "--target-accuracy")
    if is_store_data(data):  # featurized by the model's featurizer (checked), shard by shard, few numbers per row
        y_true, y_pred, names, unknown_counts, (plain, own) = store_evaluation(model, data, unknown_labels)
        empty = None  # a store keeps no texts
    else:
        corpus = as_corpus(data, reader=reader, min_labels=1)
        known = set(model.labels)
        unknown_counts: dict[str, int] = {}
        for label in corpus.labels:
            if label not in known:
                unknown_counts[label] = unknown_counts.get(label, 0) + 1
        if scores is not None and len(scores) != len(corpus):
            raise ValueError(f"scores has {len(scores)} rows for {len(corpus)} documents")
        if unknown_counts and unknown_labels == "skip":
            kept = [i for i, label in enumerate(corpus.labels) if label in known]
            corpus = corpus.subset(kept)
            scores = None if scores is None else np.asarray(scores)[kept]
            if len(corpus) == 0:
                raise InputError(corpus.path, "no document has a label the model knows "
                                 f"(the model's labels: {', '.join(model.labels)})")
        names = list(model.labels) + ([] if unknown_labels == "skip" else sorted(unknown_counts))
        y_true = corpus.label_indices(names)
        raw_scores = model.scores(corpus.texts) if scores is None else np.asarray(scores, dtype=np.float64)
        y_pred = raw_scores.argmax(axis=1)
        empty = count_empty(corpus.texts)
    counts = confusion_counts(y_true, y_pred, len(names))
    out = {"documents": len(y_true), **summary_scores(counts)}
    if summary_only:
        return out
    scores = label_scores(counts)
    number = lambda v: None if not np.isfinite(v) else float(v)  # noqa: E731  (undefined: None, null in JSON)
    out["per_label"] = {
        name: {"precision": number(scores["precision"][j]), "recall": number(scores["recall"][j]),
               "f1": float(scores["f1"][j]), "support": int(scores["support"][j]),
               "predicted": int(scores["predicted"][j]), "known": j < len(model.labels)}
        for j, name in enumerate(names) if scores["present"][j]
    }
    out["absent_labels"] = [name for j, name in enumerate(names) if not scores["present"][j]]
    out["unknown_labels"] = {"handling": "counted as errors" if unknown_labels == "count" else "skipped",
                             "documents": int(sum(unknown_counts.values())), "labels": dict(sorted(unknown_counts.items()))}
    out["empty_texts"] = empty
    out["labels"] = names
    out["confusion"] = counts.tolist()
    rows = y_true < len(model.labels)  # calibration needs labels the model knows
    if not rows.any():
        return out
    if not is_store_data(data):
        plain = confidence.summary(raw_scores[rows], y_true[rows])
        own = confidence.summary(raw_scores[rows], y_true[rows], model.temperature) if model.calibration is not None else \
            plain if model.has_probabilities else None
    out.update({
        "temperature": model.temperature,
        "ece": None if own is None else own["ece"], "ece_uncalibrated": plain["ece"],
        "nll": None if own is None else own["nll"], "nll_uncalibrated": plain["nll"],
        "reliability": {"calibrated": None if model.calibration is None else own["reliability"],
                        "uncalibrated": plain["reliability"]},
        "coverage": None if own is None else own["coverage"],
    })
    if target_accuracy is not None:
        out["target"] = confidence.threshold_for_accuracy(own["confidence"], own["correct"], target_accuracy)
    return out


def count_empty(texts) -> int:
    """How many texts are empty or only white space (they get the bias's label, from no evidence)."""
    return sum(1 for text in texts if not text.strip())


def as_corpus(data, labels=None, reader: ReaderOptions | None = None, min_labels: int = 2,
              require_labels: bool = True) -> Corpus:
    """A :class:`Corpus` from a file or folder, a Corpus, a ``(texts, labels)`` pair or a list of texts.

    Lists are checked like a file's records (texts are strings, labels strings or integers);
    labelled data must hold at least ``min_labels`` distinct labels.
    """
    if isinstance(data, Corpus):
        return data
    if is_path(data):
        return read_corpus(data, reader, require_labels=require_labels, min_labels=min_labels)
    if labels is None and isinstance(data, tuple) and len(data) == 2 and not isinstance(data[0], str):
        data, labels = data
    if labels is None and require_labels:
        raise InputError("in-memory data", "labels are missing: give (texts, labels) or labels=")
    corpus = Corpus.from_lists(data, labels)
    if len(corpus) == 0:
        raise InputError(corpus.path, "no documents")
    if require_labels and len(corpus.label_names) < min_labels:
        raise InputError(corpus.path, f"found {len(corpus.label_names)} label(s); a classifier needs at least {min_labels}")
    return corpus


def is_path(data) -> bool:
    return isinstance(data, (str, os.PathLike))


def _unweighted(reader):
    """``reader`` without its weight column: dev and test files need not have one."""
    return None if reader is None or getattr(reader, "weight_column", None) is None else replace(reader, weight_column=None)
