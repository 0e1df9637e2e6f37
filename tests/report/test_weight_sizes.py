"""Weight sizes the loss can see: every per-feature size the report, features.csv, inspect and the
training-time extras give is unchanged when a constant is added to a feature's weights across labels.

The premise is checked against SciPy: ``scipy.special.softmax`` gives the same probabilities
after the shift (softmax is invariant to adding one number to every score of a row; and a
feature's shift adds ``x_j * c`` to every label's score alike).
"""

from __future__ import annotations

import csv

import numpy as np
import pytest
from scipy.special import softmax as scipy_softmax
from typer.testing import CliRunner

import lintext
from lintext.cli import app
from lintext.evidence import training_extras
from lintext.model import Model
from lintext.report.stats import feature_table, frequency_bins, key_numbers, rare_heavy, top_features
from lintext.report.writer import write_report

from ..conftest import small_corpus_rows, write_csv


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """An AdaGrad model (its rows drift off mean zero) and the same model with every row shifted."""
    tmp = tmp_path_factory.mktemp("shift")
    rows = small_corpus_rows()
    train, test = write_csv(tmp / "train.csv", rows[:100]), write_csv(tmp / "test.csv", rows[100:])
    model = lintext.build_model(train, test=test, featurizer={"min_df": 1},
                                options={"optimizer": "adagrad", "epochs": 4, "patience": 0}, dev_fraction=0)
    rng = np.random.default_rng(1)
    shift = rng.normal(0, 3.0, size=(model.coef.shape[0], 1))
    shifted = Model(model.featurizer, model.coef + shift, model.intercept, model.labels, model.loss, dict(model.info),
                    model.feature_stats)
    texts = [t for t, _ in rows[:100]]
    X = model.featurizer.transform(texts)
    for m in (model, shifted):
        m.info = dict(m.info)
        m.info["explain"] = training_extras(m, texts, [f"train.csv:{i + 2}" for i in range(100)], X)
    return model, shifted, tmp, texts


def test_the_shift_changes_no_probability(pair):
    model, shifted, _, texts = pair
    np.testing.assert_allclose(scipy_softmax(shifted.scores(texts), axis=1), scipy_softmax(model.scores(texts), axis=1),
                               rtol=1e-9, atol=1e-12)
    # ... while the raw rows do differ, and AdaGrad's rows were off mean zero to begin with
    assert np.abs(model.coef.mean(axis=1)).max() > 1e-3


def test_every_reported_size_is_unchanged(pair):
    model, shifted, _, _ = pair
    a, b = feature_table(model), feature_table(shifted)
    for name in ("weight_norm", "max_weight"):
        np.testing.assert_allclose(b[name], a[name], rtol=1e-9, atol=1e-12)
    assert a["max_weight_label"] == b["max_weight_label"]
    assert not np.allclose(a["raw_weight_norm"], b["raw_weight_norm"])  # the raw size is kept, and it moves
    for x, y in zip(frequency_bins(a), frequency_bins(b)):
        assert x["median_weight_norm"] == pytest.approx(y["median_weight_norm"], rel=1e-9)
    ka, kb = key_numbers(a), key_numbers(b)
    assert ka["rare_in_top"] == kb["rare_in_top"]
    assert ka["rare_median_norm"] == pytest.approx(kb["rare_median_norm"], rel=1e-9)
    ta, tb = top_features(model, top=5, table=a), top_features(shifted, top=5, table=b)
    for label in model.labels:
        assert [r["feature"] for r in ta[label]] == [r["feature"] for r in tb[label]]
        np.testing.assert_allclose([r["weight"] for r in tb[label]], [r["weight"] for r in ta[label]], rtol=1e-9)
    ra, rb = rare_heavy(model, top=10, table=a), rare_heavy(shifted, top=10, table=b)
    assert [(r["feature"], r["norm_rank"]) for r in ra] == [(r["feature"], r["norm_rank"]) for r in rb]
    ea, eb = model.info["explain"]["rare_features"], shifted.info["explain"]["rare_features"]
    assert [r["column"] for r in ea] == [r["column"] for r in eb]  # the training-time ranking too


def test_centred_norm_by_hand():
    # Worked example: row (1, 2, 3) has mean 2, centred (-1, 0, 1), norm sqrt(2); raw norm sqrt(14).
    from lintext.report.stats import centred_rows

    row = centred_rows(np.array([[1.0, 2.0, 3.0]]))
    assert np.linalg.norm(row) == pytest.approx(np.sqrt(2.0))


def test_files_and_terminal_are_unchanged(pair):
    model, shifted, tmp, _ = pair
    out = {}
    for name, m in (("plain", model), ("shifted", shifted)):
        # saved in float64: float32 storage would round the shifted rows differently and could break exact ties
        folder = m.save(tmp / name, extra=lambda f, m=m: write_report(m, f), precision="float64")
        with open(folder / "features.csv", encoding="utf-8", newline="") as fh:
            rows = list(csv.DictReader(fh))
        inspect = CliRunner().invoke(app, ["inspect", str(folder), "--rare", "--rare-rows", "5"])
        top = CliRunner().invoke(app, ["inspect", str(folder), "--top", "4"])
        assert inspect.exit_code == 0 and top.exit_code == 0, inspect.output
        out[name] = (rows, inspect.output, top.output)
    (rows_a, rare_a, top_a), (rows_b, rare_b, top_b) = out["plain"], out["shifted"]
    for r, s in zip(rows_a, rows_b):
        assert float(r["weight_norm"]) == pytest.approx(float(s["weight_norm"]), rel=1e-9, abs=1e-12)
        assert r["max_weight_label"] == s["max_weight_label"]
    # rows of the rare table: "#, feature..., docs, norm, raw, rank, label, (weight)"; all but the raw norm must agree
    rare_sizes = lambda text: [line.split()[:-4] + line.split()[-3:] for line in text.splitlines()  # noqa: E731
                               if line.strip()[:1].isdigit() and "(" in line]
    assert rare_sizes(rare_a) == rare_sizes(rare_b)
    assert top_a == top_b
