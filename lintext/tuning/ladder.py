"""The learning-rate probe's ladder and how it is read: the rules and constants of the method.

The method is the "LR range test" of L. N. Smith, "Cyclical Learning Rates for Training
Neural Networks" (WACV 2017, arXiv:1506.01186), section 3.3: one short run in which the
learning rate grows from too small to too large, read off where the loss stops improving.
Smith takes that rate as the upper bound of the useful range and sets the lower bound to
"1/3 or 1/4" of it; lintext suggests that lower bound as a constant learning rate.
:mod:`lintext.tuning.probe` climbs the ladder; this module says what the ladder is and what
its rungs mean (no engine, no data, not even NumPy: the command line reads its defaults
from here without slowing its start).

* **Rungs.** The rates ``10 ** (j / 4)`` (``..., 0.1, 0.178, 0.316, 0.562, 1, 1.78, ...``)
  from the lowest rate up to the highest, both rounded into the ladder (to a rung within 1 %,
  so that rungs written to three digits are found, else inwards). One run climbs them
  in order, weights and optimizer state carried from rung to rung.
* **Scoring.** A rung runs a fixed number of steps at its rate; its score is the mean of
  its minibatch losses, each taken before its batch's update, with the standard error of
  that mean. The steps run in up to 10 blocks of near-equal length (:data:`BLOCKS_PER_RUNG`,
  one call into the compiled kernel each), and the standard error is the spread of the block
  means over the square root of their number. No moving average: nothing lags, so nothing
  needs correcting.
* **Stop.** The climb stops at the first rung whose mean loss is above the loss of the
  untrained (all-zero) model, ``ln K`` for softmax over ``K`` labels and 1 for the hinge, or
  whose loss is not finite: training at that rate has undone all it learned, the meaning
  training gives to divergence.
* **Reading** (:func:`read_ladder`). The *upper bound* is the rung with the lowest mean loss,
  provided the loss fell to it (it is below the first rung's by more than twice their
  combined standard error) and rose after it (the climb stopped, or a later rung is above it
  by more than twice their combined standard error). The *suggested rate* is two rungs below
  it: the upper bound divided by ``10 ** (2 / 4) = 3.16``, Smith's "1/3 or 1/4".
* **Verdicts.** ``suggested``; ``still-falling`` when the loss fell and was lowest at the
  highest rate tried, and ``level-at-top`` when it was lowest earlier but had not risen
  beyond its noise by the highest rate (no suggestion for either: the upper bound may lie
  above the ladder, so raise the highest rate); ``never-fell`` when the loss did not fall
  below its first rung's (too few steps per rung for the loss to move at these rates, or a
  ladder that starts too high).

Where each constant comes from
------------------------------
* 4 rungs per decade (:data:`RUNGS_PER_DECADE`): derived. It is the coarsest ladder in which
  a whole number of rungs spans Smith's factor of 3 to 4 (two rungs: 3.16; with 3 per decade
  one rung is 2.15 and two are 4.64), so the suggestion is itself a rung that was tried.
* The suggestion two rungs below the upper bound (:data:`RUNGS_BELOW_UPPER`): Smith 2017,
  section 3.3.
* Twice the standard error (:data:`NOISE_MULTIPLE`): common practice for "more than noise"
  (about 95 % one-sided under a normal approximation; the step losses of a rung are not
  independent, so it is a rule of thumb, not a test).
* 10 blocks per rung (:data:`BLOCKS_PER_RUNG`): a compromise, measured. For SGD and AdaGrad
  a call into the kernel costs time in proportion to the number of feature columns (about
  10 ms at 2^20 hashed columns), so one call per step made the default probe 4.1 times
  slower than 10 blocks of 4 steps (10.7 s against 2.6 s, demo corpus hashed into 2^20
  columns; Adam 1.6 times); 9 degrees of freedom still estimate the standard error to
  about 25 %.
* The stop at the untrained model's loss: derived from what the loss means (above it, the run
  would do better by not training); there is no factor to choose.
* 40 steps per rung (:data:`DEFAULT_STEPS_PER_RUNG`): measured (``scripts/bench_probe.py``).
  On the demo corpus, fortunes and a synthetic corpus, for sgd, adagrad and adam (batch size
  8, 5 seeds each), 40 steps gave the upper bound that moved least between seeds (0.9 rungs
  on average, against 1.2 to 1.9 for 10, 20, 30, 60 and 80 steps) and the suggestions whose
  full runs came nearest the best dev loss of a full sweep (median 4.9 % above it, against
  6.3 to 9.5 %).
* Lowest rate 1e-4 and highest rate 1e3 (:data:`DEFAULT_LOWEST_RATE`,
  :data:`DEFAULT_HIGHEST_RATE`): measured. On those corpora every rule's first rung at 1e-4
  was within 0.1 % of the untrained loss, and every climb stopped by 100; rungs above the
  stop cost nothing.

Caveat: the probe measures how fast training makes progress over a few hundred steps, not
which rate generalises best after many epochs. On the corpora above a full run at the
suggestion came within 6.3 % of a full sweep's best dev loss for sgd, but up to 50 % above it
for adagrad and 26 % for adam, which do best over many epochs with smaller steps (README,
"Finding a learning rate"). Take the suggestion as the top of a sweep's range: the four-run
sweep that :func:`lintext.tuning.probe.advice` proposes (four and two rungs below the
suggestion, the suggestion, the upper bound) came within 3.2 % of the best in every case.
"""

from __future__ import annotations

import math

RUNGS_PER_DECADE = 4
RUNGS_BELOW_UPPER = 2
NOISE_MULTIPLE = 2.0
DEFAULT_STEPS_PER_RUNG = 40
DEFAULT_LOWEST_RATE = 1e-4
DEFAULT_HIGHEST_RATE = 1e3
MAX_STEPS_PER_RUNG = 1_000_000
BLOCKS_PER_RUNG = 10
RUNG_SLACK = 0.01  # a rate within 1 % of a rung is that rung: rungs written to three digits
METHOD = "LR range test: L. N. Smith, Cyclical Learning Rates for Training Neural Networks, WACV 2017, section 3.3"
VERDICTS = ("suggested", "still-falling", "level-at-top", "never-fell")
STOPS = ("mean-loss-above-untrained", "loss-not-finite", "highest-rate-reached")


def ladder_index(rate: float) -> int:
    """The ``j`` of the ladder rate ``10 ** (j / RUNGS_PER_DECADE)`` nearest to ``rate``."""
    return round(RUNGS_PER_DECADE * math.log10(rate))


def ladder_rate(index: int) -> float:
    """The ladder rate ``10 ** (index / RUNGS_PER_DECADE)``."""
    return float(10.0 ** (index / RUNGS_PER_DECADE))


def ladder(lowest_rate: float, highest_rate: float):
    """The ladder's rates from ``lowest_rate`` to ``highest_rate``, each end rounded into the ladder:
    to a rung within 1 % (so ``5.62`` typed for ``10 ** (3/4) = 5.6234`` is that rung), else inwards."""
    slack = RUNGS_PER_DECADE * math.log10(1 + RUNG_SLACK)
    first = math.ceil(RUNGS_PER_DECADE * math.log10(lowest_rate) - slack)
    last = math.floor(RUNGS_PER_DECADE * math.log10(highest_rate) + slack)
    import numpy as np

    return np.array([ladder_rate(j) for j in range(first, last + 1)])


def suggestion_below(upper_bound: float) -> float:
    """The suggested rate for an upper bound: :data:`RUNGS_BELOW_UPPER` rungs below it."""
    return ladder_rate(ladder_index(upper_bound) - RUNGS_BELOW_UPPER)


def read_ladder(means, errors, stopped: bool) -> tuple[str, int | None]:
    """The verdict and the rung with the lowest mean loss (the upper bound when the verdict is ``suggested``).

    Parameters
    ----------
    means, errors : sequences of float
        Each rung's mean loss and its standard error, in climbing order.
    stopped : bool
        The last rung ended the climb (its mean loss above the untrained model's, or not
        finite); it is then no candidate, and it counts as the rise.

    Returns
    -------
    verdict : one of :data:`VERDICTS`
    lowest : int or None
        Index of the rung with the lowest mean loss among the candidates (None when there is none).
    """
    means, errors = [float(m) for m in means], [float(e) for e in errors]
    usable = len(means) - 1 if stopped else len(means)
    if usable < 1:
        return "never-fell", None
    low = min(range(usable), key=means.__getitem__)  # the first of equal lowest, as numpy.argmin

    def above(j: int, i: int) -> bool:
        return bool(means[j] - means[i] > NOISE_MULTIPLE * math.hypot(errors[j], errors[i]))

    if not above(0, low):
        return "never-fell", low
    if stopped or any(above(j, low) for j in range(low + 1, usable)):
        return "suggested", low
    return ("still-falling" if low == usable - 1 else "level-at-top"), low
