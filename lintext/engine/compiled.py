"""Compiled (numba) code of the training loop; semantics in :mod:`lintext.engine.kernels`.

Every ``@njit(cache=True)`` function of the training loop lives in this one file on
purpose: numba's on-disk cache is invalidated by changes to the file that defines a
function, not by changes to the functions it calls in other files, nor by changes to
the integer codes imported from :mod:`lintext.engine.optimizers` and :mod:`lintext.engine.losses` (treat those
codes as frozen). Keep it that way.

Arguments are flat: arrays, integer codes and numbers. A "row" is one feature's weights
across all labels (``params[j, :]``); the last row of ``params`` is the bias. The per-example
and per-row functions are the compiled twins of :mod:`lintext.engine.losses` and
:mod:`lintext.engine.optimizers`, which document the maths; tests check that they agree.

Per-row bookkeeping lives in one ``(n_rows, 4)`` int64 array ``info`` (``(n_rows, 8)`` for Adam;
one record of 32 or 64 bytes per row, inside one cache line, so a touched row costs one cache
miss, not five), with ``info_f`` a float64 view of the same memory for the float columns:

* ``info[j, LAST]`` -- ``last_step``; inside a batch, ``-(slot + 1)`` marks a row already
  collected for this batch and gives its position in the batch's list of rows;
* ``info[j, COUNT]`` -- Adam's per-row bias-correction count;
* ``info[j, STAT_COUNT]`` -- steps in which the row had a non-zero loss gradient;
* ``info_f[j, STAT_SUM]`` -- the sum of ``|w_after - w_before|`` over labels and those steps;
* ``info_f[j, POW1]``, ``info_f[j, POW2]`` -- ``beta1 ** count`` and ``beta2 ** count`` (Adam's
  bias corrections, kept up to date by one multiplication per step instead of two powers).

How the speed is obtained (profiled with ``perf``; timings in ``scripts/bench_train.py``):

* ``error_model="numpy"``: a division by zero gives inf / NaN instead of a check that raises,
  a check that kept LLVM from vectorising every loop with a division.
* No call to a helper taking arrays inside a loop over entries or rows: such a call passes
  each array as seven scalars, is not inlined by LLVM, and numba counts references to the
  arrays (atomic instructions) at every call; numba's own inlining keeps the counting. So
  the loops are written out in the per-batch functions below, which are called once per
  batch, and the functions that allocate nothing are compiled without reference counting
  (``NO_REFCOUNT``).
* Each rule has its own loop over the labels, without a branch or a running sum inside
  (``|dw|`` goes to scratch space and is summed after, in a fixed order), so LLVM vectorises
  it; L2 = 0 has its own loop where it saves a division (``(w - eta*g) / (1 + eta*0)`` equals
  ``w - eta*g``).
* One batch: one pass over its entries collects its distinct rows, catches up their weights
  where L2 asks for it, and counts the entries of each row; its examples are scored into a
  small buffer; a stable counting sort lays the entries out row by row (in example order);
  then each row sums its gradient in example order and takes its step, the state decay of
  its missed steps folded in. The bias is one more row whose entries are the examples.
* Memory latency is the cost of a small batch on a large model: its rows are scattered over
  hundreds of megabytes. While a batch is updated, the next batch's rows (weights, state,
  record) are prefetched (``llvm.prefetch``), a few per updated row: all at once, the
  prefetches would queue for the memory system and stall the processor.
* Powers: the decay over ``k`` missed steps comes from a table of ``rho ** k`` built once per
  epoch, and Adam's ``beta ** count`` is kept per row (a multiplication per step), instead of
  computing powers per row and step. Values below ``NEGLIGIBLE`` become 0, keeping out
  subnormal numbers, whose arithmetic is about a hundred times slower.
* A missed step of RMSProp, AdaDelta or Adam only decays the state, whatever the learning
  rate, so those rules may leave the end-of-epoch catch-up ("flush") to each row's next touch
  (``flush=False``); :func:`lintext.engine.kernels.flush` settles the state before it is read.
* Threads (``prange``) split a large batch's examples for scoring and its rows for the
  update (:func:`run_batch_threads`). Each number is computed by the same code in the same
  order on any number of threads (rows are independent; a row's gradient is summed in example
  order by one thread), so the results are bit-identical to one thread. Starting the threads
  costs more than small batches take, so :mod:`lintext.engine.kernels` calls it only for large
  batches, one batch per call; :func:`epoch_kernel` (one thread) never refers to the parallel
  functions, so a run that needs none does not spend seconds compiling them.

Where the time goes at many labels (``perf record`` with numba's profiling hooks, 60 labels on
make_synth's large shape: 324,000 features, 94 non-zeros per row, a 156 MB float64 array per
model-sized array; and fortunes, 43 labels, 16 MB):

* Memory. A touched row is 6 to 9 cache lines per model-sized array, scattered; per epoch SGD
  moves one such array (about 0.8x the SciPy floor on the large shape), AdaGrad and RMSProp
  two (1.3-1.5x), Adam and AdaDelta three (2.0-2.2x), averaging one more (SGD 1.3x) unless
  it is kept by steps (``ADD_STEPS``: SGD and AdaGrad without L1 or L2), where a hinge batch
  touches the sums of its active labels only and averaging costs next to nothing. A
  quarter to a third of the samples sit on the prefetch instructions: the core's outstanding
  misses are all in use. ``precision="float32"`` halves the lines (AdaGrad 0.9x, Adam 1.4x,
  AdaDelta 1.35x there).
* The divider. A square root and a division per weight share one divider, about 4 cycles a
  weight (1.2 ns measured; 1.45 ns at 43 labels, whose last 3 go scalar): 7% of AdaGrad's
  epoch on the large shape, 11-17% on fortunes, whose model sits in the L3 cache and whose
  floor is 0.03 s. Taking the divider out entirely (a wrong rule, for the measurement) left
  AdaGrad at 1.7-1.8x the floor on fortunes, so no cheaper reciprocal square root, which
  would also change the weights' bits, can bring it to 1.5x.
* Measured and left out: prefetching into the L2 cache only (no change) or every other line
  (1.3x slower); threads over the labels (two processes on 30 labels each took 2.5 times as
  long as one alone, on a two-core machine that others share); skipping the labels of
  negligible softmax gradient (after two epochs, 40 of fortunes' 43 labels and 54 of the large
  shape's 60 have a probability of at least 1e-3 somewhere in a batch of 8: nothing to skip).
"""

from __future__ import annotations

import numpy as np
from . import numba_setup  # noqa: F401  (first: sets numba's cache folder)
from llvmlite import ir
from numba import njit, prange, types
from numba.core import cgutils
from numba.extending import intrinsic

from .losses import HINGE
from .optimizers import ADADELTA, ADAGRAD, ADAM, FTRL, RMSPROP, SGD
from .schedules import SCHEDULE_INVERSE, SCHEDULE_INVERSE_SQRT

# Columns of the per-row bookkeeping array (see the module docstring).
LAST = 0
COUNT = 1
STAT_COUNT = 2
STAT_SUM = 3
POW1 = 4  # Adam only: its records have 8 columns, the others' 4
POW2 = 5

# Decay factors and powers below this are replaced by zero: against the terms they multiply
# they change nothing, and products with subnormal numbers (below 2.2e-308) are very slow.
NEGLIGIBLE = 1e-100

# Batches of at most this many examples prefetch the next batch's rows (larger ones would
# evict their own rows from the caches before use).
PREFETCH_MAX_EXAMPLES = 32
# Rows ahead whose optimizer state a batch's update prefetches (the state is read only there).
STATE_AHEAD = 8

# What apply_rows adds to ``avg_sum`` for a row it steps (iterate averaging; see lintext.engine.state).
ADD_NOTHING = 0
ADD_WEIGHTS = 1  # the row's new weights: avg_sum is the sum of the iterates
ADD_STEPS = 2  # t * (its change): avg_sum is the step-weighted sum of the changes, only where they moved
# No step reaches it: prepare_batch then leaves every gap at zero.
NO_STEP = 2**62

# What a missed step does to an absent row (see lintext.engine.kernels).
CATCH_UP_NONE = 0  # nothing (SGD and AdaGrad without L2; dense mode)
CATCH_UP_WEIGHTS = 1  # L2 shrinkage of the weights (SGD, AdaGrad with L2): uses the epoch's step sizes
CATCH_UP_STATE = 2  # the averages decay (RMSProp, AdaDelta, Adam), whatever the step size

FAST = dict(cache=True, error_model="numpy")
# Functions that allocate nothing: compiled without numba's reference counting (_nrt=False, a
# compiler flag of numba's), which otherwise wraps every call to a function taking arrays in
# one atomic increment and decrement per array: a microsecond per batch, half the time of a
# batch of one short document.
NO_REFCOUNT = dict(cache=True, error_model="numpy", _nrt=False)
PARALLEL = dict(cache=True, error_model="numpy", parallel=True)


# --------------------------------------------------------------------------- per example, per row


@intrinsic
def prefetch(typingctx, array, row, column):
    """Hint the processor to fetch the cache line of ``array[row, column]`` (a 2-D array) into
    its caches, without waiting for it (LLVM's ``llvm.prefetch``: read, keep in all levels).
    Out-of-range addresses are harmless: a prefetch never faults."""
    sig = types.void(array, row, column)

    def codegen(context, builder, signature, args):
        array_type = signature.args[0]
        ary = context.make_array(array_type)(context, builder, args[0])
        r = context.cast(builder, args[1], signature.args[1], types.intp)
        c = context.cast(builder, args[2], signature.args[2], types.intp)
        ptr = cgutils.get_item_pointer(context, builder, array_type, ary, [r, c], wraparound=False)
        i32 = ir.IntType(32)
        byte_ptr = ir.IntType(8).as_pointer()
        fn = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(ir.VoidType(), [byte_ptr, i32, i32, i32]), "llvm.prefetch.p0")
        builder.call(fn, [builder.bitcast(ptr, byte_ptr), i32(0), i32(3), i32(1)])
        return context.get_dummy_value()

    return sig, codegen


@njit(inline="always", **NO_REFCOUNT)
def prefetch_row(array, row, step):
    """:func:`prefetch` row ``row`` of a 2-D array (nothing when it has no rows, as a rule's
    unused state): a hint every ``step`` columns (one per cache line) and one at the last."""
    if array.shape[0] > 0:
        end = array.shape[1] - 1
        for column in range(0, end + 1, step):
            prefetch(array, row, column)
        prefetch(array, row, end)


@njit(**FAST)
def schedule_lr(schedule_code, lr0, decay, step):
    """Compiled twin of :func:`lintext.engine.schedules.schedule_learning_rate`."""
    if schedule_code == SCHEDULE_INVERSE:
        return lr0 / (1.0 + decay * step)
    if schedule_code == SCHEDULE_INVERSE_SQRT:
        return lr0 / np.sqrt(1.0 + decay * step)
    return lr0  # constant, and plateau (constant within an epoch)


@njit(**NO_REFCOUNT)
def score_examples(indptr, indices, data, y, order, first, start, stop, params, loss_code,
                   inv_batch, scores, dscores, example_loss, example_weight):
    """Score examples ``order[start:stop]``: row ``r = p - first`` of ``scores`` gets
    ``b + x_i @ W`` (the bias first, then the features in CSR order), ``dscores[r]`` the
    loss gradient ``d loss / d scores`` divided by the batch size, ``example_loss[r]`` the loss;
    with ``example_weight`` (one weight per row of the matrix; empty: none) both are multiplied
    by the example's weight (the gradient's factor ``inv_batch * weight`` taken once per example).

    Compiled twin of :func:`lintext.engine.losses.example_losses_grads`. A non-finite score gives a
    non-finite loss (never hidden). Written out in full, without calls to helpers taking
    arrays: numba would count references to them at every call.
    """
    n_labels = params.shape[1]
    bias = params.shape[0] - 1
    weighted = example_weight.shape[0] > 0
    for p in range(start, stop):
        r = p - first
        i = order[p]
        scale = inv_batch * example_weight[i] if weighted else inv_batch  # of the gradient
        for l in range(n_labels):
            scores[r, l] = params[bias, l]
        for q in range(indptr[i], indptr[i + 1]):
            j = indices[q]
            x = data[q] * 1.0
            for l in range(n_labels):
                scores[r, l] += x * params[j, l]
        label = y[i]
        if loss_code == HINGE:
            rival = -1
            best = 0.0
            for l in range(n_labels):
                dscores[r, l] = 0.0
                if l != label and (rival < 0 or scores[r, l] > best):
                    best = scores[r, l]
                    rival = l
            loss = 1.0 + best - scores[r, label]
            if loss > 0.0:
                dscores[r, rival] = scale
                dscores[r, label] = -scale
            elif loss <= 0.0:
                loss = 0.0
            # else NaN: kept
        else:
            m = scores[r, 0]
            for l in range(1, n_labels):
                if scores[r, l] > m:
                    m = scores[r, l]
            z = 0.0
            for l in range(n_labels):  # one exp per label
                e = np.exp(scores[r, l] - m)
                dscores[r, l] = e
                z += e
            for l in range(n_labels):
                dscores[r, l] = dscores[r, l] / z
            dscores[r, label] -= 1.0
            for l in range(n_labels):
                dscores[r, l] *= scale
            loss = m + np.log(z) - scores[r, label]
        example_loss[r] = loss * example_weight[i] if weighted else loss


@njit(**PARALLEL)
def score_examples_parallel(indptr, indices, data, y, order, start, stop, params, loss_code,
                            inv_batch, scores, dscores, example_loss, example_weight, n_chunks):
    """:func:`score_examples` over ``n_chunks`` contiguous chunks of the batch in parallel."""
    n = stop - start
    for c in prange(n_chunks):
        score_examples(indptr, indices, data, y, order, start, start + (n * c) // n_chunks,
                       start + (n * (c + 1)) // n_chunks, params, loss_code, inv_batch, scores,
                       dscores, example_loss, example_weight)


@njit(**NO_REFCOUNT)
def apply_rows(lo, hi, touched, decay1, decay2, row_start, entry_example, entry_value, dscores, opt_code,
               lr, l2, params, sum_sq_grad, first_moment, second_moment, avg_sq_update, info,
               info_f, beta1, beta2, rho, epsilon, mark, g, moved, upcoming, n_up, active, n_active,
               l1, shifted_grad_sum, ftrl_beta, avg_sum, l1_applied, average_gap, add_to_average):
    """Rows ``touched[lo:hi]``: sum the batch gradient from the row's entries, in example order
    (none: zero), then take one step of the rule; ``mark >= 0``: then set ``last_step`` to it.

    Compiled twin of :func:`lintext.engine.optimizers.apply_step` (no L2 on the bias), with the state decay
    of the ``missed[s]`` steps the row was absent (:func:`lintext.engine.optimizers.catch_up` of the
    decaying rules) folded into the step. One loop per rule, no branch inside. Adam's bias
    correction uses the row's own count, and ``lr * (m / c1) / (sqrt(v / c2) + eps)`` is
    computed as ``(lr * sqrt(c2) / c1) * m / (sqrt(v) + eps * sqrt(c2))``; AdaDelta's
    ``sqrt(a) / sqrt(b)`` as ``sqrt(a / b)`` (equal up to rounding; one division and one
    square root per coordinate). The statistics count the row when its gradient is not all
    zero and add ``|w_after - w_before|`` summed over labels (``g`` and ``moved`` are scratch
    space of ``n_labels``; a running sum in the loop would keep it from vectorising).

    ``opt_code == FTRL`` is McMahan et al. (2013), Algorithm 1: ``sum_sq_grad`` is ``n``,
    ``shifted_grad_sum`` is ``z``; ``lr`` is ``alpha``, ``ftrl_beta`` is ``beta``, ``l1`` and ``l2``
    are ``lambda_1`` and ``lambda_2`` (0 on the bias); its branch comes after the other rules', so
    they test nothing more than before. SGD's L1 penalty is a pass of its own after this one
    (:func:`penalise_rows`).

    Averaging (``avg_sum`` has rows) adds to a row's sums, outside its rule's loop, first the
    weights of its ``average_gap[s]`` missed steps (left here by :func:`prepare_batch` when
    the catch-up did not move them), then, with ``add_to_average == ADD_WEIGHTS``, its new weights
    (without it, :func:`average_rows` adds them after the L1 penalty): the same additions in the
    same order as when they were passes of their own, made while the row is in the cache. With
    ``add_to_average == ADD_STEPS`` (SGD and AdaGrad without L1 or L2, averaged from the first step;
    :func:`lintext.engine.state.averages_by_steps`) it adds ``t * (w_after - w_before)`` instead,
    ``t = mark - 1`` the step, and only to the weights that moved: the sum of the iterates is then
    ``T * w - avg_sum`` after ``T`` steps (:meth:`lintext.engine.state.KernelState.weight_sum`), and a
    hinge batch, which moves two labels per example, touches two of a row's sums, not all of them.

    Meanwhile it prefetches the weights of the rows ``upcoming[:n_up]`` (the next batch's),
    spread evenly over its rows: all at once, the prefetches would queue for the memory system
    and stall the processor. The remedies' arrays the next batch reads before its update
    (``l1_applied`` of SGD's L1 penalty; zero rows when off) are prefetched with them. The
    optimizer state (FTRL's ``shifted_grad_sum`` included) and averaging's ``avg_sum``, read
    only here, are prefetched ``STATE_AHEAD`` rows ahead within the batch instead, whatever
    its size and thread: fetched a batch ahead, a batch of 8 with two or three model-sized
    arrays no longer fits the L2 cache beside the current one, and its lines were evicted
    before use (AdaGrad 10-15% faster on the large shape at 60 labels, Adam 3-5%; with
    averaging, SGD and AdaGrad 15-20%; at batch sizes 64 and 256, where nothing was
    prefetched, RMSProp and AdaGrad 10-20%). The rows' records are prefetched with their weights.

    ``active[:n_active]`` (``n_active < n_labels``; SGD and AdaGrad only) lists the labels some
    example of the batch has a non-zero loss gradient for (the hinge loss has at most two per
    example): a row without L2 then takes its step on those labels only, which is exact, as a
    zero gradient moves neither ``w`` nor AdaGrad's sum (``w - eta*0 == w``, ``G + 0 == G``).
    """
    n_labels = params.shape[1]
    bias = params.shape[0] - 1
    ar = 1.0 - rho
    a1 = 1.0 - beta1
    a2 = 1.0 - beta2
    line = max(1, 64 // params.itemsize)
    t_step = float(mark - 1)  # the step (ADD_STEPS runs lazy: mark = t + 1)
    fetched = 0
    owed = 0  # n_up prefetches spread over hi - lo rows, without a division per row
    ahead = STATE_AHEAD
    for s in range(lo - ahead, hi):
        if s + ahead < hi and ahead > 0:  # the state of the row STATE_AHEAD rows on
            jf = touched[s + ahead]
            prefetch_row(sum_sq_grad, jf, line)
            prefetch_row(first_moment, jf, line)
            prefetch_row(second_moment, jf, line)
            prefetch_row(avg_sq_update, jf, line)
            prefetch_row(shifted_grad_sum, jf, line)
            if add_to_average != ADD_STEPS or n_active == n_labels:
                prefetch_row(avg_sum, jf, 8)  # float64 whatever the weights' precision
            else:  # by steps, a hinge batch moves its active labels only: their lines (active is ascending)
                seen = -1
                for k in range(n_active):
                    if active[k] // 8 != seen:
                        seen = active[k] // 8
                        prefetch(avg_sum, jf, active[k])
        if s < lo:
            continue
        owed += n_up
        while owed >= hi - lo:
            owed -= hi - lo
            jn = upcoming[fetched]
            fetched += 1
            prefetch(info, jn, 0)  # its record, read first by the next batch
            prefetch_row(params, jn, line)
            prefetch_row(l1_applied, jn, line)
        j = touched[s]
        if average_gap[s] > 0:  # averaging: the weights of its missed steps (prepare_batch)
            c = float(average_gap[s])
            for l in range(n_labels):
                avg_sum[j, l] += c * params[j, l]
        reg = 0.0 if j == bias else l2
        a = row_start[s]
        b = row_start[s + 1]
        if n_active < n_labels and reg == 0.0:  # SGD or AdaGrad on the active labels only
            nonzero = 0
            for k in range(n_active):
                c = active[k]
                gc = 0.0
                if b > a:
                    gc = entry_value[a] * dscores[entry_example[a], c]
                    for e in range(a + 1, b):
                        gc += entry_value[e] * dscores[entry_example[e], c]
                w = params[j, c] * 1.0
                if opt_code == SGD:
                    params[j, c] = w - lr * gc
                else:
                    acc = sum_sq_grad[j, c] + gc * gc
                    sum_sq_grad[j, c] = acc
                    params[j, c] = w - lr * gc / (np.sqrt(acc) + epsilon)
                nonzero += gc != 0.0
                d = params[j, c] - w
                moved[k] = abs(d)
                if add_to_average == ADD_STEPS and gc != 0.0:  # a zero gradient moved nothing
                    avg_sum[j, c] += t_step * d
            if nonzero > 0:
                info[j, STAT_COUNT] += 1
                s0 = 0.0
                s1 = 0.0
                for k in range(0, n_active - 1, 2):
                    s0 += moved[k]
                    s1 += moved[k + 1]
                if n_active % 2 == 1:
                    s0 += moved[n_active - 1]
                info_f[j, STAT_SUM] += s0 + s1
            if mark >= 0:
                info[j, LAST] = mark
            if add_to_average == ADD_WEIGHTS:
                for l in range(n_labels):
                    avg_sum[j, l] += params[j, l]
            continue
        if b > a:
            r = entry_example[a]
            x = entry_value[a]
            for l in range(n_labels):
                g[l] = x * dscores[r, l]
            for e in range(a + 1, b):
                r = entry_example[e]
                x = entry_value[e]
                for l in range(n_labels):
                    g[l] += x * dscores[r, l]
        else:
            for l in range(n_labels):
                g[l] = 0.0
        nonzero = 0
        if opt_code == SGD:
            if reg > 0.0:
                shrink = 1.0 + lr * reg
                for l in range(n_labels):
                    w = params[j, l] * 1.0
                    params[j, l] = (w - lr * g[l]) / shrink
                    nonzero += g[l] != 0.0
                    moved[l] = abs(params[j, l] - w)
            else:
                for l in range(n_labels):
                    w = params[j, l] * 1.0
                    params[j, l] = w - lr * g[l]
                    nonzero += g[l] != 0.0
                    moved[l] = abs(params[j, l] - w)
        elif opt_code == ADAGRAD:
            if reg > 0.0:
                for l in range(n_labels):
                    w = params[j, l] * 1.0
                    acc = sum_sq_grad[j, l] + g[l] * g[l]
                    sum_sq_grad[j, l] = acc
                    eta = lr / (np.sqrt(acc) + epsilon)
                    params[j, l] = (w - eta * g[l]) / (1.0 + eta * reg)
                    nonzero += g[l] != 0.0
                    moved[l] = abs(params[j, l] - w)
            else:
                for l in range(n_labels):
                    w = params[j, l] * 1.0
                    acc = sum_sq_grad[j, l] + g[l] * g[l]
                    sum_sq_grad[j, l] = acc
                    params[j, l] = w - lr * g[l] / (np.sqrt(acc) + epsilon)
                    nonzero += g[l] != 0.0
                    moved[l] = abs(params[j, l] - w)
        elif opt_code == RMSPROP:
            f = decay1[s]
            for l in range(n_labels):
                w = params[j, l] * 1.0
                gg = g[l] + reg * w
                v = rho * (f * second_moment[j, l]) + ar * gg * gg
                second_moment[j, l] = v
                params[j, l] = w - lr * gg / (np.sqrt(v) + epsilon)
                nonzero += g[l] != 0.0
                moved[l] = abs(params[j, l] - w)
        elif opt_code == ADADELTA:
            f = decay1[s]
            for l in range(n_labels):
                w = params[j, l] * 1.0
                gg = g[l] + reg * w
                eg2 = rho * (f * second_moment[j, l]) + ar * gg * gg
                second_moment[j, l] = eg2
                old = f * avg_sq_update[j, l]
                dx = -np.sqrt((old + epsilon) / (eg2 + epsilon)) * gg
                avg_sq_update[j, l] = rho * old + ar * dx * dx
                params[j, l] = w + lr * dx
                nonzero += g[l] != 0.0
                moved[l] = abs(params[j, l] - w)
        elif opt_code == ADAM:
            f1 = decay1[s]
            f2 = decay2[s]
            info[j, COUNT] += 1
            p1 = info_f[j, POW1] * beta1  # beta1 ** count, kept per row
            p2 = info_f[j, POW2] * beta2
            if p1 < NEGLIGIBLE:  # 1 - p is 1 either way; zero keeps out subnormal numbers, whose
                p1 = 0.0  # arithmetic is a hundred times slower
            if p2 < NEGLIGIBLE:
                p2 = 0.0
            info_f[j, POW1] = p1
            info_f[j, POW2] = p2
            c1 = 1.0 - p1
            root_c2 = np.sqrt(1.0 - p2)
            step = lr * root_c2 / c1
            eps = epsilon * root_c2
            for l in range(n_labels):
                w = params[j, l] * 1.0
                gg = g[l] + reg * w
                m1 = beta1 * (f1 * first_moment[j, l]) + a1 * gg
                v = beta2 * (f2 * second_moment[j, l]) + a2 * gg * gg
                first_moment[j, l] = m1
                second_moment[j, l] = v
                params[j, l] = w - step * m1 / (np.sqrt(v) + eps)
                nonzero += g[l] != 0.0
                moved[l] = abs(params[j, l] - w)
        elif opt_code == FTRL:
            pen = 0.0 if j == bias else l1
            lam2 = reg
            for l in range(n_labels):
                w = params[j, l] * 1.0
                n_old = sum_sq_grad[j, l] * 1.0
                n_new = n_old + g[l] * g[l]
                sigma = (np.sqrt(n_new) - np.sqrt(n_old)) / lr
                z = shifted_grad_sum[j, l] + g[l] - sigma * w
                shifted_grad_sum[j, l] = z
                sum_sq_grad[j, l] = n_new
                if abs(z) <= pen:
                    params[j, l] = 0.0
                else:
                    params[j, l] = -(z - np.sign(z) * pen) / ((ftrl_beta + np.sqrt(n_new)) / lr + lam2)
                nonzero += g[l] != 0.0
                moved[l] = abs(params[j, l] - w)
        if nonzero > 0:
            info[j, STAT_COUNT] += 1
            # |dw| summed as four interleaved partial sums combined (s0 + s1) + (s2 + s3): a
            # fixed order that runs four additions at a time
            s0 = 0.0
            s1 = 0.0
            s2 = 0.0
            s3 = 0.0
            l = 0
            while l + 4 <= n_labels:
                s0 += moved[l]
                s1 += moved[l + 1]
                s2 += moved[l + 2]
                s3 += moved[l + 3]
                l += 4
            while l < n_labels:
                s0 += moved[l]
                l += 1
            info_f[j, STAT_SUM] += (s0 + s1) + (s2 + s3)
        if mark >= 0:
            info[j, LAST] = mark
        if add_to_average == ADD_WEIGHTS:  # averaging: the row's new weights (else average_rows, after L1)
            for l in range(n_labels):
                avg_sum[j, l] += params[j, l]
        elif add_to_average == ADD_STEPS:  # SGD and AdaGrad: a weight moves against its gradient's sign
            for l in range(n_labels):
                avg_sum[j, l] -= t_step * np.copysign(moved[l], g[l])


@njit(**NO_REFCOUNT)
def penalise_rows(n_touched, touched, l1_total, l1_applied, params, info_f):
    """SGD's cumulative L1 penalty on the rows ``touched[:n_touched]`` but the bias, after their
    gradient step (Tsuruoka, Tsujii & Ananiadou 2009, Figure 2): ``l1_total`` is ``u``, the
    penalty any weight could have received so far, ``l1_applied[j, l]`` is ``q``, what it did
    receive; the weight moves toward zero by at most ``u - |q|`` and never crosses it. The
    statistics add the penalty's ``|dw|`` to the step's."""
    n_labels = params.shape[1]
    bias = params.shape[0] - 1
    for s in range(n_touched):
        j = touched[s]
        if j == bias:
            continue
        total = 0.0
        for l in range(n_labels):
            v = params[j, l] * 1.0
            q = l1_applied[j, l] * 1.0
            if v > 0.0:
                nv = max(0.0, v - (l1_total + q))
            elif v < 0.0:
                nv = min(0.0, v + (l1_total - q))
            else:
                nv = v
            l1_applied[j, l] = q + (nv - v)
            params[j, l] = nv
            total += abs(nv - v)
        info_f[j, STAT_SUM] += total


@njit(**NO_REFCOUNT)
def average_rows(n_touched, touched, params, avg_sum):
    """Iterate averaging: the rows ``touched[:n_touched]`` add their weights after this step to
    ``avg_sum`` (the missed steps of absent rows are added on their next touch, :func:`average_missed`)."""
    n_labels = params.shape[1]
    for s in range(n_touched):
        j = touched[s]
        for l in range(n_labels):
            avg_sum[j, l] += params[j, l]


@njit(**NO_REFCOUNT)
def add_average_gaps(n_touched, touched, average_gap, params, avg_sum):
    """Iterate averaging: the weights of the missed steps :func:`prepare_batch` left to
    :func:`apply_rows` (``average_gap[s]`` steps for row ``touched[s]``), for a batch stopped
    before its update."""
    n_labels = params.shape[1]
    for s in range(n_touched):
        if average_gap[s] > 0:
            j = touched[s]
            c = float(average_gap[s])
            for l in range(n_labels):
                avg_sum[j, l] += c * params[j, l]


@njit(**NO_REFCOUNT)
def active_labels(loss_code, opt_code, dscores, n_ex, active):
    """Labels with a non-zero loss gradient in some example of the batch (rows ``:n_ex`` of
    ``dscores``) into ``active``; returns their number, or ``n_labels`` (every label, the
    dense step) unless the loss is the hinge, the rule SGD or AdaGrad and at most half the
    labels are active."""
    n_labels = dscores.shape[1]
    if loss_code != HINGE or (opt_code != SGD and opt_code != ADAGRAD):
        return n_labels
    n_active = 0
    for l in range(n_labels):
        for r in range(n_ex):
            if dscores[r, l] != 0.0:
                active[n_active] = l
                n_active += 1
                break
    return n_active if 2 * n_active <= n_labels else n_labels


@njit(**PARALLEL)
def apply_rows_parallel(n_rows, touched, decay1, decay2, row_start, entry_example, entry_value, dscores,
                        opt_code, lr, l2, params, sum_sq_grad, first_moment, second_moment,
                        avg_sq_update, info, info_f, beta1, beta2, rho, epsilon, mark, active,
                        n_active, l1, shifted_grad_sum, ftrl_beta, avg_sum, average_gap, add_to_average,
                        n_chunks):
    """:func:`apply_rows` over ``n_chunks`` contiguous chunks of the rows in parallel."""
    n_labels = params.shape[1]
    for c in prange(n_chunks):
        g = np.empty(n_labels)
        moved = np.empty(n_labels)
        upcoming = np.empty(0, dtype=np.int64)  # nothing to prefetch
        apply_rows((n_rows * c) // n_chunks, (n_rows * (c + 1)) // n_chunks, touched, decay1, decay2,
                   row_start, entry_example, entry_value, dscores, opt_code, lr, l2, params,
                   sum_sq_grad, first_moment, second_moment, avg_sq_update, info, info_f, beta1,
                   beta2, rho, epsilon, mark, g, moved, upcoming, 0, active, n_active, l1,
                   shifted_grad_sum, ftrl_beta, avg_sum, params[:0], average_gap, add_to_average)


@njit(inline="always", **NO_REFCOUNT)
def average_missed(j, last, t, t0, kind, opt_code, cum, shrink_sums, lr, l2, epsilon, params, sum_sq_grad,
                   avg_sum, avg_from):
    """Add to ``avg_sum[j]`` the weights row ``j`` had after each of its missed steps
    ``max(last, avg_from) .. t-1`` (iterate averaging under lazy updates), before its catch-up.

    Without L2 a missed step leaves the weights alone, so that is ``(t - m) * w``. With L2
    (``kind == CATCH_UP_WEIGHTS``) the weights after missed step ``s`` are ``w`` shrunk by the
    steps ``last .. s``: for SGD ``w * exp(cum[last] - cum[s + 1])``, summed through
    ``shrink_sums[b] = sum_{i=1..b} exp(-cum[i])`` (indices from the epoch's first step ``t0``);
    for AdaGrad ``w / r^(s + 1 - last)`` with ``r = 1 + eta*l2``, a geometric sum.
    """
    m = last if last > avg_from else avg_from
    if t <= m:
        return
    n_labels = params.shape[1]
    if kind == CATCH_UP_WEIGHTS:
        if opt_code == SGD:
            f = np.exp(cum[last - t0]) * (shrink_sums[t - t0] - shrink_sums[m - t0])
            for l in range(n_labels):
                avg_sum[j, l] += f * params[j, l]
        else:
            for l in range(n_labels):
                eta = lr / (np.sqrt(sum_sq_grad[j, l]) + epsilon)
                rate = np.log1p(eta * l2)  # r = exp(rate)
                # sum_{s=m}^{t-1} r^-(s+1-last) = r^-(m+1-last) * (1 - r^-(t-m)) / (1 - r^-1)
                f = np.exp(-(m + 1 - last) * rate) * np.expm1(-(t - m) * rate) / np.expm1(-rate)
                avg_sum[j, l] += f * params[j, l]
    else:
        c = float(t - m)
        for l in range(n_labels):
            avg_sum[j, l] += c * params[j, l]


@njit(**NO_REFCOUNT)
def flush_rows(lo, hi, now, t0, cum, opt_code, lr, l2, params, sum_sq_grad, first_moment,
               second_moment, avg_sq_update, info, beta1, beta2, rho, epsilon, kind, shrink_sums,
               avg_sum, avg_from):
    """Catch rows ``lo .. hi-1`` up over their missed steps, up to step ``now``.

    Compiled twin of :func:`lintext.engine.optimizers.catch_up` over ``k = now - last_step`` missed steps:
    SGD multiplies by ``exp(cum[a] - cum[now])`` (``cum`` is the running sum of
    ``log(1 + eta_s*l2)`` from the epoch's first step ``t0``); AdaGrad divides by
    ``(1 + eta*l2)^k`` (its accumulator is unchanged while absent; ``lr`` is constant within an
    epoch); the decaying rules scale their state by ``rho^k`` / ``beta^k`` and leave ``w`` alone.
    With averaging (``avg_sum`` has rows) the missed steps' weights are first added to it
    (:func:`average_missed`).
    """
    n_labels = params.shape[1]
    averaging = avg_sum.shape[0] > 0
    for j in range(lo, hi):
        last = info[j, LAST]
        k = now - last
        info[j, LAST] = now
        if k <= 0:
            continue
        if averaging:
            average_missed(j, last, now, t0, kind, opt_code, cum, shrink_sums, lr, l2, epsilon, params,
                           sum_sq_grad, avg_sum, avg_from)
        if opt_code == SGD:
            if l2 > 0.0:
                factor = np.exp(cum[now - k - t0] - cum[now - t0])
                for l in range(n_labels):
                    params[j, l] = params[j, l] * factor
        elif opt_code == ADAGRAD:
            if l2 > 0.0:
                for l in range(n_labels):
                    eta = lr / (np.sqrt(sum_sq_grad[j, l]) + epsilon)
                    params[j, l] = params[j, l] / (1.0 + eta * l2) ** k
        elif opt_code == RMSPROP:
            f = rho**k
            f = f if f >= NEGLIGIBLE else 0.0
            for l in range(n_labels):
                second_moment[j, l] = f * second_moment[j, l]
        elif opt_code == ADADELTA:
            f = rho**k
            f = f if f >= NEGLIGIBLE else 0.0
            for l in range(n_labels):
                second_moment[j, l] = f * second_moment[j, l]
                avg_sq_update[j, l] = f * avg_sq_update[j, l]
        elif opt_code == ADAM:
            f1 = beta1**k
            f2 = beta2**k
            f1 = f1 if f1 >= NEGLIGIBLE else 0.0
            f2 = f2 if f2 >= NEGLIGIBLE else 0.0
            for l in range(n_labels):
                first_moment[j, l] = f1 * first_moment[j, l]
                second_moment[j, l] = f2 * second_moment[j, l]


@njit(**PARALLEL)
def flush_rows_parallel(n_rows, now, t0, cum, opt_code, lr, l2, params, sum_sq_grad, first_moment,
                        second_moment, avg_sq_update, info, beta1, beta2, rho, epsilon, kind, shrink_sums,
                        avg_sum, avg_from, n_chunks):
    """:func:`flush_rows` over ``n_chunks`` contiguous chunks of rows in parallel."""
    for c in prange(n_chunks):
        flush_rows((n_rows * c) // n_chunks, (n_rows * (c + 1)) // n_chunks, now, t0, cum, opt_code,
                   lr, l2, params, sum_sq_grad, first_moment, second_moment, avg_sq_update, info,
                   beta1, beta2, rho, epsilon, kind, shrink_sums, avg_sum, avg_from)


# --------------------------------------------------------------------------- per batch, per epoch


@njit(**NO_REFCOUNT)
def prepare_batch(indptr, indices, data, order, start, stop, t, t0, kind, cum, powers, opt_code, lr,
                  l2, beta1, beta2, rho, epsilon, params, sum_sq_grad, info, lazy, touched, missed,
                  decays, row_start, entry_row, entry_example, entry_value, upcoming, ahead, shrink_sums,
                  avg_sum, avg_from, average_gap):
    """Steps 1 and 2 of the batch ``order[start:stop]`` (step ``t``).

    1. Its distinct rows (``touched``; the bias last), each caught up to step ``t`` where L2
       moves its weights, with the decay of its state over the missed steps in ``decays``
       (folded into its step by :func:`apply_rows`). In dense mode every row is touched.
    2. Its entries laid out row by row, in example order (a stable counting sort): row ``s``'s
       entries are ``row_start[s] .. row_start[s + 1] - 1`` of ``entry_example`` (position in
       the batch) and ``entry_value``; the bias's entries are the examples, with value 1.

    Meanwhile the records of the next batch's rows (examples ``stop .. ahead - 1``) are
    prefetched and their rows listed in ``upcoming``. Returns ``(n_touched, n_upcoming)``.
    With averaging (``avg_sum`` has rows) a row's missed steps are added to its average: here,
    before its catch-up, when L2 shrinks its weights (:func:`average_missed`), else by
    :func:`apply_rows` before its step (``average_gap[s]`` missed steps; 0 for none).
    """
    n_labels = params.shape[1]
    n_rows = params.shape[0]
    bias = n_rows - 1
    n_ex = stop - start
    n_powers = powers.shape[1]
    base1 = beta1 if opt_code == ADAM else rho
    base2 = beta2 if opt_code == ADAM else rho
    averaging = avg_sum.shape[0] > 0
    n_up = 0
    for p in range(stop, ahead):
        i = order[p]
        for q in range(indptr[i], indptr[i + 1]):
            j = indices[q]
            prefetch(info, j, 0)
            upcoming[n_up] = j
            n_up += 1
    n_entries = 0
    if lazy:
        n_touched = 0
        for p in range(start, stop):
            i = order[p]
            for q in range(indptr[i], indptr[i + 1]):
                j = indices[q]
                last = info[j, LAST]
                if last >= 0:  # first entry of row j in this batch
                    k = t - last
                    s = n_touched
                    missed[s] = 0
                    average_gap[s] = 0
                    decays[0, s] = 1.0
                    decays[1, s] = 1.0
                    if k > 0:
                        if averaging and kind == CATCH_UP_WEIGHTS:  # before the L2 shrinkage below
                            average_missed(j, last, t, t0, kind, opt_code, cum, shrink_sums, lr, l2, epsilon,
                                           params, sum_sq_grad, avg_sum, avg_from)
                        elif averaging:  # the weights did not move: added by apply_rows, before the step
                            m = last if last > avg_from else avg_from
                            average_gap[s] = t - m if t > m else 0
                        if kind == CATCH_UP_STATE:
                            missed[s] = k
                            if k < n_powers:
                                decays[0, s] = powers[0, k]
                                decays[1, s] = powers[1, k]
                            else:
                                f1 = base1**k
                                f2 = base2**k
                                decays[0, s] = f1 if f1 >= NEGLIGIBLE else 0.0
                                decays[1, s] = f2 if f2 >= NEGLIGIBLE else 0.0
                        elif kind == CATCH_UP_WEIGHTS:  # before scoring: L2 shrinkage
                            if opt_code == SGD:
                                factor = np.exp(cum[last - t0] - cum[t - t0])
                                for l in range(n_labels):
                                    params[j, l] = params[j, l] * factor
                            else:
                                for l in range(n_labels):
                                    eta = lr / (np.sqrt(sum_sq_grad[j, l]) + epsilon)
                                    params[j, l] = params[j, l] / (1.0 + eta * l2) ** k
                    info[j, LAST] = -(s + 1)
                    touched[s] = j
                    row_start[s + 1] = 0
                    n_touched += 1
                else:
                    s = -last - 1
                entry_row[n_entries] = s
                row_start[s + 1] += 1
                n_entries += 1
        touched[n_touched] = bias
        missed[n_touched] = 0
        average_gap[n_touched] = 0
        decays[0, n_touched] = 1.0
        decays[1, n_touched] = 1.0
        bias_slot = n_touched
        n_touched += 1
    else:
        n_touched = n_rows
        for s in range(n_rows + 1):
            row_start[s] = 0
        for p in range(start, stop):
            i = order[p]
            for q in range(indptr[i], indptr[i + 1]):
                s = indices[q]
                entry_row[n_entries] = s
                row_start[s + 1] += 1
                n_entries += 1
        bias_slot = bias
    row_start[bias_slot + 1] = n_ex
    # 2. counting sort
    for s in range(n_touched):
        row_start[s + 1] += row_start[s]
    e = 0
    for p in range(start, stop):
        i = order[p]
        for q in range(indptr[i], indptr[i + 1]):
            s = entry_row[e]
            at = row_start[s]
            entry_example[at] = p - start
            entry_value[at] = data[q]
            row_start[s] = at + 1
            e += 1
    for r in range(n_ex):
        at = row_start[bias_slot]
        entry_example[at] = r
        entry_value[at] = 1.0
        row_start[bias_slot] = at + 1
    for s in range(n_touched, 0, -1):
        row_start[s] = row_start[s - 1]
    row_start[0] = 0
    return n_touched, n_up


@njit(**NO_REFCOUNT)
def epoch_kernel(indptr, indices, data, y, order, params, sum_sq_grad, first_moment,
                 second_moment, avg_sq_update, info, info_f, loss_code, opt_code, schedule_code,
                 lr0, decay, l2, beta1, beta2, rho, epsilon, batch_size, lazy, step, kind, cum,
                 powers, scores, dscores, example_loss, touched, missed, decays, row_start,
                 entry_row, entry_example, entry_value, upcoming, active, scratch, example_weight,
                 l1, l1_total, l1_applied, shifted_grad_sum, ftrl_beta, shrink_sums, avg_sum, avg_from,
                 average_gap, by_steps):
    """Run the batches of one epoch on this thread; see :mod:`lintext.engine.kernels`, which also
    allocates the work space and ends the epoch (flush). Returns ``(loss_sum, new_step, finite)``.
    ``l1_total[b]`` is the cumulative L1 penalty after the epoch's step ``b`` (empty: no L1);
    steps from ``avg_from`` on add their weights to ``avg_sum`` (no rows: no averaging), or, with
    ``by_steps``, their step-weighted changes (``ADD_STEPS``; missed steps then add nothing).

    Precondition: every ``last_step`` is at most ``step``, and a row with ``last_step < step``
    owes only the decay of a decaying rule (caught up on its next touch).
    """
    n = order.shape[0]
    n_batches = (n + batch_size - 1) // batch_size
    prefetching = upcoming.shape[0] > 0
    averaging = avg_sum.shape[0] > 0
    penalised = l1_total.shape[0] > 0
    gap_from = NO_STEP if by_steps else avg_from  # by steps, a missed step adds nothing
    loss_sum = 0.0
    for b in range(n_batches):
        t = step + b
        start = b * batch_size
        stop = min(n, start + batch_size)
        n_ex = stop - start
        lr = schedule_lr(schedule_code, lr0, decay, t)
        ahead = min(n, stop + batch_size) if prefetching else stop
        n_touched, n_up = prepare_batch(
            indptr, indices, data, order, start, stop, t, step, kind, cum, powers, opt_code, lr, l2,
            beta1, beta2, rho, epsilon, params, sum_sq_grad, info, lazy, touched, missed, decays,
            row_start, entry_row, entry_example, entry_value, upcoming, ahead, shrink_sums, avg_sum, gap_from,
            average_gap)
        score_examples(indptr, indices, data, y, order, start, start, stop, params, loss_code,
                       1.0 / n_ex, scores, dscores, example_loss, example_weight)
        total = 0.0  # the batch's losses in example order (as run_batch_threads sums them)
        for r in range(n_ex):
            total += example_loss[r]
            if not np.isfinite(example_loss[r]):  # stop at the first non-finite loss
                if lazy:  # the rows' state decay is still owed
                    for s in range(n_touched):
                        info[touched[s], LAST] = t - missed[s]
                    add_average_gaps(n_touched, touched, average_gap, params, avg_sum)
                return loss_sum + total, t + 1, False
        loss_sum += total
        n_active = active_labels(loss_code, opt_code, dscores, n_ex, active)
        mark = t + 1 if lazy else -1
        add_now = ADD_NOTHING
        if averaging and t >= avg_from and not penalised:  # with L1: after the penalty (average_rows)
            add_now = ADD_STEPS if by_steps else ADD_WEIGHTS
        apply_rows(0, n_touched, touched, decays[0], decays[1], row_start, entry_example, entry_value,
                   dscores, opt_code, lr, l2, params, sum_sq_grad, first_moment, second_moment,
                   avg_sq_update, info, info_f, beta1, beta2, rho, epsilon, mark,
                   scratch[0], scratch[1], upcoming, n_up, active, n_active, l1, shifted_grad_sum, ftrl_beta,
                   avg_sum, l1_applied, average_gap, add_now)
        if penalised:
            penalise_rows(n_touched, touched, l1_total[b], l1_applied, params, info_f)
            if averaging and t >= avg_from:
                average_rows(n_touched, touched, params, avg_sum)
    return loss_sum, step + n_batches, True


@njit(**FAST)
def run_batch_threads(b, indptr, indices, data, y, order, params, sum_sq_grad, first_moment,
                      second_moment, avg_sq_update, info, info_f, loss_code, opt_code, schedule_code,
                      lr0, decay, l2, beta1, beta2, rho, epsilon, batch_size, lazy, step, kind, cum,
                      powers, scores, dscores, example_loss, touched, missed, decays, row_start,
                      entry_row, entry_example, entry_value, upcoming, active, example_weight, l1,
                      l1_total, l1_applied, shifted_grad_sum, ftrl_beta, shrink_sums, avg_sum, avg_from,
                      average_gap, by_steps, n_threads):
    """Batch ``b`` of :func:`epoch_kernel`, with its scoring split over its examples and its
    update over its rows on ``n_threads`` threads (the same results, bit for bit). Returns
    ``(loss_sum, finite)``."""
    n = order.shape[0]
    t = step + b
    start = b * batch_size
    stop = min(n, start + batch_size)
    n_ex = stop - start
    lr = schedule_lr(schedule_code, lr0, decay, t)
    gap_from = NO_STEP if by_steps else avg_from  # by steps, a missed step adds nothing
    n_touched, _ = prepare_batch(
        indptr, indices, data, order, start, stop, t, step, kind, cum, powers, opt_code, lr, l2, beta1,
        beta2, rho, epsilon, params, sum_sq_grad, info, lazy, touched, missed, decays, row_start,
        entry_row, entry_example, entry_value, upcoming, stop, shrink_sums, avg_sum, gap_from, average_gap)
    score_examples_parallel(indptr, indices, data, y, order, start, stop, params, loss_code,
                            1.0 / n_ex, scores, dscores, example_loss, example_weight, min(n_ex, 4 * n_threads))
    total = 0.0
    for r in range(n_ex):
        total += example_loss[r]
        if not np.isfinite(example_loss[r]):
            if lazy:
                for s in range(n_touched):
                    info[touched[s], LAST] = t - missed[s]
                add_average_gaps(n_touched, touched, average_gap, params, avg_sum)
            return total, False
    n_active = active_labels(loss_code, opt_code, dscores, n_ex, active)
    mark = t + 1 if lazy else -1
    penalised = l1_total.shape[0] > 0
    add_now = ADD_NOTHING
    if avg_sum.shape[0] > 0 and t >= avg_from and not penalised:  # with L1: after the penalty (average_rows)
        add_now = ADD_STEPS if by_steps else ADD_WEIGHTS
    apply_rows_parallel(n_touched, touched, decays[0], decays[1], row_start, entry_example,
                        entry_value, dscores, opt_code, lr, l2, params, sum_sq_grad, first_moment,
                        second_moment, avg_sq_update, info, info_f, beta1, beta2, rho, epsilon,
                        mark, active, n_active, l1, shifted_grad_sum, ftrl_beta, avg_sum, average_gap, add_now,
                        min(n_touched, 8 * n_threads))
    if penalised:
        penalise_rows(n_touched, touched, l1_total[b], l1_applied, params, info_f)
        if avg_sum.shape[0] > 0 and t >= avg_from:
            average_rows(n_touched, touched, params, avg_sum)
    return total, True


# --------------------------------------------------------------------------- prediction, checks


@njit(**NO_REFCOUNT)
def score_rows(lo, hi, indptr, indices, data, params, out):
    """``out[i] = b + x_i @ W`` for rows ``lo .. hi-1`` (float64 sums, CSR order)."""
    n_labels = params.shape[1]
    bias = params.shape[0] - 1
    for i in range(lo, hi):
        for l in range(n_labels):
            out[i, l] = params[bias, l]
        for q in range(indptr[i], indptr[i + 1]):
            j = indices[q]
            x = data[q] * 1.0
            for l in range(n_labels):
                out[i, l] += x * params[j, l]


@njit(**PARALLEL)
def score_rows_parallel(indptr, indices, data, params, out, n_chunks):
    """:func:`score_rows` over ``n_chunks`` contiguous chunks of rows in parallel."""
    n = out.shape[0]
    for c in prange(n_chunks):
        score_rows((n * c) // n_chunks, (n * (c + 1)) // n_chunks, indptr, indices, data, params, out)


@njit(**NO_REFCOUNT)
def all_finite(a):
    """True when every element of the 2-D array ``a`` is finite."""
    for i in range(a.shape[0]):
        for l in range(a.shape[1]):
            if not np.isfinite(a[i, l]):
                return False
    return True
