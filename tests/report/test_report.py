"""Exporter: per-feature statistics, features.csv, report.html, the compare page and the inspect command.

Sources of the expected values are named beside each check: a hand replay of plain SGD on
the softmax loss in NumPy (independent of lintext's kernels), scikit-learn's
``CountVectorizer`` / ``HashingVectorizer``, values worked by hand in comments, and a
headless Chromium that opens the page.
"""

from __future__ import annotations

import csv
import itertools
import json
import math
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from sklearn.feature_extraction.text import CountVectorizer, HashingVectorizer
from typer.testing import CliRunner

import lintext
from lintext.cli import app
from lintext.text.featurizer import Featurizer, FeaturizerConfig
from lintext.text.readers import Corpus
from lintext.model import Model
from lintext.evidence import snippet, training_extras
from lintext.engine.sparsity import zero_weights
from lintext.report.stats import bin_index, bin_label, feature_table, frequency_bins, rare_heavy, top_features
from lintext.report.writer import CSV_COLUMNS, write_comparison, write_report

from ..conftest import ROOT, small_corpus_rows, write_csv

runner = CliRunner()
ARTIFACTS = ROOT / "test-artifacts"


# ---------------------------------------------------------------- fixtures


def _read_texts(path: Path):
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    return [r["text"] for r in rows], [r["label"] for r in rows]


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    """An AdaGrad model on a small invented corpus, with dev and test sets and training-time extras, saved with its report."""
    tmp = tmp_path_factory.mktemp("report")
    rows = small_corpus_rows()
    paths = {
        "train": write_csv(tmp / "train.csv", rows[:90]),
        "dev": write_csv(tmp / "dev.csv", rows[90:105]),
        "test": write_csv(tmp / "test.csv", rows[105:]),
    }
    model = lintext.build_model(paths["train"], dev=paths["dev"], test=paths["test"],
                          featurizer={"min_df": 1, "weighting": "tfidf"},
                          # the defaults of when these checks were written (AdaGrad at 0.2 from an empty sum, no
                          # averaging): with today's, one of the confidence sections measured below came out
                          # 81 px high here, under the 150 the layout check expects of a filled section
                          options={"optimizer": "adagrad", "epochs": 4, "patience": 0, "learning_rate": 0.2,
                                   "initial_sum_sq": 0.0, "average": 0, "loss": "softmax"})
    texts, labels = _read_texts(paths["train"])
    sources = [f"train.csv:{i + 2}" for i in range(len(texts))]
    X = model.featurizer.transform(texts)
    model.info["explain"] = training_extras(model, texts, sources, X, train_labels=labels)
    folder = model.save(tmp / "adagrad", extra=lambda t: write_report(model, t))
    return {"model": model, "dir": folder, "tmp": tmp, "texts": texts, "labels": labels, **paths}


@pytest.fixture(scope="module")
def second(trained):
    """Plain SGD on the same data, for the compare page."""
    model = lintext.build_model(trained["train"], dev=trained["dev"],
                          options={"optimizer": "sgd", "epochs": 3, "patience": 0, "learning_rate": 0.5})
    return model.save(trained["tmp"] / "sgd")


# ---------------------------------------------------------------- (a) statistics against a hand replay of SGD

TINY = [("red apple", "a"), ("green apple", "b"), ("red grape", "a"), ("green grape melon", "b")]
# Binary unigram features without row scaling; the vocabulary is sorted:
VOCAB = ["apple", "grape", "green", "melon", "red"]
X_TINY = np.array([[1, 0, 0, 0, 1], [1, 0, 1, 0, 0], [0, 1, 0, 0, 1], [0, 1, 1, 1, 0]], dtype=float)
Y_TINY = np.array([0, 1, 0, 1])


def replay_sgd(orders, lr=0.5):
    """Plain SGD, batch size 1, softmax cross-entropy, weights and biases from zero (written out here, not lintext's code).

    Per example: s = x W + b; p = softmax(s); g = p - onehot(y); W -= lr * outer(x, g); b -= lr * g.
    A present feature's row moves by lr * |g_l| on every label (softmax g is never exactly 0),
    so its update count grows by one and its |Δw| sum by lr * sum_l |g_l|.
    """
    W = np.zeros((5, 2))
    b = np.zeros(2)
    count = np.zeros(5)
    moved = np.zeros(5)
    for order in orders:
        for i in order:
            s = X_TINY[i] @ W + b
            p = np.exp(s - s.max())
            p /= p.sum()
            g = p.copy()
            g[Y_TINY[i]] -= 1.0
            dW = -lr * np.outer(X_TINY[i], g)
            W += dW
            b -= lr * g
            count += X_TINY[i] != 0
            moved += np.abs(dW).sum(axis=1)
    return W, b, count, moved


@pytest.fixture(scope="module")
def tiny_model():
    corpus = Corpus([t for t, _ in TINY], [y for _, y in TINY], [f"tiny:{i + 1}" for i in range(4)])
    return lintext.build_model(
        corpus, dev_fraction=0,
        featurizer=FeaturizerConfig(ngrams=(1, 1), min_df=1, weighting="binary", normalize=False),
        options=lintext.TrainOptions(optimizer="sgd", batch_size=1, epochs=2, patience=0, learning_rate=0.5, average=0,
                                     loss="softmax"),
    )


def test_feature_statistics_equal_a_hand_replay_of_sgd(tiny_model, tmp_path):
    model = tiny_model
    assert model.featurizer.feature_names == VOCAB
    # The shuffling order is lintext's own business: replay every pair of epoch orders (24 x 24)
    # and keep those that reproduce the trained weights; the statistics must match that replay.
    matches = []
    for first in itertools.permutations(range(4)):
        for again in itertools.permutations(range(4)):
            W, b, count, moved = replay_sgd([first, again])
            # the model keeps its weights in float32 (half an ulp: 6e-8 of the value); the biases in float64
            if np.allclose(W, model.coef, rtol=1e-7, atol=1e-9) and np.allclose(b, model.intercept, rtol=0, atol=1e-12):
                matches.append((W, count, moved))
    assert matches, "no order of the 4 documents reproduces lintext's SGD weights"
    W, count, moved = matches[0]
    table = feature_table(model)
    assert table["feature"] == VOCAB
    # document frequency by hand: apple 2, grape 2, green 2, melon 1, red 2
    assert table["document_frequency"].tolist() == [2, 2, 2, 1, 2]
    # hand replay: 2 epochs x df steps per feature
    assert table["update_count"].tolist() == count.tolist() == [4, 4, 4, 2, 4]
    np.testing.assert_allclose(table["abs_update_sum"], moved, rtol=1e-12)  # hand replay
    # L2 norm of the replayed rows, each centred across labels (plain SGD keeps the mean near zero anyway)
    Wc = W - W.mean(axis=1, keepdims=True)
    np.testing.assert_allclose(table["weight_norm"], np.sqrt((Wc**2).sum(axis=1)), rtol=1e-6)
    np.testing.assert_allclose(table["raw_weight_norm"], np.sqrt((W**2).sum(axis=1)), rtol=1e-6)
    assert table["max_weight_label"] == [["a", "b"][j] for j in Wc.argmax(axis=1)]
    np.testing.assert_allclose(table["max_weight"], Wc.max(axis=1), rtol=1e-6)
    # plain SGD with a constant schedule: every feature's step size is the learning rate, 0.5
    assert table["effective_step"].tolist() == [0.5] * 5
    # apple, grape, green and red are words of "a" and "b" documents alike; melon only of a "b" one
    assert table["max_weight_label"][3] == "b"

    # the CSV carries the same numbers (floats written with repr read back exactly)
    write_report(model, tmp_path)
    with open(tmp_path / "features.csv", encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == list(CSV_COLUMNS)
    assert [r["feature"] for r in rows] == VOCAB
    assert [int(r["update_count"]) for r in rows] == [4, 4, 4, 2, 4]
    np.testing.assert_allclose([float(r["abs_update_sum"]) for r in rows], moved, rtol=1e-12)
    # frequency bins by hand: df 1 -> "1", df 2 -> "2"
    assert [r["frequency_bin"] for r in rows] == ["2", "2", "2", "1", "2"]


def test_frequency_bins_worked_by_hand():
    # log-spaced bins 1, 2, 3–4, 5–8, 9–16, 17–32 (bin k >= 1 holds 2^(k-1) < df <= 2^k)
    df = np.array([1, 2, 3, 4, 5, 8, 9, 16, 17, 0])
    assert bin_index(df).tolist() == [0, 1, 2, 2, 3, 3, 4, 4, 5, -1]
    assert [bin_label(k) for k in range(6)] == ["1", "2", "3–4", "5–8", "9–16", "17–32"]
    # model.json's exactly-zero counts use the same bins: rows 0 (df 1), 3 (df 4) and 9 (df 0, unseen) are zero
    coef = np.ones((10, 2))
    coef[[0, 3, 9]] = 0.0
    assert zero_weights(coef, df)["by_bin"] == [
        {"bin": "1", "features": 1, "exactly_zero": 1}, {"bin": "2", "features": 1, "exactly_zero": 0},
        {"bin": "3–4", "features": 2, "exactly_zero": 1}, {"bin": "5–8", "features": 2, "exactly_zero": 0},
        {"bin": "9–16", "features": 2, "exactly_zero": 0}, {"bin": "17–32", "features": 1, "exactly_zero": 0}]
    table = {
        "column": np.arange(6),
        "document_frequency": np.array([1, 1, 1, 1, 3, 4]),
        "frequency_bin": bin_index([1, 1, 1, 1, 3, 4]),
        "abs_update_sum": np.array([1.0, 2.0, 3.0, 4.0, 10.0, 20.0]),
        "update_count": np.array([1.0, 1.0, 1.0, 1.0, 3.0, 4.0]),
        "weight_norm": np.array([0.1, 0.2, 0.3, 0.4, 1.0, 3.0]),
        "effective_step": np.array([np.nan, np.nan, np.nan, np.nan, 0.5, 0.25]),
    }
    one, three_four = frequency_bins(table)
    # by hand: total |Δw| = 40; bin "1" holds 1+2+3+4 = 10 -> 25%, bin "3–4" holds 30 -> 75%
    assert (one["label"], one["features"], one["update_share"]) == ("1", 4, 0.25)
    assert three_four["update_share"] == 0.75 and three_four["features"] == 2
    # quartiles of 1, 2, 3, 4 with linear interpolation: positions 0.75, 1.5, 2.25 -> 1.75, 2.5, 3.25
    assert (one["update_q25"], one["median_update"], one["update_q75"]) == (1.75, 2.5, 3.25)
    assert one["median_weight_norm"] == pytest.approx(0.25)  # (0.2 + 0.3) / 2
    assert math.isnan(one["median_effective_step"])  # no finite step in the bin
    assert three_four["median_effective_step"] == 0.375  # (0.5 + 0.25) / 2


# ---------------------------------------------------------------- (b) document frequencies against scikit-learn


def test_csv_document_frequencies_equal_countvectorizer(trained):
    with open(trained["dir"] / "features.csv", encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    # scikit-learn: documents containing each 1–2-gram = column sums of the binary count matrix
    cv = CountVectorizer(binary=True, ngram_range=(1, 2))
    counts = cv.fit_transform(trained["texts"])
    expected = dict(zip(cv.get_feature_names_out(), np.asarray(counts.sum(axis=0)).ravel().tolist()))
    got = {r["feature"]: int(r["document_frequency"]) for r in rows}
    assert got == expected
    assert all(r["update_count"] != "" and float(r["abs_update_sum"]) > 0 for r in rows)


def test_rare_features_and_their_documents(trained):
    model = trained["model"]
    cv = CountVectorizer(binary=True, ngram_range=(1, 2))
    counts = cv.fit_transform(trained["texts"]).tocsc()
    index = {name: j for j, name in enumerate(cv.get_feature_names_out())}
    df = np.diff(counts.indptr)
    # the rare features kept: df <= 2, largest weight norm first (norms from the weights directly, each row
    # centred across labels: the part softmax can see)
    norms = np.round(np.linalg.norm(model.coef - model.coef.mean(axis=1, keepdims=True), axis=1), 12)
    names = model.featurizer.feature_names
    rare = sorted((j for j in range(len(names)) if df[index[names[j]]] <= 2), key=lambda j: (-norms[j], j))[:30]
    extras = model.info["explain"]
    json.dumps(extras, allow_nan=False)  # JSON-ready
    assert [item["feature"] for item in extras["rare_features"]] == [names[j] for j in rare]
    for item in extras["rare_features"]:
        rows = counts.indices[counts.indptr[index[item["feature"]]]:counts.indptr[index[item["feature"]] + 1]]
        # scikit-learn: the documents containing the n-gram, named "train.csv:<line>" by the fixture
        assert [d["source"] for d in item["documents"]] == [f"train.csv:{i + 2}" for i in sorted(rows)]
        assert [d["label"] for d in item["documents"]] == [trained["labels"][i] for i in sorted(rows)]
        assert all(len(d["snippet"]) <= 160 for d in item["documents"])
    table_rows = rare_heavy(model, top=5)
    assert [r["feature"] for r in table_rows] == [names[j] for j in rare[:5]]
    assert table_rows[0]["documents"] == extras["rare_features"][0]["documents"]
    # rank 1 = largest norm of all features (NumPy directly)
    assert table_rows[0]["norm_rank"] == int((norms > norms[rare[0]]).sum()) + 1


def test_snippet_is_centred_on_the_feature():
    text = "x" * 300 + " Brown-water from the tap " + "y" * 300
    piece = snippet(text, ["brown water"])
    assert len(piece) == 160 and "Brown-water" in piece and piece.startswith("…") and piece.endswith("…")
    assert snippet("short text\nhere", ["missing"]) == "short text here"


def test_top_features_per_label_are_the_largest_weights(trained):
    model = trained["model"]
    top = top_features(model, top=3, label="water")
    # NumPy directly: the three largest entries of the "water" column of coef, each row centred across labels
    j = model.labels.index("water")
    centred = model.coef - model.coef.mean(axis=1, keepdims=True)
    expected = np.argsort(-np.round(centred[:, j], 12), kind="stable")[:3]
    assert [r["column"] for r in top["water"]] == expected.tolist()
    assert list(top) == ["water"]


def test_hashing_mode_names_columns_with_their_ngrams(tmp_path):
    texts = [t for t, _ in small_corpus_rows(10)]
    feat = Featurizer(FeaturizerConfig(ngrams=(1, 1), hash_space=64, weighting="binary"))
    X = feat.fit_transform(texts)
    rng = np.random.default_rng(0)
    model = Model(feat, rng.normal(size=(64, 3)), np.zeros(3), ["billing", "outage", "water"])
    extras = training_extras(model, texts, [f"t:{i}" for i in range(len(texts))], X)
    json.dumps(extras, allow_nan=False)
    section = extras["hashed_ngrams"]
    assert sorted(section["columns"]) == feat.used_columns.tolist()
    # scikit-learn: documents containing each token, and the column HashingVectorizer puts one token in
    cv = CountVectorizer(binary=True)
    df = dict(zip(cv.fit(texts).get_feature_names_out(), np.asarray(cv.transform(texts).sum(axis=0)).ravel()))
    one = HashingVectorizer(n_features=64, alternate_sign=False, norm=None, analyzer=lambda doc: [doc])
    per_column = {}
    for token in df:
        per_column.setdefault(int(one.transform([token]).indices[0]), []).append(token)
    for column, grams in zip(section["columns"], section["ngrams"]):
        expected = sorted(per_column[column], key=lambda t: (-df[t], t))[:3]
        assert [g[0] for g in grams] == expected
        assert [g[1] for g in grams] == [int(df[t]) for t in expected]
    model.info["explain"] = extras
    table = feature_table(model)
    assert table["column"].tolist() == feat.used_columns.tolist()
    assert table["feature"][0] == " | ".join(g[0] for g in section["ngrams"][section["columns"].index(int(table["column"][0]))])
    write_report(model, tmp_path)  # a model without history, metrics or statistics still gets a page
    assert "no update statistics" in (tmp_path / "report.html").read_text(encoding="utf-8")


# ---------------------------------------------------------------- (c) nothing on the network

URL_ATTR = re.compile(r"""\b(?:src|href|xlink:href|action|poster|data)\s*=\s*["']?([^"'\s>]*)""", re.I)
CSS_URL = re.compile(r"url\(\s*['\"]?([^'\")]*)", re.I)


def assert_offline(html: str):
    # every reference stays inside the page: fragment links only, no scheme, no protocol-relative URL
    refs = URL_ATTR.findall(html) + CSS_URL.findall(html)
    assert refs, "expected in-page references (navigation links, SVG clip paths)"
    # (an image inside a figure is inline too: a data: URI holding the PNG itself)
    inside = [r for r in refs if r.startswith("#") or r.startswith("data:image/png;base64,")]
    assert len(inside) == len(refs), [r for r in refs if r not in inside]
    assert "http://" not in html and "https://" not in html
    assert not re.search(r"<script[^>]*\ssrc", html, re.I)
    assert not re.search(r"<link\b", html, re.I)
    assert "@import" not in html and "@font-face" not in html
    assert not re.search(r"<(img|iframe|object|embed)\b", html, re.I)


def test_report_references_nothing_outside_itself(trained):
    html = (trained["dir"] / "report.html").read_text(encoding="utf-8")
    assert_offline(html)
    # learning curves, frequency, effective steps, confusion, reliability diagrams, coverage
    assert html.count('<svg aria-label=') == 6
    assert "@media print" in html


def test_report_sections_and_numbers(trained):
    model = trained["model"]
    html = (trained["dir"] / "report.html").read_text(encoding="utf-8")
    for heading in ("Summary", "Learning curves", "Frequency and updates", "Effective step per feature", "Per frequency bin",
                    "Strongest features per label", "Rare features with large weights", "Confusions", "Calibration",
                    "Routing by confidence", "Most confident errors"):
        assert f"<h2>{heading}</h2>" in html
    assert html.count("<b>How to read:</b>") == 6  # one reading guide per figure
    test = model.info["metrics"]["test"]
    assert f"{test['accuracy']:.4g}" in html  # the test accuracy as pipeline.evaluate computed it
    assert "test set: counts" in html  # the confusion matrix is the test set's when there is one
    first_rare = model.info["explain"]["rare_features"][0]
    assert first_rare["documents"][0]["source"] in html
    # calibration: the fitted temperature and the dev NLL before and after, as the record holds them
    cal = model.calibration
    assert f"T = {cal['temperature']:.4g}" in html
    assert f"<td>dev</td><td class=\"num\">{cal['nll_before']:.4g}</td><td class=\"num\">{cal['nll_after']:.4g}</td>" in html
    errors = model.info["dev_errors"]
    assert f"<b>{errors['errors']}</b> of {errors['documents']} dev documents are misclassified" in html
    for e in errors["shown"][:3]:
        assert e["source"] in html
    assert 'aria-label="Documents decided against accuracy, by probability threshold"' in html


# ---------------------------------------------------------------- degraded inputs


def test_report_without_statistics_dev_set_or_extras(tmp_path, trained):
    model = trained["model"]
    bare = Model(model.featurizer, model.coef, model.intercept, model.labels, model.loss,
                 {k: v for k, v in model.info.items() if k not in ("explain", "metrics", "dev_errors")}, feature_stats=None)
    bare.info["history"] = [{**row, "dev_loss": None, "dev_accuracy": None, "dev_macro_f1": None} for row in model.info["history"]]
    write_report(bare, tmp_path)
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "no update statistics" in html and "no confusion matrix" in html
    assert "saved without the training-time extras" in html
    assert "Calibration: absent" in html and "Errors: not recorded" in html and "No routing table" in html
    assert_offline(html)
    with open(tmp_path / "features.csv", encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["update_count"] for r in rows} == {""} and {r["effective_step"] for r in rows} == {""}


def test_report_for_lbfgs_and_hinge_without_dev(trained, tmp_path):
    lbfgs = lintext.build_model(trained["train"], dev=trained["dev"], options={"optimizer": "lbfgs", "epochs": 15, "loss": "softmax"})
    write_report(lbfgs, tmp_path / "lbfgs")
    html = (tmp_path / "lbfgs" / "report.html").read_text(encoding="utf-8")
    assert "has no per-feature effective step" in html  # effective steps are NaN
    assert "no gradient-step updates recorded" in html
    hinge = lintext.build_model(trained["train"], dev_fraction=0, options={"loss": "hinge", "optimizer": "sgd", "epochs": 2})
    write_report(hinge, tmp_path / "hinge")
    html = (tmp_path / "hinge" / "report.html").read_text(encoding="utf-8")
    assert "mean hinge loss" in html and "no dev set" in html and "none (no early stopping)" in html
    assert "Calibration: absent" in html and "gives scores, not probabilities" in html
    assert_offline(html)


@pytest.mark.slow
def test_report_says_how_hinge_scores_become_probabilities(trained, tmp_path):
    calibrated = lintext.build_model(trained["train"], dev=trained["dev"], options={"loss": "hinge", "epochs": 3})
    write_report(calibrated, tmp_path)
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "trained with the hinge loss, whose scores are not probabilities" in html
    assert f"T = {calibrated.temperature:.4g}" in html


# ---------------------------------------------------------------- (d) a real browser opens the page


def chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None


CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--disable-extensions", "--hide-scrollbars", "--enable-logging=stderr", "--v=0"]


def open_in_browser(page: Path, screenshot: Path, tmp_path: Path) -> tuple[dict, list]:
    """Load ``page`` in headless Chromium: the <body> attributes after the page's measuring script ran,
    the console lines, and a full-height screenshot."""
    binary = chromium()
    if binary is None:
        if os.environ.get("CI"):
            pytest.fail("chromium is not installed (apt-get install -y chromium)")
        pytest.skip("chromium is not installed")
    url = page.resolve().as_uri()
    done = subprocess.run([binary, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile-dom'}",
                           "--window-size=1280,2000", "--dump-dom", url],
                          capture_output=True, text=True, timeout=120)
    body = re.search(r"<body([^>]*)>", done.stdout)
    assert body, f"no DOM from chromium (exit {done.returncode}): {done.stderr[-500:]}"
    attrs = dict(re.findall(r'([\w-]+)="([^"]*)"', body.group(1)))
    console = [line for line in done.stderr.splitlines() if "CONSOLE" in line or "Uncaught" in line]
    height = min(16000, max(800, int(attrs.get("data-page-height", "4000"))))
    screenshot.parent.mkdir(parents=True, exist_ok=True)
    subprocess.run([binary, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile-shot'}",
                    f"--window-size=1280,{height}", f"--screenshot={screenshot}", url],
                   capture_output=True, text=True, timeout=120)
    return attrs, console


def assert_rendered(attrs: dict, console: list, html: str, screenshot: Path):
    expected = html.count('<svg aria-label=')
    assert console == []  # no console message at all (errors, warnings, uncaught exceptions)
    assert attrs.get("data-page-errors") == "0"
    assert attrs.get("data-figures") == str(expected)  # every inline figure is in the DOM
    assert attrs.get("data-figures-ok") == str(expected)  # ... with a non-zero rendered width and height
    sizes = [tuple(int(v) for v in s.split("x")) for s in attrs["data-figure-sizes"].split()]
    assert all(w >= 300 and h >= 150 for w, h in sizes), sizes
    assert screenshot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    import matplotlib.image

    pixels = matplotlib.image.imread(screenshot)
    assert pixels.shape[1] == 1280 and pixels.std() > 0.05  # not a blank page


@pytest.mark.slow
def test_chromium_renders_the_report(trained, tmp_path):
    page = trained["dir"] / "report.html"
    shot = ARTIFACTS / "report.png"
    attrs, console = open_in_browser(page, shot, tmp_path)
    html = page.read_text(encoding="utf-8")
    assert_rendered(attrs, console, html, shot)
    # the sections on confidence are laid out (id:top:height from the page's measuring script), and the
    # coverage and reliability figures are among the figures measured above with a non-zero size
    sections = {s.split(":")[0]: [int(v) for v in s.split(":")[1:]] for s in attrs["data-sections"].split()}
    for name in ("calibration", "routing", "errors"):
        assert sections[name][1] > 150, sections
    assert sections["calibration"][0] < sections["routing"][0] < sections["errors"][0]
    assert 'aria-label="Documents decided against accuracy' in html and 'aria-label="Reliability diagrams' in html


@pytest.mark.slow
def test_compare_page_renders(trained, second, tmp_path):
    page = write_comparison([trained["dir"], second], tmp_path / "compare.html")
    html = page.read_text(encoding="utf-8")
    assert_offline(html)
    assert html.count('<svg aria-label=') == 2  # frequency curves and learning curves
    assert "adagrad" in html and "sgd" in html and "not trained on the same data" not in html
    shot = ARTIFACTS / "compare.png"
    attrs, console = open_in_browser(page, shot, tmp_path)
    assert_rendered(attrs, console, html, shot)


@pytest.mark.slow
def test_compare_page_keeps_every_model_visible_and_losses_apart(trained, second, tmp_path):
    hinge = lintext.build_model(trained["train"], dev=trained["dev"], options={"loss": "hinge", "epochs": 3, "patience": 0})
    models = [lintext.open_model(trained["dir"]), lintext.open_model(second), hinge,
              lintext.build_model(trained["train"], dev=trained["dev"], options={"optimizer": "adam", "epochs": 3}),
              lintext.build_model(trained["train"], dev=trained["dev"], options={"optimizer": "lbfgs", "epochs": 5})]
    names = ["adagrad model", "plain sgd", "hinge model", "adam model", "lbfgs model"]
    page = write_comparison(models, tmp_path / "five.html", names=names)
    html = page.read_text(encoding="utf-8")
    # softmax and hinge losses never share an axis: one panel each
    assert "Softmax loss (solid: train, dashed: dev)" in html and "Hinge loss (solid: train, dashed: dev)" in html
    assert "Not in this figure, for want of update statistics: lbfgs model" in html
    attrs, console = open_in_browser(page, ARTIFACTS / "compare-five.png", tmp_path)
    assert_rendered(attrs, console, html, ARTIFACTS / "compare-five.png")
    assert attrs.get("data-tables-clipped") == "0"  # at 1280 px no table hides a model behind a scroll bar


# ---------------------------------------------------------------- command line


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_cli_report_writes_both_files(trained, tmp_path):
    folder = tmp_path / "copy"
    shutil.copytree(trained["dir"], folder)
    (folder / "report.html").unlink()
    (folder / "features.csv").unlink()
    result = run("report", folder, "--top", "3")
    assert result.exit_code == 0, result.output
    assert (folder / "report.html").is_file() and (folder / "features.csv").is_file()
    assert "report written to" in result.output
    assert run("report", tmp_path / "missing").exit_code == 2


def test_cli_inspect_tables(trained):
    model = trained["model"]
    result = run("inspect", trained["dir"], "--label", "water", "--top", "2")
    assert result.exit_code == 0, result.output
    j = model.labels.index("water")
    centred = model.coef - model.coef.mean(axis=1, keepdims=True)  # what softmax sees of each row
    best = model.featurizer.feature_names[int(np.argmax(centred[:, j]))]  # NumPy directly
    assert "strongest features toward water" in result.output and best in result.output
    assert "strongest features toward billing" not in result.output
    assert "features per document-frequency bin" in result.output
    rare = run("inspect", trained["dir"], "--rare", "--rare-rows", "1")
    assert rare.exit_code == 0, rare.output
    assert model.info["explain"]["rare_features"][0]["documents"][0]["source"] in rare.output
    assert max(len(line) for line in rare.output.splitlines()) <= 80  # reads in an 80-column terminal
    bad = run("inspect", trained["dir"], "--label", "nope")
    assert bad.exit_code == 2 and "--label='nope': not a label of this model" in bad.output
    assert len(bad.output.strip().splitlines()) == 1


def test_cli_compare(trained, second, tmp_path):
    out = tmp_path / "c.html"
    result = run("compare", trained["dir"], second, "--out", out, "--name", "ada", "--name", "plain")
    assert result.exit_code == 0, result.output
    html = out.read_text(encoding="utf-8")
    assert "<td>ada</td>" in html and "<td>plain</td>" in html
    bad = run("compare", trained["dir"], second, "--out", out, "--name", "one")
    assert bad.exit_code == 2 and "one name per model directory" in bad.output
