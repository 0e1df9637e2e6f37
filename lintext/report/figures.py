"""Figures of the report, drawn with matplotlib and returned as inline SVG text.

No pyplot (no global figure state, no GUI backend): each function builds a
:class:`matplotlib.figure.Figure`, and :func:`svg_text` turns it into an ``<svg>``
element with its own id prefix, text kept as text (``svg.fonttype = "none"``), no
metadata, no DOCTYPE and no namespace URLs, so the page references nothing outside
itself. A function returns ``None`` when the model lacks what the figure shows.
"""

from __future__ import annotations

import io
import math
import re
import warnings

import matplotlib as mpl
import numpy as np
from matplotlib.figure import Figure

from .stats import bin_bounds

INK = "#1d232b"
MUTED = "#4a5563"
GRID = "#dde2e7"
POINTS = "#6c8a99"
SERIES = ["#17656f", "#b35c00", "#7b3a78", "#33507a", "#5d6b12", "#a3342c", "#2f7d4f", "#8a5a14"]

STYLE = {
    "svg.fonttype": "none",
    "svg.hashsalt": "lintext-report",
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans", "Liberation Sans", "Arial", "Helvetica"],
    "font.size": 9.5,
    "axes.titlesize": 10.5,
    "axes.labelsize": 9.5,
    "axes.edgecolor": MUTED,
    "axes.labelcolor": INK,
    "axes.titlecolor": INK,
    "axes.grid": True,
    "grid.color": GRID,
    "grid.linewidth": 0.7,
    "axes.axisbelow": True,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": INK,
    "ytick.color": INK,
    "legend.frameon": False,
    "legend.fontsize": 8.5,
    "lines.linewidth": 1.8,
    "figure.facecolor": "white",
    "axes.facecolor": "white",
}


# One marker per meaning on every page: a ring is a best epoch, a star the best run, a cross a
# run that diverged.
BEST_EPOCH = {"marker": "o", "ms": 7, "mfc": "white", "mew": 1.6}
BEST_RUN = {"marker": "*", "ms": 16, "color": "gold", "mec": "black"}
DIVERGED = {"marker": "x", "ms": 9, "mew": 1.8}


def new_figure(width: float, height: float, ncols: int = 1, sharey: bool = False):
    """A constrained-layout figure (no pyplot) and its row of ``ncols`` axes."""
    fig = Figure(figsize=(width, height), layout="constrained")
    axes = fig.subplots(1, ncols, squeeze=False, sharey=sharey)[0]
    return fig, list(axes)


def svg_text(fig: Figure, prefix: str, title: str) -> str:
    """The figure as an inline ``<svg>`` element (ids prefixed with ``prefix``)."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.S)
    text = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", text)
    ids = set(re.findall(r'\sid="([^"]+)"', text))
    if ids:
        pattern = re.compile(r'(\sid="|#)(' + "|".join(re.escape(i) for i in sorted(ids, key=len, reverse=True)) + r')(?=["\)])')
        text = pattern.sub(lambda m: f"{m.group(1)}{prefix}-{m.group(2)}", text)
    size = re.match(r'<svg([^>]*?)\swidth="([\d.]+)pt"\s+height="([\d.]+)pt"', text)
    if size:
        width = float(size.group(2))
        text = re.sub(r'\swidth="[\d.]+pt"\s+height="[\d.]+pt"',
                      f' class="figure" role="img" style="max-width:{width:.0f}pt"', text, count=1)
    text = text.replace("<svg", f'<svg aria-label="{_attr(title)}"', 1)
    return text.strip()


def _attr(text: str) -> str:
    return text.replace("&", "&amp;").replace('"', "&quot;").replace("<", "&lt;")


def render(build, prefix: str, title: str, *args, **kwargs) -> str | None:
    """``build(*args, **kwargs)`` drawn in the report's style and returned as inline SVG
    (``None`` when ``build`` returns ``None``: nothing to show)."""
    with mpl.rc_context(STYLE), warnings.catch_warnings():
        # Labels in scripts the measuring font lacks (Japanese, emoji) would warn once per glyph;
        # the SVG keeps them as text (svg.fonttype none), and the browser draws them with its fonts.
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .*missing from", category=UserWarning)
        fig = build(*args, **kwargs)
        if fig is None:
            return None
        return svg_text(fig, prefix, title)


def _finite(values) -> np.ndarray:
    return np.array([math.nan if v is None else float(v) for v in values], dtype=np.float64)


def _epoch_axis(ax, epochs):
    ax.set_xlabel("epoch")
    epochs = [int(e) for e in epochs]
    if len(epochs) and max(epochs) - min(epochs) < 3:
        ax.set_xticks(range(min(epochs), max(epochs) + 1))
        ax.set_xlim(min(epochs) - 0.5, max(epochs) + 0.5)
    else:
        ax.xaxis.set_major_locator(mpl.ticker.MaxNLocator(integer=True))


def _tick(value, _pos=None) -> str:
    return f"{value:g}"


def plain_log(ax, axis: str = "y") -> None:
    """Log-axis tick labels as plain numbers (``0.2``, ``5``, ``100``), minor ones labelled on short spans."""
    target = ax.yaxis if axis == "y" else ax.xaxis
    lo, hi = ax.get_ylim() if axis == "y" else ax.get_xlim()
    formatter = mpl.ticker.FuncFormatter(_tick)
    target.set_major_formatter(formatter)
    if lo > 0 and hi / lo < 40:
        target.set_minor_locator(mpl.ticker.LogLocator(subs=(2.0, 5.0)))
        target.set_minor_formatter(formatter)
    else:
        target.set_minor_formatter(mpl.ticker.NullFormatter())


def _note(ax, text: str):
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color=MUTED)
    ax.set_xticks([])
    ax.set_yticks([])
    ax.grid(False)


# ---------------------------------------------------------------- one model


def learning_curves(history: list, best_epoch: int | None, loss_name: str, prefix: str = "lc") -> str | None:
    """Loss (train, dev), dev accuracy and macro-F1, and the learning rate in effect, per epoch."""
    return render(_learning_curves, prefix, "Learning curves", history, best_epoch, loss_name)


def _learning_curves(history, best_epoch, loss_name):
    if not history:
        return None
    epochs = np.array([row.get("epoch", i + 1) for i, row in enumerate(history)])
    fig, (ax_loss, ax_metric, ax_lr) = new_figure(10.5, 3.3, 3)
    train = _finite(row.get("train_loss") for row in history)
    dev = _finite(row.get("dev_loss") for row in history)
    ax_loss.plot(epochs, train, color=SERIES[0], marker="o", ms=3, label="train")
    if np.isfinite(dev).any():
        ax_loss.plot(epochs, dev, color=SERIES[1], marker="s", ms=3, ls="--", label="dev")
    weighted = "weighted " if any(row.get("weighted_loss") for row in history) else ""
    ax_loss.set_ylabel(f"{weighted}mean {loss_name} loss")
    ax_loss.set_title("Loss")
    ax_loss.legend()
    acc = _finite(row.get("dev_accuracy") for row in history)
    f1 = _finite(row.get("dev_macro_f1") for row in history)
    if np.isfinite(acc).any() or np.isfinite(f1).any():
        ax_metric.plot(epochs, acc, color=SERIES[2], marker="o", ms=3, label="accuracy")
        ax_metric.plot(epochs, f1, color=SERIES[3], marker="s", ms=3, ls="--", label="macro-F1")
        ax_metric.set_ylabel("dev score")
        ax_metric.legend()
    else:
        _note(ax_metric, "no dev set:\nno dev scores")
    ax_metric.set_title("Dev scores")
    lr = _finite(row.get("learning_rate") for row in history)
    if np.isfinite(lr).any():
        ax_lr.plot(epochs, lr, color=SERIES[4], marker="o", ms=3, drawstyle="steps-mid")
        positive = lr[np.isfinite(lr) & (lr > 0)]
        if positive.size and positive.max() / positive.min() > 20:
            ax_lr.set_yscale("log")
            plain_log(ax_lr)
            ax_lr.set_ylabel("learning rate in effect (log scale)")
        else:
            top = float(np.nanmax(lr)) if np.isfinite(lr).any() else 1.0
            ax_lr.set_ylim(0, top * 1.25 if top > 0 else 1.0)
            ax_lr.set_ylabel("learning rate in effect")
    else:
        _note(ax_lr, "no learning rate recorded")
    ax_lr.set_title("Learning rate")
    at = [i for i, e in enumerate(epochs) if e == best_epoch]
    for ax in (ax_loss, ax_metric, ax_lr):
        if not ax.has_data():
            continue
        _epoch_axis(ax, epochs)
        if at:  # a ring on every curve at the best epoch
            for line in list(ax.get_lines()):
                y = line.get_ydata()
                if len(y) == len(epochs) and np.isfinite(y[at[0]]):
                    ax.plot([best_epoch], [y[at[0]]], color=line.get_color(), ls="none", **BEST_EPOCH)
    if at and ax_loss.has_data():
        ax_loss.plot([], [], color=MUTED, ls="none", label=f"best epoch ({best_epoch})", **BEST_EPOCH)
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
        ax.set_title(title)
        ok = np.flatnonzero(usable(values))
        if ok.size == 0:
            _note(ax, missing)
            continue
        shown = np.sort(rng.choice(ok, size=sample, replace=False)) if ok.size > sample else ok
        jitter = np.exp(rng.uniform(-0.18, 0.18, size=shown.size))
        ax.scatter(df[shown] * jitter, values[shown], s=5, color=POINTS, alpha=0.35, linewidths=0,
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
        ax.fill_between(centres, q25, q75, color=SERIES[0], alpha=0.18, linewidth=0, label="middle half per bin")
        ax.plot(centres, med, color=SERIES[0], marker="o", ms=4, label="median per frequency bin")
        ax.set_xscale("log")
        ax.set_yscale("log")
        plain_log(ax, "x")
        plain_log(ax, "y")
        ax.set_xlabel("document frequency in training (log scale, jittered)")
        ax.set_ylabel(ylabel)
        ax.legend(loc="best")
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
    x = np.arange(len(rows))
    med = np.array([r["median_effective_step"] for r in rows])
    lo = med - np.array([r["effective_step_q25"] for r in rows])
    hi = np.array([r["effective_step_q75"] for r in rows]) - med
    ax.errorbar(x, med, yerr=[lo, hi], color=SERIES[2], marker="o", ms=5, capsize=3, lw=1.6)
    ax.set_xticks(x, [r["label"] for r in rows], rotation=40 if crowded else 0, ha="right" if crowded else "center")
    top = float((med + hi).max())
    bottom = float((med - lo).min())
    if bottom > 0 and top / bottom > 20:
        ax.set_yscale("log")
        plain_log(ax)
        ax.set_ylabel("effective step (log scale)")
    else:
        ax.set_ylim(0, top * 1.2 if top > 0 else 1.0)  # from zero, so a flat line reads as flat
        ax.set_ylabel("effective step")
    ax.set_xlabel("document frequency bin (training documents)")
    ax.set_title("Final effective step per feature, median and interquartile range")
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
            ax_u.fill_between(x, low, [r["update_q75"] for r in rows],
                              color=colour, alpha=0.12, linewidth=0)
            ax_u.plot(x, [r["median_update"] for r in rows], color=colour, marker="o", ms=4, label=name)
        steps = [r for r in bins if np.isfinite(r["median_effective_step"]) and r["median_effective_step"] > 0]
        if steps:
            any_step = True
            ax_s.plot([math.sqrt(r["low"] * r["high"]) for r in steps], [r["median_effective_step"] for r in steps],
                      color=colour, marker="o", ms=4, label=name)
    ax_u.set_xscale("log")
    ax_u.set_yscale("log")
    plain_log(ax_u, "x")
    plain_log(ax_u, "y")
    ax_u.set_xlabel("document frequency in training (log scale)")
    ax_u.set_ylabel("median sum of |Δw| per feature (log scale)")
    ax_u.set_title("Update magnitude per frequency bin")
    ax_u.legend()
    if any_step:
        ax_s.set_xscale("log")
        ax_s.set_yscale("log")
        plain_log(ax_s, "x")
        plain_log(ax_s, "y")
        ax_s.set_xlabel("document frequency in training (log scale)")
        ax_s.set_ylabel("median effective step (log scale)")
        ax_s.legend()
    else:
        _note(ax_s, "no effective steps recorded")
    ax_s.set_title("Final effective step per frequency bin")
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
    fig = Figure(figsize=(10.5, 3.6 if n_panels <= 3 else 6.6), layout="constrained")
    grid = fig.subplots(1 if n_panels <= 3 else 2, 3 if n_panels <= 3 else 2, squeeze=False).ravel().tolist()
    loss_axes = dict(zip(losses, grid[:len(losses)]))
    ax_acc, ax_lr = grid[len(losses)], grid[len(losses) + 1]
    any_dev = any_lr = False
    all_epochs = []
    handles = []
    for k, (name, history, best, loss) in enumerate(series):
        if not history:
            continue
        colour = SERIES[k % len(SERIES)]
        epochs = np.array([row.get("epoch", i + 1) for i, row in enumerate(history)])
        all_epochs += epochs.tolist()
        ax_loss = loss_axes[loss]
        (line,) = ax_loss.plot(epochs, _finite(r.get("train_loss") for r in history), color=colour, label=name)
        handles.append(line)
        dev = _finite(r.get("dev_loss") for r in history)
        if np.isfinite(dev).any():
            ax_loss.plot(epochs, dev, color=colour, ls="--")
        acc = _finite(r.get("dev_accuracy") for r in history)
        if np.isfinite(acc).any():
            any_dev = True
            ax_acc.plot(epochs, acc, color=colour, marker="o", ms=3)
            at = [i for i, e in enumerate(epochs) if e == best] if best else []
            if at:
                ax_acc.plot([best], [acc[at[0]]], color=colour, ls="none", **BEST_EPOCH)
        lr = _finite(r.get("learning_rate") for r in history)
        if np.isfinite(lr).any() and (lr[np.isfinite(lr)] > 0).all():
            any_lr = True
            ax_lr.plot(epochs, lr, color=colour, drawstyle="steps-mid")
    for loss, ax in loss_axes.items():
        ax.set_ylabel(f"mean {loss} loss")
        ax.set_title(f"{loss.capitalize()} loss (solid: train, dashed: dev)")
    if any_dev:
        ax_acc.set_ylabel("dev accuracy")
        ax_acc.set_title("Dev accuracy (ring: best epoch)")
    else:
        _note(ax_acc, "no dev set")
        ax_acc.set_title("Dev accuracy")
    if any_lr:
        ax_lr.set_yscale("log")
        plain_log(ax_lr)
        ax_lr.set_ylabel("learning rate in effect (log scale)")
    else:
        _note(ax_lr, "no learning rate recorded")
    ax_lr.set_title("Learning rate")
    for ax in grid[:len(losses) + 2]:
        if ax.has_data():
            _epoch_axis(ax, all_epochs)
    for ax in grid[len(losses) + 2:]:
        ax.set_visible(False)
    fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 4))
    return fig
