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
closed form, then is scored and updated. At the end of an epoch a *flush* catches up every
row whose catch-up moves its weights, so the weights returned after an epoch are exact and
the learning rate may change between epochs. What a missed step does, per rule:

* SGD and AdaGrad without L2: nothing (zero gradient), so lazy == dense exactly.
* SGD and AdaGrad with L2 (proximal step ``w <- (w - eta*g)/(1 + eta*l2)``): a missed step
  only shrinks, ``w <- w/(1 + eta_s*l2)``. SGD uses a running sum of ``log(1 + eta_s*l2)``
  over the epoch's steps, so any schedule works; AdaGrad's ``eta = lr/(sqrt(G)+eps)`` is
  unchanged while absent and ``lr`` is constant within an epoch, so the factor is
  ``(1 + eta*l2)^-k``. Lazy == dense exactly. These rules always flush.
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

For RMSProp, AdaDelta and Adam the decay of a missed step does not depend on the learning
rate, so ``run_epoch(..., flush=False)`` may leave it owed across epochs (``state.pending``):
each row catches up on its next touch and :func:`flush` settles every row before the state
is read. The weights are the same either way; the state differs only by rounding
(``rho^a * rho^b`` against ``rho^(a+b)``). Decay factors below ``1e-100`` count as 0.

Schedules ``inverse`` and ``inverse_sqrt`` are for SGD only: the adaptive rules' closed-form
catch-up assumes ``lr`` constant within an epoch (``constant``, or ``plateau``, which the
trainer changes between epochs only).

The bias row is touched every step with the same rule and its own state, never regularised.

Weights and state may be float64 or float32 (numba compiles one version per dtype);
arithmetic is float64. How the kernel is made fast is told in :mod:`lintext.kernels_compiled`.

Threads
-------
``threads`` lets a large batch run on several threads: its examples are scored in parallel,
then its rows updated in parallel (one Python call per batch); the end-of-epoch flush and the
scoring of dev rows are split over rows. The results are bit-identical whatever the number of
threads: every number is computed by the same code in the same order, only perhaps by another
thread. Batches under ``PARALLEL_MIN_WORK`` entries times labels (the default batch size on
text, by far) run on the calling thread in :func:`epoch_kernel`, which never refers to the
parallel functions: on two cores a parallel region costs tens of microseconds, more than a
small batch takes, and much more when another process keeps the second core busy. Work
outside the batches goes parallel above ``PARALLEL_MIN_WORK_OUTSIDE_BATCHES``.

Statistics (accumulated across epochs): ``stat_update_count[j]`` counts the steps in which
row ``j`` had a non-zero loss gradient; ``stat_abs_update_sum[j]`` sums ``|w_after - w_before|``
over labels and those steps, ``w_before`` being taken after catch-up.
"""

from __future__ import annotations

import os
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np


def numba_cache_folder(package: Path | None = None) -> str | None:
    """Where numba should keep the compiled kernels, when not beside the package.

    ``None`` (numba's default: ``__pycache__`` beside this file) when the user set
    ``NUMBA_CACHE_DIR`` or the package folder is writable; else ``lintext/numba`` in the
    user's cache folder (``$XDG_CACHE_HOME``, by default ``~/.cache``), so that an installation
    in a read-only place compiles once per user, not once per process.
    """
    if os.environ.get("NUMBA_CACHE_DIR"):
        return None
    package = Path(__file__).resolve().parent if package is None else Path(package)
    pycache = package / "__pycache__"
    if os.access(pycache if pycache.is_dir() else package, os.W_OK):
        return None
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "lintext", "numba")


_folder = numba_cache_folder()
if _folder is not None:  # before numba reads its configuration, and before any kernel is defined
    os.environ["NUMBA_CACHE_DIR"] = _folder
    if "numba" in sys.modules:
        sys.modules["numba"].config.CACHE_DIR = _folder

import numba  # noqa: E402

from .kernels_compiled import (  # noqa: E402
    CATCH_UP_NONE, CATCH_UP_STATE, CATCH_UP_WEIGHTS, COUNT, LAST, NEGLIGIBLE, POW1, POW2,
    PREFETCH_MAX_EXAMPLES, STAT_COUNT, STAT_SUM, all_finite, epoch_kernel, flush_rows,
    flush_rows_parallel, run_batch_threads, schedule_lr, score_rows, score_rows_parallel)
from .optim import schedule_learning_rate  # noqa: E402
from .optim import ADADELTA, ADAGRAD, ADAM, RMSPROP, SCHEDULE_INVERSE, SCHEDULE_INVERSE_SQRT, SGD  # noqa: E402

__all__ = ["KernelState", "all_finite", "decision_scores", "flush", "run_epoch", "schedule_lr"]

# A batch runs on several threads when its entries times labels reach this. Measured with
# scripts/bench_train.py and by hand (synthetic text, 37 entries per document, 50 labels, two
# cores, AdaGrad): two threads are slower up to 32 documents per batch (a parallel region
# costs tens of microseconds), about even at 64, 1.5-1.8x faster from 128 (240,000 entries
# times labels) to full batches. Another process busy on the second core makes each region
# wait for it, so the threshold is kept above the crossover.
PARALLEL_MIN_WORK = 1 << 18
# Work outside the batches (scoring dev rows each epoch, the one flush at the end of a run)
# goes to threads only above this: it takes tens of milliseconds below it, less than the
# seconds of compiling the parallel function on a first run, and not much more than starting
# threads on a busy machine.
PARALLEL_MIN_WORK_OUTSIDE_BATCHES = 1 << 24

_STATE_ARRAYS = {
    SGD: (),
    ADAGRAD: ("sum_sq_grad",),
    ADADELTA: ("second_moment", "avg_sq_update"),
    RMSPROP: ("second_moment",),
    ADAM: ("first_moment", "second_moment"),
}


def max_threads() -> int:
    """Threads numba may use in this process (``NUMBA_NUM_THREADS``, by default the cores)."""
    return max(1, int(numba.config.NUMBA_NUM_THREADS))


def resolve_threads(threads: int | None) -> int:
    """``threads`` clamped to ``[1, max_threads()]``; ``None`` or 0 means all of them."""
    if threads is None or threads <= 0:
        return max_threads()
    return max(1, min(int(threads), max_threads()))


class _Threads:
    """Run numba's parallel regions of this thread on ``n`` threads, then restore the setting."""

    def __init__(self, n: int):
        self.n = n
        self.previous = None

    def __enter__(self):
        if self.n > 1:
            self.previous = numba.get_num_threads()
            numba.set_num_threads(self.n)
        return self

    def __exit__(self, *exc):
        if self.previous is not None:
            numba.set_num_threads(self.previous)


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
    the per-row bookkeeping (see :mod:`lintext.kernels_compiled`), read through the views
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
        used = _STATE_ARRAYS[optimizer_code]
        arrays = {
            name: np.zeros((n_rows if name in used else 0, n_labels), dtype=dtype)
            for name in ("sum_sq_grad", "first_moment", "second_moment", "avg_sq_update")
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
        """The state arrays in the form of :mod:`lintext.optim` rules (Adam's count per row).

        Call :func:`flush` first when ``pending``.
        """
        out = {name: getattr(self, name) for name in _STATE_ARRAYS[optimizer_code]}
        if optimizer_code == ADAM:
            out["update_count"] = self.update_count[:, None]
        return out


def flush(params, state: KernelState, *, optimizer_code: int, beta1: float = 0.9, beta2: float = 0.999,
          rho: float = 0.9, threads: int | None = 1) -> None:
    """Catch every row of ``state`` up to ``state.step`` (after ``run_epoch(..., flush=False)``).

    Only the state of the decaying rules is ever pending (their weights do not move while a
    feature is absent), so the weights never change here. Give the hyperparameters of the run.
    """
    if not state.pending:
        return
    n = resolve_threads(threads)
    args = (int(state.step), int(state.step), np.zeros(1), int(optimizer_code), 0.0, 0.0, params,
            state.sum_sq_grad, state.first_moment, state.second_moment, state.avg_sq_update, state.info,
            float(beta1), float(beta2), float(rho), 0.0)
    n_features = params.shape[0] - 1
    if n > 1 and params.size >= PARALLEL_MIN_WORK_OUTSIDE_BATCHES:
        with _Threads(n):
            flush_rows_parallel(n_features, *args, 4 * n)
    else:
        flush_rows(0, n_features, *args)
    state.pending = False


def run_epoch(indptr, indices, data, y, order, params, state: KernelState, *, loss_code: int,
              optimizer_code: int, schedule_code: int, learning_rate: float, decay: float = 0.0,
              l2: float = 0.0, beta1: float = 0.9, beta2: float = 0.999, rho: float = 0.9,
              epsilon: float = 1e-8, batch_size: int = 1, lazy: bool = True, flush: bool = True,
              threads: int | None = 1) -> tuple[float, bool]:
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
    flush : bool
        Bring every row up to date at the end (the default). ``False`` lets RMSProp, AdaDelta
        and Adam leave the decay of their absent rows' state to the next touch or to
        :func:`flush` (their weights are exact either way); SGD and AdaGrad always flush.
    threads : int or None
        Threads for large batches (``None`` or 0: all of numba's threads). The results do
        not depend on it, bit for bit.

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
    if state.pending and optimizer_code in (SGD, ADAGRAD):
        raise ValueError("kernel state was not flushed: only a decaying rule may continue it")
    n_threads = resolve_threads(threads)
    batch_size = int(max(1, batch_size))
    lazy = bool(lazy)
    kind = _catch_up_kind(optimizer_code, l2, lazy)
    step = int(state.step)
    lengths = indptr[order + 1] - indptr[order]
    threaded = n_threads > 1 and _batch_work(lengths, batch_size, params.shape[1]) >= PARALLEL_MIN_WORK
    work = _work_space(lengths, params, optimizer_code, schedule_code, learning_rate, decay, l2, beta1,
                       beta2, rho, batch_size, lazy, kind, step, prefetch=not threaded)
    args = (indptr, indices, data, y, order, params, state.sum_sq_grad, state.first_moment,
            state.second_moment, state.avg_sq_update, state.info, state.info_f, int(loss_code),
            int(optimizer_code), int(schedule_code), float(learning_rate), float(decay), float(l2),
            float(beta1), float(beta2), float(rho), float(epsilon), batch_size, lazy, step, kind)
    with _Threads(n_threads if threaded else 1):
        if threaded:
            loss_sum, end, finite = _batches_threads(args, work, n_threads)
        else:
            loss_sum, end, finite = epoch_kernel(*args, *work)
        if finite:
            _end_epoch(args, work[0], end, flush, n_threads)
    state.step = int(end)
    state.pending = lazy and optimizer_code not in (SGD, ADAGRAD) and (not flush or not finite)
    return float(loss_sum), bool(finite)


def _catch_up_kind(optimizer_code, l2, lazy) -> int:
    """What a missed step does (``kernels_compiled.CATCH_UP_*``)."""
    if not lazy:
        return CATCH_UP_NONE
    if optimizer_code in (SGD, ADAGRAD):
        return CATCH_UP_WEIGHTS if l2 > 0.0 else CATCH_UP_NONE
    return CATCH_UP_STATE


def _batch_work(lengths, batch_size, n_labels) -> float:
    """Mean entries of a batch of this epoch times labels: the work threads would share."""
    if len(lengths) == 0:
        return 0.0
    return float(lengths.mean()) * min(batch_size, len(lengths)) * n_labels


def _work_space(lengths, params, optimizer_code, schedule_code, lr0, decay, l2, beta1, beta2, rho,
                batch_size, lazy, kind, step, prefetch=True) -> tuple:
    """Tables and buffers of one epoch, in the order :func:`epoch_kernel` takes them.

    ``cum``: SGD with L2, the running sum of ``log(1 + eta_s*l2)`` over the epoch's steps, so
    the shrinkage of the missed steps ``a .. b-1`` is ``exp(-(cum[b] - cum[a]))``. ``powers``:
    the decay rates' powers for gaps of up to two epochs (longer ones are computed when met),
    by repeated multiplication (relative error below ``k * 1.2e-16``), below ``NEGLIGIBLE``
    set to 0. The buffers are sized for the largest batch of this epoch.
    """
    n = len(lengths)
    n_rows, n_labels = params.shape
    n_batches = -(-n // batch_size)
    cum = np.zeros(n_batches + 1)
    if optimizer_code == SGD and l2 > 0.0:
        rates = [schedule_learning_rate(int(schedule_code), lr0, decay, step + b) for b in range(n_batches)]
        cum[1:] = np.cumsum(np.log1p(np.asarray(rates) * l2))
    n_powers = 2 * n_batches + 2 if kind == CATCH_UP_STATE else 0
    bases = (beta1, beta2) if optimizer_code == ADAM else (rho, rho)
    powers = np.empty((2, n_powers))
    if n_powers:
        for row, base in enumerate(bases):
            powers[row, 0] = 1.0
            powers[row, 1:] = np.cumprod(np.full(n_powers - 1, float(base)))
        powers[powers < NEGLIGIBLE] = 0.0
    cap = int(np.add.reduceat(lengths, np.arange(0, n, batch_size)).max()) if n else 0
    width = min(batch_size, n)
    max_rows = (min(cap, n_rows - 1) if lazy else n_rows - 1) + 1  # rows of a step, the bias last
    touched = np.arange(max_rows, dtype=np.int64)  # dense mode: every row, in order
    upcoming = np.empty(cap if prefetch and lazy and batch_size <= PREFETCH_MAX_EXAMPLES else 0, dtype=np.int64)
    return (cum, powers, np.empty((width, n_labels)), np.empty((width, n_labels)), np.empty(width), touched,
            np.zeros(max_rows, dtype=np.int64), np.ones((2, max_rows)), np.zeros(max_rows + 1, dtype=np.int64),
            np.empty(cap + width, dtype=np.int64), np.empty(cap + width, dtype=np.int64),
            np.empty(cap + width), upcoming, np.empty(n_labels, dtype=np.int64), np.empty((2, n_labels)))


def _batches_threads(args, work, n_threads):
    """The batches of one epoch, each split over ``n_threads`` threads (batches large enough
    that a call from Python per batch costs nothing that matters): the same steps, the same
    bits, as :func:`epoch_kernel`."""
    order, batch_size, step = args[4], args[22], args[24]
    n_batches = -(-len(order) // batch_size)
    loss_sum = 0.0
    for b in range(n_batches):
        total, finite = run_batch_threads(b, *args, *work[:-1], n_threads)
        loss_sum += total
        if not finite:
            return loss_sum, step + b + 1, False
    return loss_sum, step + n_batches, True


def _end_epoch(args, cum, end, flush, n_threads):
    """After the last step: the flush (every row caught up to ``end``) where it is due, else
    ``last_step = end`` where nothing is owed; the bias is always current."""
    params, sum_sq_grad, first_moment, second_moment, avg_sq_update, info = args[5:11]
    opt_code, lr0, l2, beta1, beta2, rho, epsilon = args[13], args[15], args[17], args[18], args[19], args[20], args[21]
    step, kind = args[24], args[25]
    n_features = params.shape[0] - 1
    if kind == CATCH_UP_WEIGHTS or (kind == CATCH_UP_STATE and flush):
        rest = (end, step, cum, opt_code, lr0, l2, params, sum_sq_grad, first_moment, second_moment,
                avg_sq_update, info, beta1, beta2, rho, epsilon)
        if n_threads > 1 and params.size >= PARALLEL_MIN_WORK:
            with _Threads(n_threads):
                flush_rows_parallel(n_features, *rest, 4 * n_threads)
        else:
            flush_rows(0, n_features, *rest)
    elif kind == CATCH_UP_NONE:
        info[:n_features, LAST] = end
    info[n_features, LAST] = end


def decision_scores(indptr, indices, data, params, threads: int | None = 1) -> np.ndarray:
    """Scores ``X @ W + b`` of the CSR rows (float64), rows split over ``threads`` threads."""
    out = np.empty((len(indptr) - 1, params.shape[1]))
    n = resolve_threads(threads)
    if n > 1 and data.shape[0] * params.shape[1] >= PARALLEL_MIN_WORK_OUTSIDE_BATCHES:
        with _Threads(n):
            score_rows_parallel(indptr, indices, data, params, out, 4 * n)
    else:
        score_rows(0, out.shape[0], indptr, indices, data, params, out)
    return out
