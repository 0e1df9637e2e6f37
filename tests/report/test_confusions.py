"""The confusion section at many labels: pairs, the heat view's order and size, the CSV, and the terminal.

Expected values come from confusion matrices built by hand here (labels confused in known
groups), from ``sklearn.metrics.confusion_matrix`` and from worked examples in the comments.
"""

from __future__ import annotations

import csv
import re
import time

import numpy as np
import pytest

from lintext.report.confusions import (HEAT_MAX_LABELS, confusion_order, confusion_section, heat_labels,
                                       write_confusion_csv)


def grouped_matrix(n_labels: int, group: int = 3, seed: int = 0):
    """A confusion matrix whose labels are confused only within groups of ``group`` consecutive
    labels, then shuffled: the order that puts confused labels together is known."""
    rng = np.random.default_rng(seed)
    counts = np.zeros((n_labels, n_labels), dtype=np.int64)
    for i in range(n_labels):
        counts[i, i] = 40
        g = i // group
        for j in range(g * group, min((g + 1) * group, n_labels)):
            if j != i:
                counts[i, j] = rng.integers(3, 9)
    perm = rng.permutation(n_labels)
    names = [f"label-{k:03d}" for k in range(n_labels)]
    return counts[np.ix_(perm, perm)], [names[k] for k in perm], group


def metrics_for(counts, names):
    from lintext.engine.metrics import label_scores, summary_scores

    scores = label_scores(counts)
    per = {n: {"precision": float(scores["precision"][j]), "recall": float(scores["recall"][j]), "f1": float(scores["f1"][j]),
               "support": int(scores["support"][j]), "predicted": int(scores["predicted"][j]), "known": True}
           for j, n in enumerate(names)}
    return {**summary_scores(counts), "per_label": per, "absent_labels": [], "labels": names, "confusion": counts.tolist()}


def test_order_puts_each_group_together():
    counts, names, group = grouped_matrix(58)
    order = confusion_order(counts)
    assert sorted(order.tolist()) == list(range(58))
    groups = [int(names[k].split("-")[1]) // group for k in order]
    # each group of mutually confused labels is one contiguous run in the order
    runs = [g for k, g in enumerate(groups) if k == 0 or g != groups[k - 1]]
    assert len(runs) == len(set(groups))


@pytest.mark.parametrize("n_labels", [58, 200])
def test_section_reads_at_many_labels(n_labels, tmp_path):
    counts, names, _ = grouped_matrix(n_labels)
    m = metrics_for(counts, names)
    started = time.perf_counter()
    html = confusion_section(m, names, "test")
    seconds = time.perf_counter() - started
    svg = html[html.index("<svg"):html.index("</svg>")]
    # images (the matrix, the colour bar), no text element per cell: tick labels, titles and colour bar only
    assert svg.count("<image") <= 2
    shown = min(n_labels, HEAT_MAX_LABELS)
    assert svg.count("<text") < 2 * shown + 40, svg.count("<text")
    # every shown label is written on both axes, as text
    ticks = re.findall(r">(label-\d{3})<", svg)
    assert len(ticks) == 2 * shown
    if n_labels > HEAT_MAX_LABELS:
        assert f"the {HEAT_MAX_LABELS} labels involved in the most errors (of {n_labels})" in html
    # the pairs table: the largest off-diagonal count first (NumPy over the matrix, directly)
    off = counts - np.diag(np.diag(counts))
    i, j = np.unravel_index(np.argmax(off), off.shape)
    first = re.search(r"<tbody><tr><td>([^<]+)</td><td>([^<]+)</td><td class=\"num\">(\d+)</td>", html)
    assert int(first.group(3)) == off.max()
    assert counts[names.index(first.group(1)), names.index(first.group(2))] == off.max()
    assert seconds < 30  # generous: a guard against one text object per cell, not a timing target
    path = write_confusion_csv(m, names, tmp_path / "confusion.csv")
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0][1:] == names and [r[0] for r in rows[1:]] == names
    np.testing.assert_array_equal(np.array([[int(v) for v in r[1:]] for r in rows[1:]]), counts)


def test_heat_labels_keep_the_most_involved():
    counts, names, _ = grouped_matrix(90)
    counts[5, 7] += 500  # labels 5 and 7 are now the most involved in errors
    shown = heat_labels(counts, limit=10)
    assert len(shown) == 10 and {5, 7} <= set(shown.tolist())


def test_terminal_shows_pairs_beyond_twelve_labels(tmp_path, monkeypatch):
    from lintext.cli import commands_model

    counts, names, _ = grouped_matrix(58)
    printed = []
    monkeypatch.setattr(commands_model.out, "print", lambda obj, **kw: printed.append(obj))
    commands_model.print_confusions(counts.tolist(), names)
    table = printed[0]
    assert [c.header for c in table.columns] == ["true label", "predicted as", "documents", "share of the true label"]
    assert table.row_count == 20
    off = counts - np.diag(np.diag(counts))
    assert str(off.max()) in list(table.columns[2].cells)[0]


# ---------------------------------------------------------------- the page in a browser, at 58 labels


@pytest.mark.slow
def test_chromium_renders_a_58_label_report_legibly(tmp_path):
    import lintext
    from lintext.report.writer import write_report

    from ..conftest import many_label_rows, write_csv
    from .test_report import ARTIFACTS, assert_offline, assert_rendered, open_in_browser

    rows = many_label_rows(58)
    cut = int(len(rows) * 0.7)
    model = lintext.build_model(write_csv(tmp_path / "train.csv", rows[:cut]), test=write_csv(tmp_path / "test.csv", rows[cut:]),
                                options={"epochs": 8})
    folder = model.save(tmp_path / "model", extra=lambda f: write_report(model, f))
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert_offline(html)
    assert "most confused pairs" in html and (folder / "confusion.csv").is_file()
    shot = ARTIFACTS / "report-58-labels.png"
    attrs, console = open_in_browser(folder / "report.html", shot, tmp_path)
    assert_rendered(attrs, console, html, shot)
    # the heat view's tick labels as drawn at 1280 px: 7.5 pt in the figure, scaled by rendered / natural width
    heat = html.index('aria-label="Confusions on the test set"')
    natural_pt = float(re.search(r'viewBox="0 0 ([\d.]+) ', html[heat:]).group(1))
    figures_before = html[:heat].count("<svg aria-label=")
    rendered_px = int(attrs["data-figure-sizes"].split()[figures_before].split("x")[0])
    tick_px = 7.5 * 4 / 3 * rendered_px / (natural_pt * 4 / 3)
    assert tick_px >= 8.5, tick_px  # common practice: about 9 px is the smallest text read without zooming
