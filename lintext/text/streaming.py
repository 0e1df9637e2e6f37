"""Featurizing into a feature store in chunks, with memory bounded by a chunk and the vocabulary.

:func:`featurize_store` reads the source file(s) several times, never holding more than one
chunk of texts:

1. *Labels*: one pass keeps each record's label id (8 bytes a record) and counts the records;
   the stratified dev split is drawn from them by :func:`lintext.text.split.dev_mask`, the draw
   :func:`lintext.text.split.split_dev` makes in memory (same seed, same rows).
2. *Counting* (fitting): in hashing mode each chunk's hashed counts (stateless, so chunks can be
   counted in other processes or on a cluster: ``map_chunks``) go to the shard writers (spooled,
   or kept in memory for a part of one shard) while the training rows' document frequencies add
   up; in vocabulary mode the training rows' n-grams are counted into one growing vocabulary
   (document frequency and total count per n-gram: memory bounded by the vocabulary, not the
   corpus) and the limits (``min_df``, ``max_df``, ``max_features``) are applied at the end as
   scikit-learn applies them.
3. *Writing*: in vocabulary mode each chunk is transformed by the fitted featurizer and written;
   in hashing mode each shard's raw counts are weighted as the shard is written.

The matrix equals what :class:`~lintext.text.featurizer.Featurizer` gives in memory on the same
training rows, bit for bit: counting is exact, and weighting and normalising act on each row
alone. With a fitted featurizer given (``fitted``: a model's, to score a test set), nothing is
fitted and there is no dev split.
"""

from __future__ import annotations

import time
from array import array
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Iterator

import numpy as np
import scipy.sparse as sp

from ..errors import ConfigError, InputError
from .chunked_counts import analyzed_ids, growing_vocabulary, kept_by_frequency, pair_counts
from .config import FeaturizerConfig
from .featurizer import Featurizer, df_mask, hashed_counts
from ..files import atomic_directory
from .readers import ReaderOptions, iter_records
from .split import dev_mask
from .store import SHARD_ROWS, fingerprint, open_store, shard_writer, write_store_json


@dataclass
class Chunk:
    """Consecutive records of one source file: texts (dropped once counted), label ids, record numbers,
    sources, and which rows are dev rows."""

    part: str  # "data" or "dev" (a dev file)
    texts: list | None
    labels: np.ndarray
    records: np.ndarray
    sources: list[str]
    dev: np.ndarray  # bool per row: held out for dev (a split of DATA)


def _iter_source(path, reader, chunk_rows: int) -> Iterator[tuple[int, list]]:
    """(first record number, records) of at most ``chunk_rows`` records at a time."""
    buf, start = [], 0
    for rec in iter_records(path, reader, require_labels=False):
        buf.append(rec)
        if len(buf) >= chunk_rows:
            yield start, buf
            start += len(buf)
            buf = []
    if buf:
        yield start, buf


def scan_labels(path, reader, require_labels: bool) -> tuple[np.ndarray, list[str]]:
    """Every record's label id (-1 for none) in sorted-name order, and the sorted label names."""
    codes: dict[str, int] = {}
    ids = array("q")
    for rec in iter_records(path, reader, require_labels=require_labels):
        ids.append(-1 if rec.label is None else codes.setdefault(rec.label, len(codes)))
    if not ids:
        raise InputError(path, "no documents")
    names = sorted(codes)
    remap = np.array([names.index(n) for n in codes] + [-1], dtype=np.int64)
    return remap[np.frombuffer(ids, dtype=np.int64)], names


class VocabularyCounter:
    """Document frequency and total count of every n-gram of the texts added, chunk by chunk."""

    def __init__(self, config: FeaturizerConfig):
        from sklearn.feature_extraction.text import CountVectorizer  # loaded when featurizing, not with the module

        self.config = config
        kinds = [("word", config.ngrams)] + ([("char_wb", config.char_ngrams)] if config.char_ngrams else [])
        self.analyzers = [CountVectorizer(analyzer=a, ngram_range=tuple(r), lowercase=config.lowercase).build_analyzer()
                          for a, r in kinds]
        self.vocabularies = [growing_vocabulary() for _ in kinds]
        self.df = [np.zeros(0, dtype=np.int64) for _ in kinds]
        self.totals = [np.zeros(0, dtype=np.float64) for _ in kinds]
        self.n_documents = 0

    def add(self, texts) -> None:
        self.n_documents += len(texts)
        for k, analyze in enumerate(self.analyzers):
            vocabulary = self.vocabularies[k]
            ids, lengths = analyzed_ids(texts, analyze, vocabulary.__getitem__)
            width = len(vocabulary)
            C = pair_counts(np.repeat(np.arange(lengths.size), lengths), ids, (lengths.size, width))
            for store, values in ((self.df, np.bincount(C.indices, minlength=width)),
                                  (self.totals, np.bincount(C.indices, weights=C.data, minlength=width))):
                grown = np.zeros(width, dtype=store[k].dtype)
                grown[: store[k].size] = store[k]
                grown += values.astype(grown.dtype)
                store[k] = grown

    def fitted(self) -> Featurizer:
        """The featurizer these counts give (as :meth:`Featurizer.fit` on the same texts)."""
        cfg = self.config
        picked, dfs = [], []
        for k, vocabulary in enumerate(self.vocabularies):
            grams = list(vocabulary)
            order = np.array(sorted(range(len(grams)), key=grams.__getitem__), dtype=np.int64)
            df, totals = self.df[k][order], self.totals[k][order]
            kept = kept_by_frequency(df, lambda: totals, self.n_documents, cfg)
            picked.append([grams[j] for j in order[kept].tolist()])
            dfs.append(df[kept])
        chars = [g for names in picked[1:] for g in names]
        return Featurizer.from_vocabulary(cfg, picked[0], chars, np.concatenate(dfs), self.n_documents)


def count_hashed_chunk(chunk: Chunk, config: FeaturizerConfig) -> tuple[sp.csr_matrix, Chunk]:
    """Hashed counts of a chunk, and the chunk without its texts (a task for another process)."""
    counts = hashed_counts(chunk.texts, config)
    chunk.texts = None
    return counts, chunk


def featurize_store(data, out, dev=None, dev_fraction: float = 0.1, seed: int = 0,
                    featurizer: FeaturizerConfig | None = None, fitted: Featurizer | None = None,
                    reader: ReaderOptions | None = None, shard_rows: int = SHARD_ROWS, n_jobs: int = 1,
                    map_chunks: Callable | None = None, force: bool = False, progress: Callable[[dict], None] | None = None):
    """Featurize ``data`` (and ``dev``) into a feature store at ``out``; see the module docstring.

    Parameters
    ----------
    data, dev : labelled file or folder; dev file (else a stratified ``dev_fraction`` of ``data``
        seeded by ``seed``; 0: no dev rows).
    featurizer : options of the featurizer to fit (ignored with ``fitted``).
    fitted : a fitted featurizer (a model's) to transform with instead; labels are then optional.
    shard_rows : rows per shard, and records per chunk read.
    n_jobs : processes for featurizing each chunk.
    map_chunks : ``map_chunks(function, chunks)`` yields ``function(chunk)`` in order (hashing mode's
        counting); the default runs in this process.
    force : replace ``out`` even when lintext did not write it (:func:`lintext.files.atomic_directory`).
    progress : receives ``{"stage": "featurize", "step", "documents", "total", "per_second"}`` per chunk.
    """
    if isinstance(shard_rows, bool) or not isinstance(shard_rows, int) or shard_rows < 1:
        raise ConfigError("--shard-rows", shard_rows, "must be a whole number of rows, at least 1")
    reader = (reader or ReaderOptions()).validate()
    seed = 0 if seed is None else seed
    report = progress or (lambda event: None)
    config = (featurizer or FeaturizerConfig()).validate() if fitted is None else fitted.config
    map_chunks = map_chunks or (lambda function, chunks: map(function, chunks))

    label_ids, names = scan_labels(data, reader, require_labels=fitted is None)
    if fitted is None and len(names) < 2:
        raise InputError(data, f"found {len(names)} label(s); a classifier needs at least 2")
    dev_ids = None
    if dev is not None:
        dev_ids, dev_names = scan_labels(dev, reader, require_labels=True)
        _check_dev_labels(dev, reader, dev_names, names)
        dev_ids = np.array([names.index(n) for n in dev_names] + [-1], dtype=np.int64)[dev_ids]
        held = np.zeros(len(label_ids), dtype=bool)
    elif fitted is None and dev_fraction:
        held = dev_mask(label_ids, names, float(dev_fraction), seed, data)
    else:
        held = np.zeros(len(label_ids), dtype=bool)
    total = len(label_ids) + (0 if dev_ids is None else len(dev_ids))
    sources = {"data": fingerprint(data)} | ({"dev": fingerprint(dev)} if dev is not None else {})

    def chunks(with_texts=True) -> Iterator[Chunk]:
        for part, path, ids in (("data", data, label_ids), ("dev", dev, dev_ids)):
            if path is None:
                continue
            for start, records in _iter_source(path, reader, shard_rows):
                stop = start + len(records)
                yield Chunk(part, [r.text for r in records], ids[start:stop], np.arange(start, stop),
                            [r.source for r in records], held[start:stop] if part == "data" else np.ones(stop - start, bool))

    meter = _Meter(report, total)

    n_data = int((~held).sum())
    n_dev = int(held.sum()) + (0 if dev_ids is None else len(dev_ids))

    def fill(tmp: Path):
        writers = {part: shard_writer(tmp, part, rows, shard_rows, seed) for part, rows in (("data", n_data), ("dev", n_dev))}
        weigh = None
        if fitted is not None:
            feat = fitted
        elif config.hashing:  # raw counts written as they come, weighted as each shard is written at close
            feat = _fit_hashed(chunks(), config, writers, map_chunks, meter)
            weigh = _Weigh(feat, meter)
        else:
            counter = VocabularyCounter(config)
            for chunk in chunks():
                if chunk.part == "data" and (~chunk.dev).any():
                    counter.add([t for t, held_out in zip(chunk.texts, chunk.dev) if not held_out])
                meter.advance("counting", len(chunk.records))
            feat = counter.fitted()
        if weigh is None:
            feat.n_jobs = n_jobs
            for chunk in chunks():
                _write_rows(writers, chunk, feat.transform(chunk.texts))
                meter.advance("writing", len(chunk.records))
        parts = {part: w.close(weigh) for part, w in writers.items()}
        split = ({"dev": "file", "seed": None} if dev is not None else
                 {"dev": float(dev_fraction) if held.any() else 0.0, "seed": int(seed) if held.any() else None})
        reader_json = {"format": reader.format, "text_column": reader.text_column, "label_column": reader.label_column,
                       "header": reader.header}  # how to read the source's texts back (a store without "header": True)
        write_store_json(tmp, feat, names, parts, sources, reader_json, split | {"fitted": fitted is None})

    return open_store(atomic_directory(Path(out), fill, kind="store", force=force))


def _check_dev_labels(dev, reader, dev_names, names):
    unknown = set(dev_names) - set(names)
    if unknown:
        for rec in iter_records(dev, reader, require_labels=True):
            if rec.label in unknown:
                raise InputError(rec.source, f"label {rec.label!r} does not occur in the training data")


def _write_rows(writers, chunk: Chunk, X: sp.csr_matrix) -> None:
    for part, rows in (("data", np.flatnonzero(~chunk.dev)), ("dev", np.flatnonzero(chunk.dev))):
        if rows.size:
            whole = rows.size == len(chunk.records)
            writers[part].add(X if whole else X[rows], chunk.labels[rows], chunk.records[rows],
                              chunk.sources if whole else [chunk.sources[i] for i in rows.tolist()])


def _fit_hashed(chunks: Iterable[Chunk], config, writers, map_chunks, meter) -> Featurizer:
    """Count every chunk hashed (``map_chunks``), hand the raw counts to the writers, and fit the limits."""
    df = np.zeros(config.hash_space, dtype=np.int64)
    n_train = 0
    for counts, chunk in map_chunks(_HashedTask(config), chunks):
        train = counts[np.flatnonzero(~chunk.dev)] if chunk.part == "data" else counts[:0]
        df += np.bincount(train.indices, minlength=config.hash_space)
        n_train += train.shape[0]
        _write_rows(writers, chunk, counts)
        meter.advance("counting", len(chunk.records))
    feat = Featurizer(config)
    keep = df_mask(df, n_train, config.min_df, config.max_df)
    feat.used_columns, feat.document_frequency, feat.n_documents = np.flatnonzero(keep), df * keep, n_train
    return feat


class _HashedTask:
    """``count_hashed_chunk`` with the featurizer options bound (picklable, unlike a lambda)."""

    def __init__(self, config):
        self.config = config

    def __call__(self, chunk):
        return count_hashed_chunk(chunk, self.config)


class _Weigh:
    """Hashing mode: a shard's raw counts weighted (``from_counts``) as its writer closes, counted as written."""

    def __init__(self, feat: Featurizer, meter):
        self.feat, self.meter = feat, meter

    def __call__(self, counts: sp.csr_matrix) -> sp.csr_matrix:
        self.meter.advance("writing", counts.shape[0])
        return self.feat.from_counts(counts)


class _Meter:
    """Documents per second, reported per chunk."""

    def __init__(self, report, total):
        self.report, self.total = report, total
        self.step, self.done, self.started = None, 0, time.perf_counter()

    def advance(self, step: str, documents: int) -> None:
        if step != self.step:
            self.step, self.done, self.started = step, 0, time.perf_counter()
        self.done += documents
        rate = self.done / max(time.perf_counter() - self.started, 1e-9)
        self.report({"stage": "featurize", "step": step, "documents": self.done, "total": self.total,
                     "per_second": rate})
