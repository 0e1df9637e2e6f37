"""The optimizer state the kernels keep: per-coordinate arrays and per-row bookkeeping.

Rows are the features plus the bias (last). The arrays a rule uses are those its registry
entry names (:data:`lintext.engine.optimizers.OPTIMIZERS`); the others have zero rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .compiled import COUNT, LAST, POW1, POW2, STAT_COUNT, STAT_SUM
from .optimizers import ADAM, BY_CODE

STATE_ARRAY_NAMES = ("sum_sq_grad", "first_moment", "second_moment", "avg_sq_update")


def _aligned_rows(n_rows: int, width: int) -> np.ndarray:
    """Initial per-row records ``(n_rows, width)`` (``width`` 4 or 8 int64), the array starting on
    a 64-byte boundary so that each record sits in one cache line: zero counts, and
    ``beta ** 0 = 1`` in the power columns when there are any."""
    buffer = np.zeros(n_rows * width + 8, dtype=np.int64)
    offset = (-buffer.ctypes.data % 64) // 8
    info = buffer[offset:offset + n_rows * width].reshape(n_rows, width)
    if width > POW2:
        info.view(np.float64)[:, [POW1, POW2]] = 1.0
    return info


@dataclass
class KernelState:
    """Optimizer state of the epoch kernel (rows = features + bias).

    ``sum_sq_grad``, ``first_moment``, ``second_moment``, ``avg_sq_update`` are
    ``(n_rows, n_labels)`` arrays (zero rows when the rule does not use them). ``info`` holds
    the per-row bookkeeping (see :mod:`lintext.engine.compiled`), read through the views
    ``update_count`` (Adam's per-row bias-correction count), ``last_step`` (the lazy
    bookkeeping), ``stat_update_count`` and ``stat_abs_update_sum`` (the per-row statistics).
    ``step`` is the global step. ``pending`` is True when rows of a decaying rule still owe
    the decay of missed steps (after ``run_epoch(..., flush=False)``); :func:`flush` settles it.
    """

    sum_sq_grad: np.ndarray
    first_moment: np.ndarray
    second_moment: np.ndarray
    avg_sq_update: np.ndarray
    info: np.ndarray
    step: int = 0
    pending: bool = False

    @classmethod
    def new(cls, n_features: int, n_labels: int, optimizer_code: int, dtype=np.float64) -> "KernelState":
        """Zero state for ``n_features`` features (plus the bias row) and ``n_labels`` labels."""
        n_rows = n_features + 1
        used = BY_CODE[optimizer_code].state_arrays
        arrays = {
            name: np.zeros((n_rows if name in used else 0, n_labels), dtype=dtype)
            for name in STATE_ARRAY_NAMES
        }
        return cls(**arrays, info=_aligned_rows(n_rows, 8 if optimizer_code == ADAM else 4))

    @property
    def info_f(self) -> np.ndarray:
        """Float64 view of ``info`` (for the float column)."""
        return self.info.view(np.float64)

    @property
    def last_step(self) -> np.ndarray:
        return self.info[:, LAST]

    @property
    def update_count(self) -> np.ndarray:
        return self.info[:, COUNT]

    @property
    def stat_update_count(self) -> np.ndarray:
        return self.info[:, STAT_COUNT]

    @property
    def stat_abs_update_sum(self) -> np.ndarray:
        return self.info_f[:, STAT_SUM]

    def rule_state(self, optimizer_code: int) -> dict:
        """The state arrays in the form of :mod:`lintext.engine.optimizers` rules (Adam's count per row).

        Call :func:`flush` first when ``pending``.
        """
        out = {name: getattr(self, name) for name in BY_CODE[optimizer_code].state_arrays}
        if optimizer_code == ADAM:
            out["update_count"] = self.update_count[:, None]
        return out
