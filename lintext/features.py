"""Featurizer: text to a sparse CSR matrix, built on scikit-learn's vectorizers.

Word n-grams always; character n-grams inside word boundaries when asked
(``char_wb``); a learned vocabulary or a fixed number of hashed columns.
Weighting (``binary``, ``count``, ``log`` = 1 + ln count, ``tfidf``) and
unit-length rows follow. The inverse document frequency is scikit-learn's
smoothed form ``idf = ln((1 + n) / (1 + df)) + 1`` (``TfidfTransformer`` with
``smooth_idf=True``): the textbook ``log(N / df)`` (Manning, Raghavan & Schütze
2008, ch. 6) with one extra document containing every term, plus one so that a
term in every document keeps a non-zero weight.

The fitted state is the configuration, the document count and a vocabulary
table (feature, column, document frequency): JSON plus TSV, no pickle.
Character n-gram features are written ``[gram]`` so they never collide with
word features, whose tokens cannot contain brackets.
"""

from __future__ import annotations

import os
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from sklearn.feature_extraction.text import CountVectorizer, HashingVectorizer
from sklearn.preprocessing import normalize as _normalize_rows

from .errors import ConfigError, ModelFileError

WEIGHTINGS = ("binary", "count", "log", "tfidf")
VOCAB_HEADER = "feature\tindex\tdocument_frequency"


@dataclass
class FeaturizerConfig:
    """Featurizer options; every field round-trips through JSON."""

    ngrams: tuple[int, int] = (1, 2)
    char_ngrams: tuple[int, int] | None = None
    min_df: float = 1
    max_df: float = 1.0
    max_features: int | None = None
    weighting: str = "tfidf"
    normalize: bool = True
    lowercase: bool = True
    hash_bits: int | None = None

    def __post_init__(self):
        self.ngrams = tuple(self.ngrams)
        if self.char_ngrams is not None:
            self.char_ngrams = tuple(self.char_ngrams)

    def validate(self) -> "FeaturizerConfig":
        _check_range("--ngrams", self.ngrams)
        if self.char_ngrams is not None:
            _check_range("--char-ngrams", self.char_ngrams)
        if self.weighting not in WEIGHTINGS:
            raise ConfigError("--weighting", self.weighting, f"choose one of {', '.join(WEIGHTINGS)}")
        _check_df("--min-df", self.min_df)
        _check_df("--max-df", self.max_df)
        if self.max_features is not None and self.max_features < 1:
            raise ConfigError("--max-features", self.max_features, "must be a positive number of features")
        if self.hash_bits is not None and not 4 <= self.hash_bits <= 28:
            raise ConfigError("--hash-bits", self.hash_bits, "must be between 4 and 28")
        if self.hash_bits is not None and self.max_features is not None:
            raise ConfigError("--max-features", self.max_features, "has no meaning with --hash-bits")
        return self

    def to_json(self) -> dict:
        out = asdict(self)
        out["ngrams"] = list(self.ngrams)
        out["char_ngrams"] = None if self.char_ngrams is None else list(self.char_ngrams)
        return out

    @classmethod
    def from_json(cls, data: dict) -> "FeaturizerConfig":
        known = set(cls.__dataclass_fields__)
        unknown = set(data) - known
        if unknown:
            raise ModelFileError("featurizer", f"unknown featurizer field(s): {', '.join(sorted(unknown))}")
        return cls(**data).validate()


def parse_range(option: str, text: str) -> tuple[int, int]:
    """Parse ``"1-2"`` (or ``"2"``) into an n-gram range, validated."""
    parts = str(text).split("-")
    try:
        lo, hi = (int(parts[0]), int(parts[-1])) if len(parts) <= 2 else (None, None)
    except ValueError:
        lo = hi = None
    if lo is None:
        raise ConfigError(option, text, "expected a range such as 1-2")
    return _check_range(option, (lo, hi))


def _check_range(option, rng) -> tuple[int, int]:
    lo, hi = rng
    if lo < 1 or hi < lo:
        raise ConfigError(option, f"{lo}-{hi}", "expected LOW-HIGH with 1 <= LOW <= HIGH")
    return lo, hi


def _check_df(option, value):
    if value <= 0 or (isinstance(value, float) and not float(value).is_integer() and value > 1):
        raise ConfigError(option, value, "a count of documents (>= 1) or a fraction in (0, 1]")


def _df_arg(value):
    """scikit-learn reads an int as a count and a float as a share of documents."""
    if isinstance(value, float) and value.is_integer() and value > 1:
        return int(value)
    return value


class Featurizer:
    """Maps texts to a CSR matrix; fitted on training texts only.

    Attributes after fitting: ``n_features``, ``feature_names`` (``None`` in
    hashing mode), ``document_frequency`` (training documents containing each
    column), ``n_documents``, ``used_columns`` (hashing mode: columns kept).
    """

    def __init__(self, config: FeaturizerConfig | None = None):
        self.config = (config or FeaturizerConfig()).validate()
        self.feature_names: list[str] | None = None
        self.document_frequency: np.ndarray | None = None
        self.n_documents = 0
        self.used_columns: np.ndarray | None = None
        self._word = self._char = None

    # ------------------------------------------------------------ fitting

    def fit_transform(self, texts) -> sp.csr_matrix:
        cfg = self.config
        texts = list(texts)
        self.n_documents = len(texts)
        if cfg.hash_bits is not None:
            counts = self._hashed_counts(texts)
            df = np.diff(counts.tocsc().indptr)
            keep = _df_mask(df, len(texts), cfg.min_df, cfg.max_df)
            self.used_columns = np.flatnonzero(keep)
            counts = counts @ sp.diags(keep.astype(counts.dtype))
            counts.eliminate_zeros()
            self.document_frequency = df * keep
        else:
            blocks, names = [], []
            self._word = self._vectorizer("word", cfg.ngrams)
            try:
                blocks.append(self._word.fit_transform(texts))
            except ValueError as exc:  # empty vocabulary after pruning
                raise ConfigError("--min-df", cfg.min_df, f"no features left ({exc})") from None
            names += list(self._word.get_feature_names_out())
            if cfg.char_ngrams is not None:
                self._char = self._vectorizer("char_wb", cfg.char_ngrams)
                blocks.append(self._char.fit_transform(texts))
                names += [f"[{g}]" for g in self._char.get_feature_names_out()]
            counts = sp.hstack(blocks, format="csr") if len(blocks) > 1 else blocks[0].tocsr()
            self.feature_names = names
            self.document_frequency = np.diff(counts.tocsc().indptr)
        return self._weight(counts)

    def fit(self, texts) -> "Featurizer":
        self.fit_transform(texts)
        return self

    def transform(self, texts) -> sp.csr_matrix:
        if self.document_frequency is None:
            raise RuntimeError("Featurizer is not fitted")
        texts = list(texts)
        if self.config.hash_bits is not None:
            counts = self._hashed_counts(texts)
            mask = np.zeros(counts.shape[1], dtype=counts.dtype)
            mask[self.used_columns] = 1
            counts = counts @ sp.diags(mask)
            counts.eliminate_zeros()
        else:
            blocks = [self._word.transform(texts)]
            if self._char is not None:
                blocks.append(self._char.transform(texts))
            counts = sp.hstack(blocks, format="csr") if len(blocks) > 1 else blocks[0].tocsr()
        return self._weight(counts)

    @property
    def n_features(self) -> int:
        if self.config.hash_bits is not None:
            return 2**self.config.hash_bits
        return len(self.feature_names or ())

    def idf(self) -> np.ndarray:
        """scikit-learn's smoothed inverse document frequency per column."""
        return np.log((1.0 + self.n_documents) / (1.0 + self.document_frequency)) + 1.0

    # ------------------------------------------------------------ internals

    def _vectorizer(self, analyzer, ngram_range, vocabulary=None):
        cfg = self.config
        kwargs = dict(analyzer=analyzer, ngram_range=tuple(ngram_range), lowercase=cfg.lowercase, dtype=np.float64)
        if vocabulary is not None:
            return CountVectorizer(vocabulary=vocabulary, **kwargs)
        return CountVectorizer(
            min_df=_df_arg(cfg.min_df), max_df=_df_arg(cfg.max_df), max_features=cfg.max_features, **kwargs
        )

    def _hashed_counts(self, texts) -> sp.csr_matrix:
        cfg = self.config
        common = dict(n_features=2**cfg.hash_bits, alternate_sign=False, norm=None, lowercase=cfg.lowercase)
        counts = HashingVectorizer(analyzer="word", ngram_range=cfg.ngrams, **common).transform(texts)
        if cfg.char_ngrams is not None:
            counts = counts + HashingVectorizer(analyzer="char_wb", ngram_range=cfg.char_ngrams, **common).transform(texts)
        counts = counts.tocsr()
        counts.sort_indices()
        return counts

    def _weight(self, counts: sp.csr_matrix) -> sp.csr_matrix:
        X = counts.astype(np.float64).tocsr()
        X.sum_duplicates()  # sorted, so fit and transform sum in the same order
        w = self.config.weighting
        if w == "binary":
            X.data[:] = 1.0
        elif w == "log":
            X.data = 1.0 + np.log(X.data)
        elif w == "tfidf":
            X = (X @ sp.diags(self.idf())).tocsr()
        if self.config.normalize:
            X = _normalize_rows(X, norm="l2", copy=False)
        X.sort_indices()
        return X

    # ------------------------------------------------------------ persistence

    def to_json(self) -> dict:
        return {"config": self.config.to_json(), "n_documents": int(self.n_documents)}

    def vocabulary_rows(self):
        """(feature, column, document frequency) for every column the model uses."""
        df = self.document_frequency
        if self.config.hash_bits is not None:
            return [("", int(j), int(df[j])) for j in self.used_columns]
        return [(name, j, int(df[j])) for j, name in enumerate(self.feature_names)]

    def save_vocabulary(self, path: str | os.PathLike) -> None:
        with open(path, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(VOCAB_HEADER + "\n")
            for name, j, df in self.vocabulary_rows():
                fh.write(f"{_escape(name)}\t{j}\t{df}\n")

    @classmethod
    def load(cls, state: dict, vocabulary_path: str | os.PathLike) -> "Featurizer":
        """Rebuild a fitted featurizer from :meth:`to_json` and a vocabulary TSV."""
        try:
            config = FeaturizerConfig.from_json(state["config"])
            n_documents = int(state["n_documents"])
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(vocabulary_path, f"featurizer state is incomplete or wrong: {exc}") from None
        names, index, df = _read_vocabulary(Path(vocabulary_path))
        self = cls(config)
        self.n_documents = n_documents
        if config.hash_bits is not None:
            width = 2**config.hash_bits
            if len(index) and (index.min() < 0 or index.max() >= width):
                raise ModelFileError(vocabulary_path, f"column index outside 0..{width - 1}")
            self.used_columns = np.sort(index)
            self.document_frequency = np.zeros(width, dtype=np.int64)
            self.document_frequency[index] = df
            return self
        if not np.array_equal(np.sort(index), np.arange(len(index))):
            raise ModelFileError(vocabulary_path, "column indices must be 0..n-1, each once")
        order = np.argsort(index)
        self.feature_names = [names[i] for i in order]
        self.document_frequency = df[order]
        is_char = np.array([n.startswith("[") and n.endswith("]") and len(n) > 2 for n in self.feature_names], bool)
        n_word = int((~is_char).sum())
        if is_char[:n_word].any() or (config.char_ngrams is None and n_word != len(index)):
            raise ModelFileError(vocabulary_path, "word and character features are out of order")
        self._word = self._vectorizer("word", config.ngrams, {n: i for i, n in enumerate(self.feature_names[:n_word])})
        if config.char_ngrams is not None:
            char_vocab = {n[1:-1]: i for i, n in enumerate(self.feature_names[n_word:])}
            self._char = self._vectorizer("char_wb", config.char_ngrams, char_vocab)
        return self


def _df_mask(df, n_docs, min_df, max_df) -> np.ndarray:
    """Columns kept by the document-frequency limits, read as scikit-learn reads them."""
    lo, hi = (v if isinstance(v, int) else v * n_docs for v in (_df_arg(min_df), _df_arg(max_df)))
    return (df >= max(lo, 1)) & (df <= hi)


_ESCAPES = {"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"}
_UNESCAPES = {"\\": "\\", "t": "\t", "n": "\n", "r": "\r"}


def _escape(text: str) -> str:
    return "".join(_ESCAPES.get(c, c) for c in text)


def _unescape(text: str) -> str:
    if "\\" not in text:
        return text
    out, i = [], 0
    while i < len(text):
        c = text[i]
        if c == "\\" and i + 1 < len(text):
            out.append(_UNESCAPES.get(text[i + 1], text[i + 1]))
            i += 2
        else:
            out.append(c)
            i += 1
    return "".join(out)


def _read_vocabulary(path: Path):
    if not path.is_file():
        raise ModelFileError(path, "vocabulary file is missing")
    names, index, df = [], [], []
    with open(path, encoding="utf-8", newline="\n") as fh:
        header = fh.readline().rstrip("\n")
        if header != VOCAB_HEADER:
            raise ModelFileError(path, f"line 1: expected the header {VOCAB_HEADER!r}")
        for number, line in enumerate(fh, start=2):
            parts = line.rstrip("\n").split("\t")
            if len(parts) != 3:
                raise ModelFileError(path, f"line {number}: expected 3 tab-separated fields, found {len(parts)}")
            try:
                index.append(int(parts[1]))
                df.append(int(parts[2]))
            except ValueError:
                raise ModelFileError(path, f"line {number}: index and document frequency must be integers") from None
            names.append(_unescape(parts[0]))
    return names, np.asarray(index, dtype=np.int64), np.asarray(df, dtype=np.int64)


def corpus_stats(corpus, config: FeaturizerConfig | None = None) -> dict:
    """Documents, label counts and the feature space a configuration gives on ``corpus``."""
    featurizer = Featurizer(config)
    X = featurizer.fit_transform(corpus.texts)
    df = featurizer.document_frequency
    used = df[df > 0]
    return {
        "documents": len(corpus),
        "labels": corpus.label_counts(),
        "features": int(used.size),
        "columns": int(featurizer.n_features),
        "nonzeros": int(X.nnz),
        "nonzeros_per_document": float(X.nnz / max(1, X.shape[0])),
        "share_df1": float((used == 1).mean()) if used.size else 0.0,
        "share_df2": float((used == 2).mean()) if used.size else 0.0,
    }
