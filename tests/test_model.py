"""Model directory: save, load in a fresh process, validation of every file, atomic replacement."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import lintext
from lintext.errors import ModelFileError
from lintext.files import atomic_directory
from lintext.model import FORMAT_VERSION, Model


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    from .conftest import small_corpus_rows, write_csv

    tmp = tmp_path_factory.mktemp("model")
    rows = small_corpus_rows()
    train = write_csv(tmp / "train.csv", rows[:100])
    model = lintext.build_model(train, dev_fraction=0.15, options={"epochs": 5, "seed": 1})
    path = model.save(tmp / "m")
    return model, path, [t for t, _ in rows[100:]]


def tree_bytes(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def test_files_and_fields(trained):
    model, path, _ = trained
    assert sorted(p.name for p in path.iterdir()) == [".lintext.json", "confusion.npz", "feature_stats.npz", "model.json",
                                                      "vocabulary.tsv", "weights.npz"]
    meta = json.loads((path / "model.json").read_text())
    assert meta["format_version"] == FORMAT_VERSION and meta["labels"] == ["billing", "outage", "water"]
    assert meta["training"]["optimizer"] == model.info["training"]["optimizer"]
    assert len(meta["history"]) >= 1 and 1 <= meta["best_epoch"] <= len(meta["history"])
    with np.load(path / "weights.npz", allow_pickle=False) as w:
        assert w["coef"].shape == (model.featurizer.n_features, 3) and w["intercept"].shape == (3,)
    header, *rows = (path / "vocabulary.tsv").read_text().splitlines()
    assert header == "feature\tcolumn\tdocument_frequency" and len(rows) == model.featurizer.n_features


@pytest.mark.slow
def test_fresh_process_gives_identical_predictions(trained):
    model, path, texts = trained
    code = (
        "import json, sys, lintext\n"
        f"m = lintext.open_model({str(path)!r})\n"
        "texts = json.loads(sys.stdin.read())\n"
        "print(json.dumps({'labels': m.classify(texts), 'proba': m.probabilities(texts).tolist()}))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], input=json.dumps(texts), capture_output=True, text=True, check=True)
    other = json.loads(done.stdout)
    assert other["labels"] == model.classify(texts)
    # float64 -> JSON text -> float64 is exact (repr round-trips)
    assert np.array_equal(np.array(other["proba"]), model.probabilities(texts))


def corrupt(path: Path, tmp_path: Path, how: str) -> Path:
    import shutil

    bad = tmp_path / f"bad-{how}"
    shutil.copytree(path, bad)
    if how == "truncated-weights":
        data = (bad / "weights.npz").read_bytes()
        (bad / "weights.npz").write_bytes(data[: len(data) // 2])
    elif how == "json-not-json":
        (bad / "model.json").write_text("{not json")
    elif how == "coef-shape":
        with np.load(bad / "weights.npz") as w:
            np.savez(bad / "weights.npz", coef=w["coef"][:-1], intercept=w["intercept"])
    elif how == "coef-dtype":
        with np.load(bad / "weights.npz") as w:
            np.savez(bad / "weights.npz", coef=w["coef"].astype(np.int64), intercept=w["intercept"])
    elif how == "newer-version":
        meta = json.loads((bad / "model.json").read_text())
        meta["format_version"] = FORMAT_VERSION + 1
        (bad / "model.json").write_text(json.dumps(meta))
    elif how == "labels":
        meta = json.loads((bad / "model.json").read_text())
        meta["labels"] = ["only-one"]
        (bad / "model.json").write_text(json.dumps(meta))
    elif how == "calibration":
        meta = json.loads((bad / "model.json").read_text())
        meta["calibration"]["temperature"] = -1.0
        (bad / "model.json").write_text(json.dumps(meta))
    elif how == "no-vocabulary":
        (bad / "vocabulary.tsv").unlink()
    elif how == "pickled-array":
        with np.load(bad / "weights.npz") as w:
            np.savez(bad / "weights.npz", coef=np.array([object()], dtype=object), intercept=w["intercept"])
    return bad


MALFORMED = [
    ("truncated-weights", "weights.npz: not a readable NumPy archive"),
    ("json-not-json", "model.json: not valid JSON (line 1, column 2"),
    ("coef-shape", "array 'coef' has shape"),
    ("coef-dtype", "array 'coef' has dtype int64"),
    ("newer-version", f"model format version {FORMAT_VERSION + 1} is newer"),
    ("labels", "field 'labels'"),
    ("no-vocabulary", "vocabulary file is missing"),
    ("calibration", "field 'calibration.temperature' must be a positive finite number, not -1.0"),
    ("pickled-array", "weights.npz: not a readable NumPy archive"),
]


@pytest.mark.parametrize("how, message", MALFORMED)
def test_malformed_model_is_named(trained, tmp_path, how, message):
    _, path, _ = trained
    bad = corrupt(path, tmp_path, how)
    with pytest.raises(ModelFileError) as info:
        Model.load(bad)
    assert message in str(info.value) and "\n" not in str(info.value)


def test_atomic_directory_keeps_old_on_failure(tmp_path):
    target = tmp_path / "out"
    atomic_directory(target, lambda d: (d / "a.txt").write_text("old"))
    before = tree_bytes(target)

    def fail(d):
        (d / "a.txt").write_text("new, half written")
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        atomic_directory(target, fail)
    assert tree_bytes(target) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
    atomic_directory(target, lambda d: (d / "b.txt").write_text("new"))
    assert set(tree_bytes(target)) == {".lintext.json", "b.txt"} and tree_bytes(target)["b.txt"] == b"new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


BEFORE = Path(__file__).resolve().parent / "data" / "before-layout"


@pytest.mark.parametrize("kind", ["vocabulary", "hashing"])
def test_models_written_before_the_layout_change_still_load(kind):
    # Oracle: labels and probabilities that lintext 0.1.0 itself gave (tests/data/before-layout).
    expected = json.loads((BEFORE / "predictions.json").read_text())
    model = lintext.open_model(BEFORE / kind)
    assert model.classify(expected["texts"]) == expected["expected"][kind]["labels"]
    np.testing.assert_allclose(model.probabilities(expected["texts"]), expected["expected"][kind]["probabilities"],
                               rtol=0, atol=1e-12)
    training = model.info["training"]  # read with today's spellings
    if kind == "vocabulary":
        assert training["schedule"] == "inverse-sqrt" and training["stop_metric"] == "macro-f1"
        assert training["precision"] == "float32" and training["updates"] == "lazy" and "lazy" not in training
    else:
        assert model.featurizer.config.hash_space == 256 and training["updates"] == "dense"


def test_weights_are_stored_as_float32_and_predict_as_saved(trained, tmp_path):
    model, path, texts = trained
    with np.load(path / "weights.npz", allow_pickle=False) as w:
        assert w["coef"].dtype == np.float32 and w["intercept"].dtype == np.float64
    assert model.coef.dtype == np.float32  # build_model evaluates the weights it will save
    loaded = lintext.open_model(path)
    np.testing.assert_array_equal(loaded.coef, model.coef)
    np.testing.assert_array_equal(loaded.scores(texts), model.scores(texts))
    # scores against the plain product in float64 (NumPy/SciPy directly)
    X = model.featurizer.transform(texts)
    np.testing.assert_allclose(model.scores(texts), X @ model.coef.astype(np.float64) + model.intercept, rtol=1e-12)
    wide = model.save(tmp_path / "wide", precision="float64")
    with np.load(wide / "weights.npz", allow_pickle=False) as w:
        assert w["coef"].dtype == np.float64


def test_feature_statistics_are_read_only_when_asked(trained, tmp_path):
    import shutil

    from lintext.errors import ModelFileError

    model, path, texts = trained
    copy = tmp_path / "copy"
    shutil.copytree(path, copy)
    (copy / "feature_stats.npz").write_bytes(b"not an archive")
    loaded = lintext.open_model(copy)
    assert loaded.classify(texts) == model.classify(texts)  # prediction never reads them
    with pytest.raises(ModelFileError, match="feature_stats.npz: not a readable NumPy archive"):
        loaded.feature_stats


def test_refit_keeps_the_first_pass_dev_record_and_saves_the_second_pass_weights(tmp_path):
    # Definition (engine/trainer.py, "Refit"): the saved weights are trained on train and dev
    # together; the dev metrics, dev errors and the temperature describe the first pass's weights,
    # so they equal those of the same run without a refit.
    from .conftest import small_corpus_rows, write_csv

    rows = small_corpus_rows(60)
    rows = [(t, ("billing" if i % 4 == 0 else lab)) for i, (t, lab) in enumerate(rows)]  # noise: dev not separated
    train = write_csv(tmp_path / "train.csv", rows)
    options = {"epochs": 40, "learning_rate": 0.5}
    refit = lintext.build_model(train, options=options)
    once = lintext.build_model(train, options={**options, "refit": False})
    assert refit.info["refit"] == {"epochs": once.info["best_epoch"], "documents": len(rows)}
    assert "refit" not in once.info
    assert refit.info["metrics"]["dev"]["accuracy"] == once.info["metrics"]["dev"]["accuracy"]
    assert refit.info["dev_errors"] == once.info["dev_errors"]
    assert refit.calibration["temperature"] == once.calibration["temperature"] != 1.0
    assert not np.allclose(refit.coef, once.coef)
    loaded = Model.load(refit.save(tmp_path / "m"))
    assert loaded.info["refit"] == refit.info["refit"]


def test_dev_metrics_from_the_scores_at_hand_equal_a_fresh_evaluation(tmp_path):
    # The dev set is scored once after training (its rows are featurized already); the record must
    # be what evaluating the dev file from its texts gives, field for field. And evaluate's
    # ``scores`` (the same rows' scores) stands in for featurizing, with unknown labels skipped too.
    from lintext.pipeline import evaluate
    from lintext.text.readers import Corpus

    from .conftest import small_corpus_rows, write_csv

    rows = small_corpus_rows(80)
    train, dev = write_csv(tmp_path / "train.csv", rows[:60]), write_csv(tmp_path / "dev.csv", rows[60:])
    model = lintext.build_model(train, dev=dev, options={"epochs": 6, "refit": False, "loss": "softmax"})
    fresh = evaluate(model, dev)
    assert model.info["metrics"]["dev"] == fresh and fresh["documents"] == len(rows) - 60
    texts = [t for t, _ in rows[60:]]
    labels = [lab if i % 5 else "never-seen" for i, (_, lab) in enumerate(rows[60:])]
    corpus = Corpus(texts, labels, [f"m:{i}" for i in range(len(texts))])
    for how in ("count", "skip"):
        assert evaluate(model, corpus, unknown_labels=how, scores=model.scores(texts)) == \
            evaluate(model, corpus, unknown_labels=how)
    with pytest.raises(ValueError, match=f"3 rows for {len(texts)} documents"):
        evaluate(model, corpus, scores=model.scores(texts[:3]))
