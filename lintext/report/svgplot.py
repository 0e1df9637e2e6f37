"""A small chart drawer that writes SVG text directly: the report's figures without a plotting library.

A :class:`Chart` is a row (or grid) of :class:`Panel` objects; each panel collects what to draw
(lines, markers, scatters, bands, error bars, reference lines, cells, texts) in data
coordinates, then :meth:`Chart.svg` lays the panels out with fixed rules (margins sized from the
tick labels' estimated width), picks ticks (1-2-5 steps on linear axes, decades and, on short
spans, 2 and 5 on log axes) and writes one ``<svg>`` element: no fonts measured, no layout solver,
no metadata, text kept as text for the browser to draw. Coordinates are in points (1/72 inch)
and the element scales to the page's width.

Drawing 300 labels or 1,500 points is string formatting: a few milliseconds.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from .svgdraw import FAMILY, FONT, INK, SMALL, bottom_legend, colourbar, num, panel_svg, text_width, tick_text


# ---------------------------------------------------------------- scales and ticks


class Scale:
    """Data to unit interval [0, 1] along one axis, linear or log10, possibly reversed."""

    def __init__(self, kind: str = "linear"):
        self.kind = kind
        self.lo = self.hi = None  # limits in data units (lo may exceed hi: a reversed axis)

    def fwd(self, values) -> np.ndarray:
        v = np.asarray(values, dtype=np.float64)
        if self.kind == "log":
            with np.errstate(divide="ignore", invalid="ignore"):
                v = np.where(v > 0, np.log10(np.where(v > 0, v, 1.0)), np.nan)
        return v

    def unit(self, values) -> np.ndarray:
        a, b = self.fwd([self.lo, self.hi])
        span = (b - a) or 1.0
        return (self.fwd(values) - a) / span

    def usable(self, values) -> np.ndarray:
        v = np.asarray(values, dtype=np.float64)
        return np.isfinite(v) & (v > 0) if self.kind == "log" else np.isfinite(v)

    def autoscale(self, values, margin: float = 0.05) -> None:
        v = np.asarray(values, dtype=np.float64)
        v = v[self.usable(v)]
        if v.size == 0:
            self.lo, self.hi = (1.0, 10.0) if self.kind == "log" else (0.0, 1.0)
            return
        a, b = self.fwd([v.min(), v.max()])
        if a == b:
            pad = 0.5 if self.kind == "log" else (abs(a) * 0.1 if a else 0.5)
            a, b = a - pad, b + pad
        else:
            a, b = a - margin * (b - a), b + margin * (b - a)
        self.lo, self.hi = (10.0 ** a, 10.0 ** b) if self.kind == "log" else (a, b)

    def ticks(self, target: int = 6, integer: bool = False) -> tuple[list, list]:
        """Major tick positions and their labels within the limits."""
        lo, hi = sorted((self.lo, self.hi))
        if self.kind == "log":
            return _log_ticks(lo, hi)
        step = _nice_step((hi - lo) / max(1, target - 1) / 2.6)
        while _count(lo, hi, step) > target:  # the smallest 1-2-2.5-5 step that gives at most ``target`` ticks
            step = _nice_step(step * 1.01)
        if integer:
            step = max(1.0, round(step))
        first = math.ceil(lo / step - 1e-9)
        values = [k * step for k in range(first, int(math.floor(hi / step + 1e-9)) + 1)]
        digits = max(0, -int(math.floor(math.log10(step))) + 1)
        values = [round(v, digits) + 0.0 for v in values]
        return values, [tick_text(v) for v in values]


def _count(lo: float, hi: float, step: float) -> int:
    return int(math.floor(hi / step + 1e-9)) - math.ceil(lo / step - 1e-9) + 1


def _nice_step(raw: float) -> float:
    """The smallest of 1, 2, 2.5, 5 times a power of ten that is at least ``raw``."""
    if not raw > 0 or not math.isfinite(raw):
        return 1.0
    power = 10.0 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * power * (1 + 1e-9):
            return m * power
    return 10 * power


def _log_ticks(lo: float, hi: float) -> tuple[list, list]:
    a, b = math.floor(math.log10(lo)), math.ceil(math.log10(hi))
    every = max(1, math.ceil((b - a) / 7))  # at most ~8 decade labels
    values = [10.0 ** k for k in range(a, b + 1) if (k - a) % every == 0]
    if hi / lo < 40:  # a short span: 2 and 5 within each decade too
        values = sorted({v * m for v in values + [10.0 ** (a - 1)] for m in (1, 2, 5)})
    values = [v for v in values if lo * (1 - 1e-9) <= v <= hi * (1 + 1e-9)]
    if len(values) < 2:  # less than a decade: the limits themselves, rounded
        values = [float(f"{lo:.2g}"), float(f"{hi:.2g}")]
        values = [v for v in values if lo <= v <= hi] or [lo]
    return values, [tick_text(v) for v in values]


# ---------------------------------------------------------------- a panel


class Panel:
    """One set of axes: what to draw in data coordinates, its scales, labels and legend."""

    def __init__(self):
        self.x, self.y = Scale(), Scale()
        self.items: list[tuple] = []
        self.legend_entries: list[dict] = []
        self.title = self.xlabel = self.ylabel = ""
        self.legend_at: str | None = None
        self.legend_title = ""
        self.legend_size = SMALL
        self.xlim = self.ylim = None
        self.xticks = self.yticks = None  # (positions, labels)
        self.xtick_rotation = 0
        self.tick_size = FONT
        self.integer_x = False
        self.x_tick_text = None  # a function of the tick's value, for the x axis's labels
        self.message = None
        self.square = False

    # -- what to draw (``label`` adds a legend entry)

    def line(self, x, y, colour, style: str = "-", width: float = 1.8, marker: str | None = None, size: float = 6,
             steps: str | None = None, label: str | None = None) -> None:
        x, y = np.asarray(x, dtype=np.float64).ravel(), np.asarray(y, dtype=np.float64).ravel()
        self.items.append(("line", x, y, dict(colour=colour, style=style, width=width, marker=marker, size=size, steps=steps)))
        if label is not None:
            self.legend_entries.append(dict(label=label, colour=colour, style=style, width=width, marker=marker))

    def markers(self, x, y, colour, kind: str = "o", size: float = 6, label: str | None = None, width: float = 1.6,
                edge: str | None = None) -> None:
        x, y = np.asarray(x, dtype=np.float64).ravel(), np.asarray(y, dtype=np.float64).ravel()
        self.items.append(("markers", x, y, dict(colour=colour, kind=kind, size=size, width=width, edge=edge)))
        if label is not None:
            self.legend_entries.append(dict(label=label, colour=colour, style=None, marker=kind, width=width, edge=edge))

    def scatter(self, x, y, colour, size=4.0, alpha: float = 1.0, edge: str | None = None, label: str | None = None) -> None:
        x, y = np.asarray(x, dtype=np.float64).ravel(), np.asarray(y, dtype=np.float64).ravel()
        self.items.append(("scatter", x, y, dict(colour=colour, size=size, alpha=alpha, edge=edge)))
        if label is not None:
            self.legend_entries.append(dict(label=label, colour=colour, style=None, marker="o", alpha=alpha))

    def band(self, x, low, high, colour, alpha: float = 0.18, label: str | None = None) -> None:
        x = np.asarray(x, dtype=np.float64).ravel()
        low, high = np.asarray(low, dtype=np.float64).ravel(), np.asarray(high, dtype=np.float64).ravel()
        self.items.append(("band", np.concatenate([x, x]), np.concatenate([low, high]), dict(colour=colour, alpha=alpha, n=x.size)))
        if label is not None:
            self.legend_entries.append(dict(label=label, colour=colour, style="band", alpha=alpha))

    def errorbar(self, x, y, low, high, colour, marker: str = "o", size: float = 6, width: float = 1.5,
                 label: str | None = None) -> None:
        """Line and markers through ``(x, y)`` with a bar from ``low`` to ``high`` at each point."""
        x, y = np.asarray(x, dtype=np.float64).ravel(), np.asarray(y, dtype=np.float64).ravel()
        low, high = np.asarray(low, dtype=np.float64).ravel(), np.asarray(high, dtype=np.float64).ravel()
        self.items.append(("bars", np.concatenate([x, x]), np.concatenate([low, high]), dict(colour=colour, width=width)))
        self.line(x, y, colour, width=width, marker=marker, size=size, label=label)

    def hline(self, y: float, colour, style: str = "-", width: float = 1.2, label: str | None = None) -> None:
        self.items.append(("hline", np.array([np.nan]), np.array([float(y)]), dict(colour=colour, style=style, width=width)))
        if label is not None:
            self.legend_entries.append(dict(label=label, colour=colour, style=style, width=width, marker=None))

    def vline(self, x: float, colour, style: str = "-", width: float = 1.2, label: str | None = None) -> None:
        self.items.append(("vline", np.array([float(x)]), np.array([np.nan]), dict(colour=colour, style=style, width=width)))
        if label is not None:
            self.legend_entries.append(dict(label=label, colour=colour, style=style, width=width, marker=None))

    def text(self, x: float, y: float, text: str, dx: float = 0, dy: float = 0, anchor: str = "middle",
             size: float = SMALL, colour: str = INK) -> None:
        """``text`` at data point ``(x, y)`` moved by ``(dx, dy)`` points (``dy`` up)."""
        self.items.append(("text", np.array([float(x)]), np.array([float(y)]),
                           dict(text=text, dx=dx, dy=dy, anchor=anchor, size=size, colour=colour)))

    def cells(self, colours: list, texts: list | None = None, text_colours: list | None = None, gap: float = 0.0,
              size: float = SMALL) -> None:
        """A matrix of coloured cells, row 0 at the top, cell ``(i, j)`` centred on ``x = j``, ``y = i``."""
        n_rows, n_cols = len(colours), len(colours[0]) if colours else 0
        self.items.append(("cells", np.array([-0.5, n_cols - 0.5]), np.array([-0.5, n_rows - 0.5]),
                           dict(colours=colours, texts=texts, text_colours=text_colours, gap=gap, size=size)))

    def note(self, text: str) -> None:
        """A panel with nothing to show: the message in its middle, no axes."""
        self.message = text

    # -- axes

    def set(self, title=None, xlabel=None, ylabel=None, xscale=None, yscale=None, xlim=None, ylim=None) -> None:
        for name, value in (("title", title), ("xlabel", xlabel), ("ylabel", ylabel), ("xlim", xlim), ("ylim", ylim)):
            if value is not None:
                setattr(self, name, value)
        if xscale:
            self.x.kind = xscale
        if yscale:
            self.y.kind = yscale

    def legend(self, at: str = "best", title: str = "", size: float = SMALL) -> None:
        self.legend_at, self.legend_title, self.legend_size = at, title, size

    def has_data(self) -> bool:
        return bool(self.items)

    # -- layout

    def _data(self, axis: str) -> np.ndarray:
        chunks = []
        for kind, x, y, _ in self.items:
            values = x if axis == "x" else y
            if kind in ("hline", "vline", "text") and ((kind == "hline") == (axis == "x")):
                continue
            chunks.append(values)
        return np.concatenate(chunks) if chunks else np.zeros(0)

    def fit_limits(self, shared_y: tuple | None = None) -> None:
        for scale, lim, axis in ((self.x, self.xlim, "x"), (self.y, self.ylim, "y")):
            has_cells = any(kind == "cells" for kind, *_ in self.items)
            if lim is not None:
                scale.lo, scale.hi = lim
            elif has_cells:
                scale.autoscale(self._data(axis), margin=0.0)
            else:
                scale.autoscale(self._data(axis))
        if shared_y is not None and self.ylim is None:
            self.y.lo, self.y.hi = shared_y
        if any(kind == "cells" for kind, *_ in self.items) and self.ylim is None:
            self.y.lo, self.y.hi = max(self.y.lo, self.y.hi), min(self.y.lo, self.y.hi)  # row 0 on top

    def tick_marks(self, axis: str, target: int) -> tuple[list, list]:
        given = self.xticks if axis == "x" else self.yticks
        if given is not None:
            return list(given[0]), [str(t) for t in given[1]]
        scale = self.x if axis == "x" else self.y
        values, labels = scale.ticks(target, integer=self.integer_x and axis == "x")
        fmt = self.x_tick_text if axis == "x" else None
        return values, ([fmt(v) for v in values] if fmt else labels)


# ---------------------------------------------------------------- the chart


class Chart:
    """A grid of panels, ``width`` x ``height`` inches, drawn as one ``<svg>`` element."""

    def __init__(self, width: float, height: float, rows: int = 1, cols: int = 1, share_y: bool = False):
        self.width, self.height = width * 72.0, height * 72.0
        self.rows, self.cols = rows, cols
        self.panels = [Panel() for _ in range(rows * cols)]
        self.share_y = share_y
        self.hidden: set[int] = set()
        self.bottom_legend: list[dict] = []
        self.bar = None

    def hide(self, index: int) -> None:
        self.hidden.add(index)

    def legend_below(self, entries: list[dict]) -> None:
        """One legend for the whole chart, under the panels (entries as a panel's legend entries)."""
        self.bottom_legend = entries

    def colour_scale(self, colours: list[str], ticks: list[float], labels: list[str], title: str,
                     at: str = "right") -> None:
        """A colour bar beside (``right``) or under (``below``) the panels: ``colours`` equal steps from 0 to 1."""
        self.bar = dict(colours=colours, ticks=ticks, labels=labels, title=title, at=at)

    def svg(self, prefix: str, title: str) -> str:
        shown = [p for k, p in enumerate(self.panels) if k not in self.hidden]
        shared = None
        if self.share_y:
            data = np.concatenate([p._data("y") for p in shown if not p.message] or [np.zeros(0)])
            probe = Scale(shown[0].y.kind)
            probe.autoscale(data)
            shared = (probe.lo, probe.hi)
        for p in self.panels:
            p.fit_limits(shared)
        # margins from what the panels need (the same for every panel, so that they line up)
        tick_size = max(p.tick_size for p in shown) if shown else FONT
        rotation = max([p.xtick_rotation for p in shown] or [0])
        top = 8 + (FONT + 9 if any(p.title for p in shown) else 0)
        right = 14
        legend_h = 0.0
        if self.bottom_legend:
            per_row = min(len(self.bottom_legend), 4)
            legend_h = 16 * math.ceil(len(self.bottom_legend) / per_row) + 6
        bar_w = bar_h = 0.0
        if self.bar and self.bar["at"] == "right":
            bar_w = 70.0 + (14 if self.bar["title"] else 0)
        elif self.bar:
            bar_h = 44.0
        cell_w = (self.width - bar_w) / self.cols
        cell_h = (self.height - legend_h - bar_h) / self.rows
        x_target = lambda w: max(3, int(w // 55))  # noqa: E731  (about one tick per 55 pt, as plots usually space them)
        if rotation:
            xtexts = [t for p in shown if not p.message for t in p.tick_marks("x", x_target(cell_w - 80))[1]]
            tick_h = max([text_width(t, tick_size) for t in xtexts] or [0]) * math.sin(math.radians(rotation)) + 8
        else:
            tick_h = FONT + 4
        bottom = 8 + tick_h + (16 if any(p.xlabel for p in shown) else 0)
        y_target = max(3, int((cell_h - top - bottom) // 30))
        ytexts = [t for p in shown if not p.message for t in p.tick_marks("y", y_target)[1]]
        left = 10 + max([text_width(t, tick_size) for t in ytexts] or [0]) + 10
        left += 16 if any(p.ylabel for p in shown) else 0
        out = [f'<svg aria-label="{escape(title)}" class="figure" role="img" style="max-width:{self.width:.0f}pt" '
               f'viewBox="0 0 {num(self.width)} {num(self.height)}" font-family="{FAMILY}" font-size="{FONT}" '
               f'fill="{INK}">',
               '<rect width="100%" height="100%" fill="white"/>']
        boxes = []
        for k, p in enumerate(self.panels):
            if k in self.hidden:
                continue
            r, c = divmod(k, self.cols)
            x0, y0 = c * cell_w + left, r * cell_h + top
            w, h = cell_w - left - right, cell_h - top - bottom
            if p.square:
                side = min(w, h)
                x0 += (w - side) / 2
                w = h = side
            boxes.append((x0, y0, w, h))
            out.append(panel_svg(p, f"{prefix}-{k}", x0, y0, max(w, 10.0), max(h, 10.0), rotation, x_target(w), y_target))
        if self.bottom_legend:
            out.append(bottom_legend(self.bottom_legend, self.width, self.height - legend_h + 4))
        if self.bar and boxes:
            out.append(colourbar(self.bar, boxes[-1], self.width, self.height))
        out.append("</svg>")
        return "\n".join(out)
