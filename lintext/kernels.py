"""Compiled training loop: one epoch per call, flat arguments only.

The kernel receives the CSR arrays of the training matrix, the labels, the example order
of this epoch, the parameters, the optimizer state arrays, integer codes (loss, optimizer,
schedule; see :mod:`lintext.losses` and :mod:`lintext.optim`) and numbers. It returns the
sum of per-example losses (each computed before the update of its batch), the new global
step and a flag that is False when a non-finite loss appeared (the epoch then stops).
Python (:mod:`lintext.train`) orchestrates: shuffling, dev evaluation, early stopping,
divergence checks.

Layout
------
``params`` has shape ``(n_features + 1, n_labels)``, C order: row ``j < n_features`` holds
feature ``j``'s weights, the last row is the bias. Every state array has the same rows.
State arrays a rule does not use are passed with zero rows.

Steps and batches
-----------------
A step is one batch of ``batch_size`` consecutive examples of ``order`` (the last batch may
be smaller; ``batch_size >= n`` is full batch). The batch gradient is the mean of the
per-example gradients. Step ``t`` (the global count of steps taken before it, across
epochs) uses learning rate ``schedule(lr0, decay, t)``.

Sparse semantics
----------------
*Dense mode* (``lazy=False``, the reference for tests on small problems): every row is
updated every step; a feature absent from the batch has loss gradient 0.

*Lazy mode* (default): only the rows of features present in the batch, and the bias, are
touched. Each row keeps ``last_step``, the global step it has been brought up to. When a
row is touched at step ``t`` it first *catches up* the ``k = t - last_step`` missed steps in
closed form, then is scored and updated. At the end of every epoch a *flush* catches up
every row, so the weights returned after an epoch are exact and the learning rate may
change between epochs. What a missed step does, per rule:

* SGD and AdaGrad without L2: nothing (zero gradient), so lazy == dense exactly.
* SGD and AdaGrad with L2 (proximal step ``w <- (w - eta*g)/(1 + eta*l2)``): a missed step
  only shrinks, ``w <- w/(1 + eta_s*l2)``. SGD uses a running sum of ``log(1 + eta_s*l2)``
  over the epoch's steps, so any schedule works; AdaGrad's ``eta = lr/(sqrt(G)+eps)`` is
  unchanged while absent and ``lr`` is constant within an epoch, so the factor is
  ``(1 + eta*l2)^-k``. Lazy == dense exactly.
* RMSProp, AdaDelta: the averages decay, ``E <- rho^k E``; the weight does not move. Exact
  without L2; with L2 (added to the gradient, ``g + l2*w``, on touched rows) the pull on
  absent rows is skipped, so a feature present in a fraction ``p`` of the steps is
  regularised by about ``p*l2``: with L2 these rules (and Adam) do not minimise the stated
  objective in lazy mode, only in dense mode or with full batches. (Measured: 300 documents,
  10% density, l2 = 0.01, batch size 1, 100 epochs: lazy Adam ends at objective 1.09, dense
  Adam at 0.62, the optimum being 0.60.)
* Adam: ``m <- beta1^k m``, ``v <- beta2^k v``, weight unchanged. Dense Adam would keep
  moving the weight by momentum: lazy Adam is an approximation. Bias correction uses the
  row's own ``update_count`` (steps in which it was touched; the global step in dense mode),
  so the first update of a feature first seen late has size ~lr, as at step 1. (With the
  global count ``t`` its moments, started at 0 on its first appearance, would be corrected
  by ``1 - beta^t`` instead of ``1 - beta``: a first step of about
  ``lr * (1 - beta1) / sqrt(1 - beta2)`` ~ 3.2 lr for large ``t``.)

Schedules ``inverse`` and ``inverse_sqrt`` are for SGD only: the adaptive rules' closed-form
catch-up assumes ``lr`` constant within an epoch (``constant``, or ``plateau``, which the
trainer changes between epochs only).

The bias row is touched every step with the same rule and its own state, never regularised.

Structure (kept apart for later speed work): per batch, collect the distinct features
(lazy mode), ``catch_up_rows``, ``score_batch`` (scores, losses, the batch gradient),
``apply_updates``; per-coordinate rules are scalar functions. Weights and state may be
float64 or float32 (numba compiles one version per dtype); arithmetic is float64.

Statistics (accumulated across epochs): ``stat_update_count[j]`` counts the steps in which
row ``j`` had a non-zero loss gradient; ``stat_abs_update_sum[j]`` sums ``|w_after - w_before|``
over labels and those steps, ``w_before`` being taken after catch-up.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .kernels_compiled import epoch_kernel, schedule_lr  # noqa: F401  (schedule_lr re-exported)
from .optim import ADADELTA, ADAGRAD, ADAM, RMSPROP, SCHEDULE_INVERSE, SCHEDULE_INVERSE_SQRT, SGD

_STATE_ARRAYS = {
    SGD: (),
    ADAGRAD: ("sum_sq_grad",),
    ADADELTA: ("second_moment", "avg_sq_update"),
    RMSPROP: ("second_moment",),
    ADAM: ("first_moment", "second_moment"),
}


@dataclass
class KernelState:
    """Optimizer state of the epoch kernel (rows = features + bias).

    ``sum_sq_grad``, ``first_moment``, ``second_moment``, ``avg_sq_update`` are
    ``(n_rows, n_labels)`` arrays (zero rows when the rule does not use them);
    ``update_count`` is Adam's per-row bias-correction count; ``last_step`` the lazy
    bookkeeping; ``stat_update_count`` and ``stat_abs_update_sum`` the per-row statistics;
    ``step`` the global step.
    """

    sum_sq_grad: np.ndarray
    first_moment: np.ndarray
    second_moment: np.ndarray
    avg_sq_update: np.ndarray
    update_count: np.ndarray
    last_step: np.ndarray
    stat_update_count: np.ndarray
    stat_abs_update_sum: np.ndarray
    step: int = 0

    @classmethod
    def new(cls, n_features: int, n_labels: int, optimizer_code: int, dtype=np.float64) -> "KernelState":
        """Zero state for ``n_features`` features (plus the bias row) and ``n_labels`` labels."""
        n_rows = n_features + 1
        used = _STATE_ARRAYS[optimizer_code]
        arrays = {
            name: np.zeros((n_rows if name in used else 0, n_labels), dtype=dtype)
            for name in ("sum_sq_grad", "first_moment", "second_moment", "avg_sq_update")
        }
        return cls(
            **arrays,
            update_count=np.zeros(n_rows, dtype=np.int64),
            last_step=np.zeros(n_rows, dtype=np.int64),
            stat_update_count=np.zeros(n_rows, dtype=np.int64),
            stat_abs_update_sum=np.zeros(n_rows, dtype=np.float64),
        )

    def rule_state(self, optimizer_code: int) -> dict:
        """The state arrays in the form of :mod:`lintext.optim` rules (Adam's count per row)."""
        out = {name: getattr(self, name) for name in _STATE_ARRAYS[optimizer_code]}
        if optimizer_code == ADAM:
            out["update_count"] = self.update_count[:, None]
        return out


def run_epoch(indptr, indices, data, y, order, params, state: KernelState, *, loss_code: int,
              optimizer_code: int, schedule_code: int, learning_rate: float, decay: float = 0.0,
              l2: float = 0.0, beta1: float = 0.9, beta2: float = 0.999, rho: float = 0.9,
              epsilon: float = 1e-8, batch_size: int = 1, lazy: bool = True) -> tuple[float, bool]:
    """Run one epoch of the compiled kernel, updating ``params`` and ``state`` in place.

    Parameters
    ----------
    indptr, indices, data : ndarray
        CSR arrays of the training matrix; ``data`` must have ``params``' dtype.
    y : int64 ndarray
        Label index of each row.
    order : int64 ndarray
        Rows in the order of this epoch.
    params : ndarray of shape (n_features + 1, n_labels), C order
        Weights with the bias as last row.
    state : KernelState
    loss_code, optimizer_code, schedule_code : int
        Codes from :mod:`lintext.losses` and :mod:`lintext.optim`.
    learning_rate, decay, l2, beta1, beta2, rho, epsilon : float
    batch_size : int
    lazy : bool

    Returns
    -------
    loss_sum : float
        Sum of per-example losses, each computed before its batch's update.
    finite : bool
        False when a non-finite loss stopped the epoch.
    """
    if params.dtype != data.dtype or not params.flags.c_contiguous:
        raise ValueError("params must be C-contiguous with the dtype of data")
    if optimizer_code != SGD and schedule_code in (SCHEDULE_INVERSE, SCHEDULE_INVERSE_SQRT):
        raise ValueError("the inverse schedules are for plain SGD only")
    if np.any(state.last_step != state.step):
        raise ValueError("kernel state was not flushed: last_step differs from step")
    loss_sum, end, finite = epoch_kernel(
        indptr, indices, data, y, order, params, state.sum_sq_grad, state.first_moment,
        state.second_moment, state.avg_sq_update, state.update_count, state.last_step,
        state.stat_update_count, state.stat_abs_update_sum, int(loss_code), int(optimizer_code),
        int(schedule_code), float(learning_rate), float(decay), float(l2), float(beta1),
        float(beta2), float(rho), float(epsilon), int(max(1, batch_size)), bool(lazy),
        int(state.step))
    state.step = int(end)
    return float(loss_sum), bool(finite)
