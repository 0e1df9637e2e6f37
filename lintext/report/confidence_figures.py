"""Figures of how sure a model is: reliability diagrams before and after calibration, and the
share of documents decided against the accuracy on them (routing). Inline SVG, as
:mod:`lintext.report.figures` draws them; ``None`` when there is nothing to show."""

from __future__ import annotations

import numpy as np

from .figures import INK, MUTED, SERIES, new_figure, render

MARKED = (0.5, 0.8, 0.9, 0.95)  # thresholds named on the coverage curve


def reliability(panels: list, prefix: str = "rd") -> str | None:
    """Reliability diagrams side by side.

    ``panels``: list of ``(title, series)``, ``series`` a list of ``(name, table)`` with ``table``
    a :func:`lintext.confidence.reliability` table and ``name`` its legend entry.
    """
    return render(_reliability, prefix, "Reliability diagrams before and after calibration", panels)


def _reliability(panels):
    if not any(table for _, series in panels for _, table in series):
        return None
    fig, axes = new_figure(10.5, 4.0, len(panels), sharey=True)
    for ax, (title, series) in zip(axes, panels):
        ax.line([0, 1], [0, 1], MUTED, style=":", width=1.2, label="perfect calibration")
        for k, (name, table) in enumerate(series):
            if not table:
                continue
            count = np.array(table["count"], dtype=float)
            keep = count > 0
            conf = np.array(table["confidence"], dtype=float)[keep]
            acc = np.array(table["accuracy"], dtype=float)[keep]
            size = 2 * np.sqrt((12 + 160 * count[keep] / count.sum()) / np.pi)  # a disc's area grows with its documents
            ax.line(conf, acc, SERIES[k], width=1.4, style="-" if k == 0 else "--")
            ax.scatter(conf, acc, SERIES[k], size=size, alpha=0.85, edge="white", label=name)
        edges = np.linspace(0, 1, (len(series[0][1]["count"]) if series and series[0][1] else 15) + 1)
        ax.xticks = (edges[::3].tolist(), [f"{v:g}" for v in edges[::3]])
        ax.square = True
        ax.set(xlim=(0, 1.02), ylim=(0, 1.02), xlabel="mean probability of the predicted label, per bin", title=title)
        ax.legend("upper left", size=8)
    axes[0].set(ylabel="accuracy in the bin")
    return fig


def coverage(series: list, prefix: str = "cv") -> str | None:
    """Share of documents decided against the accuracy on them, and both against the threshold.

    ``series``: list of ``(name, curve)``, ``curve`` a :func:`lintext.confidence.coverage_curve`.
    """
    return render(_coverage, prefix, "Documents decided against accuracy, by probability threshold", series)


def _coverage(series):
    series = [(name, curve) for name, curve in series if curve and curve.get("documents")]
    if not series:
        return None
    fig, (ax_c, ax_t) = new_figure(10.5, 3.9, 2)
    for k, (name, curve) in enumerate(series):
        t = np.array(curve["threshold"], dtype=float)
        decided = np.array(curve["decided"], dtype=float)
        correct = np.array(curve["correct"], dtype=float)
        share = decided / curve["documents"]
        with np.errstate(invalid="ignore", divide="ignore"):
            acc = np.where(decided > 0, correct / np.maximum(decided, 1), np.nan)
        colour = SERIES[k]
        ax_c.line(share, acc, colour, steps="post", label=name)
        for m, mark in enumerate(MARKED):
            i = int(np.argmin(np.abs(t - mark)))
            if decided[i] > 0:
                ax_c.markers([share[i]], [acc[i]], colour, "ring", size=6, width=1.4)
                if k == 0:  # labels alternate above-left and below-right of the ring (the x axis runs right to left)
                    ax_c.text(share[i], acc[i], f"≥ {mark:g}", dx=-7 if m % 2 == 0 else 7, dy=7 if m % 2 == 0 else -12,
                              anchor="end" if m % 2 == 0 else "start", size=8, colour=INK)
        ax_t.line(t, share, colour, label=f"{name}: share decided")
        ax_t.line(t, acc, colour, style="--", label=f"{name}: accuracy on decided")
    # from everything decided on the left to little decided on the right
    ax_c.set(xlim=(1.02, -0.02), xlabel="share of documents decided (coverage)", ylabel="accuracy on the documents decided",
             title="Accuracy against coverage (rings: thresholds)")
    ax_c.legend("lower right")
    ax_t.set(xlim=(0, 1), ylim=(0, 1.02), xlabel="threshold on the best probability", ylabel="share / accuracy",
             title="Against the threshold")
    ax_t.legend("lower left", size=7.5)
    return fig
