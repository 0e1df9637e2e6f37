"""Per-document explanations and the recorded dev errors (lintext.explanation).

Sources beside each check: the scores recomputed here with dense NumPy from the weight file
(``X.toarray() @ coef + intercept``), scikit-learn's ``HashingVectorizer`` for the columns of
hashed n-grams, and the definitions in the module's docstring recomputed independently.
"""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import numpy as np
import pytest
from sklearn.feature_extraction.text import HashingVectorizer

import lintext
from lintext.evidence import RARE_DF
from lintext.explanation import errors_record, explain_matrix, iter_explanations
from lintext.errors import ConfigError
from lintext.text.readers import read_corpus

from .conftest import DEMO, small_corpus_rows, write_csv

BEFORE = Path(__file__).resolve().parent / "data" / "before-layout"


def demo_batch(n=300):
    with open(DEMO / "test.csv", encoding="utf-8", newline="") as fh:
        return [row["text"] for row in csv.DictReader(fh)][:n]


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("explain")
    rows = small_corpus_rows()
    paths = {"train": write_csv(tmp / "train.csv", rows[:90]), "dev": write_csv(tmp / "dev.csv", rows[90:120])}
    # The defaults of when these checks were written (tf-idf, AdaGrad at 0.2 from an empty sum, no
    # averaging): with today's this easy corpus is separated on dev, and no temperature is fitted.
    model = lintext.build_model(paths["train"], dev=paths["dev"], featurizer={"min_df": 1, "weighting": "tfidf"},
                                options={"optimizer": "adagrad", "epochs": 4, "patience": 0, "learning_rate": 0.2,
                                         "initial_sum_sq": 0.0, "average": 0, "loss": "softmax"})
    return model, paths


def assert_contributions_add_up(model, texts):
    """Every row: listed contributions + the rest + intercept = score, for the predicted and runner-up labels."""
    X = model.featurizer.transform(texts)
    # Reference: dense NumPy from the stored weights, independent of lintext's scoring.
    expected = X.toarray() @ np.asarray(model.coef, dtype=np.float64) + np.asarray(model.intercept, dtype=np.float64)
    every = explain_matrix(model, X, texts, top=0)
    few = explain_matrix(model, X, texts, top=3)
    for i, (full, short) in enumerate(zip(every, few)):
        j, k = model.labels.index(full["label"]), model.labels.index(full["runner_up"])
        assert j == int(np.argmax(expected[i])) and full["score"] == pytest.approx(expected[i, j], abs=1e-9)
        assert sum(f["contribution"] for f in full["features"]) + full["intercept"] == pytest.approx(full["score"], abs=1e-9)
        assert full["other_features"] == 0 and full["other_contribution"] == 0.0
        assert sum(f["contribution"] for f in short["features"]) + short["other_contribution"] + short["intercept"] == \
            pytest.approx(short["score"], abs=1e-9)
        assert len(short["features"]) == min(3, X[i].nnz) and short["other_features"] == X[i].nnz - len(short["features"])
        runner = sum(f["value"] * f["runner_up_weight"] for f in full["features"]) + full["runner_up_intercept"]
        assert runner == pytest.approx(expected[i, k], abs=1e-9)
        assert full["margin"] == pytest.approx(expected[i, j] - expected[i, k], abs=1e-9)
        assert full["margin"] >= 0 and sorted(expected[i])[-2] == pytest.approx(expected[i, k], abs=1e-12)
        contributions = [f["contribution"] for f in full["features"]]
        assert contributions == sorted(contributions, reverse=True)  # largest push toward the label first
        for f in full["features"]:
            assert f["value"] == X[i, f["column"]] and f["contribution"] == f["value"] * f["weight"]
            assert f["rare"] == (f["document_frequency"] <= RARE_DF)
    return every


def test_contributions_add_up_on_a_small_model(small):
    model, _ = small
    texts = [t for t, _ in small_corpus_rows(seed=9)[:40]]
    every = assert_contributions_add_up(model, texts)
    probs = model.probabilities(texts)
    assert [r["probability"] for r in every] == pytest.approx(probs.max(axis=1).tolist(), abs=1e-15)
    assert all(r["calibrated"] and r["temperature"] == model.temperature for r in every)


@pytest.fixture(scope="module")
def demo_models():
    common = dict(dev=DEMO / "dev.csv", options={"epochs": 3, "patience": 0})
    return {"vocabulary": lintext.build_model(DEMO / "train.csv", **common),
            "hashing": lintext.build_model(DEMO / "train.csv", featurizer={"hash_space": 2**18}, **common)}


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["vocabulary", "hashing"])
def test_contributions_add_up_on_a_demo_batch(demo_models, kind):
    assert_contributions_add_up(demo_models[kind], demo_batch())


@pytest.mark.slow
def test_hashed_columns_are_named_by_the_documents_own_ngrams(demo_models):
    model = demo_models["hashing"]
    texts = demo_batch(25)
    X = model.featurizer.transform(texts)
    for i, record in enumerate(explain_matrix(model, X, texts, top=0)):
        assert sorted(f["column"] for f in record["features"]) == sorted(X[i].indices.tolist())
        for f in record["features"]:
            grams = f["feature"].split(" | ")
            assert grams and all(grams)
            for gram in grams:
                # Reference: scikit-learn's HashingVectorizer puts this one n-gram in the column shown.
                hasher = HashingVectorizer(n_features=model.featurizer.config.hash_space, alternate_sign=False,
                                           norm=None, analyzer=lambda _, g=gram: [g])
                assert hasher.transform([""]).indices.tolist() == [f["column"]]


def test_calibration_changes_probabilities_not_labels(small, tmp_path):
    model, _ = small
    texts = [t for t, _ in small_corpus_rows(seed=11)[:60]]
    assert model.temperature is not None and model.temperature != 1.0
    scores = model.scores(texts)
    calibrated = model.probabilities(texts)
    # Reference: softmax(scores / T) written out with NumPy (Guo et al. 2017, eq. for temperature scaling).
    z = np.exp(scores / model.temperature - (scores / model.temperature).max(axis=1, keepdims=True))
    np.testing.assert_allclose(calibrated, z / z.sum(axis=1, keepdims=True), rtol=1e-12, atol=1e-15)
    assert model.classify(texts) == [model.labels[j] for j in calibrated.argmax(axis=1)]
    assert model.classify(texts) == [model.labels[j] for j in scores.argmax(axis=1)]
    again = lintext.open_model(model.save(tmp_path / "m"))
    assert again.calibration == json.loads(json.dumps(model.calibration))
    assert np.array_equal(again.probabilities(texts), calibrated)


def test_dev_errors_recomputed_by_hand(small):
    model, paths = small
    record = errors_record(model)
    dev = read_corpus(paths["dev"])
    X = model.featurizer.transform(dev.texts)
    y = dev.label_indices(model.labels)
    # Reference: dense NumPy from the stored weights and the definitions in lintext.explanation.
    coef = np.asarray(model.coef, dtype=np.float64)
    scores = X.toarray() @ coef + model.intercept
    pred = scores.argmax(axis=1)
    wrong = np.flatnonzero(pred != y)
    df = model.featurizer.document_frequency
    hinge = 0
    for i in wrong:
        contrib = X[i].toarray()[0] * coef[:, pred[i]]
        top3 = [j for j in np.argsort(-contrib, kind="stable")[:3] if contrib[j] > 0]
        hinge += any(df[j] <= RARE_DF for j in top3)
    assert (record["documents"], record["errors"], record["hinge_on_rare"]) == (len(y), len(wrong), hinge)
    confidence = model.probabilities(dev.texts).max(axis=1)
    shown = record["shown"]
    assert len(shown) == min(len(wrong), 25) and record["ranked_by"] == "probability"
    assert [e["probability"] for e in shown] == pytest.approx(sorted(confidence[wrong], reverse=True)[:len(shown)], abs=1e-12)
    for e in shown:
        i = dev.sources.index(e["source"])
        assert e["true_label"] == dev.labels[i] and e["label"] == model.labels[pred[i]] != e["true_label"]


def test_recorded_errors_are_saved_and_absent_from_older_models(small, tmp_path):
    model, _ = small
    again = lintext.open_model(model.save(tmp_path / "m"))
    assert errors_record(again) == json.loads(json.dumps(errors_record(model)))
    assert again.temperature == model.temperature
    assert errors_record(lintext.open_model(BEFORE / "vocabulary")) is None


@pytest.mark.parametrize("kind", ["vocabulary", "hashing"])
def test_models_without_calibration_are_explained(kind):
    # Oracle: the probabilities lintext 0.1.0 gave for these texts (tests/data/before-layout).
    expected = json.loads((BEFORE / "predictions.json").read_text())
    model = lintext.open_model(BEFORE / kind)
    assert model.calibration is None and model.temperature is None
    records = list(iter_explanations(model, texts=expected["texts"], top=0))
    assert [r["label"] for r in records] == expected["expected"][kind]["labels"]
    best = np.max(expected["expected"][kind]["probabilities"], axis=1)
    assert [r["probability"] for r in records] == pytest.approx(best.tolist(), abs=1e-12)
    assert not any(r["calibrated"] for r in records) and all(r["temperature"] is None for r in records)
    for r in records:
        assert sum(f["contribution"] for f in r["features"]) + r["intercept"] == pytest.approx(r["score"], abs=1e-9)


def test_data_records_carry_source_and_true_label(small):
    model, paths = small
    records = list(iter_explanations(model, paths["dev"], texts=["refund my invoice"], top=2))
    dev = read_corpus(paths["dev"])
    assert [r["row"] for r in records] == list(range(1, len(dev) + 2))
    assert [r.get("source") for r in records[:-1]] == dev.sources and "source" not in records[-1]
    assert [r.get("true_label") for r in records[:-1]] == dev.labels
    assert all(len(r["features"]) <= 2 for r in records)


@pytest.mark.parametrize("kwargs, message", [
    ({"texts": ["  "]}, "is empty; give the text to explain"),
    ({"texts": []}, "give a data file or folder, or --text"),
    ({"texts": ["ok"], "top": -1}, "--top=-1"),
])
def test_bad_requests_are_refused_before_any_output(small, kwargs, message):
    model, _ = small
    with pytest.raises(ConfigError, match=re.escape(message)):
        iter_explanations(model, **kwargs)
