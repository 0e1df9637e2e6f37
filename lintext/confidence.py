"""How sure a model is, and whether to believe it: temperature scaling, calibration error, routing.

Plain NumPy over score matrices (one row per document, one column per label) and label codes;
nothing here knows of models, files or text.

*Temperature scaling* (Guo, Pleiss, Sun & Weinberger 2017, "On calibration of modern neural
networks") turns scores ``s`` into probabilities ``softmax(s / T)`` with one number ``T > 0``
fitted by minimising the negative log-likelihood of a held-out (dev) set. Dividing by ``T``
never changes which label scores highest, so it changes probabilities, never predictions.

*Expected calibration error* (ECE; Naeini, Cooper & Hauskrecht 2015, "Obtaining well calibrated
probabilities using Bayesian binning") groups documents by the probability of their predicted
label (the *confidence*) into equal-width bins ``(0, 1/M], (1/M, 2/M], ... ((M-1)/M, 1]`` (the
first bin also takes 0) and sums ``|accuracy - mean confidence|`` over bins, each weighted by
its share of the documents (Guo et al. 2017, eq. 3). The bins are the ones
``sklearn.calibration.calibration_curve(strategy="uniform")`` uses.

*Coverage* at a threshold ``t`` is the share of documents whose confidence is at least ``t``
(the ones decided automatically; the rest are left for a person), and the accuracy at ``t`` is
the accuracy on those.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import ConfigError

ECE_BINS = 15
TEMPERATURE_BOUNDS = (0.05, 20.0)  # searched range of T; a fit that ends on a bound is flagged
COVERAGE_THRESHOLDS = (0.0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.99)
CURVE_THRESHOLDS = tuple(round(i / 100, 2) for i in range(100)) + (0.995, 0.999)


# ---------------------------------------------------------------- probabilities


def log_softmax(scores: np.ndarray, temperature: float = 1.0) -> np.ndarray:
    """``log softmax(scores / temperature)`` row by row, in float64."""
    z = np.asarray(scores, dtype=np.float64) / float(temperature)
    z = z - z.max(axis=1, keepdims=True)
    return z - np.log(np.exp(z).sum(axis=1, keepdims=True))


def probabilities(scores: np.ndarray, temperature: float = 1.0) -> np.ndarray:
    """``softmax(scores / temperature)`` row by row."""
    return np.exp(log_softmax(scores, temperature))


def negative_log_likelihood(scores: np.ndarray, y: np.ndarray, temperature: float = 1.0) -> float:
    """Mean ``-log softmax(s_i / T)[y_i]`` over the rows."""
    logp = log_softmax(scores, temperature)
    return float(-logp[np.arange(len(y)), np.asarray(y, dtype=np.int64)].mean())


def fit_temperature(scores: np.ndarray, y: np.ndarray, bounds: tuple = TEMPERATURE_BOUNDS) -> tuple[float, bool]:
    """The temperature minimising the dev negative log-likelihood (Guo et al. 2017).

    The NLL is convex in ``b = 1/T`` (a mean of log-sum-exp of ``b s_i`` minus ``b s_iy``), with
    derivative ``mean(E_p[s] - s_y)`` and second derivative ``mean(Var_p[s])`` under
    ``p = softmax(b s_i)``; Newton's method on ``b``, kept inside a shrinking bracket (bisection
    when a Newton step leaves it), finds its minimum to machine precision.

    Returns
    -------
    (temperature, at_bound): ``at_bound`` is True when the minimum lies on or beyond an end of
    ``bounds`` (the dev set is separated with room to spare, or its scores carry no signal).
    """
    s = np.asarray(scores, dtype=np.float64)
    y = np.asarray(y, dtype=np.int64)
    if s.ndim != 2 or len(s) == 0 or len(y) != len(s):
        raise ValueError("fit_temperature needs a non-empty score matrix and one label code per row")
    s_true = s[np.arange(len(y)), y]

    def slope(b):
        z = b * s
        z -= z.max(axis=1, keepdims=True)
        p = np.exp(z)
        p /= p.sum(axis=1, keepdims=True)
        mean = (p * s).sum(axis=1)
        var = np.maximum((p * s * s).sum(axis=1) - mean * mean, 0.0)
        return float((mean - s_true).mean()), float(var.mean())

    lo, hi = 1.0 / bounds[1], 1.0 / bounds[0]
    g_lo, _ = slope(lo)
    if g_lo >= 0:  # NLL already rising at the highest temperature
        return float(bounds[1]), True
    g_hi, _ = slope(hi)
    if g_hi <= 0:  # still falling at the lowest temperature
        return float(bounds[0]), True
    b = min(max(1.0, lo), hi)
    for _ in range(200):
        g, h = slope(b)
        if g > 0:
            hi = b
        elif g < 0:
            lo = b
        if g == 0 or hi - lo <= 1e-15 * hi:
            break
        step = b - g / h if h > 0 else math.nan
        if step == b:  # Newton has converged to machine precision
            break
        b = step if lo < step < hi else 0.5 * (lo + hi)
    return float(1.0 / b), False


# ---------------------------------------------------------------- calibration error


def bin_ids(confidence: np.ndarray, bins: int = ECE_BINS) -> np.ndarray:
    """Equal-width bin of each confidence, right-closed (as ``calibration_curve`` bins)."""
    edges = np.linspace(0.0, 1.0, bins + 1)
    return np.searchsorted(edges[1:-1], np.asarray(confidence, dtype=np.float64))


def reliability(confidence: np.ndarray, correct: np.ndarray, bins: int = ECE_BINS) -> dict:
    """Per equal-width confidence bin: documents, mean confidence and accuracy.

    Returns
    -------
    dict of lists, one entry per bin (``None`` for the means of an empty bin): ``count``,
    ``confidence``, ``accuracy``; and ``bins``.
    """
    conf = np.asarray(confidence, dtype=np.float64)
    hit = np.asarray(correct, dtype=np.float64)
    ids = bin_ids(conf, bins)
    count = np.bincount(ids, minlength=bins)
    conf_sum = np.bincount(ids, weights=conf, minlength=bins)
    hit_sum = np.bincount(ids, weights=hit, minlength=bins)
    mean = lambda total: [float(t / c) if c else None for t, c in zip(total, count)]  # noqa: E731
    return {"bins": int(bins), "count": count.astype(int).tolist(), "confidence": mean(conf_sum), "accuracy": mean(hit_sum)}


def expected_calibration_error(confidence: np.ndarray, correct: np.ndarray, bins: int = ECE_BINS) -> float:
    """ECE: ``sum_m |B_m|/n * |acc(B_m) - conf(B_m)|`` over equal-width bins (Naeini et al. 2015)."""
    return ece_of(reliability(confidence, correct, bins))


def ece_of(table: dict) -> float:
    """The ECE of a :func:`reliability` table."""
    n = sum(table["count"])
    if n == 0:
        return math.nan
    return float(sum(c / n * abs(a - p) for c, a, p in zip(table["count"], table["accuracy"], table["confidence"]) if c))


# ---------------------------------------------------------------- routing


def coverage_curve(confidence: np.ndarray, correct: np.ndarray, thresholds=CURVE_THRESHOLDS) -> dict:
    """Documents decided (confidence at least ``t``) and correct among them, per threshold ``t``.

    Returns
    -------
    dict of lists: ``threshold``, ``decided``, ``correct``; and ``documents``.
    """
    conf = np.asarray(confidence, dtype=np.float64)
    hit = np.asarray(correct, dtype=bool)
    order = np.argsort(-conf, kind="stable")
    cum_hits = np.concatenate([[0], np.cumsum(hit[order])])
    ascending = conf[order][::-1]
    decided = [int(len(conf) - np.searchsorted(ascending, t, side="left")) for t in thresholds]
    return {"threshold": [float(t) for t in thresholds], "decided": decided,
            "correct": [int(cum_hits[d]) for d in decided], "documents": int(len(conf))}


def coverage_rows(curve: dict, thresholds=COVERAGE_THRESHOLDS) -> list[dict]:
    """Rows ``{"threshold", "decided", "coverage", "accuracy"}`` of a :func:`coverage_curve` at
    ``thresholds`` (each must be one of the curve's; accuracy is ``None`` when nothing is decided)."""
    at = {t: i for i, t in enumerate(curve["threshold"])}
    n = curve["documents"]
    rows = []
    for t in thresholds:
        i = at[float(t)]
        d, c = curve["decided"][i], curve["correct"][i]
        rows.append({"threshold": float(t), "decided": d, "coverage": d / n if n else math.nan,
                     "accuracy": c / d if d else None})
    return rows


def threshold_for_accuracy(confidence: np.ndarray, correct: np.ndarray, target: float) -> dict:
    """The lowest threshold whose decided documents reach ``target`` accuracy (the most coverage).

    The candidates are the confidences themselves: deciding every document with confidence at
    least ``t`` for ``t`` one of them. Returns ``{"target", "threshold", "decided", "coverage",
    "accuracy"}``; ``threshold`` is ``None`` when no threshold reaches the target (then the
    other numbers are those of the most accurate threshold).
    """
    conf = np.asarray(confidence, dtype=np.float64)
    hit = np.asarray(correct, dtype=bool)
    n = len(conf)
    order = np.argsort(-conf, kind="stable")
    sorted_conf = conf[order]
    hits = np.cumsum(hit[order])
    # a threshold decides a whole run of equal confidences: consider the last index of each run
    last = np.flatnonzero(np.append(sorted_conf[1:] != sorted_conf[:-1], True))
    decided = last + 1
    accuracy = hits[last] / decided
    ok = np.flatnonzero(accuracy >= target - 1e-12)
    found = ok.size > 0
    k = int(ok[-1]) if found else int(np.argmax(accuracy))
    return {"target": float(target), "threshold": float(sorted_conf[last[k]]) if found else None,
            "decided": int(decided[k]), "coverage": float(decided[k] / n), "accuracy": float(accuracy[k])}


# ---------------------------------------------------------------- one record for a model


def check_probability(option: str, value) -> float:
    """A probability threshold strictly between 0 and 1 (``--min-probability``, ``--target-accuracy``)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value < 1:
        raise ConfigError(option, value, "must be a probability above 0 and below 1")
    return float(value)


def dev_temperature(scores: np.ndarray, y: np.ndarray) -> tuple[float, bool, bool]:
    """:func:`fit_temperature` on dev scores, and whether the dev set is ``separated``: its NLL
    only falls as T -> 0, so it cannot say how sharp to be, and T stays 1. Returns
    ``(temperature, at_bound, separated)``."""
    temperature, at_bound = fit_temperature(scores, y)
    separated = at_bound and temperature == TEMPERATURE_BOUNDS[0]
    return (1.0 if separated else temperature), at_bound, separated


def calibration_record(scores: np.ndarray, y: np.ndarray, bins: int = ECE_BINS) -> dict:
    """Fit a temperature on dev scores and describe the fit, JSON-ready.

    Returns
    -------
    dict: ``method`` ("temperature"), ``temperature``, ``at_bound`` (the minimum lies on an end of
    ``bounds``), ``separated`` (the dev NLL keeps falling as T goes to 0, as when every dev document
    is right by a wide margin: then nothing can be fitted and T stays 1), ``bounds``, ``documents``,
    ``nll_before`` / ``nll_after`` (dev NLL at T = 1 and at the fitted T), ``ece_before`` /
    ``ece_after`` and ``reliability_before`` / ``reliability_after`` (:func:`reliability` tables).
    """
    s = np.asarray(scores, dtype=np.float64)
    y = np.asarray(y, dtype=np.int64)
    temperature, at_bound, separated = dev_temperature(s, y)
    record = {"method": "temperature", "temperature": temperature, "at_bound": at_bound, "separated": separated,
              "bounds": list(TEMPERATURE_BOUNDS), "documents": int(len(y))}
    for when, t in (("before", 1.0), ("after", temperature)):
        record[f"nll_{when}"] = negative_log_likelihood(s, y, t)
        table = summary(s, y, t, bins)["reliability"]
        record[f"ece_{when}"] = ece_of(table)
        record[f"reliability_{when}"] = table
    return record


def summary(scores: np.ndarray, y: np.ndarray, temperature: float = 1.0, bins: int = ECE_BINS) -> dict:
    """Confidence of the predicted label under ``softmax(scores / temperature)``, against labels ``y``.

    The predicted label is the highest score's (so a temperature never changes it). Returns
    ``ece``, ``nll``, ``reliability``, ``coverage`` (:func:`coverage_curve`) and the arrays
    ``confidence`` and ``correct``.
    """
    s = np.asarray(scores, dtype=np.float64)
    y = np.asarray(y, dtype=np.int64)
    predicted = s.argmax(axis=1)
    confidence = probabilities(s, temperature)[np.arange(len(y)), predicted]
    correct = predicted == y
    table = reliability(confidence, correct, bins)
    return {"ece": ece_of(table), "nll": negative_log_likelihood(s, y, temperature), "reliability": table,
            "coverage": coverage_curve(confidence, correct), "confidence": confidence, "correct": correct}
