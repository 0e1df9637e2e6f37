"""Chunked counting: word and character n-gram counts over contiguous chunks of
texts in worker processes, merged so that the matrix, vocabulary and document
frequencies equal one scikit-learn ``CountVectorizer`` pass bit for bit.
Used by :class:`lintext.text.featurizer.Featurizer` when ``n_jobs > 1``. scikit-learn, SciPy
and joblib load when a function here first needs them, so importing the featurizer is cheap.
"""

from __future__ import annotations

from array import array
from collections import defaultdict
from itertools import chain, repeat
from numbers import Integral

import numpy as np

from ..errors import ConfigError


def df_arg(value):
    """scikit-learn reads an int as a count and a float as a share of documents."""
    if isinstance(value, float) and value.is_integer() and value > 1:
        return int(value)
    return value


# ------------------------------------------------------------ chunked counting
#
# fit_transform with n_jobs > 1 splits the texts into contiguous chunks, counts
# each chunk in a worker process, and merges the chunks so that the result is
# the one scikit-learn's CountVectorizer gives in a single pass: same columns in
# the same (sorted) order, same counts, same document-frequency limits, same
# max_features tie-breaking.
#
# Word n-grams travel as integers, not strings.  Tokens of the default pattern
# (two or more word characters) contain no character at or below the space, so
# sorting the strings "a", "a b", "ab" equals sorting the token tuples (a,),
# (a, b), (ab,) position by position, a shorter tuple before its extensions.
# With tokens ranked 1..U in sorted order and 0 for "no token", the tuple
# (t1, ..., tk) padded with zeros to length hi is the integer key
# sum(t_j * base**(hi - j)), base = U + 1, and integer order is feature order.
# A worker ranks its own tokens; the merge maps local ranks to global ranks
# (an increasing map, so each chunk's sorted keys stay sorted) and only
# integer sorts and np.searchsorted touch the n-grams; n-gram strings are built
# once, for the kept features.  Character n-grams, and word n-grams whose keys
# would not fit 64 bits, are merged as sorted string lists.

_KEY_LIMIT = int(np.iinfo(np.int64).max)


class _TokenRank(dict):
    """Token -> rank; unknown tokens give -1 (transform)."""

    def __missing__(self, key):
        return -1


def run_parallel(tasks, jobs: int) -> list:
    from joblib import Parallel

    return Parallel(n_jobs=jobs, backend="loky")(tasks)


def split_contiguous(texts: list, parts: int) -> list[list]:
    bounds = np.linspace(0, len(texts), parts + 1).astype(np.int64).tolist()
    return [texts[a:b] for a, b in zip(bounds[:-1], bounds[1:])]


CHUNK_CHARS = 16_000_000  # text counted at once: counting holds about 100 bytes per token (~300 MB here)


def split_bounded(texts: list, parts: int, max_chars: int | None = None) -> list[list]:
    """Contiguous chunks: ``parts`` of them (:func:`split_contiguous`), or more when ``parts``
    chunks would hold more than ``max_chars`` (default :data:`CHUNK_CHARS`) characters each:
    then ``ceil(total / max_chars)`` equal shares of the characters, rounded up to a multiple
    of ``parts``, each chunk ending with the text that reaches its share (so holding at most a
    share plus that text). The counts of the chunks merge to the same result however the texts
    are cut; the cut bounds the memory counting takes."""
    max_chars = CHUNK_CHARS if max_chars is None else max_chars
    ends = np.cumsum(np.fromiter(map(len, texts), dtype=np.int64, count=len(texts)))
    total = int(ends[-1]) if len(texts) else 0
    n = -(-total // max_chars)
    n = min(len(texts), -(-n // parts) * parts)  # a multiple of the workers: none waits for a last chunk
    if n <= parts:
        return split_contiguous(texts, parts)
    cuts = np.searchsorted(ends, np.arange(1, n) * (total / n)) + 1  # a text ending past a share closes its chunk
    bounds = np.unique(np.concatenate(([0], cuts, [len(texts)]))).tolist()
    return [texts[a:b] for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


def _word_tokenizer(lowercase: bool):
    """scikit-learn's word analysis before n-grams: decode, preprocess, tokenize."""
    from sklearn.feature_extraction.text import CountVectorizer

    vec = CountVectorizer(lowercase=lowercase)
    decode, preprocess, tokenize = vec.decode, vec.build_preprocessor(), vec.build_tokenizer()
    return lambda doc: tokenize(preprocess(decode(doc)))


def analyzed_ids(texts, analyze, lookup):
    """Feature ids of every document, concatenated, and the number per document."""
    ids, lengths = array("q"), array("q")
    extend, push = ids.extend, lengths.append
    for doc in texts:
        features = analyze(doc)
        push(len(features))
        extend(map(lookup, features))
    return np.frombuffer(ids, dtype=np.int64), np.frombuffer(lengths, dtype=np.int64)


def growing_vocabulary():
    vocabulary = defaultdict()
    vocabulary.default_factory = vocabulary.__len__  # a new feature gets the next id
    return vocabulary


def _sorted_vocabulary(vocabulary) -> tuple[list[str], np.ndarray]:
    """Names sorted as Python sorts strings, and the sorted position of each id."""
    names = list(vocabulary)
    order = sorted(range(len(names)), key=names.__getitem__)
    rank = np.empty(len(names), dtype=np.int64)
    rank[order] = np.arange(len(names))
    return [names[i] for i in order], rank


def ngram_keys(ranks, lengths, ngram_range, base) -> tuple[np.ndarray, np.ndarray]:
    """Key and document of every n-gram occurrence; ``ranks`` are 0-based, -1 for unknown tokens."""
    lo, hi = ngram_range
    n_tokens = ranks.size
    doc = np.repeat(np.arange(lengths.size, dtype=np.int32), lengths)
    room = np.repeat(np.cumsum(lengths), lengths) - np.arange(n_tokens)  # tokens left in the document
    digits = np.concatenate([ranks + 1, np.zeros(hi, dtype=np.int64)])
    unknown = None
    if n_tokens and ranks.min() < 0:
        unknown = np.concatenate([[0], np.cumsum(ranks < 0), np.zeros(hi, dtype=np.int64)])
    keys, rows = [], []
    for n in range(lo, hi + 1):
        if n == 1 and unknown is None:  # every position starts a unigram
            key, row = digits[:n_tokens], doc
        else:
            at = np.flatnonzero(room >= n)
            if unknown is not None:
                at = at[unknown[at + n] == unknown[at]]
            key, row = digits[at], doc[at]
            for j in range(1, n):
                key = key * base + digits[at + j]
        keys.append(key * base ** (hi - n) if hi > n else key)
        rows.append(row)
    return np.concatenate(keys), np.concatenate(rows)


def _unique_inverse(values, inverse=True):
    """Sorted distinct values and each value's position among them (np.unique through one
    sort; np.unique itself is several times slower here on large int64 arrays).

    When the values are non-negative and leave room below 2**63 for the positions' bits, each
    value is sorted with its position in its low bits (``np.sort`` is 2-3 times quicker than
    ``np.argsort`` on int64); else through ``np.argsort``."""
    if not inverse:
        ordered = np.sort(values)
    else:
        shift = max(1, (values.size - 1).bit_length())
        if values.size and values.min() >= 0 and int(values.max()) < 1 << (63 - shift):
            packed = np.sort((values << shift) | np.arange(values.size, dtype=np.int64))
            ordered, order = packed >> shift, packed & ((1 << shift) - 1)
        else:
            order = np.argsort(values)
            ordered = values[order]
    first = np.ones(ordered.size, dtype=bool)
    np.not_equal(ordered[1:], ordered[:-1], out=first[1:])
    if not inverse:
        return ordered[first], None
    where = np.empty(values.size, dtype=np.int64)
    where[order] = np.cumsum(first) - 1
    return ordered[first], where


def pair_counts(rows, cols, shape) -> sp.csr_matrix:
    """Counts of (row, column) pairs as CSR (int32 counts) with sorted column indices, no duplicates."""
    import scipy.sparse as sp

    X = sp.csr_matrix((np.ones(rows.size, dtype=np.int32), (rows, cols)), shape=shape)
    X.sum_duplicates()
    return X


def count_word_chunk(texts, lowercase, ngram_range):
    """Worker: (sorted tokens, sorted n-gram keys, counts) of one chunk; ``None`` if keys overflow."""
    vocabulary = growing_vocabulary()
    ids, lengths = analyzed_ids(texts, _word_tokenizer(lowercase), vocabulary.__getitem__)
    tokens, rank = _sorted_vocabulary(vocabulary)
    base = len(tokens) + 1
    if base ** ngram_range[1] > _KEY_LIMIT:
        return None
    keys, rows = ngram_keys(rank[ids], lengths, ngram_range, base)
    feature_keys, cols = _unique_inverse(keys)
    return tokens, feature_keys, pair_counts(rows, cols, (lengths.size, feature_keys.size))


def count_string_chunk(texts, analyzer, ngram_range, lowercase):
    """Worker: (sorted feature names, counts) of one chunk with scikit-learn's analyzer."""
    from sklearn.feature_extraction.text import CountVectorizer

    analyze = CountVectorizer(analyzer=analyzer, ngram_range=tuple(ngram_range), lowercase=lowercase).build_analyzer()
    vocabulary = growing_vocabulary()
    ids, lengths = analyzed_ids(texts, analyze, vocabulary.__getitem__)
    names, rank = _sorted_vocabulary(vocabulary)
    rows = np.repeat(np.arange(lengths.size, dtype=np.int64), lengths)
    # one newline-joined string pickles far faster than a list (features hold no newline)
    return "\n".join(names), pair_counts(rows, rank[ids], (lengths.size, len(names)))


def _merge_sorted_names(lists) -> tuple[list[str], list[np.ndarray]]:
    """Union of sorted string lists, sorted, and where each list's entries land in it."""
    flat = list(chain.from_iterable(lists))
    order = sorted(range(len(flat)), key=flat.__getitem__)  # a merge of sorted runs
    ordered = np.fromiter(map(flat.__getitem__, order), dtype=object, count=len(flat))
    first = np.ones(len(flat), dtype=bool)
    first[1:] = ordered[1:] != ordered[:-1]
    where = np.empty(len(flat), dtype=np.int64)
    where[order] = np.cumsum(first) - 1
    return ordered[first].tolist(), np.split(where, np.cumsum([len(x) for x in lists])[:-1])


def _stack_remapped(mats, colmaps, n_cols) -> sp.csr_matrix:
    """Chunks stacked row-wise, chunk columns renumbered (increasing maps keep indices sorted)."""
    import scipy.sparse as sp

    offsets = np.cumsum([0] + [m.nnz for m in mats])
    indptr = np.concatenate([[0]] + [m.indptr[1:].astype(np.int64) + o for m, o in zip(mats, offsets)])
    index_dtype = np.int32 if max(n_cols, offsets[-1]) < 2**31 else np.int64
    indices = np.concatenate([cmap[m.indices] for m, cmap in zip(mats, colmaps)]).astype(index_dtype)
    data = np.concatenate([m.data for m in mats])
    return sp.csr_matrix((data, indices, indptr.astype(index_dtype)), shape=(len(indptr) - 1, n_cols))


def merge_string_chunks(results) -> tuple[list[str], sp.csr_matrix]:
    names, maps = _merge_sorted_names([r[0].split("\n") if r[0] else [] for r in results])
    return names, _stack_remapped([r[1] for r in results], maps, len(names))


def merge_word_chunks(results, ngram_range):
    """(global sorted tokens, base, sorted n-gram keys, counts); ``None`` if keys overflow."""
    hi = ngram_range[1]
    tokens, maps = _merge_sorted_names([r[0] for r in results])
    base = len(tokens) + 1
    if base**hi > _KEY_LIMIT:
        return None
    global_keys = []
    for (local_tokens, keys, _), rank_map in zip(results, maps):
        local_base = len(local_tokens) + 1
        digit_map = np.concatenate([[0], rank_map + 1])
        rekeyed = np.zeros_like(keys)
        for j in range(hi):
            rekeyed = rekeyed * base + digit_map[keys // local_base ** (hi - 1 - j) % local_base]
        global_keys.append(rekeyed)
    all_keys = _unique_inverse(np.concatenate(global_keys), inverse=False)[0]
    colmaps = [np.searchsorted(all_keys, k) for k in global_keys]
    return tokens, base, all_keys, _stack_remapped([r[2] for r in results], colmaps, all_keys.size)


def key_names(keys, tokens, base, ngram_range) -> list[str]:
    """Feature names of n-gram keys: tokens joined by single spaces, as scikit-learn writes them.

    Built as one string of pieces cut at newlines (tokens hold no whitespace),
    which allocates far less than joining every name separately.
    """
    hi = ngram_range[1]
    if not keys.size:
        return []
    digits = np.empty((keys.size, hi), dtype=np.int64)
    rest = keys.copy()
    for j in range(hi - 1, -1, -1):
        digits[:, j] = rest % base
        rest //= base
    # digit 0 (no token) maps to "", the last position carries the newline
    first = [""] + ([t + "\n" for t in tokens] if hi == 1 else tokens)
    middle = [""] + [" " + t for t in tokens]
    last = ["\n"] + [" " + t + "\n" for t in tokens]
    tables = [first] + [middle] * (hi - 2) + ([last] if hi > 1 else [])
    pieces = np.empty((keys.size, hi), dtype=object)
    for j, table in enumerate(tables):
        pieces[:, j] = np.array(table, dtype=object)[digits[:, j]]
    names = "".join(pieces.ravel().tolist()).split("\n")
    names.pop()  # after the last newline
    return names


def kept_columns(counts, n_docs, cfg) -> tuple[np.ndarray, np.ndarray]:
    """Columns kept by min_df / max_df / max_features exactly as ``CountVectorizer._limit_features``
    keeps them (same float64 term totals, same argsort), and every column's document frequency."""
    n_cols = counts.shape[1]
    df = np.bincount(counts.indices, minlength=n_cols)
    totals = lambda: np.bincount(counts.indices, weights=counts.data.astype(np.float64), minlength=n_cols)  # noqa: E731
    return kept_by_frequency(df, totals, n_docs, cfg), df


def kept_by_frequency(df, totals, n_docs, cfg) -> np.ndarray:
    """Columns kept by min_df / max_df / max_features given each column's document frequency ``df`` and a
    callable giving its total count (float64; needed only for max_features): :func:`kept_columns` without
    the matrix, for counts gathered chunk by chunk (:mod:`lintext.text.streaming`)."""
    n_cols = len(df)
    if not n_cols:
        raise ConfigError("--min-df", cfg.min_df, "no features left (empty vocabulary; the texts hold no tokens)")
    lo, hi = df_arg(cfg.min_df), df_arg(cfg.max_df)
    max_count = hi if isinstance(hi, Integral) else hi * n_docs
    min_count = lo if isinstance(lo, Integral) else lo * n_docs
    if max_count < min_count:
        raise ConfigError("--min-df", cfg.min_df, "no features left (max_df corresponds to < documents than min_df)")
    mask = (df <= max_count) & (df >= min_count)
    if cfg.max_features is not None and mask.sum() > cfg.max_features:
        best = (-totals()[mask]).argsort()[: cfg.max_features]
        limited = np.zeros(n_cols, dtype=bool)
        limited[np.flatnonzero(mask)[best]] = True
        mask = limited
    kept = np.flatnonzero(mask)
    if not kept.size:
        raise ConfigError("--min-df", cfg.min_df, "no features left (after pruning, no terms remain)")
    return kept


def select_columns(X: sp.csr_matrix, kept: np.ndarray) -> sp.csr_matrix:
    import scipy.sparse as sp

    if kept.size == X.shape[1]:
        return X
    new = np.full(X.shape[1], -1, dtype=np.int64)
    new[kept] = np.arange(kept.size)
    col = new[X.indices]
    keep = col >= 0
    indptr = np.concatenate([[0], np.cumsum(keep)])[X.indptr]
    return sp.csr_matrix((X.data[keep], col[keep].astype(X.indices.dtype), indptr), shape=(X.shape[0], kept.size))


def word_index_from_names(names, ngram_range):
    """(tokens, base, sorted keys, columns) rebuilt from word feature names; ``False`` if keys overflow."""
    lo, hi = ngram_range
    flat = " ".join(names).split(" ")  # one split for all names: far fewer calls than one per name
    length = np.fromiter(map(str.count, names, repeat(" ")), dtype=np.int64, count=len(names)) + 1
    tokens = sorted(set(flat))
    base = len(tokens) + 1
    if base**hi > _KEY_LIMIT:
        return False
    rank = dict(zip(tokens, range(1, base)))
    ids = np.fromiter(map(rank.__getitem__, flat), dtype=np.int64, count=len(flat))
    starts = np.cumsum(length) - length
    keys, columns = [], []
    for n in range(lo, hi + 1):  # names of other lengths can never match a text
        sel = np.flatnonzero(length == n)
        if sel.size:
            digits = ids[starts[sel][:, None] + np.arange(n)]
            key = digits[:, 0]
            for j in range(1, n):
                key = key * base + digits[:, j]
            keys.append(key * base ** (hi - n))
            columns.append(sel)
    keys = np.concatenate(keys) if keys else np.zeros(0, dtype=np.int64)
    columns = np.concatenate(columns) if columns else np.zeros(0, dtype=np.int64)
    order = np.argsort(keys, kind="stable")
    return tokens, base, keys[order], columns[order]


def token_rank(tokens) -> dict:
    """Each token's rank in the sorted ``tokens``; an unknown token gives -1."""
    return _TokenRank(zip(tokens, range(len(tokens))))


def transform_word_chunk(texts, lowercase, ngram_range, tokens, base, keys, columns, n_cols, rank=None):
    """Worker: word counts of one chunk over a fitted vocabulary given as sorted n-gram keys
    (``rank``: :func:`token_rank` of ``tokens``, when the caller keeps one)."""
    import scipy.sparse as sp

    rank = token_rank(tokens) if rank is None else rank
    ids, lengths = analyzed_ids(texts, _word_tokenizer(lowercase), rank.__getitem__)
    found, rows = ngram_keys(ids, lengths, ngram_range, base)
    if not keys.size:
        return sp.csr_matrix((lengths.size, n_cols))
    # each distinct n-gram looked up once, in ascending order (the search then walks the keys
    # forward: 0.6 s where looking up 4.6 million occurrences one by one took 1.05 s at 1.3
    # million features)
    distinct, where = _unique_inverse(found)
    at = np.searchsorted(keys, distinct)
    at[at == keys.size] = 0
    hit = (keys[at] == distinct)[where]
    column_of = at if columns is None else columns[at]
    return pair_counts(rows[hit], column_of[where[hit]], (lengths.size, n_cols))


def transform_string_chunk(texts, analyzer, ngram_range, lowercase, names):
    from sklearn.feature_extraction.text import CountVectorizer

    vocabulary = dict(zip(names, range(len(names))))
    vec = CountVectorizer(analyzer=analyzer, ngram_range=tuple(ngram_range), lowercase=lowercase, vocabulary=vocabulary)
    return vec.transform(texts).tocsr()
