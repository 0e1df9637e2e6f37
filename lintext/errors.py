"""Typed exceptions with one-line messages.

Library code raises these; only the command line turns them into exit codes
(2 for bad input, bad options, bad model files and divergence).
"""

from __future__ import annotations


class LinTextError(Exception):
    """Base class of every error lintext raises on purpose."""

    exit_code = 2

    def __str__(self) -> str:  # always one line
        return " ".join(super().__str__().split())


class InputError(LinTextError):
    """A data file cannot be read as a labelled corpus.

    The message names the file, the line or record when known, and the problem.
    """

    def __init__(self, path, problem: str, line: int | None = None, record: str | None = None):
        self.path = str(path)
        self.line = line
        self.problem = problem
        where = self.path
        if line is not None:
            where += f", line {line}"
        elif record is not None:
            where += f", {record}"
        super().__init__(f"{where}: {problem}")


class ConfigError(LinTextError):
    """An option has a value lintext cannot use; the message names option and value."""

    def __init__(self, option: str, value, problem: str):
        self.option = option
        self.value = value
        self.problem = problem
        super().__init__(f"{option}={value!r}: {problem}")


class ModelFileError(LinTextError):
    """A model directory is missing a file or holds a wrong field, shape or dtype."""

    def __init__(self, path, problem: str):
        self.path = str(path)
        super().__init__(f"{self.path}: {problem}")


class DivergenceError(LinTextError):
    """Training produced a non-finite or exploding loss."""

    def __init__(self, learning_rate: float, epoch: int, loss: float, optimizer: str = "",
                 suggestion: float | None = None, basis: str = "", reason: str = ""):
        self.learning_rate = learning_rate
        self.epoch = epoch
        self.loss = loss
        self.suggestion = suggestion
        self.reason = reason
        name = f"{optimizer} " if optimizer else ""
        why = reason or f"loss {loss:.4g}"
        advice = (f"try {suggestion:g}" + (f" ({basis})" if basis else "")) if suggestion is not None else \
            "try a smaller one (lintext probe suggests one)"
        super().__init__(
            f"training diverged at epoch {epoch} ({why}) with {name}learning rate {learning_rate:g}; {advice}"
        )


class OutputError(LinTextError):
    """An output path lintext must not or cannot write: a folder it did not write, a folder
    where a file is expected, a read-only parent, a name too long, a full disk.

    The message names the option as typed (``--out``), the path and the problem.
    """

    def __init__(self, path, problem: str, option: str = "--out"):
        self.path = str(path)
        self.option = option
        self.problem = problem
        super().__init__(f"{option} {self.path}: {problem}" if option else f"{self.path}: {problem}")


class Terminated(KeyboardInterrupt):
    """Raised in the main thread when the command line receives SIGTERM or SIGHUP.

    A subclass of :class:`KeyboardInterrupt`, so that every clean-up written for Ctrl-C
    (temporary files, worker processes) runs for it too.
    """

    def __init__(self, signum: int):
        self.signum = signum
        super().__init__(signum)
