"""A normal run prints no library warning: labels in Japanese or with an emoji draw without font warnings."""

from __future__ import annotations

import warnings

import lintext
from lintext.report.writer import write_report
from lintext.text.readers import Corpus


def test_labels_outside_the_measuring_font_render_without_warnings(tmp_path):
    texts, labels = [], []
    for i in range(12):
        texts += [f"電車 が 遅れた 駅{i} ホーム", f"料金 が 高い 請求{i} 支払い"]
        labels += ["交通", "請求😀"]
    corpus = Corpus(texts, labels, [f"mem:{i}" for i in range(len(texts))])
    model = lintext.build_model(corpus, dev=corpus, featurizer={"min_df": 1}, options={"epochs": 2})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        written = write_report(model, tmp_path)
    # A drawer that measures text with its own fonts warns once per glyph it lacks; the report's
    # figures measure nothing and leave the glyphs to the browser.
    assert [str(w.message) for w in caught] == []
    html = written["report"].read_text(encoding="utf-8")
    assert "交通" in html and "請求😀" in html  # kept as text in the SVG: the browser's fonts draw it
