"""Training, evaluating and predicting from a feature store (``lintext featurize``; :mod:`lintext.text.store`).

:func:`store_data` is what :func:`lintext.pipeline.prepare_data` does when DATA is a store: the
store's sources are checked, its ``data`` part trains and its ``dev`` part (or a dev file,
featurized with the store's featurizer) ranks epochs. A part of one shard is used as one
memory-mapped matrix, so training equals training from the source file bit for bit; a part of
several shards is read shard by shard (:class:`lintext.engine.shards.RowShards`).
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp

from . import confidence
from .engine.shards import RowShards
from .errors import ConfigError, InputError
from .evidence import rare_columns, training_extras
from .explanation import dev_errors
from .text.config import FeaturizerConfig
from .text.readers import ReaderOptions, iter_records, read_corpus
from .text.store import PARTS, SHARD_ROWS, FeatureStore, is_store, open_store


@dataclass
class StorePart:
    """One part (``data`` or ``dev``) of an opened store: what :func:`lintext.pipeline.evaluate` takes
    in place of a corpus."""

    store: FeatureStore
    part: str

    def __len__(self) -> int:
        return self.store.rows(self.part)


class ShardLoader:
    """``load(k)`` of :class:`RowShards` over one part of a store: shard ``k`` memory-mapped and its labels
    as indices into ``labels`` (picklable: sweep workers open the store themselves)."""

    def __init__(self, path, part: str, labels: list[str]):
        self.path, self.part, self.labels = str(path), part, list(labels)
        self._store = None

    def __getstate__(self):
        return {"path": self.path, "part": self.part, "labels": self.labels, "_store": None}

    def __call__(self, k: int):
        if self._store is None:
            self._store = open_store(self.path)
        shard = self._store.load_shard(self.part, k)
        return shard.X, self._store.label_ids(shard.labels, self.labels, self.part, k)

    def records(self, k: int) -> np.ndarray:
        """Record numbers of shard ``k``'s rows."""
        if self._store is None:
            self._store = open_store(self.path)
        return np.asarray(self._store.load_shard(self.part, k).records)


def stacked(rows: RowShards):
    """The shards of a store's part stacked in memory in file order (rows are dealt to shards at random):
    ``(X, y)`` as reading the source file gives them (``rows.load``: a :class:`ShardLoader`)."""
    X, y = rows.concatenated()
    order = np.argsort(np.concatenate([rows.load.records(k) for k in range(len(rows.sizes))]), kind="stable")
    return X[order], y[order]


def rows_of(store: FeatureStore, part: str, labels: list[str], stream: bool | None):
    """``(X, y)`` of a part: one matrix (memory-mapped when one shard; stacked in file order when ``stream`` is
    False), or RowShards and ``None``."""
    sizes = [s["rows"] for s in store.shards(part)]
    loader = ShardLoader(store.path, part, labels)
    rows = RowShards(sizes, store.n_features, loader)
    if stream or (stream is None and len(sizes) > 1):
        return rows, None
    return loader(0) if len(sizes) == 1 else stacked(rows)


def check_config(store: FeatureStore, featurizer: FeaturizerConfig | None) -> None:
    """A featurizer configuration given with a store must be the store's; the first difference is a ConfigError."""
    if featurizer is None:
        return
    mine, given = store.featurizer.config.to_json(), featurizer.to_json()
    shown = lambda v: "-".join(map(str, v)) if isinstance(v, list) else v  # noqa: E731  (ranges as typed: 1-2)
    for key, value in given.items():
        if mine[key] != value:
            raise ConfigError("--" + key.replace("_", "-"), shown(value), f"the store {store.path} was featurized with "
                              f"{shown(mine[key])}; drop the option or featurize again")


def store_data(path, dev=None, reader: ReaderOptions | None = None, featurizer: FeaturizerConfig | None = None,
               stream: bool | None = None) -> dict:
    """The fields of :class:`lintext.pipeline.PreparedData` for a store (see the module docstring).

    ``stream``: read the parts shard by shard (True), stack them in memory (False), or shard by
    shard only when a part has several shards (None).
    """
    if reader is not None and reader.weight_column is not None:
        raise ConfigError("--weight-column", reader.weight_column, "a feature store keeps no per-document weights; "
                          "train from the source file to weight its documents")
    store = open_store(path).check_sources()
    check_config(store, featurizer)
    if not store.has("data"):
        raise InputError(store.path, "the store holds no training rows")
    labels = store.labels
    if len(labels) < 2:
        raise InputError(store.path, f"the store's data has {len(labels)} label(s); a classifier needs at least 2")
    X, y = rows_of(store, "data", labels, stream)
    X_dev = y_dev = dev_set = None
    split = store.meta.get("split", {})
    if dev is not None:
        if store.has("dev"):
            raise ConfigError("--dev", str(dev), f"the store {store.path} holds its own dev rows; leave --dev out")
        dev_set = read_corpus(dev, reader, min_labels=1)
        X_dev, y_dev = store.featurizer.transform(dev_set.texts), dev_set.label_indices(labels)
        dev_name = str(dev)
    elif store.has("dev"):
        X_dev, y_dev = rows_of(store, "dev", labels, stream)
        dev_set = StorePart(store, "dev")
        dev_name = store.meta["sources"]["dev"]["path"] if split.get("dev") == "file" else \
            f"{split.get('dev'):g} of train (seed {split.get('seed')}, the store's split)"
    description = {
        "train": store.meta["sources"]["data"]["path"], "store": str(store.path),
        "train_documents": store.rows("data"),
        "dev": None if X_dev is None else dev_name,
        "dev_documents": 0 if dev_set is None else len(dev_set),
        "features": int(store.n_features), "nonzeros": int(store.meta["parts"]["data"]["nonzeros"]),
        "featurize_seconds": 0.0, "shards": len(store.shards("data")),
    }
    return {"featurizer": store.featurizer, "labels": labels, "X": X, "y": y, "X_dev": X_dev, "y_dev": y_dev,
            "train_set": None, "dev_set": dev_set, "description": description, "store": store}


def store_evidence(model, store: FeatureStore, top_rare: int = 30) -> dict:
    """:func:`lintext.evidence.training_extras` for a model trained on a store's ``data`` part: the
    documents behind the rare features are read back from the source by record number (the store's
    fingerprint says it is unchanged); in hashing mode the n-grams naming the columns come from the
    documents of the first shard (all of them when the part is one shard; a random sample else)."""
    rare = rare_columns(model, top_rare)
    chosen = rare[0]
    wanted = np.zeros(store.n_features, dtype=bool)
    wanted[chosen] = True
    hashing = model.featurizer.config.hashing
    blocks, records, sources, label_ids, sample = [], [], [], [], set()
    for k in range(len(store.shards("data"))):
        shard = store.load_shard("data", k)
        hit = np.flatnonzero(wanted[shard.X.indices])
        rows = np.unique(np.searchsorted(shard.X.indptr, hit, side="right") - 1)
        if k == 0 and hashing:
            sample = set(np.asarray(shard.records).tolist())
        if rows.size:
            blocks.append(shard.X[rows])
            records.append(np.asarray(shard.records)[rows])
            label_ids.append(np.asarray(shard.labels)[rows])
            every = store.sources("data", k)
            sources += [every[i] for i in rows.tolist()]
    found = np.concatenate(records) if records else np.zeros(0, dtype=np.int64)
    texts = texts_by_record(store, set(found.tolist()) | sample)
    by_record = np.argsort(found, kind="stable")  # the rows in file order, as training from the file has them
    order = found[by_record].tolist()
    X = sp.vstack(blocks, format="csr")[by_record] if blocks else sp.csr_matrix((0, store.n_features))
    labels = [store.labels[i] for i in np.concatenate(label_ids)[by_record].tolist()] if label_ids else []
    sources = [sources[i] for i in by_record.tolist()]
    hashed = [texts[r] for r in sorted(sample)] if hashing else None
    return training_extras(model, [texts[r] for r in order], sources, X, train_labels=labels, top_rare=top_rare,
                           hashed_texts=hashed, rare=rare)


def texts_by_record(store: FeatureStore, records: set, source: str = "data") -> dict:
    """The texts of the given record numbers of the store's ``source`` file (``data`` or ``dev``), by number."""
    reader = ReaderOptions(**store.meta["reader"])  # "header" is missing from older stores: True, as they were read
    out = {}
    if not records:
        return out
    last = max(records)
    for number, rec in enumerate(iter_records(store.meta["sources"][source]["path"], reader, require_labels=False)):
        if number in records:
            out[number] = rec.text
        if number >= last:
            break
    return out


def opened(data, model=None) -> tuple[FeatureStore, list[str]]:
    """A store (and the parts to score) from a path or a :class:`StorePart`; its sources checked and,
    with ``model``, its featurizer checked against the model's."""
    if isinstance(data, StorePart):
        return data.store, [data.part]
    store = open_store(data).check_sources()
    if model is not None:
        store.check_featurizer(model.featurizer, "the model")
    split_from_data = store.meta.get("split", {}).get("dev") != "file"
    return store, [p for p in PARTS if store.has(p) and (p == "data" or split_from_data)]


def store_evaluation(model, data, unknown_labels: str = "count"):
    """What :func:`lintext.pipeline.evaluate` needs of a store, shard by shard, holding a few numbers per row
    (not its scores), in file order so that the sums are those of the same rows read from the file.

    Returns ``(y_true, y_pred, names, unknown_counts, (plain, own))``: label indices into ``names``
    (the model's labels, then the unknown ones unless ``unknown_labels`` is ``"skip"``, which drops
    their rows), the count of each unknown label, and the confidence summaries of the rows with a
    known label (plain softmax and the model's own probabilities, as :func:`lintext.confidence.summary`
    gives them; ``None`` when no row has one).
    """
    store, parts = opened(data, model)
    temperatures = list(dict.fromkeys([1.0] + ([model.temperature] if model.calibration is not None else [])))
    index = {name: j for j, name in enumerate(model.labels)}
    known_of = np.array([index.get(name, -1) for name in store.labels] + [-1], dtype=np.int64)
    records, ids, predicted = [], [], []
    conf, nll = {t: [] for t in temperatures}, {t: [] for t in temperatures}
    for part in parts:
        for k in range(len(store.shards(part))):
            shard = store.load_shard(part, k)
            labels = np.asarray(shard.labels, dtype=np.int64)
            if (labels < 0).any():
                raise InputError(store.sources(part, k)[int(np.flatnonzero(labels < 0)[0])],
                                 "no label (the store was written from unlabelled data)")
            scores = model.matrix_scores(shard.X)
            best = scores.argmax(axis=1)
            truth = np.maximum(known_of[labels], 0)  # unknown labels: any column; their rows are left out below
            for t in temperatures:
                logp = confidence.log_softmax(scores, t)
                conf[t].append(np.exp(logp[np.arange(len(best)), best]))
                nll[t].append(-logp[np.arange(len(best)), truth])
            records.append(np.asarray(shard.records))
            ids.append(labels)
            predicted.append(best)
            del scores
    order = np.argsort(np.concatenate(records), kind="stable")
    ids, y_pred = np.concatenate(ids)[order], np.concatenate(predicted)[order]
    known = known_of[ids] >= 0
    unknown_counts = {store.labels[i]: int(n) for i, n in enumerate(np.bincount(ids[~known], minlength=len(store.labels)))
                      if n}
    keep = known if unknown_labels == "skip" else np.ones(len(ids), dtype=bool)
    if not keep.any():
        raise InputError(store.path, f"no document has a label the model knows (the model's labels: {', '.join(model.labels)})")
    names = list(model.labels) + ([] if unknown_labels == "skip" else sorted(unknown_counts))
    code = np.array([names.index(name) if name in names else -1 for name in store.labels], dtype=np.int64)
    y_true, y_pred = code[ids[keep]], y_pred[keep]
    rows = known[keep]
    summaries = {}
    for t in temperatures:
        c = np.concatenate(conf[t])[order][keep][rows]
        right = y_pred[rows] == y_true[rows]
        table = confidence.reliability(c, right)
        summaries[t] = {"ece": confidence.ece_of(table), "nll": float(np.concatenate(nll[t])[order][keep][rows].mean()),
                        "reliability": table, "coverage": confidence.coverage_curve(c, right), "confidence": c,
                        "correct": right}
    if not rows.any():
        return y_true, y_pred, names, unknown_counts, (None, None)
    plain = summaries[1.0]
    own = summaries[model.temperature] if model.calibration is not None else plain if model.has_probabilities else None
    return y_true, y_pred, names, unknown_counts, (plain, own)


class _DevRows:
    """What :func:`lintext.explanation.dev_errors` reads of a dev corpus besides texts, for a store's dev
    part: label indices and sources."""

    def __init__(self, y, sources):
        self.y, self.sources = y, sources

    def label_indices(self, names):
        return self.y


def dev_sample(dev: StorePart, labels: list[str]):
    """``(X, y)`` of the first shard of a store's dev part: all of it when it is one shard, else a random
    sample of ``shard_rows`` rows (rows are dealt to shards at random), so that fitting the temperature and
    finding the dev errors hold a bounded number of rows' scores."""
    return ShardLoader(dev.store.path, dev.part, labels)(0)


def store_dev_errors(model, dev: StorePart, X_dev, y_dev) -> dict:
    """:func:`lintext.explanation.dev_errors` over the first shard of a store's dev part (``X_dev``, ``y_dev``:
    :func:`dev_sample`); the texts of the errors shown are read back from the source by record number."""
    store, part = dev.store, dev.part
    records = np.asarray(store.load_shard(part, 0).records)
    source = "dev" if store.meta.get("split", {}).get("dev") == "file" else "data"

    def texts_of(rows: list) -> list:
        found = texts_by_record(store, {int(records[i]) for i in rows}, source)
        return [found[int(records[i])] for i in rows]

    return dev_errors(model, _DevRows(y_dev, store.sources(part, 0)), X_dev, texts_of=texts_of)


def store_score_rows(model, data):
    """``(record, scores row)`` of every row of a store, in record order: the shards (each in record order;
    rows are dealt to shards at random) merged, so every shard is scored before the first row is out."""
    store, parts = opened(data, model)

    def shard_rows(part, k):
        shard = store.load_shard(part, k)
        yield from zip(np.asarray(shard.records).tolist(), model.matrix_scores(shard.X))

    every = [shard_rows(p, k) for p in parts for k in range(len(store.shards(p)))]
    return heapq.merge(*every, key=lambda item: item[0])


def is_store_data(data) -> bool:
    """True for a :class:`StorePart` or a path to a store."""
    return isinstance(data, StorePart) or (isinstance(data, (str, Path)) and is_store(data))


def featurize(data, out, dev=None, dev_fraction: float = 0.1, featurizer: FeaturizerConfig | dict | None = None,
              featurizer_from=None, seed: int = 0, reader: ReaderOptions | None = None, shard_rows: int = SHARD_ROWS,
              n_jobs: int = 1, map_chunks=None, progress=None, force: bool = False) -> FeatureStore:
    """Write the feature store of ``data`` to ``out`` (``lintext featurize``); returns it opened.

    ``featurizer_from``: a model directory or a store whose fitted featurizer transforms ``data``
    (to evaluate or predict with that model from a store) instead of fitting one; there is then
    no dev split. Everything else: :func:`lintext.text.streaming.featurize_store`.
    """
    from .text.streaming import featurize_store  # scikit-learn's vectorizers: only when featurizing

    fitted = None
    if featurizer_from is not None:
        if is_store(featurizer_from):
            fitted = open_store(featurizer_from).featurizer
        else:
            from .model import open_model

            fitted = open_model(featurizer_from).featurizer
    if isinstance(featurizer, dict):
        featurizer = FeaturizerConfig(**featurizer)
    return featurize_store(data, out, dev=dev, dev_fraction=dev_fraction, seed=seed, featurizer=featurizer, fitted=fitted,
                           reader=reader, shard_rows=shard_rows, n_jobs=n_jobs, map_chunks=map_chunks, progress=progress,
                           force=force)
