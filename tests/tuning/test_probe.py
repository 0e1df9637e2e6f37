"""The learning-rate probe (its ladder, its reading) and the probe command.

Each check names its source: L. N. Smith, "Cyclical Learning Rates for Training Neural
Networks" (WACV 2017) for the method, scikit-learn's ``log_loss`` as the reference loss of
brute-force constant-rate runs made in the test, or a hand-worked example written out in
the comment.
"""

from __future__ import annotations

import csv
import json
import math
import re

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.special import softmax as scipy_softmax
from sklearn.metrics import log_loss
from typer.testing import CliRunner

from lintext import ConfigError
from lintext.cli import app
from lintext.engine.options import TrainOptions
from lintext.engine.trainer import fit
from lintext.errors import DivergenceError
from lintext.report.probe_page import RUNG_COLUMNS, SUMMARY_KEYS
from lintext.tuning.ladder import ladder, read_ladder, suggestion_below
from lintext.tuning.probe import Minibatches, block_sizes, probe_learning_rate, rung_score, untrained_loss

from ..conftest import DEMO
from ..report.test_report import assert_offline

runner = CliRunner()
LN3 = math.log(3)


def synthetic_problem(n=2400, d=30, k=3, seed=0):
    """Three overlapping Gaussian classes (so the best loss stays well above 0), rows scaled to norm 3."""
    rng = np.random.default_rng(seed)
    means = rng.normal(size=(k, d)) * 0.3
    y = rng.integers(0, k, n)
    X = means[y] + rng.normal(size=(n, d))
    X *= 3.0 / np.linalg.norm(X, axis=1, keepdims=True)
    return sp.csr_matrix(X), y


# --------------------------------------------------------------------------- the ladder and its reading


def test_ladder_has_four_rungs_per_decade():
    # Hand-worked: the rates 10^(j/4); from 1e-4 (j = -16) to 1e3 (j = 12) that is 29 rungs.
    rates = ladder(1e-4, 1e3)
    assert len(rates) == 29 and rates[0] == pytest.approx(1e-4) and rates[-1] == pytest.approx(1e3)
    assert np.allclose(rates[1:] / rates[:-1], 10 ** 0.25)
    # Ends off the ladder are rounded inwards: 0.05 -> 10^-1.25 = 0.0562, 2 -> 10^0.25 = 1.78;
    # a rung written to three digits is that rung: 5.62 -> 10^0.75 = 5.6234, 0.0178 -> 10^-1.75.
    assert ladder(0.05, 2.0) == pytest.approx([0.05623, 0.1, 0.1778, 0.3162, 0.5623, 1.0, 1.778], rel=1e-3)
    assert ladder(0.0178, 5.62)[[0, -1]] == pytest.approx([10 ** -1.75, 10 ** 0.75])


def test_suggestion_is_smiths_lower_bound():
    # Smith 2017, section 3.3: the lower bound is "1/3 or 1/4" of the upper one; two rungs of
    # 10^(1/4) are a factor of 10^(1/2) = 3.162, inside that range (hand-worked).
    assert suggestion_below(10 ** 0.5) == pytest.approx(1.0)
    assert 3 <= 1.0 / suggestion_below(1.0) <= 4


@pytest.mark.parametrize("means, stopped, verdict, lowest", [
    # Hand-worked, every standard error 0.01, so "more than noise" is a gap above 2 * sqrt(2) * 0.01 = 0.028.
    ([1.10, 1.00, 0.80, 0.60, 0.70, 1.20], True, "suggested", 3),  # fell to rung 3, the stopping rung is no candidate
    ([1.10, 1.00, 0.80, 0.60], False, "still-falling", 3),  # lowest at the top: the rise was never seen
    ([1.10, 1.00, 0.60, 0.61], False, "level-at-top", 2),  # a rise of 0.01 is within the noise
    ([1.10, 1.00, 0.60, 0.65], False, "suggested", 2),  # a rise of 0.05 is not
    ([1.10, 1.09, 1.095, 1.3], True, "never-fell", 1),  # a fall of 0.01 is within the noise
    ([2.0], True, "never-fell", None),  # the first rung already stopped the climb
])
def test_read_ladder_hand_worked(means, stopped, verdict, lowest):
    assert read_ladder(means, [0.01] * len(means), stopped) == (verdict, lowest)


def test_untrained_loss_is_the_loss_of_zero_scores():
    # Hand-worked: zero scores give every label probability 1/K (loss ln K); the hinge's margin
    # 1 + max_{j != y} 0 - 0 is 1.
    assert untrained_loss("softmax", 7) == pytest.approx(math.log(7))
    assert untrained_loss("hinge", 7) == 1.0


def test_minibatches_blocks_and_rung_score_hand_worked():
    # 10 rows in batches of 4: two batches from one permutation, the 2 rows left over are
    # skipped and the third batch comes from a fresh permutation.
    draw = Minibatches(10, 4, np.random.default_rng(0))
    rows = draw.take(3)
    assert len(rows) == 12 and len(set(rows[:8])) == 8 and len(set(rows[8:])) == 4
    assert block_sizes(40) == [4] * 10 and block_sizes(45) == [5] * 5 + [4] * 5 and block_sizes(3) == [1, 1, 1]
    # Blocks with mean losses 1 and 2 over 4 rows each: mean 1.5; standard error
    # std([1, 2], ddof=1) / sqrt(2) = 0.7071 / 1.4142 = 0.5.
    assert rung_score([4.0, 8.0], [4, 4]) == pytest.approx((1.5, 0.5))


# --------------------------------------------------------------------------- the probe on data


def test_first_rung_starts_from_the_untrained_loss():
    # Hand-worked bound: an SGD step moves a score by at most rate * (|x.x'| + 1) <= rate * 10
    # (rows of norm 3, a softmax gradient entry at most 1 in size, the bias), so 40 steps at
    # 1e-8 move it by at most 4e-6, and the softmax loss (2-Lipschitz in the scores, sum of
    # |gradient| <= 2) by at most 8e-6 from ln 3.
    X, y = synthetic_problem()
    result = probe_learning_rate(X, y, 3, {"optimizer": "sgd", "loss": "softmax"}, lowest_rate=1e-8, highest_rate=1e-7)
    assert result.mean_losses[0] == pytest.approx(LN3, abs=1e-5)


@pytest.fixture(scope="module")
def problem():
    return synthetic_problem()


@pytest.mark.slow
@pytest.mark.parametrize("optimizer", ["sgd", "adagrad", "adam"])
def test_probe_suggests_a_rate_among_the_best_by_brute_force(problem, optimizer):
    X, y = problem
    results = [probe_learning_rate(X, y, 3, {"optimizer": optimizer, "seed": seed, "loss": "softmax"}) for seed in range(3)]
    for result in results:
        # The climb stops at the first rung whose mean loss is above the untrained model's (ln 3).
        assert result.stopped_by == "mean-loss-above-untrained" and result.verdict == "suggested"
        assert result.mean_losses[-1] > LN3 and np.all(result.mean_losses[:-1] <= LN3)

    # Brute force: train at each constant rate of the ladder for about as many examples as the
    # probe saw, and measure the training loss with scikit-learn's log_loss. The good rates are
    # those within 10% of the largest loss reduction from ln 3 that any rate achieves.
    seen = results[0].steps.sum() * 8
    epochs = max(1, round(seen / X.shape[0]))
    rates = ladder(1e-3, 100)
    final = []
    for rate in rates:
        try:
            run = fit(X, y, 3, options=TrainOptions(optimizer=optimizer, learning_rate=float(rate), epochs=epochs,
                                                    patience=0, loss="softmax"))
            final.append(log_loss(y, scipy_softmax(np.asarray(X @ run.coef) + run.intercept, axis=1), labels=[0, 1, 2]))
        except DivergenceError:
            final.append(math.inf)
    final = np.array(final)
    good = rates[final <= final.min() + 0.1 * (LN3 - final.min())]
    worse_than_untrained = rates[final > LN3].min()
    assert rates[0] not in good and rates[-1] not in good  # the range is a proper part of the grid
    for result in results:
        assert good.min() <= result.suggested_rate <= good.max(), (result.suggested_rate, good)
        # Smith's upper bound is a rate that still trains: below every constant rate that ends worse than untrained.
        assert result.upper_bound < worse_than_untrained


def test_probe_says_still_falling_and_suggests_nothing(problem):
    X, y = problem
    result = probe_learning_rate(X, y, 3, {"optimizer": "sgd"}, lowest_rate=1e-4, highest_rate=1e-2)
    summary = result.summary()
    assert summary["verdict"] == "still-falling" and summary["stopped_by"] == "highest-rate-reached"
    assert summary["suggested_rate"] is None and summary["upper_bound"] is None
    assert summary["lowest_loss_rate"] == pytest.approx(1e-2)  # the loss was lowest at the top rung
    assert "--highest-rate" in summary["advice"]


# 1e307: within a few dozen steps of that size the weights pass float64's largest value, 1.797e308 (IEEE 754).
@pytest.mark.parametrize("lowest, reason", [(100.0, "mean-loss-above-untrained"), (1e307, "loss-not-finite")])
def test_probe_starting_too_high_never_fell(problem, lowest, reason):
    X, y = problem
    result = probe_learning_rate(X, y, 3, {"optimizer": "sgd", "loss": "softmax"}, lowest_rate=lowest,
                                 highest_rate=lowest * 10)
    assert result.verdict == "never-fell" and result.stopped_by == reason and result.suggested_rate is None
    assert "--steps-per-rung" in result.summary()["advice"] and "--lowest-rate" in result.summary()["advice"]


def test_probe_is_deterministic(problem):
    X, y = problem
    first, second = (probe_learning_rate(X, y, 3, {"optimizer": "adam", "seed": 3}) for _ in range(2))
    assert np.array_equal(first.mean_losses, second.mean_losses) and first.summary() == second.summary()


@pytest.mark.parametrize("options, kwargs, option", [
    ({}, {"lowest_rate": 0.0}, "--lowest-rate"),
    ({}, {"highest_rate": math.inf}, "--highest-rate"),  # not blamed on --lowest-rate
    ({}, {"lowest_rate": 1.0, "highest_rate": 5.0}, "--highest-rate"),  # less than a decade
    ({}, {"steps_per_rung": 1}, "--steps-per-rung"),
    ({}, {"steps_per_rung": 2.5}, "--steps-per-rung"),
    ({"optimizer": "lbfgs"}, {}, "--optimizer"),
    ({"batch_size": 0}, {}, "--batch-size"),
])
def test_probe_errors_name_the_option_as_typed(problem, options, kwargs, option):
    X, y = problem
    with pytest.raises(ConfigError) as info:
        probe_learning_rate(X[:50], y[:50], 3, options, **kwargs)
    assert info.value.option == option and str(info.value).startswith(f"{option}=")


# --------------------------------------------------------------------------- the command


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def rows_of(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


@pytest.mark.slow
def test_cli_probe_spells_its_names_alike_everywhere(tmp_path):
    out = tmp_path / "probe"
    result = run("probe", DEMO / "train.csv", "--dev", DEMO / "dev.csv", "--out", out, "--loss", "softmax")
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == ["probe.html", "probe.json", "rungs.csv"]
    assert not any(p.name.startswith(".") for p in tmp_path.iterdir())  # no temporary folder left behind
    table = rows_of(out / "rungs.csv")
    summary = json.loads((out / "probe.json").read_text(encoding="utf-8"))
    html = (out / "probe.html").read_text(encoding="utf-8")
    assert tuple(table[0]) == RUNG_COLUMNS and len(table) - 1 == summary["rungs_run"]
    assert summary["verdict"] == "suggested" and summary["suggested_rate"] == pytest.approx(summary["upper_bound"] / 10 ** 0.5)
    lines = result.output.splitlines()
    for key in SUMMARY_KEYS:  # every key of the reading: the same word in the terminal, the JSON file and the page
        assert key in summary and any(line.startswith(f"{key}: ") for line in lines) and f"<dt>{key}</dt>" in html
    assert f"suggested_rate: {summary['suggested_rate']:.3g}" in lines
    terminal_header = next(line for line in lines if line.strip().startswith("rung"))
    assert terminal_header.split() == list(RUNG_COLUMNS)
    assert "".join(f"<th class=\"num\">{c}</th>" for c in RUNG_COLUMNS) in html and "<svg" in html
    assert_offline(html)


def test_cli_probe_still_falling_gives_no_suggestion(small_split):
    result = run("probe", small_split["train"], "--dev", small_split["dev"], "--highest-rate", 0.01, "--steps-per-rung", 10,
                 "--loss", "softmax")
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert "verdict: still-falling" in lines and "suggested_rate: none" in lines
    assert any(line.startswith("advice: ") and "raise --highest-rate" in line for line in lines)


@pytest.mark.parametrize("args, option", [
    (["--steps-per-rung", "0"], "--steps-per-rung"),
    (["--highest-rate", "inf"], "--highest-rate"),
    (["--lowest-rate", "-1"], "--lowest-rate"),
    (["--highest-rate", "0.0005"], "--highest-rate"),
    (["--batch-size", "0"], "--batch-size"),
    (["--optimizer", "lbfgs"], "--optimizer"),
])
def test_cli_probe_bad_option_is_one_line_naming_it_as_typed(small_split, tmp_path, args, option):
    result = run("probe", small_split["train"], "--out", tmp_path / "p", *args)
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"error: {option}="), result.output
    assert not (tmp_path / "p").exists()


def test_probe_help_names_only_options_that_exist():
    import typer.main

    command = typer.main.get_command(app).commands["probe"]
    options = {name for param in command.params for name in (*param.opts, *param.secondary_opts)} | {"--help"}
    text = run("probe", "--help").output
    named = set(re.findall(r"(?<![\w-])--[a-z][a-z0-9-]*", text))
    assert named and named <= options, named - options
    for gone in ("--min-lr", "--max-lr", "--smoothing", "--blowup", "--steps"):
        assert gone not in options
    assert run("probe", DEMO / "train.csv", "--max-lr", "10").exit_code == 2
