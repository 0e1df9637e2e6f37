"""``sweep.html``: the table of a sweep, its stop metric against the learning rate, and every run's
learning curve, in the report's layout.

The sweep table's columns are declared here once (:data:`SWEEP_COLUMNS`, :data:`SHOWN_COLUMNS`)
and read by the CSV file, the terminal and this page, so the three use the same headers.
Markers mean one thing on every page (:mod:`lintext.report.figures`): a ring is a best epoch,
a star the best run, a cross a divergence.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from . import figures
from .layout import figure_block, fmt, page, section, table
from .svgdraw import blend

VIRIDIS = ["#440154", "#3b528b", "#21918c", "#5ec962", "#fde725"]  # dark blue to yellow: larger rates lighter

# Every column of sweep.csv, in order; the terminal and the page show SHOWN_COLUMNS.
SWEEP_COLUMNS = ("run", "optimizer", "learning_rate", "status", "stop_metric", "stop_value", "dev_accuracy",
                 "dev_macro_f1", "dev_loss", "best_epoch", "epochs_run", "diverged_epoch", "seconds", "cpu_seconds",
                 "attempts")
SHOWN_COLUMNS = ("rank", "optimizer", "learning_rate", "status", "dev_loss", "dev_accuracy", "dev_macro_f1", "best_epoch",
                 "epochs_run", "seconds")
TEXT_COLUMNS = ("optimizer", "status", "stop_metric")
# The headers the terminal and the page show, spelled out (sweep.csv keeps the keys).
HEADERS = {"rank": "rank", "run": "run", "optimizer": "optimizer", "learning_rate": "learning rate", "status": "status",
           "stop_metric": "stop metric", "stop_value": "stop value", "dev_loss": "dev loss", "dev_accuracy": "dev accuracy",
           "dev_macro_f1": "dev macro-F1", "best_epoch": "best epoch", "epochs_run": "epochs run",
           "diverged_epoch": "diverged at epoch", "seconds": "seconds", "cpu_seconds": "processor seconds",
           "attempts": "attempts"}
METRIC_NAMES = {"dev-loss": "dev loss", "accuracy": "dev accuracy", "macro-f1": "dev macro-F1"}
METRIC_KEYS = {"dev-loss": "dev_loss", "accuracy": "dev_accuracy", "macro-f1": "dev_macro_f1"}


def ranked(rows: list, stop_metric: str) -> list:
    """The rows best first by ``stop_metric`` at each run's best epoch (lowest dev loss, highest
    accuracy or macro-F1; ties in grid order), runs without a value (diverged) last; each with its
    ``rank`` (from 1; None for runs without a value)."""
    sign = 1.0 if stop_metric == "dev-loss" else -1.0
    scored = [r for r in rows if r["stop_value"] is not None and math.isfinite(r["stop_value"])]
    scored.sort(key=lambda r: (sign * r["stop_value"], r["run"]))
    rest = [r for r in rows if r not in scored]
    return [{**r, "rank": k} for k, r in enumerate(scored, start=1)] + [{**r, "rank": None} for r in rest]


def shown_columns(rows: list[dict]) -> tuple:
    """SHOWN_COLUMNS, and ``attempts`` when a run had to start again (a cluster worker was lost during it)."""
    return SHOWN_COLUMNS + (("attempts",) if any(r.get("attempts", 1) > 1 for r in rows) else ())


def cell(row: dict, column: str) -> str:
    """One cell of the sweep table as the terminal and the page show it."""
    value = row[column]
    if column == "learning_rate":
        return f"{value:g}"
    if column in ("seconds", "cpu_seconds"):
        return f"{value:.1f}"
    return fmt(value) if value is not None else ""


def sweep_page(result) -> str:
    """The page of a :class:`lintext.tuning.sweep.SweepResult`."""
    metric = result.stop_metric
    data = result.settings.get("data", {})
    columns = shown_columns(result.rows)
    rows = [[escape(cell(row, c)) for c in columns] for row in ranked(result.rows, metric)]
    numeric = {i for i, c in enumerate(columns) if c not in TEXT_COLUMNS}
    best = "" if result.best is None else (f" The best run is <b>{escape(result.rows[result.best]['optimizer'])} at "
                                            f"{result.rows[result.best]['learning_rate']:g}</b>; its model is in "
                                            "<code>best/</code>.")
    halving = result.settings.get("halving")
    pruning = "" if not halving else (
        f" Successive halving with factor {halving['factor']}: rungs of "
        f"{', '.join(str(r['epochs']) for r in halving['rungs'])} epochs; the runs it stopped show "
        "<i>pruned at epoch N</i>.")
    intro = (f"<p>{len(result.rows)} runs on {escape(str(data.get('train', '')))} "
             f"({fmt(data.get('train_documents'))} documents; dev: {escape(str(data.get('dev', '')))}, "
             f"{fmt(data.get('dev_documents'))} documents), ranked by {METRIC_NAMES[metric]}.{best}{pruning}</p>")
    sections = [
        section("runs", "Runs", intro + table([HEADERS[c] for c in columns], rows, numeric)),
        section("rates", f"{METRIC_NAMES[metric].capitalize()} against the learning rate", figure_block(
            figures.render(_metric_figure, "sr", "Stop metric against the learning rate", result),
            "One line per optimizer; the star is the best run, crosses on the bottom edge are runs that diverged.",
            "No run has a dev value to plot.")),
        section("curves", "Learning curves", figure_block(
            figures.render(_curves_figure, "sc", "Dev loss per epoch, per run", result),
            "Dev loss per epoch of every run, one panel per optimizer, lighter colours for larger learning rates; "
            "a ring marks each run's best epoch, a cross the epoch at which a run diverged.",
            "No run has a dev loss to plot.")),
    ]
    nav = [("runs", "Runs"), ("rates", "Learning rates"), ("curves", "Learning curves")]
    return page("Sweep", escape(f"{len(result.rows)} runs, ranked by {METRIC_NAMES[metric]}"), nav, sections)


def _metric_figure(result):
    metric = result.stop_metric
    optimizers = result.settings.get("optimizers") or list(dict.fromkeys(r["optimizer"] for r in result.rows))
    rates = sorted({r["learning_rate"] for r in result.rows})
    fig, (ax,) = figures.new_figure(7.5, 4.0)  # x is log10(rate) on a linear axis: works up to float64's largest rate
    diverged = []
    for k, name in enumerate(optimizers):
        colour = figures.SERIES[k % len(figures.SERIES)]
        runs = [r for r in result.rows if r["optimizer"] == name]
        ok = [r for r in runs if r["stop_value"] is not None]
        ax.line([math.log10(r["learning_rate"]) for r in ok], [r["stop_value"] for r in ok], colour, marker="o", size=6,
                label=name)
        bad = [math.log10(r["learning_rate"]) for r in runs if r["diverged_epoch"] is not None]
        if bad:
            diverged.append((bad, colour, name))
    values = [r["stop_value"] for r in result.rows if r["stop_value"] is not None]
    if values:  # diverged runs have no dev value: their crosses sit on the bottom edge
        lo, hi = min(values), max(values)
        pad = 0.05 * (hi - lo) if hi > lo else (0.05 * abs(lo) or 0.5)
        ax.set(ylim=(lo - 2 * pad, hi + pad))
        edge = lo - 1.6 * pad
    else:
        ax.set(ylim=(0.0, 1.0))
        edge = 0.03
    for bad, colour, name in diverged:
        ax.markers(bad, [edge] * len(bad), colour, label=f"{name}: diverged", **figures.DIVERGED)
    if result.best is not None:
        best = result.rows[result.best]
        ax.markers([math.log10(best["learning_rate"])], [best["stop_value"]], figures.GOLD, label="best run", **figures.BEST_RUN)
    ax.set(xlim=(math.log10(rates[0]) - 0.3, math.log10(rates[-1]) + 0.3), xlabel="learning rate (log scale)",
           ylabel=f"{METRIC_NAMES[metric]} at the best epoch")
    ax.integer_x = True
    ax.x_tick_text = _rate_tick
    ax.legend()
    return fig


def _rate_tick(exponent, _pos=None) -> str:
    """The learning rate at ``log10(rate) = exponent``: 0.01, 1, 100, and 1e+06 beyond four decades."""
    return f"{10.0 ** exponent:g}" if abs(exponent) <= 4 else f"1e{exponent:+.0f}"


def _curves_figure(result):
    optimizers = result.settings.get("optimizers") or list(dict.fromkeys(r["optimizer"] for r in result.rows))
    if not any(h.get("dev_loss") is not None for hist in result.histories for h in hist):
        return None
    rates = sorted({r["learning_rate"] for r in result.rows})
    fig, axes = figures.new_figure(3.6 * len(optimizers) + 0.6, 3.4, len(optimizers), sharey=True)
    shades = {rate: blend(VIRIDIS, 0.9 * i / max(1, len(rates) - 1)) for i, rate in enumerate(rates)}
    positive = all(h["dev_loss"] > 0 for hist in result.histories for h in hist if h.get("dev_loss") is not None)
    for ax, name in zip(axes, optimizers):
        for row, hist in zip(result.rows, result.histories):
            if row["optimizer"] != name:
                continue
            epochs = [h["epoch"] for h in hist]
            values = [np.nan if h.get("dev_loss") is None else h["dev_loss"] for h in hist]
            colour = shades[row["learning_rate"]]
            ax.line(epochs, values, colour, label=f"{row['learning_rate']:g}" if ax is axes[-1] else None)
            if row["diverged_epoch"] is not None:
                ax.markers([row["diverged_epoch"]], [values[-1] if values else np.nan], colour, **figures.DIVERGED)
            elif row["best_epoch"]:
                ax.markers([row["best_epoch"]], [values[row["best_epoch"] - 1]], colour, **figures.BEST_EPOCH)
        ax.set(title=name, xlabel="epoch", yscale="log" if positive else None)
        ax.integer_x = True
    axes[0].set(ylabel="dev loss")
    axes[-1].legend(title="learning rate")
    return fig
