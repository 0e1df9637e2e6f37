"""Figures of the report, returned as inline SVG text (drawn by :mod:`lintext.report.svgplot`).

Each function builds a :class:`~lintext.report.svgplot.Chart` and :func:`render` writes it as an
``<svg>`` element with its own id prefix, text kept as text, no metadata and no external
references, so the page references nothing outside itself. A function returns ``None`` when the
model lacks what the figure shows.
"""

from __future__ import annotations

import math

import numpy as np

from .stats import bin_bounds
from .svgdraw import INK, MUTED  # noqa: F401  (INK: the other figure modules' colour)
from .svgplot import Chart

POINTS = "#6c8a99"
SERIES = ["#17656f", "#b35c00", "#7b3a78", "#33507a", "#5d6b12", "#a3342c", "#2f7d4f", "#8a5a14"]

# One marker per meaning on every page: a ring is a best epoch, a star the best run, a cross a
# run that diverged.
BEST_EPOCH = {"kind": "ring", "size": 7, "width": 1.6}
BEST_RUN = {"kind": "*", "size": 16, "edge": "black"}
DIVERGED = {"kind": "x", "size": 9, "width": 1.8}
GOLD = "#e3b505"


def new_figure(width: float, height: float, ncols: int = 1, sharey: bool = False):
    """A chart of ``width`` x ``height`` inches and its row of ``ncols`` panels."""
    chart = Chart(width, height, 1, ncols, share_y=sharey)
    return chart, list(chart.panels)


def render(build, prefix: str, title: str, *args, **kwargs) -> str | None:
    """``build(*args, **kwargs)`` (a :class:`Chart`) as inline SVG with ids prefixed by ``prefix``
    (``None`` when ``build`` returns ``None``: nothing to show)."""
    chart = build(*args, **kwargs)
    return None if chart is None else chart.svg(prefix, title)


def _finite(values) -> np.ndarray:
    return np.array([math.nan if v is None else float(v) for v in values], dtype=np.float64)


def _epoch_axis(ax, epochs):
    ax.xlabel = "epoch"
    epochs = [int(e) for e in epochs]
    ax.integer_x = True
    if len(epochs) and max(epochs) - min(epochs) < 3:
        ax.xticks = (list(range(min(epochs), max(epochs) + 1)), [str(e) for e in range(min(epochs), max(epochs) + 1)])
        ax.xlim = (min(epochs) - 0.5, max(epochs) + 0.5)


# ---------------------------------------------------------------- one model


def learning_curves(history: list, best_epoch: int | None, loss_name: str, prefix: str = "lc") -> str | None:
    """Loss (train, dev), dev accuracy and macro-F1, and the learning rate in effect, per epoch."""
    return render(_learning_curves, prefix, "Learning curves", history, best_epoch, loss_name)


def _learning_curves(history, best_epoch, loss_name):
    if not history:
        return None
    epochs = np.array([row.get("epoch", i + 1) for i, row in enumerate(history)], dtype=np.float64)
    fig, (ax_loss, ax_metric, ax_lr) = new_figure(10.5, 3.3, 3)
    at = [i for i, e in enumerate(epochs) if e == best_epoch]
    curves = {ax_loss: [], ax_metric: [], ax_lr: []}  # (values, colour) of each curve, for the best-epoch rings
    train = _finite(row.get("train_loss") for row in history)
    dev = _finite(row.get("dev_loss") for row in history)
    ax_loss.line(epochs, train, SERIES[0], marker="o", size=5, label="train")
    curves[ax_loss].append((train, SERIES[0]))
    if np.isfinite(dev).any():
        ax_loss.line(epochs, dev, SERIES[1], style="--", marker="s", size=5, label="dev")
        curves[ax_loss].append((dev, SERIES[1]))
    weighted = "weighted " if any(row.get("weighted_loss") for row in history) else ""
    ax_loss.set(title="Loss", ylabel=f"{weighted}mean {loss_name} loss")
    acc = _finite(row.get("dev_accuracy") for row in history)
    f1 = _finite(row.get("dev_macro_f1") for row in history)
    if np.isfinite(acc).any() or np.isfinite(f1).any():
        ax_metric.line(epochs, acc, SERIES[2], marker="o", size=5, label="accuracy")
        ax_metric.line(epochs, f1, SERIES[3], style="--", marker="s", size=5, label="macro-F1")
        curves[ax_metric] += [(acc, SERIES[2]), (f1, SERIES[3])]
        ax_metric.set(ylabel="dev score")
        ax_metric.legend()
    else:
        ax_metric.note("no dev set:\nno dev scores")
    ax_metric.set(title="Dev scores")
    lr = _finite(row.get("learning_rate") for row in history)
    if np.isfinite(lr).any():
        ax_lr.line(epochs, lr, SERIES[4], steps="mid")
        ax_lr.markers(epochs, lr, SERIES[4], "o", size=5)
        curves[ax_lr].append((lr, SERIES[4]))
        positive = lr[np.isfinite(lr) & (lr > 0)]
        if positive.size and positive.max() / positive.min() > 20:
            ax_lr.set(yscale="log", ylabel="learning rate in effect (log scale)")
        else:
            top = float(np.nanmax(lr))
            ax_lr.set(ylim=(0, top * 1.25 if top > 0 else 1.0), ylabel="learning rate in effect")
    else:
        ax_lr.note("no learning rate recorded")
    ax_lr.set(title="Learning rate")
    for ax, drawn in curves.items():
        if not drawn:
            continue
        _epoch_axis(ax, epochs)
        if at:  # a ring on every curve at the best epoch
            for values, colour in drawn:
                if np.isfinite(values[at[0]]):
                    ax.markers([best_epoch], [values[at[0]]], colour, **BEST_EPOCH)
    if at and curves[ax_loss]:
        ax_loss.legend_entries.append(dict(label=f"best epoch ({best_epoch})", colour=MUTED, style=None, marker="ring"))
    ax_loss.legend()
    return fig


def frequency_updates(table: dict, bins: list, sample: int = 1500, prefix: str = "fu") -> str | None:
    """Document frequency against sum |Δw| and against the final weight norm, log axes."""
    return render(_frequency_updates, prefix, "Document frequency against update magnitude and weight norm", table, bins, sample)


def _frequency_updates(table, bins, sample):
    df = np.asarray(table["document_frequency"], dtype=np.float64)
    upd = np.asarray(table["abs_update_sum"], dtype=np.float64)
    norm = np.asarray(table["weight_norm"], dtype=np.float64)
    usable = lambda values: (df >= 1) & np.isfinite(values) & (values > 0)  # noqa: E731
    if not usable(upd).any() and not usable(norm).any():
        return None
    fig, (ax_u, ax_w) = new_figure(10.5, 3.9, 2)
    rng = np.random.default_rng(0)
    panels = [
        (ax_u, upd, "sum of |Δw| over training (log scale)", "Update magnitude",
         "no gradient-step updates recorded\n(L-BFGS, or no update statistics)"),
        (ax_w, norm, "final weight norm, centred across labels (log scale)", "Final weight", "all weights are zero"),
    ]
    for ax, values, ylabel, title, missing in panels:
        ax.set(title=title)
        ok = np.flatnonzero(usable(values))
        if ok.size == 0:
            ax.note(missing)
            continue
        shown = np.sort(rng.choice(ok, size=sample, replace=False)) if ok.size > sample else ok
        jitter = np.exp(rng.uniform(-0.18, 0.18, size=shown.size))
        ax.scatter(df[shown] * jitter, values[shown], POINTS, size=2.6, alpha=0.35,
                   label=f"features ({shown.size:,} of {ok.size:,} shown)" if shown.size < ok.size else "features")
        centres, med, q25, q75 = [], [], [], []
        for row in bins:
            members = values[(table["frequency_bin"] == row["bin"]) & usable(values)]
            if members.size == 0:
                continue
            lo, hi = bin_bounds(row["bin"])
            centres.append(math.sqrt(lo * hi))
            q = np.percentile(members, [25, 50, 75])
            q25.append(q[0]), med.append(q[1]), q75.append(q[2])
        ax.band(centres, q25, q75, SERIES[0], alpha=0.18, label="middle half per bin")
        ax.line(centres, med, SERIES[0], marker="o", size=6, label="median per frequency bin")
        ax.set(xscale="log", yscale="log", xlabel="document frequency in training (log scale, jittered)", ylabel=ylabel)
        ax.legend("best")
    return fig


def effective_steps(bins: list, prefix: str = "es") -> str | None:
    """Median effective step per frequency bin, with interquartile bars."""
    return render(_effective_steps, prefix, "Effective step per frequency bin", bins)


def _effective_steps(bins):
    rows = [r for r in bins if np.isfinite(r["median_effective_step"])]
    if not rows:
        return None
    crowded = len(rows) > 7
    fig, (ax,) = new_figure(6.8 + (0.35 * (len(rows) - 7) if crowded else 0), 3.6 if crowded else 3.3)
    x = np.arange(len(rows), dtype=np.float64)
    med = np.array([r["median_effective_step"] for r in rows])
    q25 = np.array([r["effective_step_q25"] for r in rows])
    q75 = np.array([r["effective_step_q75"] for r in rows])
    ax.errorbar(x, med, q25, q75, SERIES[2], marker="o", size=7, width=1.6)
    ax.xticks = (x.tolist(), [r["label"] for r in rows])
    ax.xtick_rotation = 40 if crowded else 0
    ax.xlim = (-0.5, len(rows) - 0.5)
    top, bottom = float(q75.max()), float(q25.min())
    if bottom > 0 and top / bottom > 20:
        ax.set(yscale="log", ylabel="effective step (log scale)")
    else:
        ax.set(ylim=(0, top * 1.2 if top > 0 else 1.0), ylabel="effective step")  # from zero: a flat line reads as flat
    ax.set(xlabel="document frequency bin (training documents)",
           title="Final effective step per feature, median and interquartile range")
    return fig


# ---------------------------------------------------------------- several models


def compare_frequency(series: list, prefix: str = "cf") -> str | None:
    """Median sum |Δw| (with interquartile band) and median effective step per bin, one line per model.

    ``series``: list of ``(name, bins)``.
    """
    return render(_compare_frequency, prefix, "Update magnitude and effective step per frequency bin, by model", series)


def _compare_frequency(series):
    if not any(r["median_update"] > 0 for _, bins in series for r in bins):  # NaN compares False
        return None
    fig, (ax_u, ax_s) = new_figure(10.5, 3.9, 2)
    any_step = False
    for k, (name, bins) in enumerate(series):
        colour = SERIES[k % len(SERIES)]
        rows = [r for r in bins if np.isfinite(r["median_update"]) and r["median_update"] > 0]
        if rows:
            x = [math.sqrt(r["low"] * r["high"]) for r in rows]
            low = [r["update_q25"] if r["update_q25"] > 0 else r["median_update"] for r in rows]
            ax_u.band(x, low, [r["update_q75"] for r in rows], colour, alpha=0.12)
            ax_u.line(x, [r["median_update"] for r in rows], colour, marker="o", size=6, label=name)
        steps = [r for r in bins if np.isfinite(r["median_effective_step"]) and r["median_effective_step"] > 0]
        if steps:
            any_step = True
            ax_s.line([math.sqrt(r["low"] * r["high"]) for r in steps], [r["median_effective_step"] for r in steps],
                      colour, marker="o", size=6, label=name)
    ax_u.set(xscale="log", yscale="log", xlabel="document frequency in training (log scale)",
             ylabel="median sum of |Δw| per feature (log scale)", title="Update magnitude per frequency bin")
    ax_u.legend()
    if any_step:
        ax_s.set(xscale="log", yscale="log", xlabel="document frequency in training (log scale)",
                 ylabel="median effective step (log scale)")
        ax_s.legend()
    else:
        ax_s.note("no effective steps recorded")
    ax_s.set(title="Final effective step per frequency bin")
    return fig


def compare_learning(series: list, prefix: str = "cl") -> str | None:
    """Train and dev loss, dev accuracy and learning rate per epoch, one colour per model.

    ``series``: list of ``(name, history, best_epoch, loss_name)``.
    """
    return render(_compare_learning, prefix, "Learning curves, by model", series)


def _compare_learning(series):
    """One loss panel per loss (softmax and hinge losses are on different scales), then dev
    accuracy and the learning rate; one legend for the whole figure, below it, so no legend
    covers a line and every model is named once."""
    if not any(history for _, history, _, _ in series):
        return None
    losses = sorted({loss for _, history, _, loss in series if history})
    n_panels = len(losses) + 2
    rows, cols = (1, 3) if n_panels <= 3 else (2, 2)
    fig = Chart(10.5, 3.6 if n_panels <= 3 else 6.6, rows, cols)
    grid = fig.panels
    loss_axes = dict(zip(losses, grid[:len(losses)]))
    ax_acc, ax_lr = grid[len(losses)], grid[len(losses) + 1]
    any_dev = any_lr = False
    all_epochs = []
    handles = []
    for k, (name, history, best, loss) in enumerate(series):
        if not history:
            continue
        colour = SERIES[k % len(SERIES)]
        epochs = np.array([row.get("epoch", i + 1) for i, row in enumerate(history)], dtype=np.float64)
        all_epochs += epochs.tolist()
        ax_loss = loss_axes[loss]
        ax_loss.line(epochs, _finite(r.get("train_loss") for r in history), colour)
        handles.append(dict(label=name, colour=colour, style="-", marker=None))
        dev = _finite(r.get("dev_loss") for r in history)
        if np.isfinite(dev).any():
            ax_loss.line(epochs, dev, colour, style="--")
        acc = _finite(r.get("dev_accuracy") for r in history)
        if np.isfinite(acc).any():
            any_dev = True
            ax_acc.line(epochs, acc, colour, marker="o", size=5)
            at = [i for i, e in enumerate(epochs) if e == best] if best else []
            if at:
                ax_acc.markers([best], [acc[at[0]]], colour, **BEST_EPOCH)
        lr = _finite(r.get("learning_rate") for r in history)
        if np.isfinite(lr).any() and (lr[np.isfinite(lr)] > 0).all():
            any_lr = True
            ax_lr.line(epochs, lr, colour, steps="mid")
    for loss, ax in loss_axes.items():
        ax.set(ylabel=f"mean {loss} loss", title=f"{loss.capitalize()} loss (solid: train, dashed: dev)")
    if any_dev:
        ax_acc.set(ylabel="dev accuracy", title="Dev accuracy (ring: best epoch)")
    else:
        ax_acc.note("no dev set")
        ax_acc.set(title="Dev accuracy")
    if any_lr:
        ax_lr.set(yscale="log", ylabel="learning rate in effect (log scale)")
    else:
        ax_lr.note("no learning rate recorded")
    ax_lr.set(title="Learning rate")
    for ax in grid[:len(losses) + 2]:
        if ax.has_data():
            _epoch_axis(ax, all_epochs)
    for k in range(len(losses) + 2, len(grid)):
        fig.hide(k)
    fig.legend_below(handles)
    return fig
