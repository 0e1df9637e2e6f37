"""The one progress display, and tables printed at their own width.

:class:`Display` is the ``progress`` callback every long library operation takes: a spinner
while reading, featurizing or evaluating, then one bar over the epochs of a run, the runs of
a sweep or the rungs of a probe. It draws on the terminal only (see :func:`app.show_progress`).
"""

from __future__ import annotations

from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from .app import err, out

_SPINNER_TEXT = {
    "reading": lambda e: f"Reading {e.get('path')}",
    "featurizing": lambda e: f"Featurizing {e.get('documents', '')} documents",
    "evaluating": lambda e: f"Evaluating on {e.get('path')}",
}


class Display:
    """Progress of a command: pass it as the library's ``progress`` callback, call :meth:`close` at the end."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.progress = None
        self.task = None
        self.spinner = None
        self.unit = None

    def __call__(self, event: dict) -> None:
        if not self.enabled:
            return
        stage = event.get("stage")
        if stage in _SPINNER_TEXT:
            self._stop_spinner()
            self.spinner = err.status(_SPINNER_TEXT[stage](event))
            self.spinner.start()
        elif stage == "training":  # the bar from the start: the first epoch may include loading the kernels
            self._bar("epoch", event["epochs"], 0, "")
        elif stage == "epoch" and event.get("refit"):
            self._bar("refit on train and dev: epoch", event["epochs"], event["epoch"],
                      f"train loss {event['train_loss']:.4f}")
        elif stage == "epoch":
            weighted = "weighted " if event.get("weighted_loss") else ""
            info = f"{weighted}train loss {event['train_loss']:.4f}"
            if event.get("dev_loss") is not None:
                info += (f"  {weighted}dev loss {event['dev_loss']:.4f}  dev accuracy {event['dev_accuracy']:.3f}  "
                         f"dev macro-F1 {event['dev_macro_f1']:.3f}")
            self._bar("epoch", event["epochs"], event["epoch"], info)
        elif stage == "run":
            row = event["row"]
            rung = f"rung {event['rung']}/{event['rungs']} ({event['epochs']} epochs) " if "rung" in event else ""
            queue = f"{event['running']} running, {event['queued']} queued; last: " if "running" in event else ""
            self._bar("run", event["total"], event["done"],
                      f"{rung}{queue}{row['optimizer']} {row['learning_rate']:g}: {row['status']}")
        elif stage == "featurize":
            self._bar(f"{event['step']}: document", event["total"], event["documents"],
                      f"{event['per_second']:,.0f} documents/s")
        elif stage == "probe":
            self._bar("rung", event["rungs"], event["rung"],
                      f"learning_rate {event['learning_rate']:.3g}  mean_loss {event['mean_loss']:.4f}")

    def _bar(self, unit: str, total: int, done: int, info: str) -> None:
        self._stop_spinner()
        if self.progress is not None and self.unit != unit:  # a new phase: a new bar
            self.progress.stop()
            self.progress = None
        self.unit = unit
        if self.progress is None:
            self.progress = Progress(TextColumn(f"{unit} {{task.completed}}/{{task.total}}"), BarColumn(),
                                     TextColumn("{task.fields[info]}"), TimeElapsedColumn(), console=err)
            self.progress.start()
            self.task = self.progress.add_task(unit, total=total, info="")
        self.progress.update(self.task, completed=done, total=total, info=info)

    def _stop_spinner(self):
        if self.spinner is not None:
            self.spinner.stop()
            self.spinner = None

    def close(self):
        self._stop_spinner()
        if self.progress is not None:
            self.progress.stop()


def print_wide(table) -> None:
    """Print a table without cutting a cell: at its own width when the terminal (or a pipe) is narrower."""
    needed = Console(width=400).measure(table).maximum
    if out.is_terminal and out.width >= needed:
        out.print(table)
    else:
        Console(file=out.file, width=needed, highlight=False, force_terminal=out.is_terminal).print(table)
