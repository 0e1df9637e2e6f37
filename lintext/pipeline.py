"""The main job end to end: read, split, featurize, train, evaluate.

``train`` is the Python entry point behind ``lintext train``; ``evaluate``
behind ``lintext evaluate``. Neither prints: progress goes to the callable
given, as dictionaries.
"""

from __future__ import annotations

import os
import time
from dataclasses import asdict, dataclass, fields
from typing import Callable

import numpy as np
import scipy.sparse as sp
from sklearn.metrics import accuracy_score, confusion_matrix, f1_score, precision_recall_fscore_support

from .errors import ConfigError
from .features import Featurizer, FeaturizerConfig
from .io import Corpus, iter_chunks, read_corpus, split_dev
from .model import Model, softmax
from .report_extras import training_extras
from .train import TrainOptions, fit

Progress = Callable[[dict], None]


@dataclass
class PreparedData:
    """Read, split and featurized data, shared by :func:`train`, the probe and the sweep."""

    featurizer: Featurizer
    labels: list[str]
    X: sp.csr_matrix
    y: np.ndarray
    X_dev: sp.csr_matrix | None
    y_dev: np.ndarray | None
    train_set: Corpus
    dev_set: Corpus | None
    description: dict


def prepare_data(data, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
                 seed: int = 0, fmt: str | None = None, text_column: str = "text", label_column: str = "label",
                 n_jobs: int = 1, progress: Progress | None = None) -> PreparedData:
    """Read ``data``, hold out a dev set and featurize once.

    The dev set is ``dev`` when given, else a stratified ``dev_fraction`` of ``data``
    seeded by ``seed`` (none when ``dev_fraction`` is 0). ``description`` is the ``data``
    part of a model's ``info``.
    """
    report = progress or (lambda event: None)
    fconfig = _as(FeaturizerConfig, featurizer).validate()
    reader = dict(fmt=fmt, text_column=text_column, label_column=label_column)
    report({"stage": "reading", "path": str(data)})
    corpus = data if isinstance(data, Corpus) else read_corpus(data, **reader)
    if dev is not None:
        train_set = corpus
        dev_set = dev if isinstance(dev, Corpus) else read_corpus(dev, min_labels=1, **reader)
    elif dev_fraction and dev_fraction > 0:
        train_set, dev_set = split_dev(corpus, dev_fraction, seed=seed)
    else:
        train_set, dev_set = corpus, None
    labels = train_set.label_names
    report({"stage": "featurizing", "documents": len(train_set)})
    started = time.perf_counter()
    feat = Featurizer(fconfig, n_jobs=n_jobs)
    X = feat.fit_transform(train_set.texts).tocsr()
    X_dev = feat.transform(dev_set.texts).tocsr() if dev_set is not None else None
    description = {
        "train": str(getattr(data, "path", data)),
        "train_documents": len(train_set),
        "dev": None if dev_set is None else (str(getattr(dev, "path", dev)) if dev is not None else f"{dev_fraction:g} of train"),
        "dev_documents": 0 if dev_set is None else len(dev_set),
        "features": int(X.shape[1]),
        "nonzeros": int(X.nnz),
        "featurize_seconds": round(time.perf_counter() - started, 3),
    }
    y_dev = dev_set.label_indices(labels) if dev_set is not None else None
    return PreparedData(feat, labels, X, train_set.label_indices(labels), X_dev, y_dev, train_set, dev_set, description)


def train(
    data: str | os.PathLike | Corpus,
    dev: str | os.PathLike | Corpus | None = None,
    test: str | os.PathLike | Corpus | None = None,
    dev_fraction: float = 0.1,
    featurizer: FeaturizerConfig | dict | None = None,
    options: TrainOptions | dict | None = None,
    fmt: str | None = None,
    text_column: str = "text",
    label_column: str = "label",
    n_jobs: int = 1,
    progress: Progress | None = None,
) -> Model:
    """Train a model from labelled data.

    Parameters
    ----------
    data : training file, folder or :class:`~lintext.io.Corpus`.
    dev : a dev set; when ``None``, a stratified ``dev_fraction`` of ``data``
        (seeded by ``options.seed``) is held out; ``dev_fraction=0`` trains on
        everything with no early stopping.
    test : optional test set, evaluated once at the end (never used in training).
    featurizer, options : configurations (objects or dictionaries of their fields).
    progress : called with ``{"stage": ...}`` dictionaries (reading,
        featurizing, each epoch, evaluating).

    Returns
    -------
    Model, with ``info`` holding options, history, best epoch and metrics.
    """
    report = progress or (lambda event: None)
    topts = _as(TrainOptions, options)
    topts.validate()
    prep = prepare_data(data, dev, dev_fraction, featurizer, topts.seed, fmt, text_column, label_column, n_jobs, report)
    result = fit(prep.X, prep.y, len(prep.labels), prep.X_dev, prep.y_dev, topts,
                 progress=lambda row: report({"stage": "epoch", **row}))
    info = {
        "training": _options_json(topts),
        "best_epoch": int(result.best_epoch),
        "stopped_early": bool(result.stopped_early),
        "history": result.history,
        "data": prep.description,
        "metrics": {},
    }
    train_set = prep.train_set
    model = Model(prep.featurizer, result.coef, result.intercept, prep.labels, topts.loss, info, result.feature_stats)
    model.info["explain"] = training_extras(model, train_set.texts, train_set.sources, prep.X, train_labels=train_set.labels)
    if prep.dev_set is not None:
        model.info["metrics"]["dev"] = evaluate(model, prep.dev_set)
    if test is not None:
        report({"stage": "evaluating", "path": str(test)})
        reader = dict(fmt=fmt, text_column=text_column, label_column=label_column)
        test_set = _corpus(test, reader, min_labels=1)
        model.info["data"]["test"] = str(getattr(test, "path", test))
        model.info["metrics"]["test"] = evaluate(model, test_set)
    return model


def evaluate(model: Model, data: str | os.PathLike | Corpus, summary_only: bool = False, **reader) -> dict:
    """Accuracy, macro- and weighted-F1, per-label precision/recall/F1/support and the confusion matrix.

    Labels in ``data`` that the model does not know raise InputError naming the record.
    Metrics are scikit-learn's (``sklearn.metrics``).
    """
    corpus = _corpus(data, reader, min_labels=1)
    y_true = corpus.label_indices(model.labels)
    y_pred = model.decision_function(corpus.texts).argmax(axis=1)
    every = np.arange(len(model.labels))
    out = {
        "documents": len(corpus),
        "accuracy": float(accuracy_score(y_true, y_pred)),
        "macro_f1": float(f1_score(y_true, y_pred, labels=every, average="macro", zero_division=0)),
        "weighted_f1": float(f1_score(y_true, y_pred, labels=every, average="weighted", zero_division=0)),
    }
    if summary_only:
        return out
    p, r, f, s = precision_recall_fscore_support(y_true, y_pred, labels=every, zero_division=0)
    out["per_label"] = {
        name: {"precision": float(p[j]), "recall": float(r[j]), "f1": float(f[j]), "support": int(s[j])}
        for j, name in enumerate(model.labels)
    }
    out["labels"] = list(model.labels)
    out["confusion"] = confusion_matrix(y_true, y_pred, labels=every).tolist()
    return out


def predict_rows(model: Model, data, top: int = 1, chunk_size: int = 20000, **reader):
    """Yield a CSV header and then one row per input record, streaming in chunks.

    Columns: ``row`` (the record's number in the input, from 1), ``label``, and
    ``probability`` (softmax) or ``score`` (hinge); with ``top`` > 1 also
    ``label_2``, ``probability_2`` ... up to ``top``.
    """
    if not 1 <= top <= len(model.labels):
        raise ConfigError("--top", top, f"must be between 1 and the number of labels ({len(model.labels)})")
    value = "probability" if model.loss == "softmax" else "score"
    header = ["row", "label", value]
    for k in range(2, top + 1):
        header += [f"label_{k}", f"{value}_{k}"]
    yield header
    row = 0
    for chunk in iter_chunks(data, chunk_size=chunk_size, **reader):
        scores = model.decision_function(chunk.texts)
        if model.loss == "softmax":
            scores = softmax(scores)
        best = np.argsort(-scores, axis=1, kind="stable")[:, :top]
        for i in range(len(chunk)):
            row += 1
            out = [row]
            for j in best[i]:
                out += [model.labels[j], f"{scores[i, j]:.6g}"]
            yield out


def _corpus(data, reader: dict, min_labels: int = 2) -> Corpus:
    if isinstance(data, Corpus):
        return data
    return read_corpus(data, min_labels=min_labels, **reader)


def _as(cls, value):
    if value is None:
        return cls()
    if isinstance(value, cls):
        return value
    if isinstance(value, dict):
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(value) - known)
        if unknown:
            raise ConfigError(unknown[0], value[unknown[0]], f"not a {cls.__name__} field")
        return cls(**value)
    raise TypeError(f"expected {cls.__name__} or dict, got {type(value).__name__}")


def _options_json(options: TrainOptions) -> dict:
    """The options as JSON, with the learning rate actually used filled in."""
    out = {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(options).items()}
    rate = options.base_learning_rate()
    out["learning_rate"] = rate if np.isfinite(rate) else None
    return out
