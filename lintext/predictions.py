"""``lintext predict``: a model's labels and probabilities for every record of its input, streamed in chunks."""

from __future__ import annotations

from itertools import islice

import numpy as np

from . import confidence
from .errors import ConfigError
from .explanation import require_calibration
from .from_store import is_store_data, store_score_rows
from .model import Model
from .pipeline import as_corpus, count_empty, is_path
from .text.readers import ReaderOptions, iter_chunks


def prediction_rows(model: Model, data, top_labels: int = 1, chunk_size: int = 20000, reader: ReaderOptions | None = None,
                    min_probability: float | None = None, counts: dict | None = None):
    """Yield a CSV header and then one row per input record, streaming in chunks.

    Columns: ``row`` (the record's number in the input, from 1), ``id`` (with
    ``reader.id_column``: that column's value), ``label``, and ``probability`` (calibrated when
    the model has a calibration) or ``score`` (a hinge model without one); with ``top_labels`` > 1
    also ``label_2``, ``probability_2`` ... up to ``top_labels``. Labels are ranked by score, so a
    calibration never changes them. With ``min_probability`` (needs a calibrated model) a row whose
    best probability is below it gets an empty ``label`` and ``yes`` in a last column, ``review``
    (``no`` for the rows decided). ``data``: a file, folder or ``-`` (standard input), a Corpus or
    a list of texts. ``counts``, when given, is filled with ``documents`` and ``empty_texts``.
    """
    top = top_labels
    if not 1 <= top <= len(model.labels):
        raise ConfigError("--top-labels", top, f"must be between 1 and the number of labels ({len(model.labels)})")
    if min_probability is not None:
        confidence.check_probability("--min-probability", min_probability)
        require_calibration(model, "--min-probability")
    value = "probability" if model.has_probabilities else "score"
    with_id = reader is not None and reader.id_column is not None
    header = ["row"] + (["id"] if with_id else []) + ["label", value]
    for k in range(2, top + 1):
        header += [f"label_{k}", f"{value}_{k}"]
    if min_probability is not None:
        header.append("review")
    counts = {} if counts is None else counts
    counts.update(documents=0, empty_texts=0)
    yield header
    row = 0
    for chunk, numbers, scores in _scored_chunks(model, data, chunk_size, reader):
        counts["documents"] += len(scores)
        counts["empty_texts"] += 0 if chunk is None else count_empty(chunk.texts)
        best = np.argsort(-scores, axis=1, kind="stable")[:, :top]
        if model.has_probabilities:
            scores = model.probabilities_of(scores)
        for i in range(len(scores)):
            row += 1
            number = row if numbers is None else numbers[i] + 1
            out = [number, chunk.ids[i] if chunk is not None and chunk.ids is not None else ""] if with_id else [number]
            for j in best[i]:
                out += [model.labels[j], f"{scores[i, j]:.6g}"]
            if min_probability is not None:
                unsure = scores[i, best[i, 0]] < min_probability
                if unsure:
                    out[2 if with_id else 1] = ""
                out.append("yes" if unsure else "no")
            yield out


def _scored_chunks(model, data, chunk_size, reader):
    """(chunk or None, record numbers or None, scores) of consecutive records: texts read in chunks, or a
    store's rows (in record order)."""
    if not is_store_data(data):
        chunks = iter_chunks(data, chunk_size=chunk_size, reader=reader) if is_path(data) else \
            [as_corpus(data, reader=reader, require_labels=False)]
        for chunk in chunks:
            yield chunk, None, model.scores(chunk.texts)
        return
    rows = iter(store_score_rows(model, data))
    while True:
        batch = list(islice(rows, chunk_size))
        if not batch:
            return
        yield None, [r for r, _ in batch], np.vstack([s for _, s in batch])
