"""The progress display follows every long phase of ``train``: the library announces each phase as
it starts (reading, featurizing, training, evaluating the dev and the test set) and after each
epoch, and :class:`~lintext.cli.display.Display` draws every one of them on a terminal."""

from __future__ import annotations

import io

import pytest
from rich.console import Console

import lintext
from lintext.cli import display

from ..conftest import small_corpus_rows, write_csv


@pytest.mark.slow  # trains a model
def test_train_announces_every_phase_and_the_display_draws_them(tmp_path, monkeypatch):
    rows = small_corpus_rows()
    train = write_csv(tmp_path / "train.csv", rows[:100])
    test = write_csv(tmp_path / "test.csv", rows[100:])
    events = []
    lintext.build_model(train, test=test, options={"epochs": 3, "patience": 0}, progress=events.append)
    stages = [e["stage"] for e in events]
    # phases in the order the pipeline runs them (pipeline.build_model), one event per epoch
    assert stages == ["reading", "featurizing", "training", "epoch", "epoch", "epoch", "evaluating", "evaluating"]
    assert [e.get("set") for e in events if e["stage"] == "evaluating"] == ["dev", "test"]
    assert events[2]["epochs"] == 3 and [e["epoch"] for e in events[3:6]] == [1, 2, 3]

    screen = io.StringIO()
    monkeypatch.setattr(display, "err", Console(file=screen, force_terminal=True, width=120))
    shown = display.Display(True)
    seen = []  # after each event: the spinner's text, or the bar's count
    for event in events:
        shown(event)
        seen.append(str(shown.spinner.status) if shown.spinner is not None else int(shown.progress.tasks[0].completed))
    shown.close()
    assert seen == [f"Reading {train}", f"Featurizing {events[1]['documents']} documents", 0, 1, 2, 3,
                    "Evaluating on the dev set", f"Evaluating on {test}"]
    assert "epoch 3/3" in screen.getvalue()


def test_a_run_on_the_cluster_is_one_event_drawn_with_its_rung_and_the_queue(monkeypatch):
    # A halving sweep on a cluster: each run's event carries its rung and the tasks running and queued
    # (lintext.tuning.sweep's docstring); the bar shows both, once per run. Hand-written events.
    screen = io.StringIO()
    monkeypatch.setattr(display, "err", Console(file=screen, force_terminal=True, width=160))
    shown = display.Display(True)
    row = {"optimizer": "adam", "learning_rate": 0.01, "status": "finished at budget"}
    shown({"stage": "run", "done": 2, "total": 6, "row": row, "rung": 1, "rungs": 3, "epochs": 1, "running": 2,
           "queued": 2})
    task = shown.progress.tasks[0]
    assert (task.completed, task.total) == (2, 6)
    assert task.fields["info"] == "rung 1/3 (1 epochs) 2 running, 2 queued; last: adam 0.01: finished at budget"
    shown({"stage": "run", "done": 3, "total": 6, "row": row})  # a local sweep: no queue to show
    assert shown.progress.tasks[0].fields["info"] == "adam 0.01: finished at budget"
    shown.close()
