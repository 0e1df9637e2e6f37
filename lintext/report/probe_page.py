"""``probe.html``: the learning-rate probe's rungs and reading, in the report's layout.

The probe's names are declared here once and read by ``rungs.csv``, ``probe.json``, the
terminal and this page, so all four spell them alike: :data:`RUNG_COLUMNS` (one row per rung)
and :data:`SUMMARY_KEYS` (the reading). Markers mean one thing on every page
(:mod:`lintext.report.figures`): a cross is the rung where the climb stopped.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from . import figures
from .layout import figure_block, fmt, kv, page, section, table

RUNG_COLUMNS = ("rung", "learning_rate", "steps", "mean_loss", "standard_error")
SUMMARY_KEYS = ("verdict", "suggested_rate", "upper_bound", "lowest_loss_rate", "lowest_mean_loss", "untrained_loss",
                "stopped_by", "stopped_at", "rungs_run", "advice")
PLOTTABLE_RATE = 1e300  # a log axis reaching nearer float64's largest value overflows its ticks
RATE_KEYS = ("learning_rate", "suggested_rate", "upper_bound", "lowest_loss_rate", "stopped_at")


def rate_text(rate: float) -> str:
    """A learning rate to three significant digits, written out below 10,000 (``1000``, not ``1e+03``)."""
    return f"{float(f'{rate:.3g}'):g}"


def cell(key: str, value) -> str:
    """A rung cell or a summary value as the terminal and the page show it."""
    if value is None:
        return "none"
    if key in RATE_KEYS:
        return rate_text(value)
    if key in ("mean_loss", "standard_error", "lowest_mean_loss", "untrained_loss") and not math.isfinite(value):
        return "not finite"
    if key == "standard_error":
        return f"{value:.2g}"
    if key in ("mean_loss", "lowest_mean_loss", "untrained_loss"):
        return f"{value:.4f}"
    return str(value)


def probe_page(result) -> str:
    """The page of a :class:`lintext.tuning.probe.ProbeResult`."""
    s = result.settings
    summary = result.summary()
    intro = (f"<p>{escape(str(s.get('optimizer')))}, {escape(str(s.get('loss')))} loss, batch size "
             f"{fmt(s.get('batch_size'))}: {len(result.learning_rates)} rungs of {fmt(s.get('steps_per_rung'))} steps, "
             f"{fmt(s.get('rungs_per_decade'))} per decade, from learning rate {s.get('lowest_rate'):g} towards "
             f"{s.get('highest_rate'):g}. Method: {escape(str(s.get('method')))}.</p>")
    reading = kv([(key, escape(cell(key, summary[key]))) for key in SUMMARY_KEYS])
    if summary["verdict"] != "suggested":
        reading = f'<p class="note">No suggested_rate ({escape(summary["verdict"])}): {escape(summary["advice"])}.</p>' + reading
    rows = [[escape(cell(c, row[c])) for c in RUNG_COLUMNS] for row in result.rungs()]
    factor = 10 ** (result.rungs_below / s.get("rungs_per_decade", 4))
    guide = (f"Each dot is a rung's mean_loss, its bar {result.noise_multiple:g} times its standard_error; the dotted "
             "line is untrained_loss (every score zero), and a cross marks the rung that stopped the climb. The solid "
             f"line is upper_bound, where the loss stopped improving; the dashed line suggested_rate, {result.rungs_below} "
             f"rungs (a factor of {factor:.3g}) below it.")
    return page("Learning-rate probe", escape(f"{s.get('optimizer')}, batch size {s.get('batch_size')}"),
                [("reading", "Reading"), ("rungs", "Rungs")],
                [section("reading", "Reading", intro + reading + figure_block(
                    figures.render(_figure, "pr", "Mean loss per rung against the learning rate", result),
                    guide, "No figure: no rung was run, or the rates come too near float64's largest value to draw.")),
                 section("rungs", "Rungs", table(list(RUNG_COLUMNS), rows, set(range(len(RUNG_COLUMNS)))))])


def _figure(result):
    rates, means, errors = result.learning_rates, result.mean_losses, result.standard_errors
    if not len(rates) or rates[-1] > PLOTTABLE_RATE:
        return None
    fig, (ax,) = figures.new_figure(7.5, 4.0)
    ok = np.isfinite(means)
    climbed = ok.copy()
    if result.stopped_by != "highest-rate-reached":
        climbed[-1] = False
    bar = result.noise_multiple * errors[climbed]
    ax.errorbar(rates[climbed], means[climbed], means[climbed] - bar, means[climbed] + bar, figures.SERIES[0],
                marker="o", size=6, width=1.4, label="mean_loss per rung")
    ax.hline(result.untrained_loss, figures.MUTED, style=":", width=1.2, label="untrained_loss")
    if result.stopped_by != "highest-rate-reached":
        top = 1.1 * result.untrained_loss
        y = min(means[-1], top) if ok[-1] else top
        ax.markers([rates[-1]], [y], figures.SERIES[5], label="climb stopped", **figures.DIVERGED)
    if result.upper_bound is not None:
        ax.vline(result.upper_bound, figures.SERIES[1], width=1.2, label=f"upper_bound {rate_text(result.upper_bound)}")
        ax.vline(result.suggested_rate, figures.SERIES[1], style="--", width=1.4,
                 label=f"suggested_rate {rate_text(result.suggested_rate)}")
    finite = means[ok]
    low = min(finite.min(), result.untrained_loss) if finite.size else 0.0
    ax.set(ylim=(max(0.0, low - 0.15 * result.untrained_loss), 1.15 * result.untrained_loss), xscale="log",
           xlabel="learning_rate", ylabel=f"mean_loss ({result.settings.get('loss')})")
    ax.legend(size=8)
    return fig
