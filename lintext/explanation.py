"""Why one document got its label: per-feature contributions, and the dev errors behind a model.

A linear model's score for label ``l`` is ``sum_j x_j W[j, l] + b_l``: each feature ``j``
present in the document *contributes* ``x_j W[j, l]`` (its value in the document times its
weight), and the contributions plus the intercept ``b_l`` are the score. :func:`explain_matrix`
lists them for the predicted label, with the weight toward the runner-up (the label with the
next highest score), computed in float64 from the stored weights as
:meth:`lintext.model.Model.matrix_scores` computes the score. Features are ranked by their
contribution, largest first: the features that pushed the document hardest toward its label
come first, those that pulled against it last.

:func:`dev_errors` runs once after training, while the dev texts are at hand, and keeps the dev
documents the model got wrong with the highest confidence; its JSON-ready result is stored as
``model.info["dev_errors"]`` and read back with :func:`errors_record` (the report, ``inspect
--errors``). An error *hinges on a rare feature* when one of its three largest contributions
toward the wrong label comes from a feature in at most ``RARE_DF`` training documents.
"""

from __future__ import annotations

from typing import Callable, Iterator

import numpy as np

from .errors import ConfigError, ModelFileError
from .evidence import RARE_DF, document_ngrams, hashed_names, snippet
from .text.readers import ReaderOptions, iter_chunks

HINGE_TOP = 3  # contributions looked at when asking whether an error hinges on a rare feature
ERRORS_KEPT = 25
ERROR_FEATURES = 5


def check_top(top: int) -> int:
    """``--top``: a number of features, 0 for all of them."""
    if isinstance(top, bool) or not isinstance(top, (int, np.integer)) or top < 0:
        raise ConfigError("--top", top, "must be a whole number, 0 for every feature")
    return int(top)


def _ranked(cols: np.ndarray, vals: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Contributions ``vals * weights`` and their order, largest first (ties: lower column)."""
    contrib = vals * weights
    return contrib, np.lexsort((cols, -contrib))


def explain_matrix(model, X, texts=None, top: int = 10, sources=None, true_labels=None, first_row: int = 1) -> list[dict]:
    """One explanation per row of the featurized matrix ``X``.

    Parameters
    ----------
    model : :class:`~lintext.model.Model`.
    X : CSR matrix from ``model.featurizer.transform(texts)``.
    texts : the texts (in hashing mode they name each column by the document's own n-grams;
        without them, by the training n-grams recorded for the column).
    top : features listed per document, largest contribution first; 0 for all.
    sources, true_labels : optional, per row; copied into the records.
    first_row : number of the first row (records count from it).

    Returns
    -------
    list of JSON-ready dicts: ``row``, ``label``, ``score``, ``probability`` (``None`` when the
    model has none), ``calibrated``, ``temperature``, ``runner_up``, ``runner_up_score``,
    ``margin`` (score minus the runner-up's), ``intercept``, ``runner_up_intercept``,
    ``features`` (list of ``feature``, ``column``, ``value``, ``weight``, ``runner_up_weight``,
    ``contribution``, ``document_frequency``, ``rare``), ``other_features`` and
    ``other_contribution`` (the features not listed: their number and summed contribution), and
    ``source`` / ``true_label`` when given. ``sum(contribution) + other_contribution +
    intercept`` is ``score``.
    """
    top = check_top(top)
    X = X.tocsr()
    scores = model.matrix_scores(X)
    probs = model.probabilities_of(scores) if model.has_probabilities else None
    intercept = np.asarray(model.intercept, dtype=np.float64)
    df = np.asarray(model.featurizer.document_frequency, dtype=np.int64)
    hashing = model.featurizer.config.hashing
    trained_names = hashed_names(model) if hashing and texts is None else {}
    temperature = model.temperature
    out = []
    for i in range(X.shape[0]):
        s = scores[i]
        order = np.argsort(-s, kind="stable")
        best, runner = int(order[0]), int(order[1])
        cols = X.indices[X.indptr[i]:X.indptr[i + 1]].astype(np.int64)
        vals = X.data[X.indptr[i]:X.indptr[i + 1]].astype(np.float64)
        w = np.asarray(model.coef[cols], dtype=np.float64)
        contrib, rank = _ranked(cols, vals, w[:, best])
        shown = rank if top == 0 else rank[:top]
        rest = rank[len(shown):]
        names = document_ngrams(model.featurizer, texts[i]) if hashing and texts is not None else None
        features = []
        for k in shown.tolist():
            j = int(cols[k])
            if not hashing:
                name = model.featurizer.feature_names[j]
            else:
                name = " | ".join((names or trained_names).get(j, ()))
            features.append({
                "feature": name, "column": j, "value": float(vals[k]), "weight": float(w[k, best]),
                "runner_up_weight": float(w[k, runner]), "contribution": float(contrib[k]),
                "document_frequency": int(df[j]), "rare": bool(df[j] <= RARE_DF),
            })
        record = {"row": first_row + i}
        if sources is not None:
            record["source"] = str(sources[i])
        if true_labels is not None and true_labels[i] is not None:
            record["true_label"] = str(true_labels[i])
        record.update({
            "label": model.labels[best], "score": float(s[best]),
            "probability": None if probs is None else float(probs[i, best]),
            "calibrated": temperature is not None, "temperature": temperature,
            "runner_up": model.labels[runner], "runner_up_score": float(s[runner]),
            "margin": float(s[best] - s[runner]),
            "intercept": float(intercept[best]), "runner_up_intercept": float(intercept[runner]),
            "features": features,
            "other_features": int(len(rest)), "other_contribution": float(contrib[rest].sum()),
        })
        out.append(record)
    return out


def iter_explanations(model, data=None, texts=(), reader: ReaderOptions | None = None, top: int = 10,
                      chunk_size: int = 2000) -> Iterator[dict]:
    """Explanations of every record of ``data`` (labels optional), then of every text of ``texts``.

    Records of ``data`` carry their ``source`` (and ``true_label`` when the data has labels);
    texts given directly are numbered after them. The options are checked before the first record
    (an empty text raises ConfigError); the records are read and explained chunk by chunk.
    """
    check_top(top)
    texts = list(texts or ())
    for text in texts:
        if not isinstance(text, str) or not text.strip():
            raise ConfigError("--text", text, "is empty; give the text to explain")
    if data is None and not texts:
        raise ConfigError("DATA", "", "give a data file or folder, or --text")
    return _explanations(model, data, texts, reader, top, chunk_size)


def _explanations(model, data, texts, reader, top, chunk_size) -> Iterator[dict]:
    row = 1
    if data is not None:
        for chunk in iter_chunks(data, chunk_size=chunk_size, reader=reader):
            X = model.featurizer.transform(chunk.texts)
            yield from explain_matrix(model, X, chunk.texts, top, chunk.sources, chunk.labels, first_row=row)
            row += len(chunk)
    if texts:
        yield from explain_matrix(model, model.featurizer.transform(texts), texts, top, first_row=row)


# ---------------------------------------------------------------- dev errors


def dev_errors(model, corpus, X, keep: int = ERRORS_KEPT, features: int = ERROR_FEATURES,
               texts_of: Callable[[list], list] | None = None, scores: np.ndarray | None = None) -> dict:
    """The dev documents the model gets wrong, most confident first, JSON-ready.

    Parameters
    ----------
    model : the trained (and calibrated) :class:`~lintext.model.Model`.
    corpus : the dev :class:`~lintext.text.readers.Corpus`; ``X`` its featurized matrix.
    keep : how many errors to keep; features : contributions kept per error.
    texts_of : the texts of the rows shown, given their row numbers (default: ``corpus.texts``; a
        feature store reads them back from its source).
    scores : ``model.matrix_scores(X)`` when already computed.

    Returns
    -------
    dict: ``documents`` (dev documents), ``errors`` (how many are wrong), ``hinge_on_rare`` (how
    many of those have a rare feature among their ``HINGE_TOP`` largest contributions, counting
    only contributions toward the wrong label),
    ``rare_df``, ``hinge_top``, ``ranked_by`` (``probability``, or ``margin`` for a model without
    probabilities) and ``shown``: per error (most confident first) ``source``, ``snippet``,
    ``true_label``, ``label``, ``probability``, ``score``, ``runner_up``, ``margin``,
    ``hinges_on_rare`` and ``features`` (as in :func:`explain_matrix`).
    """
    X = X.tocsr()
    y = corpus.label_indices(model.labels)
    scores = model.matrix_scores(X) if scores is None else scores
    predicted = scores.argmax(axis=1)
    wrong = np.flatnonzero(predicted != y)
    if model.has_probabilities:
        strength, ranked_by = model.probabilities_of(scores)[np.arange(len(y)), predicted], "probability"
    else:
        ordered = np.sort(scores, axis=1)
        strength, ranked_by = ordered[:, -1] - ordered[:, -2], "margin"
    df = np.asarray(model.featurizer.document_frequency, dtype=np.int64)
    hinges = {}
    for i in wrong.tolist():
        cols = X.indices[X.indptr[i]:X.indptr[i + 1]].astype(np.int64)
        vals = X.data[X.indptr[i]:X.indptr[i + 1]].astype(np.float64)
        contrib, rank = _ranked(cols, vals, np.asarray(model.coef[cols, predicted[i]], dtype=np.float64))
        top3 = rank[:HINGE_TOP]
        hinges[i] = bool(((df[cols[top3]] <= RARE_DF) & (contrib[top3] > 0)).any())
    chosen = wrong[np.lexsort((wrong, -strength[wrong]))][:keep]
    texts = texts_of(chosen.tolist()) if texts_of is not None else [corpus.texts[i] for i in chosen]
    shown = []
    if len(chosen):
        records = explain_matrix(model, X[chosen], texts, features, [corpus.sources[i] for i in chosen])
        for i, text, rec in zip(chosen.tolist(), texts, records):
            shown.append({
                "source": rec["source"], "snippet": snippet(text, [f["feature"].split(" | ")[0] for f in rec["features"]]),
                "true_label": model.labels[int(y[i])], "label": rec["label"], "probability": rec["probability"],
                "score": rec["score"], "runner_up": rec["runner_up"], "margin": rec["margin"],
                "hinges_on_rare": hinges[i],
                "features": [{k: f[k] for k in ("feature", "column", "value", "weight", "contribution",
                                                "document_frequency", "rare")} for f in rec["features"]],
            })
    return {"documents": int(len(y)), "errors": int(len(wrong)), "hinge_on_rare": int(sum(hinges.values())),
            "rare_df": RARE_DF, "hinge_top": HINGE_TOP, "ranked_by": ranked_by, "shown": shown}


def errors_record(model) -> dict | None:
    """The model's recorded dev errors, or ``None`` when it has none (trained without a dev
    set, or written before lintext recorded them)."""
    record = model.info.get("dev_errors") if isinstance(model.info, dict) else None
    return record if isinstance(record, dict) and isinstance(record.get("shown"), list) else None


def require_calibration(model, option: str) -> None:
    """Raise a one-line error naming the model directory when ``model`` has no calibration."""
    if model.calibration is None:
        where = getattr(model, "path", None) or "this model"
        raise ModelFileError(where, f"has no calibration (written before lintext fitted one, or trained without a dev "
                                f"set); {option} needs calibrated probabilities: train the model again with a dev set")
