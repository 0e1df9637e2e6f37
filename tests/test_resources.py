"""Requests that cannot fit are refused before allocating; large tables live beside model.json.

The memory limit is set small through LINTEXT_MEMORY_LIMIT (lintext/resources.py), so each
case is refused in a fraction of a second instead of running the machine out of memory. The
expected sizes are worked out by hand in the comments from the layout of the arrays
(lintext/engine/footprint.py).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

import lintext
from lintext.cli import app
from lintext.engine.footprint import training_bytes, workers_that_fit
from lintext.engine.options import TrainOptions
from lintext.errors import ConfigError, InputError, ModelFileError
from lintext.model_tables import read_confusions
from lintext.resources import capped_processes, parse_size, usable_cores

from .conftest import small_corpus_rows, write_csv

runner = CliRunner()


def test_training_bytes_by_hand():
    # 999 features + bias = 1,000 rows x 4 labels = 4,000 cells. AdaGrad in float64: weights,
    # best copy and one state array = 3 x 8 x 4,000 = 96,000; row records 64 x 1,000 = 64,000;
    # one float64 copy for the report 8 x 4,000 = 32,000. Total 192,000.
    assert training_bytes(999, 4, TrainOptions(optimizer="adagrad")) == 192_000
    # Adam in float32 keeps two state arrays: 4 x 4 x 4,000 + 64,000 + 32,000 = 160,000.
    assert training_bytes(999, 4, TrainOptions(optimizer="adam", precision="float32")) == 160_000
    assert parse_size("512M", "x") == 512 * 2**20 and parse_size("2g", "x") == 2 * 2**30 and parse_size("100", "x") == 100


def test_a_huge_hashed_space_is_refused_before_featurizing(tiny_csv, monkeypatch):
    # 2^28 columns x 2 labels with AdaGrad (by hand, in units of 2^28 bytes): weights, best copy and
    # state 3 x 2 x 8 = 48, the report's float64 copy 2 x 8 = 16, row records 64, the featurizer's
    # per-column arrays 32: 160 x 2^28 bytes = 40 GiB. 64 MiB is allowed.
    monkeypatch.setenv("LINTEXT_MEMORY_LIMIT", "64M")
    result = runner.invoke(app, ["train", str(tiny_csv), "--out", str(tiny_csv.parent / "m"), "--hash-space", "2^28",
                                 "--optimizer", "adagrad", "--quiet"])
    assert result.exit_code == 2
    assert result.output.startswith("error: --hash-space=268435456: training (weights and adagrad state of "
                                    "268,435,457 rows x 2 labels (float64)) needs about 40 GiB but 64 MiB of memory")
    assert "use a smaller --hash-space or --precision float32" in result.output
    assert not (tiny_csv.parent / "m").exists()


def test_many_labels_times_many_features_is_refused(tmp_path, monkeypatch):
    rows = [(f"word{i} other{i} thing{i}", f"label{i % 400}") for i in range(800)]
    data = write_csv(tmp_path / "many.csv", rows)
    monkeypatch.setenv("LINTEXT_MEMORY_LIMIT", "1M")
    with pytest.raises(InputError) as info:
        lintext.build_model(data, dev_fraction=0, featurizer={"min_df": 1}, options={"epochs": 1})
    # 2,400 distinct words (3 per document) and 1,600 distinct word pairs (2 per document, n-grams 1-2)
    assert str(info.value).startswith(f"{data}: 400 labels x 4,000 features: training")
    assert "use --max-features or a larger --min-df or --precision float32" in str(info.value)


def test_workers_are_capped_at_the_cores_and_the_memory(monkeypatch):
    assert capped_processes(64) == usable_cores() and capped_processes(0) == usable_cores()
    options = TrainOptions(optimizer="sgd")
    per_run = training_bytes(1000, 10, options)
    monkeypatch.setenv("LINTEXT_MEMORY_LIMIT", str(per_run * 2 + per_run // 2))  # room for two and a half runs
    assert workers_that_fit(8, 1000, 10, options) == 2
    monkeypatch.setenv("LINTEXT_MEMORY_LIMIT", str(per_run // 2))
    assert workers_that_fit(8, 1000, 10, options) == 1


def test_jobs_never_exceed_the_cores():
    from lintext.text.featurizer import Featurizer

    assert Featurizer(n_jobs=64)._jobs_for(10**6) == usable_cores()


def test_loading_refuses_arrays_larger_than_the_memory(tmp_path, monkeypatch):
    import shutil
    from pathlib import Path

    model = shutil.copytree(Path(__file__).parent / "data" / "before-layout" / "vocabulary", tmp_path / "m")
    monkeypatch.setenv("LINTEXT_MEMORY_LIMIT", "1K")  # the weights are 324 x 3 x 4 bytes (float32) = 3,888
    with pytest.raises(ModelFileError, match=r"array 'coef' needs 3.8 KiB of memory, 1 KiB is available"):
        lintext.open_model(model)


@pytest.fixture(scope="module")
def many_labels_model(tmp_path_factory):
    # 300 labels, 4 documents each; evaluated on its own training data so every label has a row.
    tmp = tmp_path_factory.mktemp("labels")
    rows = [(f"topic{j} word{j} sign{j} mark{i}", f"label{j:03d}") for j in range(300) for i in range(4)]
    data = write_csv(tmp / "data.csv", rows)
    model = lintext.build_model(data, dev=data, featurizer={"min_df": 1}, options={"epochs": 3, "patience": 0})
    return model, model.save(tmp / "model")


def test_the_confusion_matrix_lives_beside_model_json(many_labels_model):
    model, path = many_labels_model
    dense = np.asarray(model.info["metrics"]["dev"]["confusion"])
    assert dense.shape == (300, 300) and dense.sum() == 1200
    text = (path / "model.json").read_text()
    assert '"confusion"' not in text
    # The matrix has 90,000 cells; model.json no longer grows with them (per-label rows remain).
    assert len(text) < 90_000 * 2
    with np.load(path / "confusion.npz") as cells:
        assert len(cells["dev_count"]) == np.count_nonzero(dense) and cells["dev_count"].sum() == 1200
    loaded = lintext.open_model(path)
    assert np.array_equal(np.asarray(loaded.info["metrics"]["dev"]["confusion"]), dense)


def test_above_the_inline_limit_the_matrix_stays_in_its_file(many_labels_model, monkeypatch):
    import lintext.model_tables as tables

    model, path = many_labels_model
    monkeypatch.setattr(tables, "INLINE_LABELS", 100)
    loaded = lintext.open_model(path)
    assert "confusion" not in loaded.info["metrics"]["dev"]
    matrices = read_confusions(path, loaded.info["metrics"], 300)
    assert np.array_equal(matrices["dev"], np.asarray(model.info["metrics"]["dev"]["confusion"]))


def test_a_tampered_confusion_file_is_refused(many_labels_model, tmp_path):
    import shutil

    _, path = many_labels_model
    bad = shutil.copytree(path, tmp_path / "bad")
    with np.load(bad / "confusion.npz") as cells:
        arrays = {k: cells[k] for k in cells.files}
    arrays["dev_count"] = arrays["dev_count"] + 1
    np.savez(bad / "confusion.npz", **arrays)
    with pytest.raises(ModelFileError, match="the counts add up to"):
        lintext.open_model(bad)


def test_large_json_is_written_without_indentation(tmp_path):
    from lintext.files import json_text

    small, large = {"a": [1, 2]}, {"a": list(range(300_000))}
    assert json_text(small) == json.dumps(small, indent=2) + "\n"
    assert json_text(large) == json.dumps(large) + "\n"


def test_resource_limit_errors_in_the_sweep(tmp_path, monkeypatch):
    rows = small_corpus_rows()
    data = write_csv(tmp_path / "train.csv", rows)
    monkeypatch.setenv("LINTEXT_MEMORY_LIMIT", "64M")
    with pytest.raises(ConfigError, match="--hash-space=268435456: training"):
        from lintext.tuning.sweep import sweep

        sweep(data, optimizers="sgd,adam", learning_rates=[0.1], featurizer={"hash_space": 2**28})
