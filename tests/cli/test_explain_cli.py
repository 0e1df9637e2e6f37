"""``lintext explain``, ``inspect --errors``, ``predict --min-probability`` and ``evaluate``'s
calibration and routing numbers, through typer's test runner.

Sources beside each check: the Python API on the same texts, NumPy recomputations of the
definitions, and scikit-learn's ``calibration_curve`` for the bins of the ECE.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from sklearn.calibration import calibration_curve
from typer.testing import CliRunner

import lintext
from lintext.cli import app

runner = CliRunner()
BEFORE = Path(__file__).resolve().parents[1] / "data" / "before-layout"
# The keys of one line of `explain --json`, as documented in the README.
RECORD_KEYS = {"row", "label", "score", "probability", "calibrated", "temperature", "runner_up", "runner_up_score",
               "margin", "intercept", "runner_up_intercept", "features", "other_features", "other_contribution"}
FEATURE_KEYS = {"feature", "column", "value", "weight", "runner_up_weight", "contribution", "document_frequency", "rare"}


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    from ..conftest import small_corpus_rows, write_csv

    tmp = tmp_path_factory.mktemp("explain-cli")
    # every fifth label moved to the next label, so the model makes errors and is unsure of some rows
    names = ["billing", "outage", "water"]
    rows = [(t, names[(names.index(y) + 1) % 3] if i % 5 == 0 else y) for i, (t, y) in enumerate(small_corpus_rows(60))]
    paths = {"train": write_csv(tmp / "train.csv", rows[:120]), "dev": write_csv(tmp / "dev.csv", rows[120:150]),
             "test": write_csv(tmp / "test.csv", rows[150:])}
    out = tmp / "model"
    result = run("train", paths["train"], "--dev", paths["dev"], "--out", out, "--epochs", "6", "--quiet", "--min-df", "1")
    assert result.exit_code == 0, result.output
    texts = [r[0] for r in rows[150:]]
    labels = [r[1] for r in rows[150:]]
    return {"dir": out, "model": lintext.open_model(out), "texts": texts, "labels": labels, **paths}


def test_explain_json_lines_have_the_documented_keys(trained):
    result = run("explain", trained["dir"], trained["test"], "--json", "--top", "0", "--text", "refund the invoice please",
                 "--text", "the tap water is brown")
    assert result.exit_code == 0, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == len(trained["texts"]) + 2
    records = [json.loads(line) for line in lines]
    for r in records[:-2]:
        assert set(r) == RECORD_KEYS | {"source", "true_label"}
    for r in records[-2:]:
        assert set(r) == RECORD_KEYS
    model = trained["model"]
    X = model.featurizer.transform(trained["texts"] + ["refund the invoice please", "the tap water is brown"])
    probs = model.probabilities(trained["texts"] + ["refund the invoice please", "the tap water is brown"])
    for i, r in enumerate(records):
        assert all(set(f) == FEATURE_KEYS for f in r["features"])
        assert len(r["features"]) == X[i].nnz  # --top 0: every feature of the document
        assert r["label"] == model.labels[int(probs[i].argmax())] and r["probability"] == pytest.approx(probs[i].max())
        assert sum(f["contribution"] for f in r["features"]) + r["intercept"] == pytest.approx(r["score"], abs=1e-9)
    assert [r["true_label"] for r in records[:-2]] == trained["labels"]


def test_explain_table(trained):
    result = run("explain", trained["dir"], "--text", "my invoice shows a refund", "--top", "2")
    assert result.exit_code == 0, result.output
    assert "probabilities calibrated with temperature" in result.output
    assert "runner-up" in result.output and "1 other features" not in result.output
    assert "intercept" in result.output and "=  score" in result.output


@pytest.mark.parametrize("kind", ["vocabulary", "hashing"])
def test_older_models_explain_with_calibration_absent(kind):
    result = run("explain", BEFORE / kind, "--text", "brown water from the tap", "--top", "3")
    assert result.exit_code == 0, result.output
    assert result.output.startswith("calibration: absent")
    line = json.loads(run("explain", BEFORE / kind, "--text", "brown water", "--json").output)
    assert line["calibrated"] is False and line["temperature"] is None


def one_line_error(result, message):
    assert result.exit_code == 2, result.output
    assert message in result.output and len(result.output.strip().splitlines()) == 1, result.output


@pytest.mark.parametrize("args, message", [
    (["explain", "{model}", "--text", ""], "--text='': is empty; give the text to explain"),
    (["explain", "{model}"], "give a data file or folder, or --text"),
    (["explain", "{model}", "--text", "x", "--top", "-2"], "--top=-2"),
    (["predict", "{model}", "{test}", "--min-probability", "0"], "--min-probability=0.0: must be a probability above 0 and below 1"),
    (["predict", "{model}", "{test}", "--min-probability", "1"], "--min-probability=1.0: must be a probability above 0 and below 1"),
    (["predict", "{model}", "{test}", "--min-probability", "1.5"], "--min-probability=1.5"),
    (["predict", "{model}", "{test}", "--min-probability", "-0.2"], "--min-probability=-0.2"),
    (["evaluate", "{model}", "{test}", "--target-accuracy", "1.2"], "--target-accuracy=1.2: must be a probability"),
    (["predict", "{old}", "{test}", "--min-probability", "0.5"], "vocabulary: has no calibration"),
    (["evaluate", "{old}", "{test}", "--target-accuracy", "0.9"], "--target-accuracy needs calibrated probabilities"),
])
def test_bad_input_one_line(trained, args, message):
    filled = [a.format(model=trained["dir"], test=trained["test"], old=BEFORE / "vocabulary") for a in args]
    one_line_error(run(*filled), message)


def test_older_models_still_predict_and_evaluate(trained):
    result = run("predict", BEFORE / "vocabulary", trained["test"])
    assert result.exit_code == 0 and result.output.startswith("row,label,probability\n")
    evaluated = run("evaluate", BEFORE / "vocabulary", trained["test"], "--json")
    data = json.loads(evaluated.output)
    assert data["temperature"] is None and data["ece"] == data["ece_uncalibrated"]
    assert "calibration: absent" in run("evaluate", BEFORE / "vocabulary", trained["test"]).output


def test_predict_leaves_unsure_rows_for_review(trained, tmp_path):
    model = trained["model"]
    probs = model.probabilities(trained["texts"]).max(axis=1)
    threshold = float(np.median(probs))  # about half of the rows on each side
    target = tmp_path / "routed.csv"
    result = run("predict", trained["dir"], trained["test"], "--min-probability", repr(threshold), "--out", target, "-q")
    assert result.exit_code == 0, result.output
    rows = list(csv.reader(target.open()))
    assert rows[0] == ["row", "label", "probability", "review"]
    labels = model.classify(trained["texts"])
    for r, p, label in zip(rows[1:], probs, labels):
        unsure = p < threshold
        assert r[3] == ("yes" if unsure else "no") and r[1] == ("" if unsure else label)
    assert 0 < sum(r[3] == "yes" for r in rows[1:]) < len(rows) - 1


def test_evaluate_json_calibration_and_routing(trained):
    result = run("evaluate", trained["dir"], trained["test"], "--json", "--target-accuracy", "0.9")
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    model = trained["model"]
    probs = model.probabilities(trained["texts"])
    conf = probs.max(axis=1)
    right = np.array(model.classify(trained["texts"])) == np.array(trained["labels"])
    # Reference: ECE from scikit-learn's calibration_curve (15 uniform bins) and the bin counts.
    prob_true, prob_pred = calibration_curve(right.astype(int), conf, n_bins=15, strategy="uniform")
    bins = np.searchsorted(np.linspace(0, 1, 16)[1:-1], conf)
    counts = np.bincount(bins, minlength=15)
    counts = counts[counts > 0]
    assert data["ece"] == pytest.approx(float((counts / len(conf) * np.abs(prob_true - prob_pred)).sum()), abs=1e-12)
    assert data["temperature"] == model.temperature and data["ece_uncalibrated"] >= 0
    for row in data["coverage"]:  # decided = rows whose best probability is at least the threshold
        assert row["decided"] == int((conf >= row["threshold"]).sum())
        if row["decided"]:
            assert row["accuracy"] == pytest.approx(right[conf >= row["threshold"]].mean())
    target = data["target"]
    if target["threshold"] is not None:
        decided = conf >= target["threshold"]
        assert right[decided].mean() >= 0.9 and decided.sum() == target["decided"]
        lower = conf[conf < target["threshold"]]
        if lower.size:  # the next lower threshold misses the target
            assert right[conf >= lower.max()].mean() < 0.9 or conf[conf >= lower.max()].size == decided.sum()


def test_evaluate_tables_show_routing(trained):
    result = run("evaluate", trained["dir"], trained["test"], "--target-accuracy", "0.8")
    assert result.exit_code == 0, result.output
    assert "expected calibration error (15 bins)" in result.output and "routing:" in result.output
    assert "accuracy 0.8:" in result.output or "no threshold reaches accuracy 0.8" in result.output


def test_inspect_errors(trained):
    record = trained["model"].info["dev_errors"]
    result = run("inspect", trained["dir"], "--errors", "--rare-rows", "2")
    assert result.exit_code == 0, result.output
    assert f"dev errors: {record['errors']} of {record['documents']} dev documents misclassified" in result.output
    for e in record["shown"][:2]:
        assert e["source"] in result.output
    old = run("inspect", BEFORE / "vocabulary", "--errors")
    assert old.exit_code == 0 and "dev errors: not recorded for this model" in old.output
