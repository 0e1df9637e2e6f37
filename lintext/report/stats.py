"""Numbers behind the report: per-feature statistics, frequency bins, notable features.

Everything here is plain NumPy over a :class:`~lintext.model.Model`; nothing draws or
writes files. :mod:`lintext.report` lists the public functions.

Vocabulary
----------
*document frequency* (``df``)
    training documents containing the feature (the featurizer's count);
*update count*
    gradient steps in which the feature was present with a non-zero gradient;
*update magnitude*
    ``sum |Δw|`` over those steps and over labels (``abs_update_sum``);
*weight norm*
    the L2 norm of the feature's row of ``coef`` (its weights across labels) after removing the
    row's mean across labels. Softmax and the multiclass hinge ignore that mean: adding the same
    amount to every label's weight of a feature changes no score difference, no probability and
    no prediction, so only the centred row is what the loss can see. Plain SGD keeps each row's
    mean at zero (the softmax gradient sums to zero across labels) but per-coordinate rules such
    as AdaGrad let it drift, and the raw norm would then overstate the feature's weight. Every
    per-feature size (norm, largest weight, per-label weight) is taken on the centred row; the
    raw norm is kept as ``raw_weight_norm``;
*effective step*
    the learning rate times the rule's final per-feature scaling (how far one unit of
    gradient moves the weight), mean over labels (NaN for L-BFGS, where there is none).

Frequency bins are log-spaced: ``1``, ``2``, ``3–4``, ``5–8``, ``9–16`` … bin ``k >= 1``
holds ``2^(k-1) < df <= 2^k``; bin 0 holds ``df = 1`` (:mod:`lintext.engine.sparsity` defines them).
"""

from __future__ import annotations

import math

import numpy as np

from ..engine.sparsity import bin_bounds, bin_index, bin_label
from ..errors import ConfigError
from ..evidence import RARE_DF, explain_section, hashed_names

STAT_COLUMNS = ("update_count", "abs_update_sum", "effective_step")


# ---------------------------------------------------------------- per-feature table


def feature_table(model) -> dict:
    """One row per feature of ``model``: its frequency, training updates and final weights.

    Parameters
    ----------
    model : :class:`~lintext.model.Model`

    Returns
    -------
    dict of equal-length columns (NumPy arrays, except the text columns, which are lists)

        ``column`` (int), ``feature`` (text; in hashing mode the most frequent training
        n-grams that fell into the column, joined by `` | ``, when the model's
        ``info["explain"]`` has them, else ``""``), ``document_frequency`` (int),
        ``update_count``, ``abs_update_sum``, ``effective_step`` (float; NaN when the model
        has no ``feature_stats``), ``weight_norm`` (L2 norm of the ``coef`` row with its mean
        across labels removed), ``raw_weight_norm`` (of the row as stored), ``weight_mean``
        (that mean), ``max_weight`` and ``max_weight_label`` (the largest of the centred
        row's weights and its label), ``frequency_bin`` (index into :func:`frequency_bins`;
        -1 for ``df = 0``).

    In vocabulary mode there is one row per vocabulary entry, in column order; in
    hashing mode one row per column kept after the document-frequency limits.
    """
    feat = model.featurizer
    df_all = np.asarray(feat.document_frequency, dtype=np.int64)
    hashing = feat.config.hashing
    if hashing:
        columns = np.asarray(feat.used_columns, dtype=np.int64)
        names_by_column = hashed_names(model)
        names = [" | ".join(names_by_column.get(int(j), ())) for j in columns]
    else:
        columns = np.arange(len(feat.feature_names), dtype=np.int64)
        names = list(feat.feature_names)
    summary = _row_summaries(model, columns)
    best = summary["best"]
    df = df_all[columns]
    table = {
        "column": columns,
        "feature": names,
        "document_frequency": df,
    }
    stats = model.feature_stats
    for name in STAT_COLUMNS:
        if stats is not None and name in stats:
            table[name] = np.asarray(stats[name], dtype=np.float64)[columns]
        else:
            table[name] = np.full(len(columns), np.nan)
    table["weight_norm"] = summary["norm"]
    table["raw_weight_norm"] = summary["raw_norm"]
    table["weight_mean"] = summary["mean"]
    table["max_weight"] = summary["max"]
    table["max_weight_label"] = np.array(list(model.labels) + [""], dtype=object)[best].tolist()
    table["frequency_bin"] = bin_index(df)
    return table


BLOCK_ROWS = 8192  # rows of coef widened and centred at a time: a few MB, so the passes stay in cache


def _row_blocks(model, columns):
    """``(slice into columns, the rows' weights as float64)`` a block of rows at a time."""
    for start in range(0, len(columns), BLOCK_ROWS):
        part = slice(start, min(len(columns), start + BLOCK_ROWS))
        yield part, weight_rows(model, columns[part])


def _row_summaries(model, columns) -> dict:
    """Per row of ``coef`` (the rows ``columns``): mean across labels, norms of the centred and raw
    row, the centred row's largest weight and its label (``len(labels)`` for an empty model)."""
    n, k = len(columns), model.coef.shape[1]
    out = {"mean": np.zeros(n), "norm": np.zeros(n), "raw_norm": np.zeros(n), "max": np.zeros(n),
           "best": np.zeros(n, dtype=np.int64)}  # with no labels, 0 is len(labels): the label ""
    if k == 0:
        return out
    for part, raw in _row_blocks(model, columns):
        mean = raw.mean(axis=1)
        coef = centred_rows(raw, mean)
        best = coef.argmax(axis=1)
        out["mean"][part] = mean
        out["norm"][part] = np.sqrt(np.einsum("ij,ij->i", coef, coef))
        out["raw_norm"][part] = np.sqrt(np.einsum("ij,ij->i", raw, raw))
        out["best"][part] = best
        out["max"][part] = coef[np.arange(len(best)), best]
    return out


def centred_rows(coef, mean=None) -> np.ndarray:
    """``coef`` (features x labels) with each row's mean across labels removed, as float64:
    the part of each feature's weights that softmax and the multiclass hinge can see."""
    coef = np.asarray(coef, dtype=np.float64)
    if mean is None:
        mean = coef.mean(axis=1) if coef.size else np.zeros(coef.shape[0])
    return coef - np.asarray(mean)[:, None]


def size_key(values) -> np.ndarray:
    """Sizes rounded to 1e-12 for ranking and ordering, so that ties stay ties whatever rounding
    the centring left (a shifted row's centred weights differ in their last bits)."""
    return np.round(np.asarray(values, dtype=np.float64), 12)


def coef_rows(model, columns) -> np.ndarray:
    """The rows ``columns`` of ``model.coef`` as stored: ``coef`` itself when they are all of them in
    order, a view when they are a run of rows, else a copy of just those rows."""
    coef = model.coef
    columns = np.asarray(columns, dtype=np.int64)
    if len(columns) and columns[-1] - columns[0] == len(columns) - 1 and (np.diff(columns) == 1).all():
        return coef if len(columns) == coef.shape[0] else coef[columns[0]:columns[-1] + 1]
    return coef[columns]


def weight_rows(model, columns) -> np.ndarray:
    """:func:`coef_rows` as float64: no copy when they are all of the rows, in order, and already
    float64; only the rows taken are widened (a hashing model uses few of its rows)."""
    return np.asarray(coef_rows(model, columns), dtype=np.float64)


# ---------------------------------------------------------------- frequency bins


def frequency_bins(table: dict) -> list[dict]:
    """Summary of the features per log-spaced document-frequency bin.

    Parameters
    ----------
    table : the output of :func:`feature_table`.

    Returns
    -------
    list of dict, one per non-empty bin in increasing frequency, with ``bin`` (index),
    ``label`` (``"3–4"``), ``low``, ``high``, ``features`` (count), ``feature_share``,
    ``update_share`` (share of the total ``sum |Δw|``), ``median_weight_norm``,
    ``median_update`` with ``update_q25`` and ``update_q75`` (quartiles of ``sum |Δw|``),
    ``median_update_count``, ``median_effective_step`` with ``effective_step_q25`` and
    ``effective_step_q75``. Statistics the model lacks are NaN; so are the update
    statistics when no feature moved at all (L-BFGS records no gradient steps).
    """
    bins = table["frequency_bin"]
    total_features = int((bins >= 0).sum())
    updates = table["abs_update_sum"]
    total_update = float(np.nansum(updates)) if np.isfinite(updates).any() else math.nan
    rows = []
    for k in np.unique(bins[bins >= 0]):
        mask = bins == k
        lo, hi = bin_bounds(int(k))
        upd = updates[mask]
        steps = table["effective_step"][mask]
        q_upd = _quantiles(upd) if total_update > 0 else (math.nan,) * 3  # all zero: no gradient steps recorded
        q_step = _quantiles(steps)
        rows.append({
            "bin": int(k),
            "label": bin_label(int(k)),
            "low": lo,
            "high": hi,
            "features": int(mask.sum()),
            "feature_share": float(mask.sum() / total_features),
            "update_share": float(np.nansum(upd) / total_update) if total_update > 0 else math.nan,
            "median_weight_norm": float(np.median(table["weight_norm"][mask])),
            "median_update": q_upd[1],
            "update_q25": q_upd[0],
            "update_q75": q_upd[2],
            "median_update_count": _quantiles(table["update_count"][mask])[1] if total_update > 0 else math.nan,
            "median_effective_step": q_step[1],
            "effective_step_q25": q_step[0],
            "effective_step_q75": q_step[2],
        })
    return rows


def _quantiles(values) -> tuple[float, float, float]:
    """Quartiles of the finite values (NaN when there are none)."""
    values = np.asarray(values, dtype=np.float64)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return (math.nan, math.nan, math.nan)
    q = np.percentile(values, [25, 50, 75])
    return float(q[0]), float(q[1]), float(q[2])


# ---------------------------------------------------------------- notable features


def top_features(model, top: int = 10, label: str | None = None, table: dict | None = None) -> dict:
    """The ``top`` features with the largest (centred) weight for each label (or for ``label`` only).

    Weights are the feature's row with its mean across labels removed (see the module
    docstring): what the feature adds to this label's score over the other labels on average.

    Returns
    -------
    dict label -> list of dict (``feature``, ``column``, ``weight``, ``document_frequency``,
    ``weight_norm``), largest weight first.
    """
    table = feature_table(model) if table is None else table
    wanted = model.labels if label is None else [label]
    label_columns = [model.labels.index(name) for name in wanted]
    orders = _largest_centred(model, table, top, label_columns)
    out = {}
    for name, j, order in zip(wanted, label_columns, orders):
        weights = weight_rows(model, table["column"][order])[:, j] - table["weight_mean"][order]  # only the rows shown
        out[name] = [{
            "feature": table["feature"][i] or f"column {int(table['column'][i])}",
            "column": int(table["column"][i]),
            "weight": float(weight),
            "document_frequency": int(table["document_frequency"][i]),
            "weight_norm": float(table["weight_norm"][i]),
        } for i, weight in zip(order, weights)]
    return out


def _largest_centred(model, table, top: int, label_columns: list) -> list[np.ndarray]:
    """For each label column ``j``, the table rows of the ``top`` largest centred weights, largest first,
    ties in column order: ``np.lexsort((column, -size_key(centred[:, j])))[:top]``.

    Sorting every column of a features x labels matrix costs seconds at 300,000 x 60, and so does
    widening, centring and rounding all of it. Instead a sample of rows gives, per label, a lower
    bound of its ``top``-th largest key (the ``top``-th largest of the sample's); one pass over the
    rows, a block at a time, keeps the weights within rounding of at least that bound, and only
    those few are rounded and sorted. The result is the same, ties included.
    """
    columns, mean = table["column"], table["weight_mean"]
    n = len(columns)
    step = max(1, n // 20000)
    sample = np.arange(0, n, step)
    if not label_columns:
        return []
    if top >= len(sample) or not np.isfinite(mean).all():  # few rows, or a NaN or infinite weight: sort it all
        keys = size_key(centred_rows(weight_rows(model, columns), mean))
        return [np.lexsort((columns, -keys[:, j]))[:top] for j in label_columns]
    keys = size_key(weight_rows(model, columns[sample])[:, label_columns] - mean[sample, None])
    bound = np.sort(keys, axis=0)[len(sample) - top]  # np.partition is slower here: most keys are equal zeros
    # round(v, 12) >= bound needs v >= bound - 0.5e-12 up to a few ulps of v (rint(v * 1e12) / 1e12)
    floor = bound - 1e-12 - 8 * np.finfo(np.float64).eps * np.abs(bound)
    every = label_columns == list(range(model.coef.shape[1]))
    rows, which = [], []
    for part, raw in _row_blocks(model, columns):
        centred = (raw if every else raw[:, label_columns]) - mean[part, None]
        r, w = np.nonzero(centred >= floor)
        rows.append(r + part.start)
        which.append(w)
    rows, which = np.concatenate(rows), np.concatenate(which)
    out = []
    for k, j in enumerate(label_columns):
        keep = rows[which == k]
        key = size_key(weight_rows(model, columns[keep])[:, j] - mean[keep])
        out.append(keep[np.lexsort((columns[keep], -key))][:top])
    return out


def rare_heavy(model, top: int = 15, label: str | None = None, table: dict | None = None, rare_df: int = RARE_DF) -> list[dict]:
    """Features in at most ``rare_df`` training documents with the largest (centred) weight norms.

    These are the features the model may have memorised: seen once or twice, yet
    weighted like the frequent ones. Each row has ``feature``, ``column``,
    ``document_frequency``, ``weight_norm``, ``norm_rank`` (1 = the largest weight norm
    of all features), ``norm_percentile`` (share of all features with a smaller norm),
    ``max_weight``, ``max_weight_label`` and ``documents`` (from the model's
    ``info["explain"]``, written at training time; empty when absent), each
    ``{"source", "label", "snippet"}``. With ``label``, only features whose largest
    weight goes to that label.
    """
    table = feature_table(model) if table is None else table
    norms = table["weight_norm"]
    keys = size_key(norms)
    df = table["document_frequency"]
    n = len(norms)
    candidates = np.flatnonzero((df >= 1) & (df <= rare_df))
    if label is not None:
        candidates = np.array([i for i in candidates if table["max_weight_label"][i] == label], dtype=np.int64)
    order = candidates[np.lexsort((table["column"][candidates], -keys[candidates]))][:top]
    documents = {int(item["column"]): item.get("documents", []) for item in explain_section(model).get("rare_features", [])}
    rows = []
    for i in order:
        norm = float(norms[i])
        rank = int((keys > keys[i]).sum()) + 1  # 1 = the largest; ties share the better rank
        rows.append({
            "feature": table["feature"][i] or f"column {int(table['column'][i])}",
            "column": int(table["column"][i]),
            "document_frequency": int(df[i]),
            "weight_norm": norm,
            "raw_weight_norm": float(table["raw_weight_norm"][i]),
            "norm_rank": rank,
            "norm_percentile": float((keys < keys[i]).sum() / n) if n else math.nan,
            "max_weight": float(table["max_weight"][i]),
            "max_weight_label": table["max_weight_label"][i],
            "documents": documents.get(int(table["column"][i]), []),
        })
    return rows


def key_numbers(table: dict, rare_df: int = RARE_DF, top: int = 100) -> dict:
    """A few headline numbers contrasting rare (df <= ``rare_df``) and common features.

    ``rare_share`` (of features), ``rare_update_share`` (of total ``sum |Δw|``; NaN
    without statistics), ``rare_median_norm`` and ``common_median_norm`` (median weight
    norm of rare features and of features in more than 8 documents), ``rare_in_top``
    (how many of the ``top`` largest weight norms belong to rare features) and ``top``.
    """
    df = table["document_frequency"]
    norms = table["weight_norm"]
    used = df >= 1
    rare = used & (df <= rare_df)
    common = df > 8
    updates = table["abs_update_sum"]
    total = float(np.nansum(updates[used])) if np.isfinite(updates).any() else math.nan
    top = min(top, int(used.sum()))
    order = np.lexsort((table["column"], -size_key(norms)))[:top]
    return {
        "features": int(used.sum()),
        "rare_df": rare_df,
        "rare_features": int(rare.sum()),
        "rare_share": float(rare.sum() / max(1, used.sum())),
        "rare_update_share": float(np.nansum(updates[rare]) / total) if total > 0 else math.nan,
        "rare_median_norm": float(np.median(norms[rare])) if rare.any() else math.nan,
        "common_median_norm": float(np.median(norms[common])) if common.any() else math.nan,
        "rare_in_top": int(rare[order].sum()),
        "top": top,
    }


def check_label(model: Model, label: str | None) -> str | None:
    """``label`` when the model knows it; ConfigError naming ``--label`` otherwise."""
    if label is not None and label not in model.labels:
        raise ConfigError("--label", label, f"not a label of this model; choose one of {', '.join(model.labels)}")
    return label
