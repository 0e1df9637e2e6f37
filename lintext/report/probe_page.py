"""``probe.html``: the learning-rate probe's loss against the learning rate, in the report's layout."""

from __future__ import annotations

from html import escape

import numpy as np

from . import figures
from .layout import figure_block, page, section


def probe_page(result) -> str:
    """``probe.html``: raw and smoothed loss against the learning rate, the suggestion marked."""
    return page("Learning-rate probe", escape(f"{result.settings.get('optimizer')}, batch size {result.settings.get('batch_size')}"),
                [("probe", "Probe")], [section("probe", "Loss against the learning rate", _text(result) + figure_block(
                    figures.render(_figure, "pr", "Training loss against the learning rate", result),
                    "The grey dots are the loss of each step's minibatch before its update, the line their smoothed value; "
                    "the dashed line is the suggestion.", "No step was run."))])


def _figure(result):
    fig, (ax,) = figures.new_figure(7.5, 4.0)
    ax.plot(result.learning_rates, result.losses, ".", ms=3, color="0.7", label="minibatch loss")
    ax.plot(result.learning_rates, result.smoothed, "-", color=figures.SERIES[0], label="smoothed")
    if result.suggestion is not None:
        ax.axvline(result.suggestion, color=figures.SERIES[5], ls="--", label=f"suggestion {result.suggestion:.3g}")
    finite = result.smoothed[np.isfinite(result.smoothed)]
    if finite.size:
        ax.set_ylim(0, 1.15 * max(finite.max(), finite[0]))
    ax.set_xscale("log")
    ax.set_xlabel("learning rate")
    ax.set_ylabel(f"training loss ({result.settings.get('loss')})")
    ax.legend()
    return fig


def _text(result) -> str:
    s = result.settings
    text = (f"<p>{s.get('optimizer')}, batch size {s.get('batch_size')}, {len(result.learning_rates)} of {s.get('steps')} steps "
            f"from {s.get('min_lr'):g} to {s.get('max_lr'):g}; stopped: {result.stop_reason}.</p>"
            f"<p>Suggested learning rate: <b>{'none' if result.suggestion is None else f'{result.suggestion:.3g}'}</b> "
            "(steepest descent of the smoothed loss against log learning rate). Method: L. N. Smith, "
            "&ldquo;Cyclical Learning Rates for Training Neural Networks&rdquo;, 2017.</p>")
    return text
