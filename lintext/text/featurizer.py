"""Featurizer: text to a sparse CSR matrix, built on scikit-learn's vectorizers.

Word n-grams always; character n-grams inside word boundaries when asked
(``char_wb``); a learned vocabulary or a fixed number of hashed columns.
Weighting (``binary``, ``count``, ``log`` = 1 + ln count, ``tfidf``, ``log-tfidf``
= (1 + ln count) x idf) and unit-length rows follow. The inverse document frequency is scikit-learn's
smoothed form ``idf = ln((1 + n) / (1 + df)) + 1`` (``TfidfTransformer`` with
``smooth_idf=True``): the textbook ``log(N / df)`` (Manning, Raghavan & Schütze
2008, ch. 6) with one extra document containing every term, plus one so that a
term in every document keeps a non-zero weight.

The fitted state is the configuration, the document count and a vocabulary
table (feature, column, document frequency): JSON plus TSV, no pickle.
Character n-gram features are written ``[gram]`` so they never collide with
word features, whose tokens cannot contain brackets.

Word n-grams are counted from scikit-learn's own analysis (its decoding, preprocessing
and tokenizer) as integer keys over token ids (:mod:`lintext.text.chunked_counts`), not
as joined strings: the matrix, the vocabulary and the document frequencies are those of
one ``CountVectorizer`` pass, bit for bit, in 0.3 s where its ``fit_transform`` takes
0.74 s on fortunes' 12,000 texts. With ``n_jobs > 1`` and at least
``PARALLEL_MIN_DOCS`` texts, fitting and transforming run over contiguous chunks in
worker processes (joblib, loky backend) and the chunks are merged exactly; fewer texts
are counted the same way in this process, as one chunk.

scikit-learn, SciPy and joblib load when a featurizer first counts or weighs texts, not when
this module loads: a loaded model's vocabulary and document frequencies (all that the report
and ``inspect`` read) come without them.
"""

from __future__ import annotations

import os
from numbers import Integral
from pathlib import Path

import numpy as np

from .chunked_counts import (
    count_string_chunk, count_word_chunk, df_arg, kept_columns, key_names, merge_string_chunks, merge_word_chunks,
    run_parallel, select_columns, split_bounded, split_contiguous, token_rank, transform_string_chunk,
    transform_word_chunk, word_index_from_names,
)
from ..errors import ConfigError, ModelFileError
from .vocabulary import VOCAB_HEADER, escape, read_vocabulary  # noqa: F401  (VOCAB_HEADER: re-exported)
from .config import FeaturizerConfig, parse_range  # noqa: F401  (parse_range: re-exported)

PARALLEL_MIN_DOCS = 20_000  # fewer texts than this: one chunk in this process, even with n_jobs > 1


class Featurizer:
    """Maps texts to a CSR matrix; fitted on training texts only.

    Parameters
    ----------
    config : the options; ``FeaturizerConfig()`` when ``None``.
    n_jobs : worker processes for :meth:`fit_transform` and :meth:`transform`;
        ``0`` or ``-1`` means one per core.  It never changes the result, so it
        is not part of the configuration written with a model.
    parallel_min_docs : inputs with fewer texts are featurized as one chunk in
        this process; ``None`` reads the module constant ``PARALLEL_MIN_DOCS``.

    Attributes after fitting: ``n_features``, ``feature_names`` (``None`` in
    hashing mode), ``document_frequency`` (training documents containing each
    column), ``n_documents``, ``used_columns`` (hashing mode: columns kept).
    """

    def __init__(self, config: FeaturizerConfig | None = None, n_jobs: int = 1, parallel_min_docs: int | None = None):
        self.config = (config or FeaturizerConfig()).validate()
        if isinstance(n_jobs, bool) or not isinstance(n_jobs, Integral) or n_jobs < -1:
            raise ConfigError("n_jobs", n_jobs, "a number of processes >= 1, or 0 / -1 for one per core")
        self.n_jobs = int(n_jobs)
        self.parallel_min_docs = parallel_min_docs
        self.feature_names: list[str] | None = None
        self.document_frequency: np.ndarray | None = None
        self.n_documents = 0
        self.used_columns: np.ndarray | None = None
        self._reset()

    def _reset(self):
        self._word = self._char = None  # CountVectorizers for single-pass transform, built on demand
        self._n_word = 0  # word columns come first, character columns after them
        self._word_index = None  # (tokens, base, sorted keys, columns) for chunked transform; see ngram_keys
        self._rank = None  # token -> rank of _word_index's tokens, for transforms in this process

    # ------------------------------------------------------------ fitting

    def fit_transform(self, texts) -> sp.csr_matrix:
        import scipy.sparse as sp

        cfg = self.config
        texts = list(texts)
        self.n_documents = len(texts)
        self._reset()
        jobs = self._jobs_for(len(texts))
        if cfg.hashing:
            counts = self._hashed_counts(texts, jobs)
            df = np.bincount(counts.indices, minlength=counts.shape[1])
            keep = df_mask(df, len(texts), cfg.min_df, cfg.max_df)
            self.used_columns = np.flatnonzero(keep)
            counts = counts @ sp.diags(keep.astype(counts.dtype))
            counts.eliminate_zeros()
            self.document_frequency = df * keep
        else:
            counts = self._fit_chunked(texts, jobs)
        return self._weight(counts)

    def fit(self, texts) -> "Featurizer":
        self.fit_transform(texts)
        return self

    def transform(self, texts) -> sp.csr_matrix:
        if self.document_frequency is None:
            raise RuntimeError("Featurizer is not fitted")
        texts = list(texts)
        jobs = self._jobs_for(len(texts))
        if self.config.hashing:
            return self.from_counts(self._hashed_counts(texts, jobs))
        return self._weight(self._transform_chunked(texts, jobs))

    def from_counts(self, counts: sp.csr_matrix) -> sp.csr_matrix:
        """Weighted rows from raw counts over this featurizer's columns; in hashing mode
        (counts from :func:`hashed_counts`) the columns outside the document-frequency limits are
        dropped first. What :meth:`transform` does after counting."""
        import scipy.sparse as sp

        if self.config.hashing:
            mask = np.zeros(counts.shape[1], dtype=counts.dtype)
            mask[self.used_columns] = 1
            counts = counts @ sp.diags(mask)
            counts.eliminate_zeros()
        return self._weight(counts)

    @property
    def n_features(self) -> int:
        if self.config.hashing:
            return self.config.hash_space
        return len(self.feature_names or ())

    def idf(self) -> np.ndarray:
        """scikit-learn's smoothed inverse document frequency per column."""
        return np.log((1.0 + self.n_documents) / (1.0 + self.document_frequency)) + 1.0

    # ------------------------------------------------------------ internals

    def _jobs_for(self, n_texts: int) -> int:
        from joblib import cpu_count

        jobs = cpu_count() if self.n_jobs in (0, -1) else min(self.n_jobs, cpu_count())  # never more than the cores
        threshold = PARALLEL_MIN_DOCS if self.parallel_min_docs is None else self.parallel_min_docs
        return min(jobs, n_texts) if jobs > 1 and n_texts >= max(threshold, 2) else 1

    def _vectorizer(self, analyzer, ngram_range, vocabulary=None):
        from sklearn.feature_extraction.text import CountVectorizer

        cfg = self.config
        kwargs = dict(analyzer=analyzer, ngram_range=tuple(ngram_range), lowercase=cfg.lowercase, dtype=np.float64)
        if vocabulary is not None:
            return CountVectorizer(vocabulary=vocabulary, **kwargs)
        return CountVectorizer(
            min_df=df_arg(cfg.min_df), max_df=df_arg(cfg.max_df), max_features=cfg.max_features, **kwargs
        )

    def _fit_chunked(self, texts, jobs) -> sp.csr_matrix:
        """Count contiguous chunks (in worker processes when ``jobs > 1``), then merge exactly
        (:mod:`lintext.text.chunked_counts`)."""
        import scipy.sparse as sp

        cfg = self.config
        chunks = split_bounded(texts, jobs)
        tasks = [_task(count_word_chunk, c, cfg.lowercase, cfg.ngrams) for c in chunks]
        if cfg.char_ngrams is not None:
            tasks += [_task(count_string_chunk, c, "char_wb", cfg.char_ngrams, cfg.lowercase) for c in chunks]
        results = _run(tasks, jobs)
        word_results, char_results = results[: len(chunks)], results[len(chunks) :]
        merged = None if any(r is None for r in word_results) else merge_word_chunks(word_results, cfg.ngrams)
        if merged is None:  # n-gram keys would overflow 64 bits: count strings instead
            retry = [_task(count_string_chunk, c, "word", cfg.ngrams, cfg.lowercase) for c in chunks]
            names, counts = merge_string_chunks(_run(retry, jobs))
            kept, df = kept_columns(counts, len(texts), cfg)
            word_names = [names[j] for j in kept.tolist()]
        else:
            tokens, base, keys, counts = merged
            kept, df = kept_columns(counts, len(texts), cfg)
            self._word_index = (tokens, base, keys[kept], None)
            word_names = key_names(keys[kept], tokens, base, cfg.ngrams)
        blocks, names, dfs = [select_columns(counts, kept)], word_names, [df[kept]]
        self._n_word = len(word_names)
        if char_results:
            char_names, counts = merge_string_chunks(char_results)
            kept, df = kept_columns(counts, len(texts), cfg)
            blocks.append(select_columns(counts, kept))
            names = names + [f"[{char_names[j]}]" for j in kept.tolist()]
            dfs.append(df[kept])
        self.feature_names = names
        self.document_frequency = np.concatenate(dfs)
        return sp.hstack(blocks, format="csr") if len(blocks) > 1 else blocks[0]

    def _transform_chunked(self, texts, jobs) -> sp.csr_matrix:
        """Counts over the fitted vocabulary, a contiguous chunk per worker when ``jobs > 1``.

        In this process, n-grams that cannot be written as keys and character n-grams go
        through scikit-learn's ``CountVectorizer`` over the vocabulary, built once and kept."""
        import scipy.sparse as sp

        cfg = self.config
        chunks = split_bounded(texts, jobs)
        if self._word_index is None:
            self._word_index = word_index_from_names(self.feature_names[: self._n_word], cfg.ngrams)
        if self._word_index is not False:
            tokens, base, keys, columns = self._word_index
            if jobs == 1 and self._rank is None:  # kept: a few texts at a time cost little
                self._rank = token_rank(tokens)
            rank = self._rank if jobs == 1 else None  # a worker builds its own (a dict pickles slowly)
            tasks = [_task(transform_word_chunk, c, cfg.lowercase, cfg.ngrams, tokens, base, keys, columns, self._n_word,
                           rank) for c in chunks]
        elif jobs == 1:
            tasks = [_task(self._word_vectorizer().transform, c) for c in chunks]
        else:
            word_names = self.feature_names[: self._n_word]
            tasks = [_task(transform_string_chunk, c, "word", cfg.ngrams, cfg.lowercase, word_names) for c in chunks]
        if cfg.char_ngrams is not None and jobs == 1:
            tasks += [_task(self._char_vectorizer().transform, c) for c in chunks]
        elif cfg.char_ngrams is not None:
            char_names = [n[1:-1] for n in self.feature_names[self._n_word :]]
            tasks += [_task(transform_string_chunk, c, "char_wb", cfg.char_ngrams, cfg.lowercase, char_names) for c in chunks]
        results = _run(tasks, jobs)
        blocks = [sp.vstack(results[: len(chunks)], format="csr")]
        if cfg.char_ngrams is not None:
            blocks.append(sp.vstack(results[len(chunks) :], format="csr"))
        return sp.hstack(blocks, format="csr") if len(blocks) > 1 else blocks[0]

    def _word_vectorizer(self):
        """scikit-learn's CountVectorizer over the fitted word vocabulary, built on first use."""
        if self._word is None:
            words = self.feature_names[: self._n_word]
            self._word = self._vectorizer("word", self.config.ngrams, dict(zip(words, range(len(words)))))
        return self._word

    def _char_vectorizer(self):
        """The same over the character n-grams (their names without the brackets)."""
        if self._char is None:
            grams = [n[1:-1] for n in self.feature_names[self._n_word :]]
            self._char = self._vectorizer("char_wb", self.config.char_ngrams, dict(zip(grams, range(len(grams)))))
        return self._char

    def _hashed_counts(self, texts, jobs: int = 1) -> sp.csr_matrix:
        import scipy.sparse as sp

        parts = _run([_task(hashed_counts, c, self.config) for c in split_contiguous(texts, jobs)], jobs)
        return sp.vstack(parts, format="csr") if len(parts) > 1 else parts[0]

    def _weight(self, counts: sp.csr_matrix) -> sp.csr_matrix:
        import scipy.sparse as sp
        from sklearn.preprocessing import normalize

        X = counts.astype(np.float64).tocsr()
        X.sum_duplicates()  # sorted, so fit and transform sum in the same order
        w = self.config.weighting
        if w == "binary":
            X.data[:] = 1.0
        elif w == "log":
            X.data = 1.0 + np.log(X.data)
        elif w in ("tfidf", "log-tfidf"):  # log-tfidf: scikit-learn's TfidfVectorizer(sublinear_tf=True)
            if w == "log-tfidf":
                X.data = 1.0 + np.log(X.data)
            X = (X @ sp.diags(self.idf())).tocsr()
        if self.config.normalize:
            X = normalize(X, norm="l2", copy=False)
        X.sort_indices()
        return X

    # ------------------------------------------------------------ persistence

    def to_json(self) -> dict:
        return {"config": self.config.to_json(), "n_documents": int(self.n_documents)}

    def vocabulary_rows(self):
        """(feature, column, document frequency) for every column the model uses."""
        df = self.document_frequency
        if self.config.hashing:
            return [("", int(j), int(df[j])) for j in self.used_columns]
        return [(name, j, int(df[j])) for j, name in enumerate(self.feature_names)]

    def save_vocabulary(self, path: str | os.PathLike) -> None:
        with open(path, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(VOCAB_HEADER + "\n")
            for name, j, df in self.vocabulary_rows():
                fh.write(f"{escape(name)}\t{j}\t{df}\n")

    @classmethod
    def from_vocabulary(cls, config, word_names: list, char_names: list, document_frequency, n_documents: int) -> "Featurizer":
        """A fitted featurizer from n-grams counted elsewhere (a feature store's streamed count): word
        n-grams first, then character n-grams, with their document frequencies in that order."""
        feat = cls(config)
        feat.feature_names = list(word_names) + [f"[{g}]" for g in char_names]
        feat.document_frequency, feat.n_documents = document_frequency, n_documents
        feat._n_word = len(word_names)
        return feat

    @classmethod
    def load(cls, state: dict, vocabulary_path: str | os.PathLike, n_jobs: int = 1) -> "Featurizer":
        """Rebuild a fitted featurizer from :meth:`to_json` and a vocabulary TSV."""
        try:
            config = FeaturizerConfig.from_json(state["config"])
            n_documents = int(state["n_documents"])
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(vocabulary_path, f"featurizer state is incomplete or wrong: {exc}") from None
        names, index, df = read_vocabulary(Path(vocabulary_path))
        if len(df) and (df.min() < 0 or df.max() > n_documents):
            line = int(np.flatnonzero((df < 0) | (df > n_documents))[0]) + 2
            raise ModelFileError(vocabulary_path, f"line {line}: document frequency {df[line - 2]} outside 0..{n_documents} "
                                                  "(the number of training documents)")
        self = cls(config, n_jobs=n_jobs)
        self.n_documents = n_documents
        if config.hashing:
            width = config.hash_space
            if len(index) and (index.min() < 0 or index.max() >= width):
                raise ModelFileError(vocabulary_path, f"column index outside 0..{width - 1}")
            if len(np.unique(index)) != len(index):
                raise ModelFileError(vocabulary_path, "a column appears twice")
            self.used_columns = np.sort(index)
            self.document_frequency = np.zeros(width, dtype=np.int64)
            self.document_frequency[index] = df
            return self
        if not np.array_equal(np.sort(index), np.arange(len(index))):
            raise ModelFileError(vocabulary_path, "columns must be 0..n-1, each once")
        if len(set(names)) != len(names):
            seen: set = set()
            line = next(i for i, name in enumerate(names) if name in seen or seen.add(name)) + 2
            raise ModelFileError(vocabulary_path, f"line {line}: feature {names[line - 2]!r} appears twice")
        order = np.argsort(index)
        in_order = np.array_equal(order, np.arange(len(order)))  # as written by save_vocabulary
        self.feature_names = names if in_order else [names[i] for i in order]
        self.document_frequency = df if in_order else df[order]
        if "\0[" in "\0" + "\0".join(self.feature_names):  # some name starts with "[": look at each
            is_char = np.array([n.startswith("[") and n.endswith("]") and len(n) > 2 for n in self.feature_names], bool)
        else:
            is_char = np.zeros(len(order), dtype=bool)
        n_word = int((~is_char).sum())
        if is_char[:n_word].any() or (config.char_ngrams is None and n_word != len(index)):
            raise ModelFileError(vocabulary_path, "word and character features are out of order")
        if config.char_ngrams is not None and n_word == len(index):
            raise ModelFileError(vocabulary_path, "the configuration has character n-grams but the vocabulary has none")
        self._n_word = n_word
        return self


def _task(function, *args):
    """One call as joblib's ``delayed`` writes it, ``(function, args, kwargs)``, without importing joblib."""
    return function, args, {}


def _run(tasks, jobs: int) -> list:
    """The calls' results, in order: in worker processes when ``jobs > 1``, else here."""
    if jobs > 1:
        return run_parallel(tasks, jobs)
    return [function(*args, **kwargs) for function, args, kwargs in tasks]


def hashed_counts(texts, cfg: FeaturizerConfig) -> sp.csr_matrix:
    """Hashed word (+ character) counts; stateless, so chunks can be counted anywhere (another
    process or machine) and stacked."""
    from sklearn.feature_extraction.text import HashingVectorizer

    common = dict(n_features=cfg.hash_space, alternate_sign=False, norm=None, lowercase=cfg.lowercase)
    counts = HashingVectorizer(analyzer="word", ngram_range=cfg.ngrams, **common).transform(texts)
    if cfg.char_ngrams is not None:
        counts = counts + HashingVectorizer(analyzer="char_wb", ngram_range=cfg.char_ngrams, **common).transform(texts)
    counts = counts.tocsr()
    counts.sort_indices()
    return counts


def df_mask(df, n_docs, min_df, max_df) -> np.ndarray:
    """Columns kept by the document-frequency limits, read as scikit-learn reads them."""
    lo, hi = (v if isinstance(v, int) else v * n_docs for v in (df_arg(min_df), df_arg(max_df)))
    return (df >= max(lo, 1)) & (df <= hi)


def corpus_stats(corpus, config: FeaturizerConfig | None = None) -> dict:
    """Documents, label counts and the feature space a configuration gives on ``corpus``.

    ``share_df1`` / ``share_df2``: shares of the kept features found in exactly one / two
    documents; ``before_filter`` holds the same (``features``, ``share_df1``, ``share_df2``) for
    every feature the n-gram settings produce before ``min_df``, ``max_df`` and
    ``max_features`` (with the default ``min_df`` of 2 the share in one document after the
    filter is 0 by construction, so only the share before it says how many were dropped).
    """
    from dataclasses import replace

    config = config or FeaturizerConfig()
    featurizer = Featurizer(config)
    X = featurizer.fit_transform(corpus.texts)
    df = featurizer.document_frequency
    used = df[df > 0]
    unfiltered = Featurizer(replace(config, min_df=1, max_df=1.0, max_features=None))
    unfiltered.fit(corpus.texts)
    every = unfiltered.document_frequency[unfiltered.document_frequency > 0]
    return {
        "documents": len(corpus),
        "labels": corpus.label_counts(),
        "features": int(used.size),
        "columns": int(featurizer.n_features),
        "nonzeros": int(X.nnz),
        "nonzeros_per_document": float(X.nnz / max(1, X.shape[0])),
        "share_df1": float((used == 1).mean()) if used.size else 0.0,
        "share_df2": float((used == 2).mean()) if used.size else 0.0,
        "before_filter": {
            "features": int(every.size),
            "share_df1": float((every == 1).mean()) if every.size else 0.0,
            "share_df2": float((every == 2).mean()) if every.size else 0.0,
        },
    }
