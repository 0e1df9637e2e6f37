"""Classification scores as the standard definitions give them, on integer label codes.

Per label ``k``: ``TP`` (true ``k``, predicted ``k``), ``FP`` (predicted ``k``, true another), ``FN``
(true ``k``, predicted another). Precision ``TP / (TP + FP)`` is *undefined* for a label never
predicted and recall ``TP / (TP + FN)`` for a label absent from the truth: both are returned as
NaN (``None`` in JSON, "—" on screen), never as 0, which would read as "always wrong". F1 is
``2 TP / (2 TP + FP + FN)`` (van Rijsbergen's F with beta = 1), defined for every label present in
the truth or the predictions: 0 for a label never predicted or never true.

Averages run over the labels present in the truth or the predictions, as
``sklearn.metrics.f1_score(average="macro")`` does when ``labels`` is not given; a label that is
neither (support 0, never predicted) tells nothing about the classifier and is left out.
Macro-F1 is the plain mean of those labels' F1, weighted-F1 the mean weighted by support.
"""

from __future__ import annotations

import numpy as np

AVERAGE_NOTE = ("Averages are over the labels present in the truth or the predictions (as scikit-learn's "
                "f1_score with average=\"macro\"); a never-predicted label has no precision and a label "
                "absent from the truth no recall (shown as —); either enters the averages with F1 = 0, "
                "from F1 = 2·TP / (2·TP + FP + FN).")


def confusion_counts(y_true, y_pred, n_labels: int) -> np.ndarray:
    """Counts ``C[i, j]`` of documents of true label ``i`` predicted as ``j`` (int64, n x n)."""
    y_true = np.asarray(y_true, dtype=np.int64)
    y_pred = np.asarray(y_pred, dtype=np.int64)
    flat = np.bincount(y_true * n_labels + y_pred, minlength=n_labels * n_labels)
    return flat.reshape(n_labels, n_labels)


def label_scores(counts: np.ndarray) -> dict:
    """Per-label numbers from a confusion matrix: arrays ``tp``, ``support``, ``predicted``,
    ``precision`` and ``recall`` (NaN where undefined), ``f1`` (NaN only for labels absent from
    both truth and predictions) and the boolean mask ``present``."""
    counts = np.asarray(counts, dtype=np.int64)
    return _scores(np.diag(counts), counts.sum(axis=1), counts.sum(axis=0))


def _scores(tp, support, predicted) -> dict:
    tp = np.asarray(tp, dtype=np.float64)
    present = (support > 0) | (predicted > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        precision = np.where(predicted > 0, tp / predicted, np.nan)
        recall = np.where(support > 0, tp / support, np.nan)
        f1 = np.where(present, 2 * tp / (support + predicted), np.nan)  # 2TP+FP+FN = support + predicted
    return {"tp": tp.astype(np.int64), "support": support, "predicted": predicted, "precision": precision,
            "recall": recall, "f1": f1, "present": present}


def summary_scores(counts: np.ndarray) -> dict:
    """Accuracy, macro-F1 and weighted-F1 of a confusion matrix (see the module docstring)."""
    scores = label_scores(counts)
    total = int(scores["support"].sum())
    present = scores["present"]
    f1 = scores["f1"][present]
    support = scores["support"][present]
    return {
        "accuracy": float(scores["tp"].sum() / total) if total else float("nan"),
        "macro_f1": float(f1.mean()) if f1.size else float("nan"),
        "weighted_f1": float((f1 * support).sum() / total) if total else float("nan"),
        "averaged_over": int(present.sum()),
    }


def macro_f1(y_true, y_pred, n_labels: int) -> float:
    """Macro-F1 over the labels present in ``y_true`` or ``y_pred`` (per-label counts only: no
    n x n matrix, so it stays cheap at any number of labels)."""
    y_true = np.asarray(y_true, dtype=np.int64)
    y_pred = np.asarray(y_pred, dtype=np.int64)
    tp = np.bincount(y_true[y_true == y_pred], minlength=n_labels)
    scores = _scores(tp, np.bincount(y_true, minlength=n_labels), np.bincount(y_pred, minlength=n_labels))
    f1 = scores["f1"][scores["present"]]
    return float(f1.mean()) if f1.size else float("nan")


def confused_pairs(counts, names, top: int | None = None) -> list[dict]:
    """The off-diagonal cells of a confusion matrix, largest count first.

    Each row: ``true``, ``predicted`` (label names), ``count`` and ``share`` (of the true
    label's documents); ties broken by the larger share, then by name. ``top``: at most this many.
    """
    counts = np.asarray(counts, dtype=np.int64)
    support = counts.sum(axis=1)
    i, j = np.nonzero(counts)
    keep = i != j
    i, j = i[keep], j[keep]
    rows = [{"true": names[a], "predicted": names[b], "count": int(counts[a, b]),
             "share": float(counts[a, b] / support[a])} for a, b in zip(i.tolist(), j.tolist())]
    rows.sort(key=lambda r: (-r["count"], -r["share"], r["true"], r["predicted"]))
    return rows if top is None else rows[:top]
