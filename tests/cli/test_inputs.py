"""The inputs people have: standard input, plain text, headerless files, an id column, labels the
model never saw, empty texts, and in-memory lists. Expected values are worked by hand in the
comments or come from scikit-learn (``sklearn.metrics.f1_score``) on the same predictions."""

from __future__ import annotations

import csv
import io
import json
import warnings

import numpy as np
import pytest
from typer.testing import CliRunner

import lintext
from lintext.cli import app
from lintext.errors import InputError
from lintext.text.readers import ReaderOptions, read_corpus, iter_records

from ..conftest import small_corpus_rows, write, write_csv

runner = CliRunner(mix_stderr=False) if "mix_stderr" in CliRunner.__init__.__code__.co_varnames else CliRunner()


def run(*args, input=None):
    return runner.invoke(app, [str(a) for a in args], input=input)


@pytest.fixture(scope="module")
def model_dir(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("inputs")
    rows = small_corpus_rows()
    model = lintext.build_model(write_csv(tmp / "train.csv", rows[:100]), options={"epochs": 6})
    return model.save(tmp / "model")


# ---------------------------------------------------------------- readers


def test_plain_text_one_document_per_line(tmp_path):
    path = write(tmp_path / "notes.txt", "first text\n\nthird, with a comma\n")
    records = list(iter_records(path, require_labels=False))
    # by hand: three lines, the blank one an empty document, so record k is line k
    assert [r.text for r in records] == ["first text", "", "third, with a comma"]
    assert [r.source for r in records] == [f"{path}:1", f"{path}:2", f"{path}:3"]
    assert all(r.label is None for r in records)
    with pytest.raises(InputError, match="plain text .* has no labels"):
        read_corpus(path)


def test_headerless_columns_by_position_and_an_id_column(tmp_path):
    path = write(tmp_path / "data.tsv", "billing\tinvoice too high\tA-1\noutage\tpower cut\tA-2\n")
    corpus = read_corpus(path, ReaderOptions(header=False, text_column="2", label_column="1", id_column="3"))
    assert corpus.texts == ["invoice too high", "power cut"] and corpus.labels == ["billing", "outage"]
    assert corpus.ids == ["A-1", "A-2"] and corpus.sources == [f"{path}:1", f"{path}:2"]
    with pytest.raises(InputError, match="line 1: no column 'label': without a header, give the label column by position"):
        read_corpus(path, ReaderOptions(header=False, text_column="2"))
    # with a header, a position works too when no column has that name
    path = write(tmp_path / "h.csv", "text,label\nhello there,a\nbye now,b\n")
    assert read_corpus(path, ReaderOptions(text_column="1", label_column="2")).labels == ["a", "b"]


def test_in_memory_lists_train_the_same_model_as_the_file(tmp_path):
    rows = small_corpus_rows()[:60]
    texts, labels = [t for t, _ in rows], [y for _, y in rows]
    options = {"epochs": 3}
    from_file = lintext.build_model(write_csv(tmp_path / "t.csv", rows), options=options)
    for model in (lintext.build_model(texts, labels, options=options), lintext.build_model((texts, labels), options=options),
                  lintext.build_model(texts, labels=labels, options=options)):
        np.testing.assert_array_equal(model.coef, from_file.coef)  # same data, same seed: the same weights
        assert model.info["data"]["train"] == "in-memory data"
    with pytest.raises(InputError, match="2 texts but 1 labels"):
        lintext.build_model(["a b", "c d"], labels=["x"])


# ---------------------------------------------------------------- command line


def test_predict_reads_standard_input_and_carries_the_id(model_dir):
    result = run("predict", model_dir, "-", input="the tap water is brown\n\ninvoice refund please\n")
    assert result.exit_code == 0, result.output
    lines = result.stdout.strip().splitlines()
    assert lines[0] == "row,label,probability" and len(lines) == 4
    assert "1 document(s) have an empty text" in result.stderr
    table = "text,ref\nthe tap water is brown,T-7\ninvoice refund please,T-8\n"
    result = run("predict", model_dir, "-", "--format", "csv", "--id-column", "ref", input=table)
    rows = list(csv.reader(io.StringIO(result.stdout)))
    assert result.exit_code == 0 and rows[0][:3] == ["row", "id", "label"] and [r[1] for r in rows[1:]] == ["T-7", "T-8"]


def test_evaluate_counts_labels_the_model_never_saw(model_dir, tmp_path):
    from sklearn.metrics import f1_score

    rows = small_corpus_rows()[100:]
    rows = [(t, y) for t, y in rows if y != "water"] + [("gas smell near the meter", "gas"), ("", "billing")]
    path = write_csv(tmp_path / "test.csv", rows)
    result = run("evaluate", model_dir, path, "--json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    pred = lintext.open_model(model_dir).classify([t for t, _ in rows])
    truth = [y for _, y in rows]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # scikit-learn on the label strings: "gas" is a true label never predicted, "water" maybe predicted, never true
        assert data["macro_f1"] == pytest.approx(f1_score(truth, pred, average="macro"), abs=1e-12)
    assert data["unknown_labels"] == {"handling": "counted as errors", "documents": 1, "labels": {"gas": 1}}
    assert data["per_label"]["gas"]["precision"] is None and data["per_label"]["gas"]["recall"] == 0.0
    assert data["empty_texts"] == 1
    assert "1 document(s) have a label the model never saw, counted as errors: gas (1)" in result.stderr
    skipped = json.loads(run("evaluate", model_dir, path, "--json", "--skip-unknown-labels").stdout)
    assert skipped["documents"] == len(rows) - 1 and "gas" not in skipped["per_label"]
    tables = run("evaluate", model_dir, path)
    assert tables.exit_code == 0 and "gas (unknown)" in tables.stdout
    assert "—" in tables.stdout  # gas: never predicted, so no precision
