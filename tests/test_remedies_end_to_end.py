"""Remedies through the whole tool: divergence on the demo corpus, the sweep's table, the command
line's options, document weights from a column, the model directory and the report.

Sources beside each check: the issue's definition of divergence (a train loss above the
untrained model's ln K after the first epoch), scikit-learn's TfidfVectorizer(sublinear_tf=True)
for the ``log-tfidf`` weighting, and hand-worked counts.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest
from sklearn.feature_extraction.text import TfidfVectorizer
from typer.testing import CliRunner

import lintext
from lintext.cli import app
from lintext.engine.options import TrainOptions
from lintext.engine.trainer import fit
from lintext.errors import DivergenceError
from lintext.pipeline import prepare_data
from lintext.report.writer import comparison_html, report_html
from lintext.text.featurizer import Featurizer, FeaturizerConfig
from lintext.tuning.sweep import sweep

from .conftest import DEMO, write_csv

runner = CliRunner()
RULES = ("sgd", "adagrad", "adadelta", "rmsprop", "adam", "ftrl")


@pytest.fixture(scope="module")
def demo_data():
    return prepare_data(DEMO / "train.csv", dev=DEMO / "dev.csv")


@pytest.mark.slow
@pytest.mark.parametrize("optimizer", RULES)
def test_step_size_1000_on_the_demo_corpus_is_divergence_and_defaults_are_not(demo_data, optimizer):
    # The definition: after the first epoch, a train loss above the untrained model's
    # (softmax: ln 7 = 1.946 here) is divergence. A rule "blows up" at 1000 when some epoch's train loss
    # passes that; every such run must be reported, and the rule's default step never.
    p = demo_data
    zero_loss = math.log(len(p.labels))
    seen = []
    try:
        fit(p.X, p.y, len(p.labels), p.X_dev, p.y_dev, TrainOptions(optimizer=optimizer, learning_rate=1000.0, epochs=8, loss="softmax"),
            progress=seen.append)
        flagged = False
    except DivergenceError as exc:
        flagged = True
        assert "learning rate 1000" in str(exc) and exc.epoch <= 2
    first_pass = [row for row in seen if not row.get("refit")]  # a refit's own first epoch is not held to it
    blew_up = flagged or any(row["train_loss"] > zero_loss for row in first_pass[1:])
    assert flagged == blew_up
    assert flagged or optimizer == "adadelta"  # measured: only AdaDelta's tiny first steps survive 1000
    sensible = fit(p.X, p.y, len(p.labels), p.X_dev, p.y_dev, TrainOptions(optimizer=optimizer, loss="softmax"))
    assert max(r["dev_accuracy"] for r in sensible.history) > 0.8


@pytest.mark.slow
def test_demo_sweep_flags_step_size_1000_as_diverged(tmp_path):
    result = sweep(DEMO / "train.csv", dev=DEMO / "dev.csv", optimizers="sgd,adagrad", learning_rates="0.1,1000",
                   options={"epochs": 6}, workers=1)
    status = {(r["optimizer"], r["learning_rate"]): r["status"] for r in result.rows}
    assert status[("sgd", 1000.0)].startswith("diverged at epoch") and status[("adagrad", 1000.0)].startswith("diverged")
    assert not status[("sgd", 0.1)].startswith("diverged") and not status[("adagrad", 0.1)].startswith("diverged")
    page = (result.save(tmp_path / "sweep") / "sweep.html").read_text(encoding="utf-8")
    assert "diverged at epoch" in page


def test_cli_train_takes_every_remedy_and_the_model_says_so(small_split, tmp_path):
    # Every remedy is a train option; model.json keeps them, the report lists them, and the
    # exactly-zero counts per bin add up to the features (hand count from the saved weights).
    rows = [row.split(",") for row in small_split["train"].read_text().splitlines()[1:]]
    weighted = write_csv(tmp_path / "weighted.csv", [])
    with open(weighted, "w", encoding="utf-8") as fh:
        fh.write("text,label,weight\n" + "".join(f"{t},{lab},{1 + i % 3}\n" for i, (t, lab) in enumerate(rows)))
    out = tmp_path / "model"
    result = runner.invoke(app, ["train", str(weighted), "--dev", str(small_split["dev"]), "--out", str(out), "--quiet",
                                 "--l1", "0.01", "--average", "2", "--label-weights", "balanced",
                                 "--weight-column", "weight", "--epochs", "6"])
    assert result.exit_code == 0, result.output
    meta = json.loads((out / "model.json").read_text(encoding="utf-8"))
    assert meta["training"]["l1"] == 0.01 and meta["training"]["average"] == 2
    assert meta["training"]["label_weights"] == "balanced" and meta["data"]["weight_column"] == "weight"
    assert all(row.get("weighted_loss") for row in meta["history"])
    model = lintext.open_model(out)
    zero_rows = int(np.sum(~np.any(model.coef != 0, axis=1)))
    assert meta["sparsity"]["exactly_zero"] == zero_rows == sum(b["exactly_zero"] for b in meta["sparsity"]["by_bin"])
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "cumulative L1 penalty" in page and "iterate averaging from epoch 2" in page and "label weights balanced" in page
    assert "document weights from the column weight" in page
    # The report's bins table: each bin's row ends with its count of features at exactly zero, counted
    # here by hand from the saved weights (bins by their definition: 2^(k-1) < df <= 2^k, df 1 alone).
    df = np.asarray(model.featurizer.document_frequency)
    zero = ~np.any(model.coef != 0, axis=1)
    counts = {}
    for d, z in zip(df.tolist(), zero.tolist()):
        if d >= 1:
            k = (d - 1).bit_length()
            label = "1" if k == 0 else f"{2 ** (k - 1) + 1}–{2 ** k}" if k > 1 else "2"
            features, zeros = counts.get(label, (0, 0))
            counts[label] = (features + 1, zeros + z)
    assert sum(z for _, z in counts.values()) > 0  # the L1 penalty left some at zero: the cells are not all "0"
    for label, (features, zeros) in counts.items():
        row = re.search(rf'<tr><td>{label}</td><td class="num">{features:,}</td>((?:(?!</tr>).)*)</tr>', page)
        assert row and row.group(1).endswith(f'<td class="num">{zeros:,}</td>'), (label, features, zeros)


def test_cli_ftrl_and_bad_remedy_options(small_split, tmp_path):
    out = tmp_path / "ftrl"
    ok = runner.invoke(app, ["train", str(small_split["train"]), "--dev", str(small_split["dev"]), "--out", str(out),
                             "--quiet", "--optimizer", "ftrl", "--l1", "0.5", "--epochs", "4"])
    assert ok.exit_code == 0, ok.output
    bad = runner.invoke(app, ["train", str(small_split["train"]), "--out", str(tmp_path / "x"), "--optimizer", "adam",
                              "--l1", "0.1"])
    assert bad.exit_code == 2 and "--l1" in bad.output
    bad = runner.invoke(app, ["train", str(small_split["train"]), "--out", str(tmp_path / "x"), "--weight-column", "w"])
    assert bad.exit_code == 2 and "no column 'w'" in bad.output


def test_compare_shows_remedies_side_by_side(small_split):
    plain = lintext.build_model(small_split["train"], dev=small_split["dev"], options={"epochs": 4, "average": 0})
    sparse = lintext.build_model(small_split["train"], dev=small_split["dev"],
                                 options={"epochs": 4, "l1": 1e-3, "average": 1})
    page = comparison_html([plain, sparse], names=["plain", "l1"])
    assert "Remedies side by side" in page and "share of |Δw| in features of ≤ 2 documents" in page
    assert "Features at exactly zero, per document-frequency bin" in page and "dev macro-F1" in page
    assert "L1 0.001" in page and "averaged from epoch 1" in page
    assert "Remedies for rare features: none" in report_html(plain)


def test_log_tfidf_is_scikit_learns_sublinear_tfidf():
    # Reference: TfidfVectorizer(sublinear_tf=True): (1 + ln tf) * smoothed idf, rows of unit length.
    texts = ["the cat sat on the the mat", "a dog and a cat", "the dog barked at the cat the end"]
    ours = Featurizer(FeaturizerConfig(ngrams=(1, 1), min_df=1, weighting="log-tfidf")).fit_transform(texts)
    theirs = TfidfVectorizer(sublinear_tf=True).fit_transform(texts)
    np.testing.assert_allclose(ours.toarray(), theirs.toarray(), rtol=1e-12, atol=1e-15)


def test_each_remedy_has_its_sentence_and_its_few_words_in_order():
    # Hand-written: the report's sentence and the comparison's few words of each remedy, in one order.
    from lintext.report.remedies import remedies

    def remedies_on(info):
        return [sentence for sentence, _ in remedies(info)]

    def remedies_short(info):
        return [words for _, words in remedies(info)]

    info = {"training": {"optimizer": "adagrad", "l1": 0.001, "l2": 0.01, "average": 2, "initial_sum_sq": 0.1,
                         "label_weights": "balanced"}, "data": {"weight_column": "w"}}
    assert remedies_on(info) == [
        "elastic net: cumulative L1 penalty 0.001 (Tsuruoka, Tsujii & Ananiadou 2009), L2 0.01",
        "iterate averaging from epoch 2: the model is the mean of the weights after every step since (Polyak & Juditsky 1992)",
        "AdaGrad's sum of squared gradients started at 0.1, so a rare feature's first step scales with its gradient",
        "label weights balanced (losses are weighted)",
        "document weights from the column w (losses are weighted)"]
    assert remedies_short(info) == ["L1 0.001", "averaged from epoch 2", "AdaGrad start 0.1", "label weights balanced",
                                    "document weights"]
    ftrl = {"training": {"optimizer": "ftrl", "l1": 0.5, "l2": 0.0, "beta": None, "initial_sum_sq": 0.1}}
    assert remedies_on(ftrl) == ["FTRL-Proximal (McMahan et al. 2013) with lambda_1 0.5, lambda_2 0, beta 1"]
    assert remedies_short(ftrl) == ["FTRL λ1 0.5"]
    assert remedies_on({"training": {"optimizer": "sgd", "l1": 0.001}}) == [
        "cumulative L1 penalty 0.001 (Tsuruoka, Tsujii & Ananiadou 2009)"]
    assert remedies_on({}) == remedies_short({}) == []
