"""The command line through typer's test runner: output, messages and exit status."""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from lintext.cli import app

from ..conftest import write

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_stats_reports_counts(tiny_csv):
    result = run("stats", tiny_csv, "--ngrams", "1-1")
    assert result.exit_code == 0, result.output
    # 12 documents; words: ferry, was, late, bill, too, high (df 6 each) + 12 numbers? no: single
    # digits are dropped by the default token pattern (two or more word characters).
    assert "12 documents, 2 labels" in result.output
    assert "features: 6 " in result.output
    # before the filter the same six words (df 6 each): none in one or two documents
    assert "before the document-frequency filter (--min-df, --max-df, --max-features): 6 features, 0.0% in 1 document" in result.output
    assert "after it: 6 features, 0.0% in 1 document, 0.0% in 2 documents" in result.output


def test_stats_shares_before_and_after_the_filter(tmp_path):
    # by hand: words (two or more letters) and their document counts: alpha 3, beta 2, gamma 1, delta 1;
    # before the filter 4 features, 2 of them (50%) in one document, 1 (25%) in two; --min-df 2 keeps alpha and beta:
    # none in one document, beta (50%) in two.
    path = write(tmp_path / "s.csv", "text,label\nalpha beta,a\nalpha gamma,b\nalpha beta delta,a\n")
    result = run("stats", path, "--ngrams", "1-1", "--weighting", "count")
    assert result.exit_code == 0, result.output
    assert "4 features, 50.0% in 1 document, 25.0% in 2 documents" in result.output
    assert "after it: 2 features, 0.0% in 1 document, 50.0% in 2 documents" in result.output


BAD_INPUTS = [
    ("missing.csv", None, "no such file or folder"),
    ("empty.csv", "", "empty file"),
    ("nocol.csv", "body,label\nx,a\n", "line 1: no column 'text'"),
    ("nolabel.csv", "text,label\nx,a\ny, \n", "line 3: empty label"),
    ("utf8.csv", b"text,label\n\xfe,a\n", "line 2: invalid UTF-8 byte 0xfe at byte offset 11"),
    ("bad.jsonl", '{"text": "a", "label": "x"}\n{"text": \n', "line 2: malformed JSON"),
    ("field.jsonl", '{"body": "a", "label": "x"}\n', "line 1: no field 'text'"),
    ("one.jsonl", '{"text": "a", "label": "x"}\n', "found 1 label(s) ('x')"),
]


@pytest.mark.parametrize("name, content, message", BAD_INPUTS)
def test_bad_input_exits_2_with_one_line(tmp_path, name, content, message):
    path = tmp_path / name
    if content is not None:
        write(path, content)
    result = run("stats", path)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert lines[0].startswith(f"error: {path}") and message in lines[0]
    assert "Traceback" not in result.output


def test_folder_without_label_folders(tmp_path):
    write(tmp_path / "flat" / "doc.txt", "hello")
    result = run("stats", tmp_path / "flat")
    assert result.exit_code == 2 and "no label sub-folders" in result.output


@pytest.mark.parametrize(
    "args, message",
    [
        (["--ngrams", "3-1"], "--ngrams='3-1'"),
        (["--weighting", "bm25"], "--weighting='bm25'"),
        (["--min-df", "lots"], "--min-df='lots'"),
        (["--format", "xml"], "--format='xml'"),
    ],
)
def test_bad_options_exit_2(tiny_csv, args, message):
    result = run("stats", tiny_csv, *args)
    assert result.exit_code == 2 and message in result.output


def test_version_and_help():
    assert run("--version").output.startswith("lintext ")
    result = run("stats", "--help")
    assert result.exit_code == 0 and "Example:" in result.output


# ------------------------------------------------------------------ train / predict / evaluate

import csv  # noqa: E402
import json  # noqa: E402

from ..test_model import MALFORMED, corrupt, tree_bytes  # noqa: E402


@pytest.fixture
def cli_model(small_split, tmp_path):
    out = tmp_path / "model"
    result = run("train", small_split["train"], "--dev", small_split["dev"], "--test", small_split["test"],
                 "--out", out, "--epochs", "8", "--quiet")
    assert result.exit_code == 0, result.output
    return out, result


def test_train_prints_metrics_and_location(cli_model):
    out, result = cli_model
    assert "best epoch" in result.output and "model written to" in result.output and str(out) in result.output
    meta = json.loads((out / "model.json").read_text())
    assert set(meta["metrics"]) == {"dev", "test"}
    assert 0.0 <= meta["metrics"]["test"]["accuracy"] <= 1.0


def test_predict_one_row_per_input(cli_model, small_split, tmp_path):
    out, _ = cli_model
    target = tmp_path / "pred.csv"
    result = run("predict", out, small_split["test"], "--out", target, "--top-labels", "2", "--quiet")
    assert result.exit_code == 0, result.output
    rows = list(csv.reader(target.open()))
    n_inputs = len(list(csv.reader(small_split["test"].open()))) - 1
    assert rows[0] == ["row", "label", "probability", "label_2", "probability_2"]
    assert len(rows) == n_inputs + 1 and [r[0] for r in rows[1:]] == [str(i) for i in range(1, n_inputs + 1)]
    for r in rows[1:]:
        assert r[1] != r[3] and float(r[2]) >= float(r[4])
    # the predicted label equals the Python API's prediction for the same texts
    model = lintext_load(out)
    texts = [t for t, _ in csv.reader(small_split["test"].open())][1:]
    assert [r[1] for r in rows[1:]] == model.classify(texts)


def lintext_load(path):
    import lintext

    return lintext.open_model(path)


def test_predict_without_label_column_to_stdout(cli_model, tmp_path):
    out, _ = cli_model
    data = write(tmp_path / "new.jsonl", '{"text": "the tap water is brown"}\n{"text": "invoice refund please"}\n')
    result = run("predict", out, data)
    assert result.exit_code == 0, result.output
    lines = result.output.strip().splitlines()
    assert lines[0] == "row,label,probability" and len(lines) == 3


def test_evaluate_json_keys_match_sklearn(cli_model, small_split):
    from sklearn.metrics import accuracy_score, f1_score

    out, _ = cli_model
    result = run("evaluate", out, small_split["test"], "--json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert {"accuracy", "macro_f1", "weighted_f1", "per_label", "confusion"} <= set(data)
    # Reference: sklearn.metrics on the same predictions.
    rows = list(csv.reader(small_split["test"].open()))[1:]
    pred = lintext_load(out).classify([t for t, _ in rows])
    truth = [lab for _, lab in rows]
    assert data["accuracy"] == pytest.approx(accuracy_score(truth, pred), abs=1e-12)
    assert data["macro_f1"] == pytest.approx(f1_score(truth, pred, average="macro"), abs=1e-12)
    assert sum(map(sum, data["confusion"])) == len(rows)
    tables = run("evaluate", out, small_split["test"])
    assert tables.exit_code == 0 and "per label" in tables.output and "confusion" in tables.output


@pytest.mark.parametrize("how, message", MALFORMED)
def test_malformed_model_exit_2(cli_model, small_split, tmp_path, how, message):
    out, _ = cli_model
    bad = corrupt(out, tmp_path, how)
    result = run("predict", bad, small_split["test"])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and message in lines[0]


@pytest.mark.parametrize(
    "args, message",
    [
        (["--learning-rate", "-1"], "--learning-rate=-1.0"),
        (["--ngrams", "2-1"], "--ngrams='2-1'"),
        (["--optimizer", "newton"], "--optimizer='newton'"),
        (["--loss", "squared"], "--loss='squared'"),
        (["--epochs", "0"], "--epochs=0"),
        (["--batch-size", "0"], "--batch-size=0"),
        (["--threads", "-2"], "--threads=-2"),
    ],
)
def test_train_rejects_bad_values_up_front(small_split, tmp_path, args, message):
    result = run("train", small_split["train"], "--out", tmp_path / "m", *args)
    assert result.exit_code == 2 and message in result.output, result.output
    assert not (tmp_path / "m").exists()


def test_diverging_run_leaves_existing_model_untouched(cli_model, small_split):
    out, _ = cli_model
    before = tree_bytes(out)
    result = run("train", small_split["train"], "--out", out, "--optimizer", "sgd", "--learning-rate", "1e12",
                 "--loss", "softmax", "--epochs", "5", "--quiet")
    assert result.exit_code == 2, result.output
    assert "diverged" in result.output and "learning rate 1e+12" in result.output
    assert tree_bytes(out) == before
    assert sorted(p.name for p in out.parent.iterdir() if p.name.startswith(".model")) == []


def test_interrupted_run_leaves_existing_model_untouched(cli_model, small_split, monkeypatch):
    from lintext.text.featurizer import Featurizer

    out, _ = cli_model
    before = tree_bytes(out)

    def interrupted(self, path):  # Ctrl-C while the new model is being written
        raise KeyboardInterrupt

    monkeypatch.setattr(Featurizer, "save_vocabulary", interrupted)
    result = run("train", small_split["train"], "--out", out, "--epochs", "2", "--quiet")
    assert result.exit_code == 130
    assert tree_bytes(out) == before
    assert [p.name for p in out.parent.iterdir() if p.name.startswith(".")] == []
