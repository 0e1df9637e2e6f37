"""Large per-run tables kept beside ``model.json``, not in it: the confusion matrices.

A confusion matrix has one cell per pair of labels: at 10,000 labels that is 10^8 numbers,
which made ``model.json`` 1.3 GB and every ``predict`` read all of it. The model directory
keeps each evaluated set's matrix in ``confusion.npz`` as its non-zero cells (arrays
``<set>_true``, ``<set>_predicted``, ``<set>_count``: at most one cell per document), and
``model.json`` keeps the rest of the metrics. At load the matrices come back as the lists
``info["metrics"][<set>]["confusion"]`` when the model has at most
:data:`INLINE_LABELS` labels; above that they stay in the file (:func:`read_confusions`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .arrays import read_npz
from .errors import ModelFileError

CONFUSION_FILE = "confusion.npz"
INLINE_LABELS = 500


def split_confusions(meta: dict) -> tuple[dict, dict]:
    """``(meta without confusion matrices, the arrays of confusion.npz)``; ``meta`` itself is not changed."""
    metrics = meta.get("metrics")
    if not isinstance(metrics, dict):
        return meta, {}
    arrays, kept = {}, {}
    for name, entry in metrics.items():
        if isinstance(entry, dict) and entry.get("confusion") is not None:
            matrix = np.asarray(entry["confusion"], dtype=np.int64)
            true, predicted = np.nonzero(matrix)
            arrays.update({f"{name}_true": true.astype(np.int64), f"{name}_predicted": predicted.astype(np.int64),
                           f"{name}_count": matrix[true, predicted]})
            entry = {k: v for k, v in entry.items() if k != "confusion"}
        kept[name] = entry
    return {**meta, "metrics": kept}, arrays


def read_confusions(folder: Path, metrics: dict, n_labels: int) -> dict:
    """The dense confusion matrices (set name -> int64 array) stored in ``folder``'s confusion.npz, checked.

    Every cell index must name a label, every count be positive, and the counts of a set add
    up to its number of documents.
    """
    path = Path(folder) / CONFUSION_FILE
    if not path.is_file():
        return {}
    names = [name for name, entry in metrics.items() if isinstance(entry, dict)]
    shapes = {f"{name}_{part}": (None,) for name in names for part in ("true", "predicted", "count")}
    arrays = read_npz(path, shapes, kinds="i", finite=False, optional=tuple(shapes))
    matrices = {}
    for name in names:
        parts = [arrays.get(f"{name}_{part}") for part in ("true", "predicted", "count")]
        if all(p is None for p in parts):
            continue
        if any(p is None for p in parts) or len({len(p) for p in parts}) != 1:
            raise ModelFileError(path, f"the arrays of set {name!r} are missing or of different lengths")
        true, predicted, counts = parts
        if len(true) and (min(true.min(), predicted.min()) < 0 or max(true.max(), predicted.max()) >= n_labels
                          or counts.min() <= 0):
            raise ModelFileError(path, f"set {name!r}: a cell outside the {n_labels} labels or a count below 1")
        documents = metrics[name].get("documents")
        if documents is not None and int(counts.sum()) != documents:
            raise ModelFileError(path, f"set {name!r}: the counts add up to {int(counts.sum())}, not {documents} documents")
        matrix = np.zeros((n_labels, n_labels), dtype=np.int64)
        np.add.at(matrix, (true, predicted), counts)
        matrices[name] = matrix
    return matrices


def join_confusions(folder: Path, info: dict, n_labels: int) -> None:
    """Put the matrices of confusion.npz back into ``info["metrics"]`` (at most INLINE_LABELS labels)."""
    metrics = info.get("metrics")
    if not isinstance(metrics, dict) or n_labels > INLINE_LABELS:
        return
    for name, matrix in read_confusions(folder, metrics, n_labels).items():
        metrics[name] = {**metrics[name], "confusion": matrix.tolist()}
