"""Evidence from the training data: what only the training texts can tell about a model.

:func:`training_extras` runs once, right after training, while the training texts are at
hand; its JSON-ready result is kept as ``model.info["explain"]`` and read back by
:func:`explain_section` and :func:`hashed_names` (the report, ``inspect``). It records the
training documents behind the rare features with the largest weights and, in hashing mode,
the n-grams that fell into each used column. A feature is *rare* when at most ``RARE_DF``
training documents contain it.
"""

from __future__ import annotations

import re
from collections import Counter

import numpy as np


RARE_DF = 2
SNIPPET_CHARS = 160


def rare_columns(model, top_rare: int = 30, rare_df: int = RARE_DF) -> tuple[np.ndarray, dict]:
    """The ``top_rare`` columns with ``1 <= df <= rare_df`` and the largest centred weight norms (ties:
    lower column first), and the norm of every rare column."""
    df = np.asarray(model.featurizer.document_frequency, dtype=np.int64)
    candidates = np.flatnonzero((df >= 1) & (df <= rare_df))
    rows = np.asarray(model.coef[candidates], dtype=np.float64)
    rows = rows - rows.mean(axis=1, keepdims=True)  # the mean across labels: invisible to the loss
    norms = np.sqrt(np.einsum("ij,ij->i", rows, rows))
    chosen = candidates[np.lexsort((candidates, -np.round(norms, 12)))][:top_rare]  # rounded: ties stay ties
    return chosen, dict(zip(candidates.tolist(), norms.tolist()))


def training_extras(model, train_texts, train_sources, X_train, train_labels=None, top_rare: int = 30,
                    rare_df: int = RARE_DF, ngrams_per_column: int = 3, hashed_texts=None, rare=None) -> dict:
    """What only the training data can tell the report, as JSON-ready data.

    Meant to be stored as ``model.info["explain"]`` right after training.

    Parameters
    ----------
    model : the trained :class:`~lintext.model.Model`.
    train_texts, train_sources : the training texts and their sources (``"file:line"``), in
        the row order of ``X_train``.
    X_train : the training matrix (CSR) the model was trained on.
    train_labels : optional label of each training text, shown beside its snippet.
    top_rare : how many rare features (df <= ``rare_df``) with the largest weight norms to keep
        (norms of the rows with their mean across labels removed, as in the report).
    ngrams_per_column : hashing mode: how many n-grams to name per column.
    hashed_texts : hashing mode: the texts whose n-grams name the columns (default ``train_texts``;
        a feature store passes a bounded sample, its first shard).
    rare : :func:`rare_columns` of the model with these ``top_rare`` and ``rare_df``, when the caller
        has computed it already (a feature store does, to know which rows to read back).

    Returns
    -------
    dict with ``rare_df``, ``rare_features`` (list of ``{"column", "feature",
    "document_frequency", "weight_norm", "documents": [{"source", "label", "snippet"}]}``,
    largest weight norm first; snippets of at most 160 characters around the feature)
    and, in hashing mode, ``hashed_ngrams`` = ``{"columns": [...], "ngrams": [[[text,
    documents], ...], ...]}``: per used column the training n-grams that fell into it,
    most frequent (by document count) first.
    """
    feat = model.featurizer
    texts = list(train_texts)
    sources = list(train_sources)
    extras: dict = {"rare_df": int(rare_df)}
    names_by_column: dict = {}
    if feat.config.hashing:
        extras["hashed_ngrams"] = _hashed_ngrams(feat, texts if hashed_texts is None else hashed_texts, ngrams_per_column)
        section = extras["hashed_ngrams"]
        names_by_column = {c: [g[0] for g in grams] for c, grams in zip(section["columns"], section["ngrams"])}

    df = np.asarray(feat.document_frequency, dtype=np.int64)
    chosen, norm_of = rare if rare is not None else rare_columns(model, top_rare, rare_df)
    X = X_train.tocsc()
    rare = []
    for j in chosen.tolist():
        rows = X.indices[X.indptr[j]:X.indptr[j + 1]]
        if feat.feature_names is not None:
            texts_for = [feat.feature_names[j]]
        else:
            texts_for = names_by_column.get(j, [])
        docs = []
        for i in sorted(int(r) for r in rows):
            doc = {"source": str(sources[i]) if i < len(sources) else f"row {i + 1}",
                   "snippet": snippet(texts[i], texts_for)}
            if train_labels is not None:
                doc["label"] = str(train_labels[i])
            docs.append(doc)
        rare.append({
            "column": int(j),
            "feature": " | ".join(texts_for),
            "document_frequency": int(df[j]),
            "weight_norm": float(norm_of[j]),
            "documents": docs,
        })
    extras["rare_features"] = rare
    return extras


def _hashed_ngrams(feat, texts, keep: int) -> dict:
    """Per used column, the ``keep`` training n-grams with the most documents that hash into it."""
    cfg = feat.config
    counts: Counter = Counter()
    for kind, analyze in _analyzers(cfg):
        local: Counter = Counter()
        for text in texts:
            local.update(set(analyze(text)))
        for gram, n in local.items():
            counts[(gram, kind)] += n
    if not counts:
        return {"columns": [], "ngrams": []}
    grams = sorted(counts)  # alphabetical: ties in count go to the earlier text
    width = cfg.hash_space
    column = _columns(width, [g for g, _ in grams])
    n_docs = np.array([counts[g] for g in grams], dtype=np.int64)
    used = np.zeros(width, dtype=bool)
    used[np.asarray(feat.used_columns, dtype=np.int64)] = True
    keep_rows = np.flatnonzero(used[column])
    order = keep_rows[np.lexsort((keep_rows, -n_docs[keep_rows], column[keep_rows]))]
    columns, ngrams = [], []
    start = 0
    while start < len(order):
        c = column[order[start]]
        stop = start
        while stop < len(order) and column[order[stop]] == c:
            stop += 1
        columns.append(int(c))
        ngrams.append([[_display(*grams[i]), int(n_docs[i])] for i in order[start:min(stop, start + keep)]])
        start = stop
    return {"columns": columns, "ngrams": ngrams}


def document_ngrams(featurizer, text: str) -> dict:
    """Hashing mode: column -> the n-grams of ``text`` that hash into it (character n-grams as
    ``[gram]``), in alphabetical order; the same analyzers and hash as the featurizer."""
    grams = sorted({(gram, kind) for kind, analyze in _analyzers(featurizer.config) for gram in analyze(text)})
    out: dict = {}
    for (gram, kind), c in zip(grams, _columns(featurizer.config.hash_space, [g for g, _ in grams]).tolist()):
        out.setdefault(int(c), []).append(_display(gram, kind))
    return out


def _analyzers(cfg) -> list:
    from sklearn.feature_extraction.text import HashingVectorizer

    analyzers = [("", HashingVectorizer(analyzer="word", ngram_range=cfg.ngrams, lowercase=cfg.lowercase).build_analyzer())]
    if cfg.char_ngrams is not None:
        analyzers.append(("char", HashingVectorizer(analyzer="char_wb", ngram_range=cfg.char_ngrams,
                                                    lowercase=cfg.lowercase).build_analyzer()))
    return analyzers


def _columns(width: int, grams: list) -> np.ndarray:
    """The column of each n-gram: HashingVectorizer hashes every n-gram with
    FeatureHasher(input_type="string"); one row per n-gram."""
    from sklearn.feature_extraction.text import FeatureHasher

    if not grams:
        return np.zeros(0, dtype=np.int64)
    hashed = FeatureHasher(n_features=width, input_type="string", alternate_sign=False).transform([[g] for g in grams])
    return hashed.indices.astype(np.int64)


def _display(gram: str, kind: str) -> str:
    """Character n-grams are written ``[gram]``, as in vocabulary mode."""
    return f"[{gram}]" if kind == "char" else gram


def snippet(text: str, features=(), width: int = SNIPPET_CHARS) -> str:
    """At most ``width`` characters of ``text`` on one line, centred on the first feature found."""
    flat = " ".join(str(text).split())
    if len(flat) <= width:
        return flat
    at = -1
    for feature in features:
        tokens = re.findall(r"\w+", feature.strip("[]")) if feature else []
        if not tokens:
            continue
        pattern = r"\W+".join(re.escape(t) for t in tokens)
        found = re.search(pattern, flat, flags=re.IGNORECASE)
        if found:
            at = found.start()
            break
    if at < 0:
        return flat[: width - 1] + "…"
    start = max(0, min(at - width // 3, len(flat) - width))
    piece = flat[start:start + width]
    if start > 0:
        piece = "…" + piece[1:]
    if start + width < len(flat):
        piece = piece[:-1] + "…"
    return piece


# ---------------------------------------------------------------- reading it back


def explain_section(model) -> dict:
    """The model's ``info["explain"]`` when it is a dictionary, else ``{}``."""
    section = model.info.get("explain") if isinstance(model.info, dict) else None
    return section if isinstance(section, dict) else {}


def hashed_names(model) -> dict:
    """Hashing mode: column -> the most frequent training n-grams that fell into it (may be empty)."""
    section = explain_section(model).get("hashed_ngrams") or {}
    columns = section.get("columns") or []
    ngrams = section.get("ngrams") or []
    return {int(c): [str(g[0]) for g in grams] for c, grams in zip(columns, ngrams)}
