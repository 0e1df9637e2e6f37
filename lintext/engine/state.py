"""The optimizer state the kernels keep: per-coordinate arrays and per-row bookkeeping.

Rows are the features plus the bias (last). The arrays a rule uses are those its registry
entry names (:data:`lintext.engine.optimizers.OPTIMIZERS`); the others have zero rows.

Remedies, their semantics under lazy updates (each off by default; off, the kernels take exactly
the paths :mod:`lintext.engine.kernels` describes, bit for bit):

* *Example weights* (``example_weight``, one per row of the matrix): each example's loss and
  gradient are multiplied by its weight (label weights times document weights).
* *FTRL-Proximal* (McMahan et al. 2013): a zero gradient leaves ``z`` and ``n`` unchanged and the
  weight is a function of them, so lazy == dense exactly; L1 and L2 are the paper's
  ``lambda_1`` and ``lambda_2``, never a catch-up.
* *Cumulative L1 penalty* (SGD; Tsuruoka, Tsujii & Ananiadou 2009): as the paper's algorithm,
  a weight receives the penalty it missed when its feature is next present, after its gradient
  step; in dense mode every weight is penalised every step. The two differ (the paper's is the
  lazy one) where a weight absent for a while would have been clipped at zero in between.
* *Iterate averaging* (Polyak & Juditsky 1992): ``state.avg_sum`` sums the weights after every
  step from ``avg_from`` on; a row's missed steps are added in closed form on its next touch
  and at each epoch's end (weights unchanged while absent, or shrunk by L2 for SGD and AdaGrad),
  so the average equals the dense one's exactly for SGD, AdaGrad and FTRL, and is the exact
  average of the lazy iterates for the other rules. Every epoch then ends with a full catch-up.
  For SGD and AdaGrad without L1 or L2, averaged from step 0 (the default training),
  ``avg_sum`` holds instead ``sum_t t * (w_t - w_(t-1))``, added only where a weight moved, and
  nothing is caught up (``average_steps``; :func:`lintext.engine.state.averages_by_steps`):
  :meth:`KernelState.weight_sum` gives the sum of the weights either way.

Arrays of the remedies (zero rows when off):

* ``shifted_grad_sum`` -- FTRL-Proximal's ``z`` (McMahan et al. 2013, Algorithm 1), the sum of
  the gradients minus ``sigma * w`` terms; its ``n`` is ``sum_sq_grad``.
* ``l1_applied`` -- the cumulative L1 penalty's ``q`` (Tsuruoka, Tsujii & Ananiadou 2009): the
  signed total penalty each weight has received; ``l1_total`` is the paper's ``u``, the
  penalty any weight could have received by now (a number, across epochs).
* ``avg_sum`` -- iterate averaging: the sum of each weight over the steps counted so far (or,
  with ``average_steps``, its step-weighted changes), always float64 (the averaged weights are
  ``weight_sum(params) / steps counted``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .compiled import COUNT, LAST, POW1, POW2, STAT_COUNT, STAT_SUM
from .optimizers import ADAGRAD, ADAM, BY_CODE, SGD

STATE_ARRAY_NAMES = ("sum_sq_grad", "first_moment", "second_moment", "avg_sq_update", "shifted_grad_sum")


def averages_by_steps(optimizer_code: int, lazy: bool, l2: float, l1: float, avg_from: int) -> bool:
    """Whether iterate averaging keeps ``state.avg_sum`` as the step-weighted sum of the weights'
    changes, ``sum_t t * (w_t - w_(t-1))``, instead of the sum of the weights.

    Both give the average: after ``T`` steps counted from step 0, the sum of the iterates is
    ``T * w_T - sum_t t * (w_t - w_(t-1))`` (summation by parts; :meth:`KernelState.weight_sum`).
    By steps, a step adds only where a weight moved, and a step that misses a row adds nothing to
    it, so no row is caught up for the average: with the hinge loss a batch moves two labels per
    example, and the epoch of the default training takes about half the time. It needs weights
    that stay put while their feature is absent and a count from step 0: SGD or AdaGrad, lazy,
    without L1 or L2, averaged from the first epoch (the default). Otherwise the sum of the
    weights is kept, missed steps in closed form. The two agree to rounding (a few units in the
    last place of ``T * w``), not bit for bit.
    """
    return optimizer_code in (SGD, ADAGRAD) and lazy and l2 == 0.0 and l1 == 0.0 and avg_from == 0


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
    ``step`` is the global step; ``average_steps`` says how ``avg_sum`` is kept (set by the first
    ``run_epoch``, carried by a checkpoint). ``pending`` is True when rows of a decaying rule still owe
    the decay of missed steps (after ``run_epoch(..., flush=False)``); :func:`flush` settles it.
    """

    sum_sq_grad: np.ndarray
    first_moment: np.ndarray
    second_moment: np.ndarray
    avg_sq_update: np.ndarray
    shifted_grad_sum: np.ndarray
    info: np.ndarray
    l1_applied: np.ndarray
    avg_sum: np.ndarray
    step: int = 0
    pending: bool = False
    l1_total: float = 0.0
    average_steps: bool = False

    def weight_sum(self, params, out: np.ndarray | None = None) -> np.ndarray:
        """The sum of the weights over the steps averaged so far (float64): ``avg_sum``, or, when
        it is kept by steps (from step 0), ``step * w - avg_sum`` (summation by parts:
        ``sum_(t<T) w_t = T * w_T - sum_t t * (w_t - w_(t-1))`` with ``w_(-1) = 0``), computed
        into ``out`` (float64, the shape of ``params``) when given: no model-sized temporaries."""
        if not self.average_steps:
            return self.avg_sum
        total = np.multiply(params, float(self.step), dtype=np.float64, out=out)
        return np.subtract(total, self.avg_sum, out=total)

    @classmethod
    def new(cls, n_features: int, n_labels: int, optimizer_code: int, dtype=np.float64, *,
            initial_sum_sq: float | None = None, l1: bool = False, average: bool = False) -> "KernelState":
        """Zero state for ``n_features`` features (plus the bias row) and ``n_labels`` labels.

        ``initial_sum_sq`` is where AdaGrad's ``sum_sq_grad`` starts (``None``: its rule's
        default, ``AdaGrad.initial_sum_sq``); ``l1`` and ``average`` allocate the arrays of SGD's
        cumulative L1 penalty and of iterate averaging.
        """
        spec = BY_CODE[optimizer_code]
        if initial_sum_sq is None:
            initial_sum_sq = spec.hyperparameters.get("initial_sum_sq", 0.0)
        n_rows = n_features + 1
        used = spec.state_arrays
        arrays = {
            name: np.zeros((n_rows if name in used else 0, n_labels), dtype=dtype)
            for name in STATE_ARRAY_NAMES
        }
        if initial_sum_sq:
            arrays["sum_sq_grad"].fill(initial_sum_sq)
        return cls(**arrays, info=_aligned_rows(n_rows, 8 if optimizer_code == ADAM else 4),
                   l1_applied=np.zeros((n_rows if l1 else 0, n_labels), dtype=dtype),
                   avg_sum=np.zeros((n_rows if average else 0, n_labels)))

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
