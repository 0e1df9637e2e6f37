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
        ax.plot([0, 1], [0, 1], color=MUTED, ls=":", lw=1.2, label="perfect calibration")
        for k, (name, table) in enumerate(series):
            if not table:
                continue
            count = np.array(table["count"], dtype=float)
            keep = count > 0
            conf = np.array([c for c, n in zip(table["confidence"], count) if n > 0], dtype=float)
            acc = np.array([a for a, n in zip(table["accuracy"], count) if n > 0], dtype=float)
            size = 12 + 160 * count[keep] / count.sum()
            ax.plot(conf, acc, color=SERIES[k], lw=1.4, ls="-" if k == 0 else "--")
            ax.scatter(conf, acc, s=size, color=SERIES[k], alpha=0.85, edgecolors="white", linewidths=0.6, label=name,
                       zorder=3)
        edges = np.linspace(0, 1, (len(series[0][1]["count"]) if series and series[0][1] else 15) + 1)
        ax.set_xticks(edges[::3])
        ax.set_xlim(0, 1.02)
        ax.set_ylim(0, 1.02)
        ax.set_aspect("equal")
        ax.set_xlabel("mean probability of the predicted label, per bin")
        ax.set_title(title)
        ax.legend(loc="upper left", fontsize=8)
    axes[0].set_ylabel("accuracy in the bin")
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
        ax_c.plot(share, acc, color=colour, drawstyle="steps-post", label=name)
        for m, mark in enumerate(MARKED):
            i = int(np.argmin(np.abs(t - mark)))
            if decided[i] > 0:
                ax_c.plot([share[i]], [acc[i]], "o", color=colour, ms=5, mfc="white", mew=1.4)
                if k == 0:  # labels alternate above-left and below-right of the ring
                    ax_c.annotate(f"≥ {mark:g}", (share[i], acc[i]), textcoords="offset points",
                                  xytext=(-7, 7) if m % 2 == 0 else (7, -12), ha="right" if m % 2 == 0 else "left",
                                  fontsize=8, color=INK)
        ax_t.plot(t, share, color=colour, label=f"{name}: share decided")
        ax_t.plot(t, acc, color=colour, ls="--", label=f"{name}: accuracy on decided")
    ax_c.set_xlim(1.02, -0.02)  # from everything decided on the left to little decided on the right
    ax_c.set_xlabel("share of documents decided (coverage)")
    ax_c.set_ylabel("accuracy on the documents decided")
    ax_c.set_title("Accuracy against coverage (rings: thresholds)")
    ax_c.legend(loc="lower right")
    ax_t.set_xlim(0, 1)
    ax_t.set_ylim(0, 1.02)
    ax_t.set_xlabel("threshold on the best probability")
    ax_t.set_ylabel("share / accuracy")
    ax_t.set_title("Against the threshold")
    ax_t.legend(loc="lower left", fontsize=7.5)
    return fig
