"""Drawing for :mod:`lintext.report.svgplot`: a laid-out panel, lines, markers, cells, legends and
colour bars as SVG text (coordinates in points, to a tenth), and colour blending."""

from __future__ import annotations

import math
from html import escape

import numpy as np

FONT = 9.5
SMALL = 8.5
CHAR = 0.56  # mean advance of a sans-serif glyph, in ems (an estimate: nothing is measured)
INK = "#1d232b"
MUTED = "#4a5563"
GRID = "#dde2e7"
FAMILY = "'DejaVu Sans','Liberation Sans',Arial,Helvetica,sans-serif"


def text_width(text: str, size: float = FONT) -> float:
    return len(str(text)) * CHAR * size


def num(v: float) -> str:
    """A coordinate in points, to a tenth."""
    return f"{v:.1f}".rstrip("0").rstrip(".") if math.isfinite(v) else "0"


def tick_text(value: float) -> str:
    return f"{value:g}"


# ---------------------------------------------------------------- markers


def marker_path(kind: str, x: np.ndarray, y: np.ndarray, size) -> str:
    """Path data for markers centred on the points ``(x, y)`` (in points); ``size`` a diameter or one per point."""
    size = np.broadcast_to(np.asarray(size, dtype=np.float64), x.shape)
    parts = []
    for cx, cy, s in zip(x.tolist(), y.tolist(), size.tolist()):
        r = s / 2
        if kind in ("o", "ring"):
            parts.append(f"M{num(cx - r)} {num(cy)}a{num(r)} {num(r)} 0 1 0 {num(2 * r)} 0"
                         f"a{num(r)} {num(r)} 0 1 0 {num(-2 * r)} 0z")
        elif kind == "s":
            parts.append(f"M{num(cx - r)} {num(cy - r)}h{num(2 * r)}v{num(2 * r)}h{num(-2 * r)}z")
        elif kind == "x":
            parts.append(f"M{num(cx - r)} {num(cy - r)}l{num(2 * r)} {num(2 * r)}"
                         f"M{num(cx - r)} {num(cy + r)}l{num(2 * r)} {num(-2 * r)}")
        elif kind == "*":
            pts = []
            for k in range(10):
                rad = r if k % 2 == 0 else r * 0.42
                ang = math.pi / 2 + k * math.pi / 5
                pts.append(f"{num(cx + rad * math.cos(ang))} {num(cy - rad * math.sin(ang))}")
            parts.append("M" + "L".join(pts) + "z")
    return "".join(parts)


def marker_style(kind: str, colour: str, alpha: float = 1.0, edge: str | None = None, width: float = 1.6) -> str:
    if kind == "ring":
        return f'fill="white" stroke="{colour}" stroke-width="{width:g}"'
    if kind == "x":
        return f'fill="none" stroke="{colour}" stroke-width="{width:g}"'
    if kind == "*":
        return f'fill="{colour}" stroke="{edge or "black"}" stroke-width="0.6"'
    out = f'fill="{colour}"' + (f' fill-opacity="{alpha:g}"' if alpha < 1 else "")
    return out + (f' stroke="{edge}" stroke-width="0.6"' if edge else "")


DASHES = {"-": None, "--": "5 3", ":": "1.2 2.4"}


# ---------------------------------------------------------------- drawing


def panel_svg(p, pid: str, x0: float, y0: float, w: float, h: float, rotation: float, x_target: int,
               y_target: int) -> str:
    out = []
    if p.title:
        out.append(f'<text x="{num(x0 + w / 2)}" y="{num(y0 - 7)}" text-anchor="middle" font-size="10.5">'
                   f"{escape(p.title)}</text>")
    if p.message is not None:
        lines = p.message.split("\n")
        for i, line in enumerate(lines):
            dy = (i - (len(lines) - 1) / 2) * 13
            out.append(f'<text x="{num(x0 + w / 2)}" y="{num(y0 + h / 2 + dy + 3)}" text-anchor="middle" '
                       f'fill="{MUTED}">{escape(line)}</text>')
        return "\n".join(out)
    px = lambda v: x0 + p.x.unit(v) * w  # noqa: E731
    py = lambda v: y0 + h - p.y.unit(v) * h  # noqa: E731
    xt, xl = p.tick_marks("x", x_target)
    yt, yl = p.tick_marks("y", y_target)
    xs, ys = px(np.asarray(xt, dtype=float)) if xt else np.zeros(0), py(np.asarray(yt, dtype=float)) if yt else np.zeros(0)
    inside_x = [(v, t, s) for v, t, s in zip(xs.tolist(), xl, xt) if x0 - 0.5 <= v <= x0 + w + 0.5]
    inside_y = [(v, t, s) for v, t, s in zip(ys.tolist(), yl, yt) if y0 - 0.5 <= v <= y0 + h + 0.5]
    has_cells = any(kind == "cells" for kind, *_ in p.items)
    if not has_cells:
        d = "".join(f"M{num(v)} {num(y0)}v{num(h)}" for v, _, _ in inside_x)
        d += "".join(f"M{num(x0)} {num(v)}h{num(w)}" for v, _, _ in inside_y)
        if d:
            out.append(f'<path d="{d}" stroke="{GRID}" stroke-width="0.7" fill="none"/>')
    out.append(f'<clipPath id="{pid}-clip"><rect x="{num(x0)}" y="{num(y0)}" width="{num(w)}" height="{num(h)}"/></clipPath>')
    out.append(f'<g clip-path="url(#{pid}-clip)">')
    texts = []
    for kind, x, y, style in p.items:
        if kind == "cells":
            out.append(_cells_svg(style, px, py))
        elif kind == "band":
            n = style["n"]
            xx, yy = px(x), py(y)
            ok = np.isfinite(xx) & np.isfinite(yy)
            if ok[:n].all() and ok[n:].all() and n:
                pts = [(a, b) for a, b in zip(xx[:n].tolist(), yy[n:].tolist())] + \
                      [(a, b) for a, b in zip(xx[:n][::-1].tolist(), yy[:n][::-1].tolist())]
                d = "M" + "L".join(f"{num(a)} {num(b)}" for a, b in pts) + "z"
                out.append(f'<path d="{d}" fill="{style["colour"]}" fill-opacity="{style["alpha"]:g}"/>')
        elif kind == "bars":
            n = x.size // 2
            xx, lo, hi = px(x[:n]), py(y[:n]), py(y[n:])
            d = "".join(f"M{num(a)} {num(b)}V{num(c)}M{num(a - 3)} {num(b)}h6M{num(a - 3)} {num(c)}h6"
                        for a, b, c in zip(xx.tolist(), lo.tolist(), hi.tolist()) if math.isfinite(a + b + c))
            out.append(f'<path d="{d}" stroke="{style["colour"]}" stroke-width="1.2" fill="none"/>')
        elif kind == "line":
            out.append(_line_svg(px(x), py(y), style))
        elif kind == "markers":
            xx, yy = px(x), py(y)
            ok = np.isfinite(xx) & np.isfinite(yy)
            out.append(f'<path d="{marker_path(style["kind"], xx[ok], yy[ok], style["size"])}" '
                       f'{marker_style(style["kind"], style["colour"], edge=style["edge"], width=style["width"])}/>')
        elif kind == "scatter":
            xx, yy = px(x), py(y)
            ok = np.isfinite(xx) & np.isfinite(yy)
            size = np.broadcast_to(np.asarray(style["size"], dtype=np.float64), x.shape)[ok]
            out.append(f'<path d="{marker_path("o", xx[ok], yy[ok], size)}" '
                       f'{marker_style("o", style["colour"], style["alpha"], style["edge"])}/>')
        elif kind == "hline":
            v = float(py(y)[0])
            out.append(f'<path d="M{num(x0)} {num(v)}h{num(w)}" {_stroke(style)}/>')
        elif kind == "vline":
            v = float(px(x)[0])
            out.append(f'<path d="M{num(v)} {num(y0)}v{num(h)}" {_stroke(style)}/>')
        elif kind == "text":
            texts.append((float(px(x)[0]) + style["dx"], float(py(y)[0]) - style["dy"], style))
    out.append("</g>")
    for tx, ty, style in texts:
        if math.isfinite(tx) and math.isfinite(ty):
            out.append(f'<text x="{num(tx)}" y="{num(ty)}" text-anchor="{style["anchor"]}" font-size="{style["size"]:g}" '
                       f'fill="{style["colour"]}">{escape(style["text"])}</text>')
    if has_cells:
        out.append(f'<rect x="{num(x0)}" y="{num(y0)}" width="{num(w)}" height="{num(h)}" stroke="{GRID}" '
                   'stroke-width="0.8" fill="none"/>')
    else:
        out.append(f'<path d="M{num(x0)} {num(y0)}V{num(y0 + h)}H{num(x0 + w)}" stroke="{MUTED}" stroke-width="0.8" fill="none"/>')
    # ticks and their labels
    ticks = "".join(f"M{num(v)} {num(y0 + h)}v3.5" for v, _, _ in inside_x) + "".join(
        f"M{num(x0)} {num(v)}h-3.5" for v, _, _ in inside_y)
    if ticks:
        out.append(f'<path d="{ticks}" stroke="{MUTED}" stroke-width="0.8" fill="none"/>')
    size = f' font-size="{p.tick_size:g}"' if p.tick_size != FONT else ""
    for v, label, _ in inside_x:
        if rotation:
            out.append(f'<text transform="translate({num(v + 3)} {num(y0 + h + 7)}) rotate(-{rotation:g})" '
                       f'text-anchor="end"{size}>{escape(label)}</text>')
        else:
            out.append(f'<text x="{num(v)}" y="{num(y0 + h + 6 + FONT)}" text-anchor="middle"{size}>{escape(label)}</text>')
    for v, label, _ in inside_y:
        out.append(f'<text x="{num(x0 - 6)}" y="{num(v + 3.2)}" text-anchor="end"{size}>{escape(label)}</text>')
    if p.xlabel:
        below = y0 + h + 8 + ((FONT + 4) if not rotation else max([text_width(t, p.tick_size) for t in xl] or [0])
                              * math.sin(math.radians(rotation)) + 8) + 6
        out.append(f'<text x="{num(x0 + w / 2)}" y="{num(below)}" text-anchor="middle">{escape(p.xlabel)}</text>')
    if p.ylabel:
        width = max([text_width(t, p.tick_size) for _, t, _ in inside_y] or [0])
        lx = x0 - width - 14
        out.append(f'<text transform="translate({num(lx)} {num(y0 + h / 2)}) rotate(-90)" text-anchor="middle">'
                   f"{escape(p.ylabel)}</text>")
    if p.legend_at and p.legend_entries:
        out.append(_legend_svg(p, x0, y0, w, h, px, py))
    return "\n".join(out)


def _stroke(style: dict) -> str:
    dash = DASHES.get(style.get("style") or "-")
    return (f'stroke="{style["colour"]}" stroke-width="{style["width"]:g}" fill="none"'
            + (f' stroke-dasharray="{dash}"' if dash else ""))


def _line_svg(xx: np.ndarray, yy: np.ndarray, style: dict) -> str:
    out = []
    if style["style"] not in (None, "none") and xx.size:
        if style["steps"] and xx.size > 1:
            xx, yy = _steps(xx, yy, style["steps"])
        ok = np.isfinite(xx) & np.isfinite(yy)
        d, pen = [], False
        for a, b, good in zip(xx.tolist(), yy.tolist(), ok.tolist()):
            if good:
                d.append(("L" if pen else "M") + f"{num(a)} {num(b)}")
            pen = good
        if d:
            out.append(f'<path d="{"".join(d)}" {_stroke(style)} stroke-linejoin="round"/>')
    if style["marker"]:
        ok = np.isfinite(xx) & np.isfinite(yy)
        if style["steps"]:
            return "\n".join(out)
        out.append(f'<path d="{marker_path(style["marker"], xx[ok], yy[ok], style["size"])}" '
                   f'{marker_style(style["marker"], style["colour"])}/>')
    return "\n".join(out)


def _steps(xx: np.ndarray, yy: np.ndarray, where: str) -> tuple[np.ndarray, np.ndarray]:
    if where == "post":
        x2 = np.repeat(xx, 2)[1:]
        y2 = np.repeat(yy, 2)[:-1]
        return x2, y2
    mids = (xx[:-1] + xx[1:]) / 2
    edges = np.concatenate([[xx[0]], mids, [xx[-1]]])
    return np.repeat(edges, 2)[1:-1], np.repeat(yy, 2)


def _cells_svg(style: dict, px, py) -> str:
    colours, texts, text_colours, gap = style["colours"], style["texts"], style["text_colours"], style["gap"]
    out = []
    for i, row in enumerate(colours):
        top, bottom = float(py(i - 0.5)), float(py(i + 0.5))
        y, hgt = min(top, bottom), abs(bottom - top)
        for j, colour in enumerate(row):
            if colour is None:
                continue
            left, right = float(px(j - 0.5)), float(px(j + 0.5))
            out.append(f'<rect x="{num(left + gap / 2)}" y="{num(y + gap / 2)}" width="{num(right - left - gap)}" '
                       f'height="{num(hgt - gap)}" fill="{colour}"/>')
            if texts is not None:
                out.append(f'<text x="{num((left + right) / 2)}" y="{num(y + hgt / 2 + style["size"] * 0.35)}" '
                           f'text-anchor="middle" font-size="{style["size"]:g}" fill="{text_colours[i][j]}">'
                           f"{escape(str(texts[i][j]))}</text>")
    return "\n".join(out)


def _entry_svg(e: dict, x: float, y: float, size: float) -> str:
    """One legend entry's key (a short line, band or marker) at ``(x, y)``, then its text."""
    out = []
    style = e.get("style")
    if style == "band":
        out.append(f'<rect x="{num(x)}" y="{num(y - 4)}" width="18" height="8" fill="{e["colour"]}" '
                   f'fill-opacity="{e.get("alpha", 0.2):g}"/>')
    elif style not in (None, "none"):
        out.append(f'<path d="M{num(x)} {num(y)}h18" {_stroke({"colour": e["colour"], "width": e.get("width", 1.8), "style": style})}/>')
    if e.get("marker"):
        kind = e["marker"]
        out.append(f'<path d="{marker_path(kind, np.array([x + 9]), np.array([y]), 6 if kind != "*" else 11)}" '
                   f'{marker_style(kind, e["colour"], e.get("alpha", 1.0), e.get("edge"), e.get("width", 1.6))}/>')
    out.append(f'<text x="{num(x + 23)}" y="{num(y + size * 0.35)}" font-size="{size:g}">{escape(e["label"])}</text>')
    return "".join(out)


def _legend_svg(p, x0, y0, w, h, px, py) -> str:
    size = p.legend_size
    line_h = size + 5
    rows = len(p.legend_entries) + (1 if p.legend_title else 0)
    box_w = 30 + max([text_width(e["label"], size) for e in p.legend_entries] + [text_width(p.legend_title, size)])
    box_h = rows * line_h + 6
    corners = {"upper right": (x0 + w - box_w - 4, y0 + 4), "upper left": (x0 + 4, y0 + 4),
               "lower left": (x0 + 4, y0 + h - box_h - 4), "lower right": (x0 + w - box_w - 4, y0 + h - box_h - 4)}
    at = p.legend_at
    if at not in corners:  # "best": the corner covering the fewest drawn points
        xs, ys = [], []
        for kind, x, y, _ in p.items:
            if kind in ("line", "markers", "scatter", "band", "bars"):
                xs.append(px(x)), ys.append(py(y))
        xs = np.concatenate(xs) if xs else np.zeros(0)
        ys = np.concatenate(ys) if ys else np.zeros(0)
        count = lambda c: int(((xs >= c[0]) & (xs <= c[0] + box_w) & (ys >= c[1]) & (ys <= c[1] + box_h)).sum())  # noqa: E731
        at = min(corners, key=lambda name: (count(corners[name]), list(corners).index(name)))
    lx, ly = corners[at]
    out = [f'<g><rect x="{num(lx)}" y="{num(ly)}" width="{num(box_w)}" height="{num(box_h)}" fill="white" '
           f'fill-opacity="0.85"/>']
    y = ly + 3 + line_h / 2
    if p.legend_title:
        out.append(f'<text x="{num(lx + 4)}" y="{num(y + size * 0.35)}" font-size="{size:g}" font-weight="bold">'
                   f"{escape(p.legend_title)}</text>")
        y += line_h
    for e in p.legend_entries:
        out.append(_entry_svg(e, lx + 4, y, size))
        y += line_h
    out.append("</g>")
    return "".join(out)


def bottom_legend(entries: list[dict], width: float, top: float) -> str:
    per_row = min(len(entries), 4)
    col_w = min(width / per_row, 40 + max(text_width(e["label"], SMALL) for e in entries))
    start = (width - col_w * per_row) / 2
    out = []
    for k, e in enumerate(entries):
        r, c = divmod(k, per_row)
        out.append(_entry_svg(e, start + c * col_w, top + 8 + r * 16, SMALL))
    return "\n".join(out)


def colourbar(bar: dict, box: tuple, width: float, height: float) -> str:
    x0, y0, w, h = box
    colours, n = bar["colours"], len(bar["colours"])
    out = []
    if bar["at"] == "right":
        bx, bh = x0 + w + 14, h * 0.75
        by = y0 + (h - bh) / 2
        step = bh / n
        for k, colour in enumerate(colours):  # 0 at the bottom
            out.append(f'<rect x="{num(bx)}" y="{num(by + bh - (k + 1) * step)}" width="12" height="{num(step + 0.2)}" '
                       f'fill="{colour}"/>')
        for t, label in zip(bar["ticks"], bar["labels"]):
            ty = by + bh - t * bh
            out.append(f'<path d="M{num(bx + 12)} {num(ty)}h3" stroke="{MUTED}" stroke-width="0.8"/>'
                       f'<text x="{num(bx + 17)}" y="{num(ty + 3)}" font-size="{SMALL:g}">{escape(label)}</text>')
        if bar["title"]:
            out.append(f'<text transform="translate({num(bx + 60)} {num(by + bh / 2)}) rotate(-90)" text-anchor="middle" '
                       f'font-size="{SMALL:g}">{escape(bar["title"])}</text>')
    else:
        bw = w * 0.45
        bx, by = x0 + (w - bw) / 2, height - 40
        step = bw / n
        for k, colour in enumerate(colours):
            out.append(f'<rect x="{num(bx + k * step)}" y="{num(by)}" width="{num(step + 0.2)}" height="9" fill="{colour}"/>')
        for t, label in zip(bar["ticks"], bar["labels"]):
            tx = bx + t * bw
            out.append(f'<path d="M{num(tx)} {num(by + 9)}v3" stroke="{MUTED}" stroke-width="0.8"/>'
                       f'<text x="{num(tx)}" y="{num(by + 21)}" text-anchor="middle" font-size="{SMALL:g}">{escape(label)}</text>')
        if bar["title"]:
            out.append(f'<text x="{num(bx + bw / 2)}" y="{num(by + 33)}" text-anchor="middle" font-size="{SMALL:g}">'
                       f"{escape(bar['title'])}</text>")
    return "\n".join(out)


def blend(stops: list[str], t: float) -> str:
    """The colour at ``t`` in [0, 1] along the hex colour ``stops`` (equally spaced), as ``#rrggbb``."""
    t = min(1.0, max(0.0, float(t)))
    pos = t * (len(stops) - 1)
    k = min(int(pos), len(stops) - 2)
    f = pos - k
    a, b = _rgb(stops[k]), _rgb(stops[k + 1])
    return "#" + "".join(f"{round(u + (v - u) * f):02x}" for u, v in zip(a, b))


def _rgb(colour: str) -> tuple[int, int, int]:
    colour = colour.lstrip("#")
    return int(colour[0:2], 16), int(colour[2:4], 16), int(colour[4:6], 16)
