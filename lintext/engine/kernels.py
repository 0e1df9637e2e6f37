"""Compiled training loop: one epoch per call, flat arguments only.

The kernel receives the CSR arrays of the training matrix, the labels, the example order
of this epoch, the parameters, the optimizer state arrays, integer codes (loss, optimizer,
schedule; see :mod:`lintext.engine.losses` and :mod:`lintext.engine.optimizers`) and numbers. It returns the
sum of per-example losses (each computed before the update of its batch), the new global
step and a flag that is False when a non-finite loss appeared (the epoch then stops).
Python (:mod:`lintext.engine.trainer`) orchestrates: shuffling, dev evaluation, early stopping,
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

Remedies (example weights, FTRL, SGD's cumulative L1 penalty, iterate averaging): their lazy
semantics are in :mod:`lintext.engine.state`; off, the kernels take exactly the paths above.

Weights and state may be float64 or float32 (numba compiles one version per dtype);
arithmetic is float64. How the kernel is made fast is told in :mod:`lintext.engine.compiled`.

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
over labels and those steps, ``w_before`` being taken after catch-up (with SGD's L1 penalty, the
gradient step's and the penalty's ``|dw|`` are added one after the other).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .compiled import (
    CATCH_UP_NONE, CATCH_UP_STATE, CATCH_UP_WEIGHTS, LAST, NEGLIGIBLE, PREFETCH_MAX_EXAMPLES, all_finite, epoch_kernel,
    flush_rows, flush_rows_parallel, run_batch_threads, schedule_lr, score_rows, score_rows_parallel)
from .numba_setup import Threads, max_threads, resolve_threads
from .optimizers import ADAGRAD, ADAM, FTRL, SGD
from .schedules import SCHEDULE_INVERSE, SCHEDULE_INVERSE_SQRT, schedule_learning_rate
from .state import KernelState, averages_by_steps

__all__ = ["KernelState", "Rows", "Settings", "WorkSpace", "all_finite", "decision_scores", "flush", "max_threads",
           "resolve_threads", "run_epoch", "schedule_lr"]

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


class Rows(NamedTuple):
    """The training rows of one epoch: CSR arrays, labels, and the example order."""

    indptr: np.ndarray
    indices: np.ndarray
    data: np.ndarray
    y: np.ndarray
    order: np.ndarray


class Settings(NamedTuple):
    """Integer codes and numbers of one epoch (codes: :mod:`lintext.engine.losses`,
    :mod:`lintext.engine.optimizers`, :mod:`lintext.engine.schedules`; ``kind``: ``compiled.CATCH_UP_*``)."""

    loss_code: int
    optimizer_code: int
    schedule_code: int
    learning_rate: float
    decay: float
    l2: float
    beta1: float
    beta2: float
    rho: float
    epsilon: float
    batch_size: int
    lazy: bool
    step: int
    kind: int


class WorkSpace(NamedTuple):
    """Tables and buffers of one epoch (see :func:`_work_space`)."""

    cum: np.ndarray
    powers: np.ndarray
    scores: np.ndarray
    dscores: np.ndarray
    example_loss: np.ndarray
    touched: np.ndarray
    missed: np.ndarray
    decays: np.ndarray
    row_start: np.ndarray
    entry_row: np.ndarray
    entry_example: np.ndarray
    entry_value: np.ndarray
    upcoming: np.ndarray
    active: np.ndarray
    scratch: np.ndarray
    shrink_sums: np.ndarray
    l1_total: np.ndarray
    average_gap: np.ndarray


def flush(params, state: KernelState, *, optimizer_code: int, beta1: float, beta2: float, rho: float,
          threads: int | None = 1) -> None:
    """Catch every row of ``state`` up to ``state.step`` (after ``run_epoch(..., flush=False)``).

    Only the state of the decaying rules is ever pending (their weights do not move while a
    feature is absent), so the weights never change here. Give the hyperparameters of the run
    (:func:`lintext.engine.optimizers.kernel_hyperparameters`).
    """
    if not state.pending:
        return
    step = int(state.step)
    settings = Settings(0, int(optimizer_code), 0, 0.0, 0.0, 0.0, float(beta1), float(beta2), float(rho), 0.0,
                        1, True, step, CATCH_UP_STATE)
    _flush_rows(params, state, settings, np.zeros(1), np.zeros(1), step, resolve_threads(threads),
                PARALLEL_MIN_WORK_OUTSIDE_BATCHES, averaging=False)
    state.pending = False


def run_epoch(indptr, indices, data, y, order, params, state: KernelState, *, loss_code: int,
              optimizer_code: int, schedule_code: int, learning_rate: float, beta1: float, beta2: float,
              rho: float, epsilon: float, decay: float = 0.0, l2: float = 0.0, batch_size: int = 1,
              lazy: bool = True, flush: bool = True, threads: int | None = 1, ftrl_beta: float = 1.0,
              l1: float = 0.0, example_weight=None, avg_from: int = 0) -> tuple[float, bool]:
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
        Codes from :mod:`lintext.engine.losses`, :mod:`lintext.engine.optimizers` and
        :mod:`lintext.engine.schedules`.
    learning_rate, decay, l2 : float
    beta1, beta2, rho, epsilon : float
        The rule's hyperparameters, all four (no defaults here: take them from the rule with
        :func:`lintext.engine.optimizers.kernel_hyperparameters`).
    batch_size : int
    lazy : bool
    flush : bool
        Bring every row up to date at the end (the default). ``False`` lets RMSProp, AdaDelta
        and Adam leave the decay of their absent rows' state to the next touch or to
        :func:`flush` (their weights are exact either way); SGD and AdaGrad always flush.
    threads : int or None
        Threads for large batches (``None`` or 0: all of numba's threads). The results do
        not depend on it, bit for bit.
    ftrl_beta : float
        FTRL's ``beta`` (only read by FTRL).
    l1 : float
        L1 strength: SGD's cumulative penalty per unit step size, FTRL's ``lambda_1``.
    example_weight : float64 ndarray or None
        A weight per row of the matrix (``None``: every example weighs 1).
    avg_from : int
        With averaging (``state.avg_sum`` has rows), the first step whose weights count.

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
    if state.pending and optimizer_code in (SGD, ADAGRAD, FTRL):
        raise ValueError("kernel state was not flushed: only a decaying rule may continue it")
    if l1 > 0.0 and optimizer_code not in (SGD, FTRL):
        raise ValueError("an L1 penalty is for SGD and FTRL only")
    if (optimizer_code == FTRL) != (state.shifted_grad_sum.shape[0] > 0):
        raise ValueError("FTRL needs its state (KernelState.new with the FTRL code), and only FTRL has it")
    if optimizer_code == SGD and l1 > 0.0 and state.l1_applied.shape[0] == 0:
        raise ValueError("SGD with L1 needs KernelState.new(..., l1=True)")
    averaging = state.avg_sum.shape[0] > 0
    flush = flush or averaging  # every epoch ends current: the average is read after each
    by_steps = averaging and averages_by_steps(optimizer_code, bool(lazy), float(l2), float(l1), int(avg_from))
    if state.step > 0 and averaging and state.average_steps != by_steps:  # the state keeps one or the other
        raise ValueError("iterate averaging cannot change its bookkeeping within a run (see averages_by_steps)")
    state.average_steps = by_steps
    weights = np.zeros(0) if example_weight is None else np.ascontiguousarray(example_weight, dtype=np.float64)
    n_threads = resolve_threads(threads)
    rows = Rows(indptr, indices, data, y, order)
    settings = Settings(int(loss_code), int(optimizer_code), int(schedule_code), float(learning_rate),
                        float(decay), float(l2), float(beta1), float(beta2), float(rho), float(epsilon),
                        int(max(1, batch_size)), bool(lazy), int(state.step),
                        _catch_up_kind(optimizer_code, l2, bool(lazy)))
    remedies = Remedies(weights, float(l1), float(ftrl_beta), int(avg_from), by_steps)
    lengths = indptr[order + 1] - indptr[order]
    threaded = n_threads > 1 and _batch_work(lengths, settings.batch_size, params.shape[1]) >= PARALLEL_MIN_WORK
    work = _work_space(lengths, params, settings, prefetch=not threaded, remedies=remedies, state=state)
    with Threads(n_threads if threaded else 1):
        if threaded:
            loss_sum, end, finite = _batches_threads(rows, params, state, settings, work, n_threads, remedies)
        else:
            loss_sum, end, finite = _epoch_one_thread(rows, params, state, settings, work, remedies)
        if finite:
            _end_epoch(params, state, settings, work, end, flush, n_threads, remedies)
    if finite and work.l1_total.shape[0] > 0:
        state.l1_total = float(work.l1_total[-1])
    state.step = int(end)
    state.pending = settings.kind == CATCH_UP_STATE and (not flush or not finite)
    return float(loss_sum), bool(finite)


class Remedies(NamedTuple):
    """The remedies' inputs of one epoch (the module docstring): example weights (empty: none), the L1
    strength, FTRL's beta, the average's first step and whether it is kept by steps (averages_by_steps)."""

    example_weight: np.ndarray
    l1: float
    ftrl_beta: float
    avg_from: int
    by_steps: bool = False


def _epoch_one_thread(rows: Rows, params, state: KernelState, s: Settings, w: WorkSpace, r: Remedies):
    """The one call into :func:`compiled.epoch_kernel`, its arguments unpacked by name."""
    return epoch_kernel(
        rows.indptr, rows.indices, rows.data, rows.y, rows.order, params, state.sum_sq_grad, state.first_moment,
        state.second_moment, state.avg_sq_update, state.info, state.info_f, s.loss_code, s.optimizer_code,
        s.schedule_code, s.learning_rate, s.decay, s.l2, s.beta1, s.beta2, s.rho, s.epsilon, s.batch_size, s.lazy,
        s.step, s.kind, w.cum, w.powers, w.scores, w.dscores, w.example_loss, w.touched, w.missed, w.decays,
        w.row_start, w.entry_row, w.entry_example, w.entry_value, w.upcoming, w.active, w.scratch, r.example_weight,
        r.l1, w.l1_total, state.l1_applied, state.shifted_grad_sum, r.ftrl_beta, w.shrink_sums, state.avg_sum,
        r.avg_from, w.average_gap, r.by_steps)


def _batches_threads(rows: Rows, params, state: KernelState, s: Settings, w: WorkSpace, n_threads: int,
                     r: Remedies):
    """The batches of one epoch, each split over ``n_threads`` threads (batches large enough
    that a call from Python per batch costs nothing that matters): the same steps, the same
    bits, as :func:`compiled.epoch_kernel`."""
    n_batches = -(-len(rows.order) // s.batch_size)
    loss_sum = 0.0
    for b in range(n_batches):
        total, finite = run_batch_threads(
            b, rows.indptr, rows.indices, rows.data, rows.y, rows.order, params, state.sum_sq_grad,
            state.first_moment, state.second_moment, state.avg_sq_update, state.info, state.info_f, s.loss_code,
            s.optimizer_code, s.schedule_code, s.learning_rate, s.decay, s.l2, s.beta1, s.beta2, s.rho, s.epsilon,
            s.batch_size, s.lazy, s.step, s.kind, w.cum, w.powers, w.scores, w.dscores, w.example_loss, w.touched,
            w.missed, w.decays, w.row_start, w.entry_row, w.entry_example, w.entry_value, w.upcoming, w.active,
            r.example_weight, r.l1, w.l1_total, state.l1_applied, state.shifted_grad_sum, r.ftrl_beta,
            w.shrink_sums, state.avg_sum, r.avg_from, w.average_gap, r.by_steps, n_threads)
        loss_sum += total
        if not finite:
            return loss_sum, s.step + b + 1, False
    return loss_sum, s.step + n_batches, True


def _end_epoch(params, state: KernelState, s: Settings, w: WorkSpace, end, flush, n_threads, r: Remedies):
    """After the last step: the flush (every row caught up to ``end``) where it is due, else
    ``last_step = end`` where nothing is owed; the bias is always current. With lazy averaging
    every row is caught up (its missed steps added to the average) unless it is kept by steps."""
    n_features = params.shape[0] - 1
    averaging = s.lazy and state.avg_sum.shape[0] > 0 and not r.by_steps
    if s.kind == CATCH_UP_WEIGHTS or (s.kind == CATCH_UP_STATE and flush) or averaging:
        _flush_rows(params, state, s, w.cum, w.shrink_sums, end, n_threads, PARALLEL_MIN_WORK, averaging,
                    r.avg_from)
    elif s.kind == CATCH_UP_NONE:
        state.info[:n_features, LAST] = end
    state.info[n_features, LAST] = end


def _flush_rows(params, state: KernelState, s: Settings, cum, shrink_sums, now, n_threads, threshold,
                averaging=False, avg_from=0):
    """Every feature row caught up to step ``now`` (compiled.flush_rows), threaded from ``threshold`` weights."""
    n_features = params.shape[0] - 1
    avg_sum = state.avg_sum if averaging else np.zeros((0, params.shape[1]))
    if n_threads > 1 and params.size >= threshold:
        with Threads(n_threads):
            flush_rows_parallel(n_features, now, s.step, cum, s.optimizer_code, s.learning_rate, s.l2, params,
                                state.sum_sq_grad, state.first_moment, state.second_moment, state.avg_sq_update,
                                state.info, s.beta1, s.beta2, s.rho, s.epsilon, s.kind, shrink_sums, avg_sum,
                                avg_from, 4 * n_threads)
    else:
        flush_rows(0, n_features, now, s.step, cum, s.optimizer_code, s.learning_rate, s.l2, params,
                   state.sum_sq_grad, state.first_moment, state.second_moment, state.avg_sq_update, state.info,
                   s.beta1, s.beta2, s.rho, s.epsilon, s.kind, shrink_sums, avg_sum, avg_from)


def _catch_up_kind(optimizer_code, l2, lazy) -> int:
    """What a missed step does (``compiled.CATCH_UP_*``)."""
    if not lazy:
        return CATCH_UP_NONE
    if optimizer_code in (SGD, ADAGRAD):
        return CATCH_UP_WEIGHTS if l2 > 0.0 else CATCH_UP_NONE
    if optimizer_code == FTRL:
        return CATCH_UP_NONE
    return CATCH_UP_STATE


def _batch_work(lengths, batch_size, n_labels) -> float:
    """Mean entries of a batch of this epoch times labels: the work threads would share."""
    if len(lengths) == 0:
        return 0.0
    return float(lengths.mean()) * min(batch_size, len(lengths)) * n_labels


def _work_space(lengths, params, s: Settings, prefetch=True, remedies: Remedies | None = None,
                state: KernelState | None = None) -> WorkSpace:
    """Tables and buffers of one epoch.

    ``cum``: SGD with L2, the running sum of ``log(1 + eta_s*l2)`` over the epoch's steps, so
    the shrinkage of the missed steps ``a .. b-1`` is ``exp(-(cum[b] - cum[a]))``. ``powers``:
    the decay rates' powers for gaps of up to two epochs (longer ones are computed when met),
    by repeated multiplication (relative error below ``k * 1.2e-16``), below ``NEGLIGIBLE``
    set to 0. The buffers are sized for the largest batch of this epoch.

    ``shrink_sums`` (lazy averaging with SGD and L2): ``shrink_sums[b] = sum_{i=1..b} exp(-cum[i])``,
    the sum over missed steps of the L2 shrinkage (:func:`compiled.average_missed`).
    ``l1_total`` (SGD with L1): the cumulative penalty ``u`` after each step of the epoch,
    ``state.l1_total + l1 * (eta_0 + ... + eta_b)``.
    """
    n = len(lengths)
    batch_size = s.batch_size
    n_rows, n_labels = params.shape
    n_batches = -(-n // batch_size)
    cum = np.zeros(n_batches + 1)
    l1 = remedies.l1 if remedies is not None and state is not None else 0.0
    rates = None  # SGD's step sizes of the epoch's batches, for the L2 catch-up and the L1 penalty
    if s.optimizer_code == SGD and (s.l2 > 0.0 or l1 > 0.0):
        rates = np.array([schedule_learning_rate(s.schedule_code, s.learning_rate, s.decay, s.step + b)
                          for b in range(n_batches)])
    if s.optimizer_code == SGD and s.l2 > 0.0:
        cum[1:] = np.cumsum(np.log1p(rates * s.l2))
    n_powers = 2 * n_batches + 2 if s.kind == CATCH_UP_STATE else 0
    bases = (s.beta1, s.beta2) if s.optimizer_code == ADAM else (s.rho, s.rho)
    powers = np.empty((2, n_powers))
    if n_powers:
        for row, base in enumerate(bases):
            powers[row, 0] = 1.0
            powers[row, 1:] = np.cumprod(np.full(n_powers - 1, float(base)))
        powers[powers < NEGLIGIBLE] = 0.0
    shrink_sums = np.zeros(0)
    l1_total = np.zeros(0)
    if remedies is not None and state is not None:
        if s.lazy and s.optimizer_code == SGD and s.l2 > 0.0 and state.avg_sum.shape[0] > 0:
            if cum[-1] > 700.0:
                raise ValueError("--l2 shrinks the weights by more than e^-700 in one epoch: too strong to average")
            shrink_sums = np.concatenate(([0.0], np.cumsum(np.exp(-cum[1:]))))
        if s.optimizer_code == SGD and l1 > 0.0:
            l1_total = state.l1_total + l1 * np.cumsum(rates)
    cap = int(np.add.reduceat(lengths, np.arange(0, n, batch_size)).max()) if n else 0
    width = min(batch_size, n)
    max_rows = (min(cap, n_rows - 1) if s.lazy else n_rows - 1) + 1  # rows of a step, the bias last
    upcoming = cap if prefetch and s.lazy and batch_size <= PREFETCH_MAX_EXAMPLES else 0
    return WorkSpace(
        cum=cum, powers=powers, scores=np.empty((width, n_labels)), dscores=np.empty((width, n_labels)),
        example_loss=np.empty(width), touched=np.arange(max_rows, dtype=np.int64),  # dense mode: every row, in order
        missed=np.zeros(max_rows, dtype=np.int64), decays=np.ones((2, max_rows)),
        row_start=np.zeros(max_rows + 1, dtype=np.int64), entry_row=np.empty(cap + width, dtype=np.int64),
        entry_example=np.empty(cap + width, dtype=np.int64), entry_value=np.empty(cap + width),
        upcoming=np.empty(upcoming, dtype=np.int64), active=np.empty(n_labels, dtype=np.int64),
        scratch=np.empty((2, n_labels)), shrink_sums=shrink_sums, l1_total=l1_total,
        average_gap=np.zeros(max_rows, dtype=np.int64))


def decision_scores(indptr, indices, data, params, threads: int | None = 1) -> np.ndarray:
    """Scores ``X @ W + b`` of the CSR rows (float64), rows split over ``threads`` threads."""
    out = np.empty((len(indptr) - 1, params.shape[1]))
    n = resolve_threads(threads)
    if n > 1 and data.shape[0] * params.shape[1] >= PARALLEL_MIN_WORK_OUTSIDE_BATCHES:
        with Threads(n):
            score_rows_parallel(indptr, indices, data, params, out, 4 * n)
    else:
        score_rows(0, out.shape[0], indptr, indices, data, params, out)
    return out
