"""Step-size schedules: a function of the step count, the readable specification.

The compiled kernels receive a schedule as an integer code plus numbers
(:func:`lintext.engine.compiled.schedule_lr` is the compiled twin of
:func:`schedule_learning_rate`); a test checks that both agree. Names are spelled as the
command line takes them (``--schedule inverse-sqrt``) and as files and pages show them.
"""

from __future__ import annotations

import math

# Integer codes shared with the kernels (frozen: the kernels' cache does not see them change).
SCHEDULE_CONSTANT = 0
SCHEDULE_INVERSE = 1
SCHEDULE_INVERSE_SQRT = 2
SCHEDULE_PLATEAU = 3
SCHEDULE_CODES = {"constant": SCHEDULE_CONSTANT, "inverse": SCHEDULE_INVERSE,
                  "inverse-sqrt": SCHEDULE_INVERSE_SQRT, "plateau": SCHEDULE_PLATEAU}
# Schedules that change the step size within an epoch: plain SGD only (the adaptive rules'
# closed-form catch-up assumes a step size constant within an epoch).
WITHIN_EPOCH = ("inverse", "inverse-sqrt")


def constant(lr0: float, decay: float, step: int) -> float:
    """Constant step size ``eta_t = lr0``."""
    return lr0


def inverse(lr0: float, decay: float, step: int) -> float:
    """``eta_t = lr0 / (1 + decay * t)`` (the 1/t schedule; plain SGD only)."""
    return lr0 / (1.0 + decay * step)


def inverse_sqrt(lr0: float, decay: float, step: int) -> float:
    """``eta_t = lr0 / sqrt(1 + decay * t)`` (the 1/sqrt(t) schedule; plain SGD only)."""
    return lr0 / math.sqrt(1.0 + decay * step)


def plateau(lr0: float, decay: float, step: int) -> float:
    """Constant within an epoch; the trainer multiplies ``lr0`` by a factor between epochs
    when the monitored metric did not improve (see :func:`plateau_update`)."""
    return lr0


SCHEDULES = {SCHEDULE_CONSTANT: constant, SCHEDULE_INVERSE: inverse, SCHEDULE_INVERSE_SQRT: inverse_sqrt,
             SCHEDULE_PLATEAU: plateau}


def schedule_learning_rate(schedule: str | int, lr0: float, decay: float, step: int) -> float:
    """Step size of global step ``step`` (0 for the first step) under ``schedule``.

    Parameters
    ----------
    schedule : {"constant", "inverse", "inverse-sqrt", "plateau"} or int code
    lr0 : float
        Base learning rate.
    decay : float
        Decay per step of the inverse schedules.
    step : int
        Number of steps taken before this one.
    """
    code = SCHEDULE_CODES[schedule] if isinstance(schedule, str) else int(schedule)
    return SCHEDULES[code](lr0, decay, step)


def plateau_update(lr: float, improved: bool, factor: float) -> float:
    """Learning rate of the next epoch under decay-on-plateau: ``lr * factor`` unless improved."""
    return lr if improved else lr * factor
