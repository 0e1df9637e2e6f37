"""How many features end with all their weights exactly zero, per document-frequency bin.

L1 penalties (SGD's cumulative penalty, FTRL's ``lambda_1``) set weights to exactly zero; the
model directory (``model.json``, ``"sparsity"``) and the report give the count per log-spaced
document-frequency bin: ``1``, ``2``, ``3–4``, ``5–8``, ``9–16`` … bin ``k >= 1`` holds
``2^(k-1) < df <= 2^k``, bin 0 holds ``df = 1``. The bins are defined here once; the report's
(:mod:`lintext.report.stats`) are these.
"""

from __future__ import annotations

import numpy as np


def bin_index(df) -> np.ndarray:
    """Log-spaced bin of each document frequency: 1 -> 0, 2 -> 1, 3–4 -> 2, 5–8 -> 3, …; 0 -> -1."""
    df = np.asarray(df, dtype=np.int64)
    # frexp(n)[1] is n's bit length for n >= 1 (and 0 for n = 0): ceil(log2(df)) without rounding.
    k = np.frexp(np.maximum(df - 1, 0).astype(np.float64))[1].astype(np.int64)
    return np.where(df >= 1, k, -1)


def bin_bounds(k: int) -> tuple[int, int]:
    """Smallest and largest document frequency in bin ``k``."""
    return (1, 1) if k == 0 else (2 ** (k - 1) + 1, 2**k)


def bin_label(k: int) -> str:
    """``"1"``, ``"2"``, ``"3–4"``, ``"5–8"``, … for bin ``k``."""
    lo, hi = bin_bounds(k)
    return str(lo) if lo == hi else f"{lo}–{hi}"


def zero_weights(coef, document_frequency) -> dict:
    """Features (rows of ``coef``, features x labels) whose weights are all exactly zero.

    Returns ``{"features", "exactly_zero", "by_bin": [{"bin", "features", "exactly_zero"}, ...]}``
    over the features seen in training (document frequency at least 1), bins in increasing
    frequency.
    """
    coef = np.asarray(coef)
    df = np.asarray(document_frequency)
    zero = ~np.any(coef != 0, axis=1)
    bins = bin_index(df)
    seen = bins >= 0
    rows = [{"bin": bin_label(int(k)), "features": int(np.sum(bins == k)), "exactly_zero": int(np.sum(zero & (bins == k)))}
            for k in np.unique(bins[seen])]
    return {"features": int(seen.sum()), "exactly_zero": int(np.sum(zero & seen)), "by_bin": rows}
