"""Successive halving of a sweep's runs.

Successive halving (K. Jamieson and A. Talwalkar, "Non-stochastic best arm identification and
hyperparameter optimization", AISTATS 2016) trains every configuration for a small budget, keeps
the best ``1/eta`` of them by the stop metric, gives those ``eta`` times the budget, and repeats
until the full budget. Budgets and counts follow one bracket of Hyperband (L. Li, K. Jamieson,
G. DeSalvo, A. Rostamizadeh and A. Talwalkar, "Hyperband: a novel bandit-based approach to
hyperparameter optimization", JMLR 2017/2018): with ``n`` configurations, ``R`` epochs and
``s = min(floor(log_eta n), floor(log_eta R))`` halvings, rung ``i = 0 .. s`` trains
``n_i = floor(n * eta^-i)`` configurations for ``r_i = round(R * eta^(i - s))`` epochs, the last
rung for all ``R``.

Choices of lintext:

* The budget is in epochs, and a run promoted to a larger budget goes on from a checkpoint of its
  epoch loop (:mod:`lintext.engine.resume`: weights, optimizer state, the shuffling generator, the
  early-stopping monitor), sent with its task, so each rung's runs are independent tasks that run
  anywhere (local processes or a Dask cluster), and a run that reaches the full budget is exactly
  the full grid's run of that configuration (same history, same weights, bit for bit).
* A run ranks by its stop metric at its best epoch so far (ties: grid order); a diverged run never
  goes on. A run that stopped early (patience) inside its budget is final: it keeps its status and,
  when it ranks among the best, its place, without further training.
* A run that used its whole budget and did not rank among the best has the status
  ``pruned at epoch N`` (N: its budget). The best run is chosen among the runs that were not pruned.
"""

from __future__ import annotations

from typing import Callable, Iterable

from ..report.sweep_page import ranked
from .runs import BUDGET_USED


def pruned(epoch: int) -> str:
    """The status of a run stopped by successive halving after ``epoch`` epochs."""
    return f"pruned at epoch {epoch}"


def halving_budgets(n_runs: int, epochs: int, factor: int) -> list[tuple[int, int]]:
    """``(configurations, epochs)`` of each rung of the bracket (see the module docstring).

    Hand-worked: 15 runs, 50 epochs, factor 3: ``s = min(2, 3) = 2``, rungs (15, 6), (5, 17), (1, 50).
    """
    def floor_log(x):
        k = 0
        while factor ** (k + 1) <= x:
            k += 1
        return k

    s = min(floor_log(n_runs), floor_log(epochs))
    return [(max(1, n_runs // factor**i), max(1, int(round(epochs * factor ** (i - s))))) for i in range(s + 1)]


def successive_halving(grid, run: Callable[[list], Iterable], stop_metric: str, factor: int,
                       report: Callable[[dict], None], order_key=None):
    """Run the bracket over ``grid`` (TrainOptions of each run).

    ``run(tasks)`` trains ``(index, options, epochs, checkpoint)`` tasks and yields ``(row, history, weights,
    checkpoint)`` as they finish. Returns ``(results, rungs)``: ``results[index]`` is the run's last
    ``(row, history, weights)`` (rows of pruned runs say so), ``rungs`` the bracket as run: per rung its
    epochs and runs trained.
    """
    epochs = grid[0].epochs
    bracket = halving_budgets(len(grid), epochs, factor)
    results: dict[int, tuple] = {}
    checkpoints: dict[int, dict] = {}
    alive = list(range(len(grid)))
    rungs = []
    for level, (_, budget) in enumerate(bracket):
        train = [i for i in alive if i not in results or results[i][0]["status"] == BUDGET_USED]
        tasks = sorted(((i, grid[i], budget, checkpoints.pop(i, None)) for i in train), key=order_key or (lambda t: t[0]))
        rungs.append({"epochs": budget, "runs": [t[0] for t in tasks], "configurations": len(alive)})
        done = 0
        for row, history, weights, checkpoint in run(tasks):
            results[row["run"]] = (row, history, weights)
            if checkpoint is not None:
                checkpoints[row["run"]] = checkpoint
            done += 1
            report({"stage": "run", "done": done, "total": len(tasks), "row": row, "rung": level + 1,
                    "rungs": len(bracket), "epochs": budget})
        if level + 1 == len(bracket):
            break
        keep = bracket[level + 1][0]
        best_first = ranked([results[i][0] for i in alive], stop_metric)  # the table's order; diverged: no rank
        going_on = [row["run"] for row in best_first[:keep] if row["rank"] is not None]
        for i in alive:
            if i not in going_on and results[i][0]["status"] == BUDGET_USED:
                row, history, _ = results[i]
                results[i] = ({**row, "status": pruned(row["epochs_run"])}, history, None)
        alive = going_on
        checkpoints = {i: c for i, c in checkpoints.items() if i in alive}  # the pruned runs' are dropped
    return results, rungs
