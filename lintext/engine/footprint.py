"""How much memory a training run takes, estimated before anything is allocated.

A run keeps, per row of the weights (features plus the bias) and label: the weights, the
rule's state arrays (:data:`lintext.engine.optimizers.OPTIMIZERS` names them: none for SGD,
one for AdaGrad, two for Adam), and a copy of the best epoch's weights when it stops early,
all in the training precision; per row a bookkeeping record of 64 bytes; and afterwards one
float64 copy of the weights for evaluation and the report. L-BFGS (SciPy's L-BFGS-B with
its default memory of 10 pairs) keeps about 30 float64 vectors of the weights' size.
These are estimates (within about a copy of the weights), meant to refuse requests that
cannot fit long before they would exhaust the machine, not to budget memory to the byte.
"""

from __future__ import annotations

import numpy as np

from .options import TrainOptions

LBFGS_VECTORS = 30
ROW_RECORD_BYTES = 64


def training_bytes(n_features: int, n_labels: int, options: TrainOptions) -> int:
    """Bytes a training run with these options allocates for ``n_features`` columns and ``n_labels`` labels."""
    cells = (int(n_features) + 1) * int(n_labels)
    if options.optimizer == "lbfgs":
        return cells * 8 * LBFGS_VECTORS
    item = np.dtype(options.precision).itemsize
    arrays = 2 + len(options.spec.state_arrays)  # weights, best-epoch copy, the rule's state
    return cells * item * arrays + (int(n_features) + 1) * ROW_RECORD_BYTES + cells * 8


def describe(n_features: int, n_labels: int, options: TrainOptions) -> str:
    """What the estimate covers, in words: ``"weights and adagrad state of 1,048,577 rows x 3 labels (float64)"``."""
    state = "state" if options.spec.state_arrays or options.optimizer == "lbfgs" else ""
    what = f"weights and {options.optimizer} {state}".strip() if state else "weights"
    return f"{what} of {int(n_features) + 1:,} rows x {int(n_labels):,} labels ({options.precision})"


HASHING_BYTES_PER_COLUMN = 32  # the featurizer's per-column arrays while it fits a hashed space


def check_fits(n_features: int, n_labels: int, options: TrainOptions, hash_space: int | None = None, source="",
               workers: int = 1, featurizing: bool = False) -> None:
    """Refuse, before allocating, a training run (or ``workers`` of them) that cannot fit in memory.

    With a hashed space the error names ``--hash-space`` (a ConfigError); otherwise it names
    the data (an InputError: many labels times many features). ``featurizing`` adds what the
    featurizer needs to fit a hashed space of ``n_features`` columns.
    """
    from ..errors import ConfigError, InputError
    from ..resources import memory_shortfall, size_text

    need = training_bytes(n_features, n_labels, options) * max(1, workers)
    if featurizing:
        need += int(n_features) * HASHING_BYTES_PER_COLUMN
    available = memory_shortfall(need)
    if available is None:
        return
    runs = f"{workers} runs at once, each " if workers > 1 else ""
    problem = (f"training ({runs}{describe(n_features, n_labels, options)}) needs about {size_text(need)} "
               f"but {size_text(available)} of memory is available")
    cheaper = "" if options.precision == "float32" else " or --precision float32"
    if hash_space is not None:
        raise ConfigError("--hash-space", hash_space, f"{problem}; use a smaller --hash-space{cheaper}")
    raise InputError(source, f"{int(n_labels):,} labels x {int(n_features):,} features: {problem}; "
                             f"use --max-features or a larger --min-df{cheaper}")


def workers_that_fit(requested: int, n_features: int, n_labels: int, options: TrainOptions) -> int:
    """How many runs of this size can train at once in the memory available (at least 1, at most ``requested``)."""
    from ..resources import available_memory

    available = available_memory()
    per_run = max(1, training_bytes(n_features, n_labels, options))
    if available is None:
        return requested
    return max(1, min(requested, available // per_run))
