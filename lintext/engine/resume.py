"""Stopping a run after some epochs and going on with it later, bit for bit as if it had not stopped.

Successive halving (:mod:`lintext.tuning.halving`) trains every configuration for a few epochs and
gives the best ones more: a run that goes on continues from a :func:`snapshot` of its epoch loop
taken at the end of its budget (before the end-of-run flush of the optimizer state, which would
change the rounding of later catch-ups): weights, optimizer state, the shuffling generator's state,
the learning rate, the cumulative L1 penalty and the iterate averages, the early-stopping monitor, the best epoch's weights, the history
and the epochs' objectives (for the divergence checks). Restored by
:func:`restore`, the epochs that follow are those of an uninterrupted run with the same options.
"""

from __future__ import annotations

import numpy as np

from .state import STATE_ARRAY_NAMES, KernelState


def snapshot(params, state: KernelState, rng, lr, monitor, best_params, best_epoch, history, reference_loss,
             last_lr, objectives) -> dict:
    """Copies of everything the epoch loop carries from one epoch to the next."""
    return {
        "params": params.copy(), "state": {name: getattr(state, name).copy() for name in STATE_ARRAY_NAMES + ("info",)},
        "averaged": {name: getattr(state, name).copy() for name in ("l1_applied", "avg_sum")},
        "l1_total": float(state.l1_total), "step": int(state.step), "pending": bool(state.pending),
        "average_steps": bool(state.average_steps), "rng": rng.bit_generator.state, "lr": lr,
        "monitor": (monitor.best, monitor.since_best), "best_params": None if best_params is None else best_params.copy(),
        "best_epoch": best_epoch, "history": [dict(row) for row in history], "reference_loss": reference_loss,
        "last_lr": last_lr, "objectives": list(objectives),
    }


def restore(checkpoint: dict, params, state: KernelState, rng, monitor):
    """Put a :func:`snapshot` back into freshly made ``params``, ``state``, ``rng`` and ``monitor`` (in place);
    returns ``(lr, best_params, best_epoch, history, reference_loss, last_lr, objectives)`` (``objectives``: each
    epoch's train loss plus penalty, which the divergence checks read)."""
    np.copyto(params, checkpoint["params"])
    for name, array in {**checkpoint["state"], **checkpoint["averaged"]}.items():
        np.copyto(getattr(state, name), array)  # into the fresh, cache-aligned arrays
    state.l1_total = checkpoint["l1_total"]
    state.step, state.pending, state.average_steps = checkpoint["step"], checkpoint["pending"], checkpoint["average_steps"]
    rng.bit_generator.state = checkpoint["rng"]
    monitor.best, monitor.since_best = checkpoint["monitor"]
    best = checkpoint["best_params"]
    return (checkpoint["lr"], None if best is None else best.copy(), checkpoint["best_epoch"],
            [dict(row) for row in checkpoint["history"]], checkpoint["reference_loss"], checkpoint["last_lr"],
            list(checkpoint["objectives"]))
