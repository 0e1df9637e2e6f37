"""Page layout shared by the report and the comparison page: style, scripts, table and number helpers.

The page is one self-contained file: inline CSS (screen and print), figures as inline
SVG, and a few lines of inline script that only measure the figures after layout
(``data-figures`` / ``data-figures-ok`` / ``data-figure-sizes`` / ``data-page-errors``,
``data-tables-clipped`` (tables wider than their box) and ``data-sections``, each section's
``id:top:height``, on ``<body>``, read by the tests that open the page in a headless browser
and by ``scripts/report_picture.py`` and ``scripts/shoot_report.py``). Nothing is
fetched from anywhere.
"""

from __future__ import annotations

import math
from html import escape

import numpy as np

from .. import __version__

CSS = """
:root { --ink: #1d232b; --muted: #4a5563; --line: #cfd6dc; --paper: #fbfbf8; --card: #ffffff;
        --accent: #17656f; --accent-soft: #e3eff0; --warn: #8a4b00; --warn-soft: #fbf0e1; }
* { box-sizing: border-box; }
html { background: var(--paper); }
body { margin: 0; color: var(--ink); background: var(--paper); line-height: 1.45; font-size: 15px;
       font-family: system-ui, -apple-system, "Segoe UI", "DejaVu Sans", "Liberation Sans", sans-serif; }
header.top { background: #14343a; color: #f4f7f7; padding: 1.4rem 2rem 1.2rem; }
header.top .kicker { margin: 0; letter-spacing: .12em; text-transform: uppercase; font-size: .75rem; color: #b9d7da; }
header.top h1 { margin: .2rem 0 .3rem; font-size: 1.6rem; font-weight: 650; }
header.top p.sub { margin: 0; color: #d7e4e6; }
nav.toc { position: sticky; top: 0; z-index: 2; background: #ffffffee; border-bottom: 1px solid var(--line);
          padding: .45rem 2rem; font-size: .88rem; }
nav.toc a { color: var(--accent); margin-right: 1.1rem; text-decoration: none; white-space: nowrap; }
nav.toc a:hover { text-decoration: underline; }
main { max-width: 1120px; margin: 0 auto; padding: .5rem 2rem 2rem; }
section { margin-top: 1.8rem; }
h2 { font-size: 1.22rem; margin: 0 0 .6rem; padding-left: .6rem; border-left: 4px solid var(--accent); }
h3 { font-size: 1rem; margin: 1rem 0 .4rem; }
p { margin: .4rem 0; }
.muted { color: var(--muted); }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(330px, 1fr)); gap: .8rem; }
.card { background: var(--card); border: 1px solid var(--line); border-radius: 6px; padding: .7rem .9rem; }
.card h3 { margin: 0 0 .4rem; font-size: .9rem; text-transform: uppercase; letter-spacing: .06em; color: var(--accent); }
dl.kv { display: grid; grid-template-columns: max-content minmax(0, 1fr); gap: .15rem .8rem; margin: 0; font-size: .9rem; }
dl.kv dt { color: var(--muted); }
dl.kv dd { margin: 0; overflow-wrap: break-word; min-width: 0; }
table { border-collapse: collapse; background: var(--card); font-size: .88rem; margin: .4rem 0 .8rem; }
th, td { border-bottom: 1px solid var(--line); padding: .28rem .6rem; text-align: left; vertical-align: top; }
th { background: var(--accent-soft); font-weight: 600; }
tbody tr:nth-child(even) td { background: #f5f7f8; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num { white-space: nowrap; }
.scroll { max-width: 100%; overflow-x: auto; }
td.feature { font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: .84rem; overflow-wrap: anywhere; }
td.docs { font-size: .82rem; max-width: 34rem; }
td.docs div + div { margin-top: .3rem; }
td.wide { min-width: 22rem; }
td.contributions { min-width: 16rem; }
.nowrap { white-space: nowrap; }
.rare { color: var(--warn); font-weight: 600; font-size: .78rem; }
.source { color: var(--muted); font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace; }
.labels { display: grid; grid-template-columns: repeat(auto-fit, minmax(300px, 1fr)); gap: 0 1rem; }
.labels table { width: 100%; }
figure.plot { background: var(--card); border: 1px solid var(--line); border-radius: 6px; margin: .6rem 0 1rem; padding: .7rem; }
figure.plot svg.figure { display: block; width: 100%; height: auto; margin: 0 auto; }
figure.plot figcaption { margin-top: .45rem; font-size: .9rem; color: var(--ink); }
figure.plot figcaption b { color: var(--accent); }
.note { background: var(--warn-soft); border-left: 4px solid var(--warn); padding: .5rem .8rem; margin: .6rem 0; font-size: .92rem; }
.numbers { background: var(--card); border: 1px solid var(--line); border-radius: 6px; padding: .6rem .9rem; }
.numbers li { margin: .15rem 0; }
footer { max-width: 1120px; margin: 0 auto; padding: 1rem 2rem 2rem; color: var(--muted); font-size: .82rem; }
@media print {
  @page { size: A4; margin: 13mm 12mm; }
  html, body { background: #ffffff; font-size: 10pt; }
  header.top { background: #ffffff; color: var(--ink); padding: 0 0 .4rem; border-bottom: 2px solid var(--ink); }
  header.top .kicker, header.top p.sub { color: var(--muted); }
  nav.toc { display: none; }
  main, footer { max-width: none; padding: 0; }
  section { margin-top: 1rem; }
  h2 { break-after: avoid; }
  figure.plot, table, .card, .note, .numbers { break-inside: avoid; }
  .scroll { overflow: visible; }
  figure.plot, .card, table { border-color: #9aa3ab; }
  tbody tr:nth-child(even) td { background: #ffffff; }
  a { color: inherit; text-decoration: none; }
}
"""

HEAD_SCRIPT = ("window.addEventListener('error', function () { var b = document.body; if (b) { "
               "b.setAttribute('data-page-errors', String(Number(b.getAttribute('data-page-errors') || 0) + 1)); } });")

MEASURE_SCRIPT = """(function () {
  function measure() {
    var figs = document.querySelectorAll('svg.figure'), ok = 0, sizes = [];
    for (var i = 0; i < figs.length; i++) {
      var r = figs[i].getBoundingClientRect();
      sizes.push(Math.round(r.width) + 'x' + Math.round(r.height));
      if (r.width > 0 && r.height > 0) { ok += 1; }
    }
    var b = document.body;
    b.setAttribute('data-figures', String(figs.length));
    b.setAttribute('data-figures-ok', String(ok));
    b.setAttribute('data-figure-sizes', sizes.join(' '));
    b.setAttribute('data-page-height', String(document.documentElement.scrollHeight));
    var secs = document.querySelectorAll('section[id]'), where = [];
    for (var j = 0; j < secs.length; j++) {
      var s = secs[j].getBoundingClientRect();
      where.push(secs[j].id + ':' + Math.round(s.top + window.scrollY) + ':' + Math.round(s.height));
    }
    b.setAttribute('data-sections', where.join(' '));
    var wide = document.querySelectorAll('div.scroll'), clipped = 0;
    for (var k = 0; k < wide.length; k++) { if (wide[k].scrollWidth > wide[k].clientWidth + 1) { clipped += 1; } }
    b.setAttribute('data-tables-clipped', String(clipped));
    if (!b.hasAttribute('data-page-errors')) { b.setAttribute('data-page-errors', '0'); }
  }
  measure();
  window.addEventListener('load', measure);
})();"""

# ---------------------------------------------------------------- small helpers


def fmt(value, digits: int = 4) -> str:
    """A number for a table cell: ``–`` for missing, thousands separators for counts."""
    if value is None:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}"
    try:
        value = float(value)
    except (TypeError, ValueError):
        return escape(str(value))
    if not math.isfinite(value):
        return "–"
    if value == 0:
        return "0"
    if abs(value) >= 1e9 or abs(value) < 1e-3:
        return f"{value:.{max(1, digits - 1)}e}"
    if abs(value) >= 1000:
        return f"{value:,.0f}"
    return f"{value:.{digits}g}"


def pct(value) -> str:
    return "–" if value is None or not math.isfinite(value) else f"{100 * value:.1f}%"


def table(header: list, rows: list, numeric: set | None = None, cls: str = "") -> str:
    """An HTML table; cells are trusted HTML (escape before), ``numeric`` column indices right-aligned."""
    numeric = numeric or set()
    head = "".join(f'<th class="num">{h}</th>' if i in numeric else f"<th>{h}</th>" for i, h in enumerate(header))
    body = []
    for row in rows:
        cells = []
        for i, cell in enumerate(row):
            if isinstance(cell, tuple):  # (html, class)
                cells.append(f'<td class="{cell[1]}">{cell[0]}</td>')
            elif i in numeric:
                cells.append(f'<td class="num">{cell}</td>')
            else:
                cells.append(f"<td>{cell}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    cls_attr = f' class="{cls}"' if cls else ""
    return f'<div class="scroll"><table{cls_attr}><thead><tr>{head}</tr></thead><tbody>{"".join(body)}</tbody></table></div>'


def kv(pairs: list) -> str:
    return '<dl class="kv">' + "".join(f"<dt>{escape(str(k))}</dt><dd>{v}</dd>" for k, v in pairs) + "</dl>"


def figure_block(svg: str | None, guide: str, missing: str) -> str:
    if svg is None:
        return f'<p class="note">{escape(missing)}</p>'
    return f'<figure class="plot">{svg}<figcaption><b>How to read:</b> {escape(guide)}</figcaption></figure>'


def page(title: str, subtitle: str, nav: list, sections: list) -> str:
    links = "".join(f'<a href="#{anchor}">{escape(name)}</a>' for anchor, name in nav)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<meta name=\"generator\" content=\"lintext {escape(__version__)}\">\n"
        f"<title>{escape(title)}</title>\n<style>{CSS}</style>\n<script>{HEAD_SCRIPT}</script>\n</head>\n<body>\n"
        f'<header class="top"><p class="kicker">lintext</p><h1>{escape(title)}</h1><p class="sub">{subtitle}</p></header>\n'
        f'<nav class="toc">{links}</nav>\n<main>\n' + "\n".join(sections) + "\n</main>\n"
        f"<footer>Written by lintext {escape(__version__)}. This page is self-contained: its figures are inline SVG "
        "and it loads nothing from elsewhere.</footer>\n"
        f"<script>{MEASURE_SCRIPT}</script>\n</body>\n</html>\n"
    )


def section(anchor: str, title: str, body: str) -> str:
    return f'<section id="{anchor}"><h2>{escape(title)}</h2>\n{body}\n</section>'


def name_cell(text: str) -> tuple:
    return (escape(text), "feature")
