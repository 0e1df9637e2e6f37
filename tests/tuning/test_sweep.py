"""Sweeps and the sweep command (the probe: test_probe.py).

Each check names its source: scikit-learn or SciPy as reference implementations, IEEE 754
(float64's largest finite value), Python's mmap module, a brute-force measurement made in
the test, or a hand-worked example written out in the comment.
"""

from __future__ import annotations

import csv
import json
import math
import re
import mmap

import numpy as np
import pytest
from scipy.special import softmax as scipy_softmax
from sklearn.metrics import accuracy_score, f1_score, log_loss
from typer.testing import CliRunner

import lintext.engine.kernels
from lintext import ConfigError, open_model, read_corpus
from lintext.cli import app
from lintext.tuning.sweep import parse_learning_rates, parse_optimizers, sweep

runner = CliRunner()
# A learning rate that makes float64 overflow in the first epoch: after one step the weights
# are about 1e308 times the gradient, and the scores of the next examples (sums of such
# weights) pass float64's largest finite value, 1.797e308 (IEEE 754), so the loss is inf/NaN.
OVERFLOW_RATE = 1e308
SMALL = {"epochs": 6, "patience": 2, "loss": "softmax", "stop_metric": "dev-loss"}


def rows_of(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def without_seconds(result):
    rows = [{k: v for k, v in row.items() if k not in ("seconds", "cpu_seconds")} for row in result.rows]
    histories = [[{k: v for k, v in h.items() if k != "seconds"} for h in hist] for hist in result.histories]
    return rows, histories, result.best


# --------------------------------------------------------------------------- grids


def test_parse_lists():
    # Hand-worked: the text split at commas, each part read as a Python float.
    assert parse_learning_rates("1e-4, 0.01,1") == (1e-4, 0.01, 1.0)
    assert parse_optimizers("sgd, Adam") == ("sgd", "adam")
    for text, bad in (("0.1,fast", "fast"), ("0.1,-1", "-1"), ("0.1,,1", ""), ("0.1,nan", "nan"), ("0.1,0.1", 0.1)):
        with pytest.raises(ConfigError) as info:
            parse_learning_rates(text)
        assert info.value.option == "--learning-rates" and info.value.value == bad
    with pytest.raises(ConfigError) as info:
        parse_optimizers("sgd,lbfgs")  # L-BFGS has no learning rate to sweep
    assert info.value.value == "lbfgs"


# --------------------------------------------------------------------------- sweeps


def test_diverging_run_is_flagged_and_the_others_finish(small_split):
    # Softmax with learning rate 1e6: a step of size ~1e6 on features of size <= 1 moves the
    # weights by ~1e5, and the loss of a misclassified example grows linearly with its scores,
    # so the mean loss of epoch 1 is of order 1e5 (hand-worked estimate), far above 1000 x the
    # loss of the all-zero model (ln 3 = 1.0986), which is where lintext.train's guard trips.
    result = sweep(small_split["train"], dev=small_split["dev"], optimizers="sgd,adam",
                   learning_rates=[1e6, 0.1, 1.0], workers=1, options=SMALL)
    by_key = {(r["optimizer"], r["learning_rate"]): r for r in result.rows}
    assert len(result.rows) == 6
    for name in ("sgd", "adam"):
        diverged = by_key[(name, 1e6)]
        assert diverged["status"] == "diverged at epoch 1" and diverged["diverged_epoch"] == 1
        assert diverged["dev_loss"] is None and diverged["best_epoch"] is None and diverged["epochs_run"] == 1
        for rate in (0.1, 1.0):
            row = by_key[(name, rate)]
            assert row["status"] in ("finished", "stopped early")
            assert math.isfinite(row["dev_loss"]) and 1 <= row["best_epoch"] <= row["epochs_run"] <= SMALL["epochs"]
    assert result.rows[result.best]["learning_rate"] != 1e6


def test_saved_best_run_is_the_best_row_of_the_table(small_split, tmp_path):
    result = sweep(small_split["train"], dev=small_split["dev"], optimizers="sgd,adagrad",
                   learning_rates=[OVERFLOW_RATE, 0.03, 0.3, 3.0], workers=1, options=SMALL)
    out = result.save(tmp_path / "sweep")
    table = rows_of(out / "sweep.csv")
    assert len(table) == 8 and {r["status"] for r in table if float(r["learning_rate"]) == OVERFLOW_RATE} == {"diverged at epoch 1"}
    finished = [r for r in table if r["dev_loss"]]
    best_row = min(finished, key=lambda r: float(r["dev_loss"]))  # the stop metric is dev loss: lowest wins
    assert json.loads((out / "sweep.json").read_text())["best_run"] == int(best_row["run"])

    model = open_model(out / "best")
    assert model.info["training"]["refit"] is False and "refit" not in model.info  # a run is not refit
    assert model.info["training"]["optimizer"] == best_row["optimizer"]
    assert model.info["training"]["learning_rate"] == float(best_row["learning_rate"])
    dev = read_corpus(small_split["dev"])
    y_dev = dev.label_indices(model.labels)
    proba = scipy_softmax(model.scores(dev.texts), axis=1)
    # scikit-learn's log loss (mean cross-entropy, natural log) and accuracy of the reloaded model
    # against the table's row of the best run.
    # (the table's row was computed on the run's float64 weights; the saved model keeps them in float32)
    assert log_loss(y_dev, proba, labels=range(len(model.labels))) == pytest.approx(float(best_row["dev_loss"]), rel=1e-6)
    assert accuracy_score(y_dev, proba.argmax(axis=1)) == pytest.approx(float(best_row["dev_accuracy"]))
    # macro-F1 over the labels present in the truth or the predictions (scikit-learn without `labels`)
    macro_f1 = f1_score(y_dev, proba.argmax(axis=1), average="macro")
    assert macro_f1 == pytest.approx(float(best_row["dev_macro_f1"]))
    page = (out / "sweep.html").read_text(encoding="utf-8")
    assert page.count("<svg") == 2 and "diverged at epoch 1" in page
    assert " src=" not in page and "http" not in page.replace("http://www.w3.org", "")  # self-contained


@pytest.mark.slow
def test_two_jobs_give_the_same_sweep_as_one(small_split):
    kwargs = dict(dev=small_split["dev"], optimizers="sgd,adagrad,adam", learning_rates=[0.01, 0.3, OVERFLOW_RATE], options=SMALL)
    one = sweep(small_split["train"], workers=1, **kwargs)
    two = sweep(small_split["train"], workers=2, **kwargs)
    assert two.settings["workers"] == 2 and one.settings["workers"] == 1
    assert without_seconds(one) == without_seconds(two)
    assert np.array_equal(one.model.coef, two.model.coef) and np.array_equal(one.model.intercept, two.model.intercept)


def test_runs_read_the_matrix_through_shared_memory_maps(small_split, monkeypatch):
    # With one job the worker function runs in this process, so the engine's kernel entry
    # point can be watched: the CSR arrays it receives must be views of a memory map
    # (Python's mmap.mmap at the end of their .base chain), not private copies.
    seen = []
    real = lintext.engine.kernels.run_epoch

    def watch(indptr, indices, data, *args, **kwargs):
        seen.append([_mapped(a) for a in (indptr, indices, data)] + [data.flags.writeable])
        return real(indptr, indices, data, *args, **kwargs)

    monkeypatch.setattr(lintext.engine.kernels, "run_epoch", watch)
    sweep(small_split["train"], dev=small_split["dev"], optimizers="sgd", learning_rates=[0.1], workers=1, options=SMALL)
    assert seen and all(s == [True, True, True, False] for s in seen)


def _mapped(array) -> bool:
    while array is not None:
        if isinstance(array, mmap.mmap):
            return True
        array = getattr(array, "base", None)
    return False


def test_sweep_needs_dev_data(small_split):
    with pytest.raises(ConfigError) as info:
        sweep(small_split["train"], dev_fraction=0, workers=1)
    assert info.value.option == "--dev-fraction"


# --------------------------------------------------------------------------- commands


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.mark.slow
def test_cli_sweep_writes_table_page_and_best_model(small_split, tmp_path):
    out = tmp_path / "sweep"
    result = run("sweep", small_split["train"], "--dev", small_split["dev"], "--out", out, "--optimizers", "sgd,adam",
                 "--learning-rates", "0.1,1", "--epochs", 4, "--workers", 1, "--loss", "softmax", "--stop-metric", "dev-loss")
    assert result.exit_code == 0, result.output
    assert "best: " in result.output and ("finished" in result.output or "stopped early" in result.output)
    assert sorted(p.name for p in out.iterdir()) == [".lintext.json", "best", "sweep.csv", "sweep.html", "sweep.json"]
    assert len(rows_of(out / "sweep.csv")) == 4
    assert (out / "best" / "model.json").is_file() and (out / "best" / "weights.npz").is_file()
    assert (out / "best" / "report.html").is_file() and (out / "best" / "features.csv").is_file()
    # ranked as the heading says: the dev-loss column falls down the table (lowest first), headers spelled out
    lines = result.output.splitlines()
    head = next(i for i, line in enumerate(lines) if "learning rate" in line and "dev loss" in line)
    assert "ranked by dev loss (best first)" in result.output and "dev_loss" not in result.output
    losses = [float(m.group(2)) for line in lines[head + 1:] for m in [re.search(r"(finished|stopped early)\s+([\d.]+)", line)] if m]
    assert losses == sorted(losses) and len(losses) == 4
    assert not any(p.name.startswith(".") for p in tmp_path.iterdir())  # no temporary folder left behind
    # The best run is an ordinary model directory: the other commands take it as it is.
    assert run("evaluate", out / "best", small_split["test"]).exit_code == 0
    assert run("report", out / "best", "--quiet").exit_code == 0 and (out / "best" / "report.html").is_file()


@pytest.mark.parametrize("option, value, shown", [
    ("--learning-rates", "0.1,fast", "'fast'"),
    ("--learning-rates", "0.1,-2", "'-2'"),
    ("--optimizers", "sgd,lbfgs", "'lbfgs'"),
])
def test_cli_sweep_bad_list_exits_2_naming_option_and_value(small_split, tmp_path, option, value, shown):
    result = run("sweep", small_split["train"], "--dev", small_split["dev"], "--out", tmp_path / "x", option, value)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"error: {option}=") and shown in lines[0], result.output
    assert not (tmp_path / "x").exists()


def test_a_sweep_whose_runs_all_fail_keeps_the_previous_best(small_split, tmp_path):
    from ..test_model import tree_bytes

    out = tmp_path / "sweep"
    good = sweep(small_split["train"], dev=small_split["dev"], optimizers="sgd", learning_rates=[0.3], workers=1,
                 options=SMALL)
    good.save(out)
    before = tree_bytes(out / "best")
    failed = sweep(small_split["train"], dev=small_split["dev"], optimizers="sgd", learning_rates=[OVERFLOW_RATE],
                   workers=1, options=SMALL)
    assert failed.best is None and failed.model is None
    failed.save(out)
    assert failed.kept_previous_best and tree_bytes(out / "best") == before
    saved = json.loads((out / "sweep.json").read_text())
    assert saved["best_run"] is None and saved["best_kept_from_previous_sweep"] is True
    assert rows_of(out / "sweep.csv")[0]["status"] == "diverged at epoch 1"
    open_model(out / "best")  # still a complete model
    # and a sweep into a fresh folder whose runs all fail writes no best/
    failed.save(tmp_path / "fresh")
    assert not (tmp_path / "fresh" / "best").exists() and not failed.kept_previous_best
