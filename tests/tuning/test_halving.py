"""Successive halving: the bracket's budgets against the Hyperband paper, and a halved sweep against the full grid.

References: L. Li et al., "Hyperband" (JMLR 2017/2018), Table 1 (the brackets for R = 81, eta = 3);
K. Jamieson & A. Talwalkar (AISTATS 2016) for the procedure; the full grid run by lintext itself
(every configuration to the end) as the reference for the choice and the weights.
"""

from __future__ import annotations

import numpy as np
import pytest

from lintext.engine.options import TrainOptions
from lintext.errors import ConfigError
from lintext.pipeline import prepare_data
from lintext.tuning.halving import halving_budgets
from lintext.tuning.runs import BUDGET_USED, RunData, share_arrays, train_run
from lintext.tuning.sweep import sweep

OPTIONS = {"epochs": 9, "patience": 3}


def test_budgets_of_the_most_aggressive_bracket():
    # Li et al., Table 1, R = 81, eta = 3, bracket s = 4: n_i = 81, 27, 9, 3, 1 configurations with
    # r_i = 1, 3, 9, 27, 81 units of resource.
    assert halving_budgets(81, 81, 3) == [(81, 1), (27, 3), (9, 9), (3, 27), (1, 81)]
    # Hand-worked: 15 runs, 50 epochs, eta 3: s = min(floor(log3 15), floor(log3 50)) = min(2, 3) = 2,
    # epochs round(50 / 9) = 6, round(50 / 3) = 17, 50; configurations 15, 5, 1.
    assert halving_budgets(15, 50, 3) == [(15, 6), (5, 17), (1, 50)]
    # Fewer epochs than runs: s is capped by the epochs (log2 4 = 2), so the first rung has 1 epoch.
    assert halving_budgets(12, 4, 2) == [(12, 1), (6, 2), (3, 4)]


def strip(row):
    return {k: v for k, v in row.items() if k not in ("seconds", "cpu_seconds")}


@pytest.mark.slow
def test_halving_keeps_the_full_grids_best_run_and_its_weights(small_split):
    kwargs = dict(dev=small_split["dev"], optimizers="sgd,adagrad,adam", learning_rates=[0.001, 0.03, 0.3, 3.0],
                  workers=1, options=OPTIONS)
    full = sweep(small_split["train"], **kwargs)
    halved = sweep(small_split["train"], halving=3, **kwargs)
    # 12 runs, 9 epochs, eta 3: s = 2, rungs (12 runs, 1 epoch), (4, 3), (1, 9); no run here stops early
    # before the last rung, so each rung trains all its configurations
    rungs = halved.settings["halving"]["rungs"]
    assert [(r["epochs"], r["configurations"], len(r["runs"])) for r in rungs] == [(1, 12, 12), (3, 4, 4), (9, 1, 1)]
    # a rung trains the runs that went on past the rung before it, smallest learning rate first
    assert sorted(rungs[0]["runs"]) == list(range(12))
    for before, rung in zip(rungs, rungs[1:]):
        assert sorted(rung["runs"]) == [r["run"] for r in halved.rows if r["epochs_run"] > before["epochs"]]
        assert [halved.rows[i]["learning_rate"] for i in rung["runs"]] == sorted(halved.rows[i]["learning_rate"] for i in rung["runs"])
    assert halved.best == full.best
    assert np.array_equal(halved.model.coef, full.model.coef) and np.array_equal(halved.model.intercept, full.model.intercept)
    pruned = [r for r in halved.rows if r["status"].startswith("pruned at epoch ")]
    assert pruned and all(r["status"] == f"pruned at epoch {r['epochs_run']}" for r in pruned)
    for a, b in zip(halved.rows, full.rows):
        if not a["status"].startswith("pruned"):  # ran to its end: the full grid's row
            assert strip(a) == strip(b)
        else:  # the first epochs of the same run
            assert [h["dev_loss"] for h in halved.histories[a["run"]]] == \
                [h["dev_loss"] for h in full.histories[a["run"]]][: a["epochs_run"]]
    assert sum(r["epochs_run"] for r in halved.rows) < sum(r["epochs_run"] for r in full.rows)


def test_halving_factor_is_checked(small_split):
    with pytest.raises(ConfigError) as info:
        sweep(small_split["train"], dev=small_split["dev"], halving=1, workers=1)
    assert info.value.option == "--halving"


@pytest.mark.slow
def test_halving_page_and_table_say_pruned(small_split, tmp_path):
    result = sweep(small_split["train"], dev=small_split["dev"], optimizers="sgd", learning_rates=[1e-4, 0.01, 1.0, 10.0],
                   workers=1, halving=2, options={"epochs": 4, "patience": 0})
    # 4 runs, 4 epochs, eta 2: rungs (4, 1), (2, 2), (1, 4): two runs pruned at epoch 1, one at epoch 2
    assert sorted(r["status"] for r in result.rows if r["status"].startswith("pruned")) == \
        ["pruned at epoch 1", "pruned at epoch 1", "pruned at epoch 2"]
    out = result.save(tmp_path / "sweep")
    assert "pruned at epoch 1" in (out / "sweep.csv").read_text() and "pruned at epoch 2" in (out / "sweep.html").read_text()


def test_a_run_at_its_budget_keeps_no_weights_and_goes_on_from_its_checkpoint(small_split, tmp_path):
    # A run that used its budget is pruned or resumed from its checkpoint: its weights are neither
    # written (run-<i>.npz) nor returned. Reference: the same configuration trained without a break
    # (lintext.engine.resume's claim, bit for bit), whose weights the resumed run must end with.
    prepared = prepare_data(small_split["train"], small_split["dev"])
    data = RunData(str(tmp_path), share_arrays(tmp_path, prepared.X, prepared.y, prepared.X_dev, prepared.y_dev))
    options = TrainOptions(optimizer="adagrad", learning_rate=0.1, epochs=4, patience=0, refit=False)
    n_labels = len(prepared.labels)
    for save_to in (str(tmp_path), None):  # local processes save to the folder; a cluster sends them back
        row, _, weights, checkpoint = train_run(data, 0, options, n_labels, epochs=2, save_to=save_to)
        assert row["status"] == BUDGET_USED and row["epochs_run"] == 2 and checkpoint is not None
        assert weights is None and not (tmp_path / "run-0.npz").exists()
        row, _, weights, _ = train_run(data, 0, options, n_labels, save_to=save_to, resume=checkpoint)
        assert row["status"] == "finished" and row["epochs_run"] == 4
        if save_to is not None:
            with np.load(tmp_path / "run-0.npz") as saved:
                weights = {k: saved[k] for k in saved.files}
            (tmp_path / "run-0.npz").unlink()
        _, _, straight, _ = train_run(data, 0, options, n_labels)
        assert np.array_equal(weights["coef"], straight["coef"])
        assert np.array_equal(weights["intercept"], straight["intercept"])


def test_the_bracket_prunes_promotes_and_keeps_final_runs_by_the_tables_ranking():
    # Hand-worked, with a stand-in for training (each run's stop value per rung given below):
    # 6 runs, 4 epochs, eta 2: s = min(2, 2) = 2, rungs (6 runs, 1 epoch), (3, 2), (1, 4).
    # Rung 1 (macro-F1, higher is better): run 0 diverges, run 1 stops early at 0.9 (final), runs 2, 3
    # and 4 tie at 0.5, run 5 has 0.2. Best 3: runs 1, 2, 3 (the tie goes to grid order): 4 and 5 are
    # pruned at epoch 1. Rung 2 trains 2 and 3 (run 1 is final): 0.6 and 0.95; best 1 of runs 1, 2, 3
    # is run 3, so run 2 is pruned at epoch 2 and run 1 keeps its status. Rung 3 trains run 3 to the end.
    from lintext.tuning.halving import successive_halving
    from lintext.tuning.runs import best_run

    values = {1: {0: None, 1: 0.9, 2: 0.5, 3: 0.5, 4: 0.5, 5: 0.2}, 2: {2: 0.6, 3: 0.95}, 4: {3: 0.97}}
    grid = [TrainOptions(optimizer="sgd", learning_rate=10.0 ** -k, epochs=4) for k in range(6)]

    def run(tasks):
        for i, options, epochs, _ in tasks:
            value = values[epochs][i]
            status = ("diverged at epoch 1" if value is None else "stopped early" if i == 1
                      else "finished" if epochs == options.epochs else BUDGET_USED)
            yield {"run": i, "status": status, "stop_value": value, "epochs_run": epochs}, [], None, None

    events = []
    results, rungs = successive_halving(grid, run, "macro-f1", 2, events.append)
    assert rungs == [{"epochs": 1, "runs": [0, 1, 2, 3, 4, 5], "configurations": 6},
                     {"epochs": 2, "runs": [2, 3], "configurations": 3},
                     {"epochs": 4, "runs": [3], "configurations": 1}]
    assert [results[i][0]["status"] for i in range(6)] == [
        "diverged at epoch 1", "stopped early", "pruned at epoch 2", "finished", "pruned at epoch 1", "pruned at epoch 1"]
    assert [(e["rung"], e["done"], e["total"]) for e in events] == [(1, k, 6) for k in range(1, 7)] + [(2, 1, 2), (2, 2, 2), (3, 1, 1)]
    rows = [results[i][0] for i in range(6)]
    assert best_run([r for r in rows if not r["status"].startswith("pruned")], "macro-f1") == 3


def test_best_run_is_the_tables_rank_one():
    # Hand-worked: lowest dev loss first, ties to the earlier run, runs without a finite value never best.
    from lintext.report.sweep_page import ranked
    from lintext.tuning.runs import best_run

    rows = [{"run": i, "stop_value": v} for i, v in enumerate([None, float("nan"), float("inf"), 0.3, 0.2, 0.2])]
    assert best_run(rows, "dev-loss") == 4 == ranked(rows, "dev-loss")[0]["run"]
    assert best_run(rows, "accuracy") == 3 == ranked(rows, "accuracy")[0]["run"]
    assert best_run(rows[:3], "dev-loss") is None and best_run([], "accuracy") is None
