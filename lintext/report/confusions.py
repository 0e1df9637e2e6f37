"""The report's confusion section: most confused pairs, a matrix or heat view, per-label scores.

Up to :data:`MATRIX_MAX_LABELS` labels the matrix is drawn with its counts in the cells. Beyond,
one text per cell would neither read nor stay cheap (58 labels are 3,364 cells), so the page
shows the most confused pairs as a table and a *heat view*: one image of the share of each true
label's documents predicted as each other label, the diagonal left grey, labels reordered so that
labels confused with each other sit together (average-linkage clustering of the symmetrised
shares, leaves in SciPy's optimal order). The heat view keeps its labels legible by showing at
most :data:`HEAT_MAX_LABELS` labels: those involved in the most errors. The full matrix is
written as ``confusion.csv`` beside the page (:func:`write_confusion_csv`).
"""

from __future__ import annotations

import csv
import os
from html import escape
from pathlib import Path

import numpy as np

from ..engine.metrics import AVERAGE_NOTE, confused_pairs
from ..files import atomic_file
from . import figures
from .svgdraw import blend
from .layout import figure_block, fmt, pct, table
from .leaf_order import average_linkage, optimal_leaf_order

MATRIX_MAX_LABELS = 12
HEAT_MAX_LABELS = 60
PAIRS_SHOWN = 20
CSV_NAME = "confusion.csv"

GUIDE_MATRIX = ("Rows are the true labels and columns the predicted ones: the diagonal holds the correct predictions, "
                "and a dark cell off the diagonal names a pair of labels the model confuses.")
GUIDE_HEAT = ("Rows are true labels, columns predicted ones, in the same order; the colour of a cell is the share of "
              "the row label's documents predicted as the column label, the diagonal (correct predictions) is grey. "
              "Labels confused with each other are placed next to each other, so groups of confusable labels show "
              "as dark squares near the diagonal; the counts are in the table of pairs above and in confusion.csv.")


def evaluated_set(metrics: dict) -> str | None:
    """``"test"`` when the model's metrics hold a test confusion matrix, else ``"dev"`` when a dev one, else None."""
    for which in ("test", "dev"):
        if isinstance(metrics.get(which), dict) and metrics[which].get("confusion"):
            return which
    return None


def confusion_section(m: dict, labels: list, which: str) -> str:
    """HTML of the confusion section for the metrics ``m`` of the ``which`` set."""
    names = list(m.get("labels") or labels)
    counts = np.asarray(m.get("confusion"), dtype=np.int64)
    if counts.ndim != 2 or counts.shape != (len(names), len(names)):
        return '<p class="note">The confusion matrix could not be shown (its shape does not match the labels).</p>'
    pairs = confused_pairs(counts, names)
    parts = [f"<p>{escape(which.capitalize())} set: {fmt(int(counts.sum()))} documents, {fmt(len(names))} labels, "
             f"{fmt(int(counts.sum() - np.trace(counts)))} errors in {fmt(len(pairs))} distinct pairs. "
             f"The full matrix (rows true, columns predicted) is in <code>{CSV_NAME}</code> beside this page.</p>"]
    if pairs:
        rows = [[escape(p["true"]), escape(p["predicted"]), fmt(p["count"]), pct(p["share"])] for p in pairs[:PAIRS_SHOWN]]
        parts.append(f"<h3>The {min(PAIRS_SHOWN, len(pairs))} most confused pairs</h3>"
                     + table(["true label", "predicted as", "documents", "share of the true label"], rows, {2, 3}))
    if len(names) <= MATRIX_MAX_LABELS:
        parts.append(figure_block(figures.render(_matrix, "cm", f"Confusion matrix on the {which} set", counts, names, which),
                                  GUIDE_MATRIX, "The confusion matrix could not be drawn."))
    else:
        shown = heat_labels(counts)
        if len(shown) < len(names):
            parts.append(f'<p class="muted">The heat view shows the {len(shown)} labels involved in the most errors '
                         f"(of {len(names)}), so that its labels stay legible; every label is in {CSV_NAME} and in the "
                         "table below.</p>")
        parts.append(figure_block(
            figures.render(_heat, "cm", f"Confusions on the {which} set", counts, names, shown, which),
            GUIDE_HEAT, "No two labels are confused: there is nothing to draw."))
    parts.append(per_label_table(m, which))
    return "\n".join(parts)


def per_label_table(m: dict, which: str) -> str:
    """Per-label precision, recall (— where undefined), F1, documents, predictions; absent labels apart."""
    per = m.get("per_label")
    if not isinstance(per, dict):
        return ""
    undefined = lambda v, digits=3: "—" if v is None else fmt(v, digits)  # noqa: E731
    rows = [[escape(name) + ("" if v.get("known", True) else " <i>(unknown to the model)</i>"), undefined(v.get("precision")),
             undefined(v.get("recall")), fmt(v.get("f1"), 3), fmt(v.get("support")), fmt(v.get("predicted"))]
            for name, v in per.items()]
    out = f"<h3>Per label, {escape(which)} set</h3>" + table(
        ["label", "precision", "recall", "F1", "documents", "predicted"], rows, {1, 2, 3, 4, 5})
    if "averaged_over" in m:
        out += f'<p class="muted">{escape(AVERAGE_NOTE)}</p>'
    if m.get("absent_labels"):
        out += (f'<p class="muted">Not in the {escape(which)} data and never predicted, so left out of the averages: '
                f"{escape(', '.join(m['absent_labels']))}.</p>")
    return out


# ---------------------------------------------------------------- ordering


def heat_labels(counts, limit: int = HEAT_MAX_LABELS) -> np.ndarray:
    """Indices of the labels the heat view shows, in display order.

    At most ``limit`` labels: those with the most errors as true or predicted label (ties by
    index), ordered so that labels confused with each other are neighbours.
    """
    counts = np.asarray(counts, dtype=np.float64)
    off = counts - np.diag(np.diag(counts))
    involvement = off.sum(axis=0) + off.sum(axis=1)
    chosen = np.sort(np.lexsort((np.arange(len(counts)), -involvement))[:limit])
    return chosen[confusion_order(counts[np.ix_(chosen, chosen)])]


def confusion_order(counts) -> np.ndarray:
    """A permutation placing mutually confused labels together.

    Similarity of labels ``a`` and ``b``: ``s = share(a -> b) + share(b -> a)`` (shares of the
    true label's documents); distance ``1 - s / max(s)``; average-linkage clustering with the
    leaves in optimal order (Bar-Joseph, Gifford & Jaakkola 2001; :mod:`.leaf_order`).
    """
    counts = np.asarray(counts, dtype=np.float64)
    n = len(counts)
    if n < 3:
        return np.arange(n)
    support = counts.sum(axis=1, keepdims=True)
    share = np.divide(counts, support, out=np.zeros_like(counts), where=support > 0)
    sim = share + share.T
    np.fill_diagonal(sim, 0.0)
    top = sim.max()
    if top <= 0:
        return np.arange(n)
    dist = 1.0 - sim / top
    np.fill_diagonal(dist, 0.0)
    return optimal_leaf_order(average_linkage(dist), dist)


# ---------------------------------------------------------------- figures


MATRIX_STOPS = ["#ffffff", "#9fc9cf", figures.SERIES[0], "#0b343a"]
HEAT_STOPS = ["#ffffff", "#f3cf9c", "#d9793a", "#a3342c", "#3d0d18"]
DIAGONAL = "#c9d0d6"


def _matrix(counts, labels, which):
    """Small matrices: cell colour is the share of the true label (ten shades), text the count."""
    counts = np.asarray(counts, dtype=np.float64)
    n = len(labels)
    side = min(8.5, 2.6 + 0.62 * n)
    fig, (ax,) = figures.new_figure(side + 1.2, side)
    totals = counts.sum(axis=1, keepdims=True)
    share = np.divide(counts, totals, out=np.zeros_like(counts), where=totals > 0)
    shades = [blend(MATRIX_STOPS, (k + 0.5) / 10) for k in range(10)]
    level = np.minimum((share * 10).astype(np.int64), 9)
    ax.cells([[shades[v] for v in row] for row in level.tolist()], texts=counts.astype(np.int64).tolist(),
             text_colours=[["white" if v > 0.45 else figures.INK for v in row] for row in share.tolist()], gap=1.6)
    ax.xticks = (list(range(n)), [str(name) for name in labels])
    ax.yticks = (list(range(n)), [str(name) for name in labels])
    ax.xtick_rotation = 35
    ax.square = True
    ax.set(xlabel="predicted label", ylabel="true label", title=f"{which} set: counts; colour = share of the true label")
    fig.colour_scale(shades, [k / 5 for k in range(6)], [f"{k / 5:g}" for k in range(6)],
                     "share of the row (recall on the diagonal)")
    return fig


def _heat(counts, labels, shown, which):
    """Many labels: one coloured cell per pair (no text per cell), off-diagonal shares on their own colour scale."""
    counts = np.asarray(counts, dtype=np.float64)
    support = counts.sum(axis=1, keepdims=True)
    share = np.divide(counts, support, out=np.zeros_like(counts), where=support > 0)[np.ix_(shown, shown)]
    off = share.copy()
    np.fill_diagonal(off, np.nan)
    top = float(np.nanmax(off)) if np.isfinite(off).any() else 0.0
    if top <= 0:
        return None
    n = len(shown)
    cell = 0.15  # inches per label: 10.8 pt, room for 7.5-pt tick labels at the page's width
    side = max(4.0, cell * n)
    fig, (ax,) = figures.new_figure(side + 1.6, side + 2.2)
    steps = 32
    palette = [blend(HEAT_STOPS, k / (steps - 1)) for k in range(steps)]
    shares = np.nan_to_num(off / top, nan=0.0)
    level = np.where(shares > 0, np.maximum(1, np.rint(shares * (steps - 1))), 0).astype(np.int64)  # any confusion shows
    colours = [[palette[v] if v else None for v in row] for row in level.tolist()]  # white cells: the background
    for i in range(n):
        colours[i][i] = DIAGONAL
    ax.cells(colours)
    names = [str(labels[k]) for k in shown]
    ax.xticks = (list(range(n)), names)
    ax.yticks = (list(range(n)), names)
    ax.xtick_rotation = 90
    ax.tick_size = 7.5
    ax.square = True
    ax.set(xlabel="predicted label", ylabel="true label",
           title=f"{which} set: share of each true label predicted as another (diagonal grey)")
    ticks = [t for t in np.linspace(0, 1, 5)]
    fig.colour_scale(palette, ticks, [f"{t * top:.0%}" for t in ticks], "share of the row's documents", at="below")
    return fig


# ---------------------------------------------------------------- the full matrix


def write_confusion_csv(m: dict, labels: list, path: str | os.PathLike) -> Path | None:
    """The full confusion matrix as CSV: header ``true \\ predicted`` and the label names, one row per true label.

    Written atomically; ``None`` (nothing written) when ``m`` has no matrix of the right shape.
    """
    names = list(m.get("labels") or labels)
    counts = m.get("confusion")
    if not counts or len(counts) != len(names) or any(len(row) != len(names) for row in counts):
        return None

    def write(fh):
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(["true \\ predicted", *names])
        for name, row in zip(names, counts):
            writer.writerow([name, *(int(v) for v in row)])

    return atomic_file(Path(path), write)
