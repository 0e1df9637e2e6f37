"""The report's chart drawer: well-formed SVG, points where the axes say, ticks by the usual rules.

External references: Python's XML parser (``xml.etree.ElementTree``) for well-formedness; the
1-2-5 tick steps and decade ticks on log axes are common practice in plotting (the values below
are worked by hand); colour blending is linear interpolation of the RGB channels.
"""

from __future__ import annotations

import re
import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np

from lintext.report import confusions, figures
from lintext.report.svgdraw import blend
from lintext.report.svgplot import Chart, Scale

from ..conftest import ROOT


def parse(svg: str) -> ET.Element:
    return ET.fromstring(svg)


def path_points(d: str) -> list[list[tuple[float, float]]]:
    """Absolute ``M``/``L`` path data as its subpaths' points."""
    out = []
    for cmd, x, y in re.findall(r"([ML])(-?[\d.]+) (-?[\d.]+)", d):
        if cmd == "M":
            out.append([])
        out[-1].append((float(x), float(y)))
    return out


def test_linear_ticks_step_by_one_two_or_five():
    scale = Scale()
    scale.lo, scale.hi = 0.0, 1.0
    assert scale.ticks(6)[0] == [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]  # worked by hand: raw step 0.2
    scale.lo, scale.hi = -3.2, 47.0
    assert scale.ticks(6)[0] == [0.0, 10.0, 20.0, 30.0, 40.0]  # raw step 10.04 -> 10 (1-2-5 rule)
    scale.lo, scale.hi = 0.85, 4.15
    assert scale.ticks(5, integer=True) == ([1.0, 2.0, 3.0, 4.0], ["1", "2", "3", "4"])
    scale.lo, scale.hi = 0.3, 0.31
    values, labels = scale.ticks(6)
    assert labels == ["0.3", "0.302", "0.304", "0.306", "0.308", "0.31"]  # no 0.30000000000000004


def test_log_ticks_are_decades_or_two_and_five_on_short_spans():
    scale = Scale("log")
    scale.lo, scale.hi = 0.8, 1200.0
    assert scale.ticks()[1] == ["1", "10", "100", "1000"]
    scale.lo, scale.hi = 1.5, 30.0  # a span under 40: 2 and 5 within the decade too
    assert scale.ticks()[1] == ["2", "5", "10", "20"]
    scale.lo, scale.hi = 1e-12, 1e12  # 24 decades: every fourth, so that the labels fit
    assert scale.ticks()[1] == ["1e-12", "1e-08", "0.0001", "1", "10000", "1e+08", "1e+12"]


def test_points_land_where_the_axes_say():
    chart = Chart(6, 4)
    (panel,) = chart.panels
    panel.line([1, 2, 3, np.nan, 5], [10, 20, 30, 40, 50], "#000000")
    panel.set(xlim=(0, 6), ylim=(0, 60))
    svg = chart.svg("t", "a test")
    root = parse(svg)
    assert root.get("aria-label") == "a test"
    lines = [p.get("d") for p in root.iter("path") if p.get("stroke") == "#000000"]
    (subpaths,) = [path_points(d) for d in lines]
    assert len(subpaths) == 2  # the NaN breaks the line
    (a, b, c), (e,) = subpaths
    # equal steps in data are equal steps on the page; y grows upwards
    assert abs((b[0] - a[0]) - (c[0] - b[0])) <= 0.11 and abs((e[0] - c[0]) - 2 * (b[0] - a[0])) <= 0.21
    assert a[1] > b[1] > c[1] > e[1]
    assert abs((a[1] - b[1]) - (b[1] - c[1])) <= 0.11


def test_reversed_axis_and_log_axis():
    chart = Chart(6, 4)
    (panel,) = chart.panels
    panel.line([1.0, 0.0], [1, 10], "#000000", marker=None)
    panel.set(xlim=(1.02, -0.02), yscale="log", ylim=(1, 100))
    root = parse(chart.svg("t", "x"))
    (subpath,) = path_points([p.get("d") for p in root.iter("path") if p.get("stroke") == "#000000"][0])
    (x1, y1), (x0, y10) = subpath
    assert x1 < x0  # 1 on the left, 0 on the right
    box = root.find(".//clipPath/rect")  # the panel
    top, height = float(box.get("y")), float(box.get("height"))
    # y = 1 is the bottom edge; log10(10) is half-way between log10(1) and log10(100): half the height
    assert abs(y1 - (top + height)) <= 0.1 and abs(y10 - (top + height / 2)) <= 0.1, (y1, y10, top, height)


def test_blend_interpolates_each_channel():
    assert blend(["#000000", "#ffffff"], 0.5) == "#808080"
    assert blend(["#ff0000", "#00ff00", "#0000ff"], 0.75) == "#0080" + "80"  # half-way from green to blue
    assert blend(["#102030", "#405060"], 0.0) == "#102030" and blend(["#102030", "#405060"], 1.0) == "#405060"


def test_ids_are_prefixed_and_unique_across_figures():
    history = [{"epoch": e, "train_loss": 1 / e, "dev_loss": 1.2 / e, "dev_accuracy": 0.5 + e / 20,
                "dev_macro_f1": 0.4 + e / 20, "learning_rate": 0.1} for e in range(1, 6)]
    a = figures.learning_curves(history, 3, "softmax", prefix="one")
    b = figures.learning_curves(history, 3, "softmax", prefix="two")
    ids = re.findall(r'\sid="([^"]+)"', a + b)
    assert ids and len(ids) == len(set(ids))
    assert all(i.startswith(("one-", "two-")) for i in ids)
    for svg in (a, b):
        root = parse(svg)
        assert root.tag == "svg" and len(root.findall(".//{*}text")) + len(root.findall(".//text")) > 10


def test_heat_view_at_three_hundred_labels_is_one_cell_per_coloured_pair():
    rng = np.random.default_rng(0)
    n = 300
    counts = np.diag(rng.integers(20, 40, size=n))
    pairs = rng.integers(0, n, size=(500, 2))
    for i, j in pairs:
        if i != j:
            counts[i, j] += 1 + (i + j) % 4
    names = [f"label-{k:03d}" for k in range(n)]
    shown = np.arange(n)
    svg = figures.render(confusions._heat, "cm", "heat", counts, names, shown, "test")
    root = parse(svg)
    coloured = int((counts - np.diag(np.diag(counts)) > 0).sum())
    rects = [r for r in root.iter("rect") if r.get("fill") not in (None, "none", "white")]  # not the clip, frame or page
    cells = [r for r in rects if r.get("height") != "9"]  # the colour bar's steps are 9 pt high
    assert len(cells) == coloured + n  # every confused pair (however small its share) and the grey diagonal
    assert len(rects) - len(cells) == 32
    assert sum(1 for r in cells if r.get("fill") == confusions.DIAGONAL) == n


def test_writing_a_report_loads_no_plotting_library(tmp_path):
    code = ("import sys, lintext; from lintext.report.writer import write_report; "
            "from lintext.text.readers import Corpus; "
            "c = Corpus(['tap water smells', 'meter reading late'] * 6, ['x', 'y'] * 6, [f'm:{i}' for i in range(12)]); "
            "m = lintext.build_model(c, dev=c, featurizer={'min_df': 1}, options={'epochs': 2}); "
            f"write_report(m, {str(tmp_path)!r}); "
            "print(sorted(n for n in sys.modules if n.split('.')[0] in ('matplotlib', 'PIL')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip().splitlines()[-1] == "[]"
    assert (tmp_path / "report.html").read_text(encoding="utf-8").count("<svg aria-label=") >= 3
