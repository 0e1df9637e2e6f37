"""One run of a sweep, wherever it runs: the data it reads, the training, its row of the table.

:class:`RunData` says where a run's rows are, in a form that travels to another process or
machine: arrays the sweep wrote with ``np.save`` into a folder (opened memory-mapped, so the
operating system shares their pages between the processes of one machine), a feature store's
shards (:class:`lintext.engine.shards.RowShards`, read one at a time), or, on a cluster whose
workers share no folder with the sweep, the arrays themselves, sent to each worker once.

:func:`train_run` trains one configuration, optionally for fewer epochs than its options say (a
budget of successive halving), and returns its table row, its history and, unless a folder to
save them in is given, its weights. Every run is seeded by its options, never by where it ran, so
the same configuration gives the same row and weights in any process or on any machine.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from ..engine.options import TrainOptions
from ..engine.shards import RowShards
from ..engine.trainer import fit
from ..errors import DivergenceError, LinTextError
from ..report.sweep_page import METRIC_KEYS, ranked


def share_arrays(folder: Path, X, y, X_dev, y_dev) -> dict:
    """Write the in-memory matrices' arrays for workers to open memory-mapped; returns the shapes."""
    arrays = {}
    if not isinstance(X, RowShards):
        arrays.update(data=X.data, indices=X.indices, indptr=X.indptr, y=y)
    if not isinstance(X_dev, RowShards):
        arrays.update(dev_data=X_dev.data, dev_indices=X_dev.indices, dev_indptr=X_dev.indptr, dev_y=y_dev)
    for name, array in arrays.items():
        np.save(folder / f"{name}.npy", np.ascontiguousarray(array), allow_pickle=False)
    return {"X": X.shape, "X_dev": X_dev.shape}


class ListLoader:
    """``load(k)`` of RowShards over shards held in memory (a cluster worker that was sent them)."""

    def __init__(self, shards: list):
        self.shards = shards

    def __call__(self, k):
        data, indices, indptr, y, n_features = self.shards[k]
        return sp.csr_matrix((data, indices, indptr), shape=(len(indptr) - 1, n_features), copy=False), y


@dataclass
class RunData:
    """Where a run's training and dev rows are (see the module docstring)."""

    folder: str | None
    shapes: dict
    shards: RowShards | None = None  # training rows from a store, read shard by shard
    dev_shards: RowShards | None = None
    labels: list | None = None  # the labels' names, for label weights given per label
    weights: dict | None = None  # per-document weights of the training and dev rows (sample_weight, dev_weight)

    def open(self, arrays: dict | None = None):
        """``(X, y, X_dev, y_dev)``; ``arrays``: what :meth:`in_memory` gave, sent to this worker."""
        X = y = X_dev = y_dev = None
        if arrays is not None:
            X, y, X_dev, y_dev = _from_arrays(arrays)
        elif self.folder is not None and (self.shards is None or self.dev_shards is None):
            X, y, X_dev, y_dev = _open_some(Path(self.folder), self.shapes, self.shards is None, self.dev_shards is None)
        if self.shards is not None and arrays is None:
            X, y = self.shards, None
        if self.dev_shards is not None and arrays is None:
            X_dev, y_dev = self.dev_shards, None
        return X, y, X_dev, y_dev

    def in_memory(self) -> dict:
        """Every array a run reads, to send to workers that cannot open ``folder`` or the store."""
        out = {}
        for key, rows in (("train", self.shards), ("dev", self.dev_shards)):
            if rows is not None:
                out[key] = [_shard_arrays(*rows.load(k), rows.n_features) for k in range(len(rows.sizes))]
        if self.folder is not None:
            X, y, X_dev, y_dev = _open_some(Path(self.folder), self.shapes, self.shards is None, self.dev_shards is None)
            if X is not None:
                out["X"] = _shard_arrays(X, y, X.shape[1])
            if X_dev is not None:
                out["X_dev"] = _shard_arrays(X_dev, y_dev, X_dev.shape[1])
        return out


def _shard_arrays(X, y, n_features):
    return (np.array(X.data), np.array(X.indices), np.array(X.indptr), np.array(y), int(n_features))


def _from_arrays(arrays: dict):
    def matrix(key):
        data, indices, indptr, y, width = arrays[key]
        return sp.csr_matrix((data, indices, indptr), shape=(len(indptr) - 1, width), copy=False), y

    X, y = matrix("X") if "X" in arrays else (None, None)
    X_dev, y_dev = matrix("X_dev") if "X_dev" in arrays else (None, None)
    for key in ("train", "dev"):
        if key in arrays:
            rows = RowShards([len(s[2]) - 1 for s in arrays[key]], arrays[key][0][4], ListLoader(arrays[key]))
            if key == "train":
                X, y = rows, None
            else:
                X_dev, y_dev = rows, None
    return X, y, X_dev, y_dev


def _open_some(folder: Path, shapes: dict, train: bool, dev: bool):
    def matrix(prefix, shape):
        a = {k: np.load(folder / f"{prefix}{k}.npy", mmap_mode="r", allow_pickle=False) for k in ("data", "indices", "indptr", "y")}
        return sp.csr_matrix((a["data"], a["indices"], a["indptr"]), shape=shape, copy=False), a["y"]

    X, y = matrix("", shapes["X"]) if train else (None, None)
    X_dev, y_dev = matrix("dev_", shapes["X_dev"]) if dev else (None, None)
    return X, y, X_dev, y_dev


def train_run(data: RunData, index: int, options: TrainOptions, n_labels: int, epochs: int | None = None,
              save_to: str | None = None, arrays: dict | None = None, threads: int | None = None,
              resume: dict | None = None):
    """Train run ``index``; returns ``(row, history, weights, checkpoint)``.

    ``epochs``: a budget below ``options.epochs`` (successive halving); a run that uses all of it
    without stopping early has the status ``finished at budget`` and a ``checkpoint`` to go on from
    (``resume``; :mod:`lintext.engine.resume`) until the sweep prunes or promotes it; its row's
    times then add up over the budgets, and its weights are neither returned nor saved (the
    checkpoint holds them). ``save_to``: write the weights to ``save_to/run-<index>.npz`` and
    return ``None`` for them. ``threads``: numba threads of this run (a cluster worker's share;
    the weights do not depend on it).
    """
    X, y, X_dev, y_dev = data.open(arrays)
    seen: list[dict] = list(resume["history"]) if resume is not None else []
    budget = options.epochs if epochs is None else min(int(epochs), options.epochs)
    trained = replace(options, epochs=budget, threads=options.threads if threads is None else threads)
    earlier = (resume or {}).get("times", (0.0, 0.0))
    started, cpu = time.perf_counter() - earlier[0], time.process_time() - earlier[1]
    try:
        result = fit(X, y, n_labels, X_dev, y_dev, trained, resume=resume, keep_checkpoint=budget < options.epochs,
                     progress=lambda row: seen.append({k: v for k, v in row.items() if k != "epochs"}),
                     label_names=data.labels, **(data.weights or {}))
    except DivergenceError as exc:
        return run_row(index, options, seen, None, f"diverged at epoch {exc.epoch}", time.perf_counter() - started,
                       time.process_time() - cpu, diverged_epoch=exc.epoch), seen, None, None
    except LinTextError as exc:  # re-raised with a message only: typed errors need not unpickle
        raise LinTextError(str(exc)) from None
    seconds, cpu = time.perf_counter() - started, time.process_time() - cpu
    checkpoint = result.checkpoint
    if checkpoint is not None:
        checkpoint["times"] = (seconds, cpu)
    if result.stopped_early:
        status = "stopped early"
    else:
        status = "finished" if budget == options.epochs else BUDGET_USED
    row = run_row(index, options, result.history, result.best_epoch, status, seconds, cpu)
    if status == BUDGET_USED:  # pruned or resumed from its checkpoint (which holds the weights): none kept
        return row, result.history, None, checkpoint
    weights = {"coef": result.coef, "intercept": result.intercept,
               **{f"stat_{k}": v for k, v in result.feature_stats.items()}}
    if save_to is not None:
        np.savez(Path(save_to) / f"run-{index}.npz", **weights)
        weights = None
    return row, result.history, weights, checkpoint


BUDGET_USED = "finished at budget"  # a halving run that used its whole budget: pruned or promoted next


def run_row(index: int, options: TrainOptions, history: list[dict], best_epoch: int | None, status: str,
            seconds: float, cpu_seconds: float, diverged_epoch: int | None = None) -> dict:
    """One row of the sweep table; metrics are those of the epoch whose weights were kept.

    ``seconds`` is the run's wall time, ``cpu_seconds`` the processor time of its process
    (the two differ when other processes compete for the cores); ``attempts`` is how many times
    it was started (above 1 when a cluster worker was lost during it).
    """
    best = history[best_epoch - 1] if best_epoch else {}
    return {
        "run": index, "optimizer": options.optimizer, "learning_rate": float(options.learning_rate), "status": status,
        "stop_metric": options.stop_metric, "stop_value": best.get(METRIC_KEYS[options.stop_metric]),
        "dev_accuracy": best.get("dev_accuracy"), "dev_macro_f1": best.get("dev_macro_f1"), "dev_loss": best.get("dev_loss"),
        "best_epoch": best_epoch, "epochs_run": diverged_epoch or len(history), "diverged_epoch": diverged_epoch,
        "seconds": round(seconds, 4), "cpu_seconds": round(cpu_seconds, 4), "attempts": 1,
    }


def best_run(rows: list[dict], stop_metric: str) -> int | None:
    """Index of the best row by ``stop_metric`` (first in grid order on ties); None when every run diverged.

    The ranking is the table's (:func:`lintext.report.sweep_page.ranked`), so the best run is its rank 1.
    """
    top = ranked(rows, stop_metric)[:1]
    return top[0]["run"] if top and top[0]["rank"] is not None else None
