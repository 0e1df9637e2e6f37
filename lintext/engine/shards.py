"""Training rows in shards, read one at a time: what lets the trainer learn from a corpus larger than memory.

:class:`RowShards` describes rows kept in parts (a feature store's shards) by their sizes and a
``load(k)`` callable that returns shard ``k`` as ``(CSR matrix, label indices)``, typically
memory-mapped. :func:`epoch_pieces` is what the trainer's epoch loop runs over: the rows of one
epoch as one or more pieces, each handed to the compiled kernel in turn.

Shuffling. In memory there is one piece, all rows, in the order of one ``rng.permutation(n)``
(the draw the trainer has always made, so in-memory training is bit for bit what it was). With
shards, each epoch draws a permutation of the shards and then, for each shard in that order, a
permutation of its rows: every row is still seen once per epoch, in a seeded and deterministic
order, but two rows of different shards are never interleaved within an epoch, and each shard's
last batch may be smaller than ``batch_size``. Unlike a full shuffle, the rows of one shard stay
together: were the shards not themselves mixed (consecutive rows of a file sorted by label, say),
the model would see long runs of one label and end each epoch on the last shard's labels. So
``lintext featurize`` deals the rows of a part of several shards to the shards at random (seeded;
:class:`lintext.text.store.DealingWriter`): each shard is a random sample of the corpus.
``scripts/bench_store.py`` measures the effect on accuracy against a full shuffle.

Only one shard's arrays are referenced at a time: the piece handed out is emptied before the next
shard is loaded, so a memory-mapped shard's pages are released (unmapped) before the next is read.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Iterator

import numpy as np
import scipy.sparse as sp

from . import losses
from .metrics import macro_f1


@dataclass
class RowShards:
    """Rows of a matrix kept in shards. ``load(k)`` returns shard ``k`` as ``(X, y)``: a CSR matrix with
    ``n_features`` columns and ``sizes[k]`` rows, and its label indices."""

    sizes: list[int]
    n_features: int
    load: Callable[[int], tuple]

    @property
    def shape(self) -> tuple[int, int]:
        return (int(sum(self.sizes)), int(self.n_features))

    def labels(self) -> np.ndarray:
        """Every row's label index, shard after shard (one shard loaded at a time)."""
        return np.concatenate([np.asarray(self.load(k)[1], dtype=np.int64) for k in range(len(self.sizes))])

    def concatenated(self) -> tuple[sp.csr_matrix, np.ndarray]:
        """All shards stacked in memory: ``(X, y)`` (for full-batch L-BFGS)."""
        parts = [self.load(k) for k in range(len(self.sizes))]
        return sp.vstack([p[0] for p in parts], format="csr"), np.concatenate([np.asarray(p[1]) for p in parts])


class Piece:
    """The rows of one kernel call: CSR arrays (``data`` in the training dtype), labels and their order."""

    __slots__ = ("indptr", "indices", "data", "y", "order")

    def arrays(self) -> tuple:
        return self.indptr, self.indices, self.data, self.y, self.order

    def clear(self) -> None:
        self.indptr = self.indices = self.data = self.y = self.order = None


def epoch_pieces(X, y, rng: np.random.Generator, dtype, check: Callable | None = None, data=None) -> Iterator[Piece]:
    """The rows of one epoch, as pieces in training order (see the module docstring).

    ``X`` is a CSR matrix (with ``y``, and ``data``: its values in ``dtype``, converted once by the
    caller) or :class:`RowShards` (``y`` unused; ``check(X, y)`` validates each shard as loaded).
    """
    piece = Piece()
    if not isinstance(X, RowShards):
        piece.indptr, piece.indices, piece.y = X.indptr, X.indices, y
        piece.data = np.ascontiguousarray(X.data, dtype=dtype) if data is None else data
        piece.order = rng.permutation(X.shape[0]).astype(np.int64)
        yield piece
        return
    for k in rng.permutation(len(X.sizes)).tolist():
        piece.clear()  # release the previous shard before reading the next
        Xk, yk = X.load(k)
        if check is not None:
            Xk, yk = check(Xk, yk)
        piece.indptr, piece.indices, piece.y = Xk.indptr, Xk.indices, yk
        piece.data = np.ascontiguousarray(Xk.data, dtype=dtype)
        del Xk, yk
        piece.order = rng.permutation(len(piece.y)).astype(np.int64)
        yield piece
    piece.clear()


def shard_dev_scores(dev: RowShards, params, loss: str, threads=1, check: Callable | None = None) -> dict:
    """Dev loss, accuracy and macro-F1 over dev rows kept in shards, one shard at a time (the same
    values as :func:`lintext.engine.monitor.dev_scores` on all rows, up to the rounding of the loss's sum)."""
    from . import kernels  # numba loads on first use, not with the module (lintext.pipeline imports this one)

    total, truth, predicted = 0.0, [], []
    for k in range(len(dev.sizes)):
        Xk, yk = dev.load(k)
        if check is not None:
            Xk, yk = check(Xk, yk)
        S = kernels.decision_scores(Xk.indptr, Xk.indices, Xk.data, params, threads=threads)
        total += losses.mean_loss(loss, S, yk) * len(yk)
        truth.append(np.asarray(yk, dtype=np.int64))
        predicted.append(S.argmax(axis=1))
        del Xk, yk, S
    y_true, y_pred = np.concatenate(truth), np.concatenate(predicted)
    return {"dev_loss": total / len(y_true), "dev_accuracy": float(np.mean(y_true == y_pred)),
            "dev_macro_f1": macro_f1(y_true, y_pred, params.shape[1])}
