"""The stratified, seeded dev split of a corpus."""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError, InputError
from .readers import Corpus


def split_dev(corpus: Corpus, fraction: float = 0.1, seed: int = 0) -> tuple[Corpus, Corpus]:
    """Stratified, seeded split into (train, dev).

    Each label gives ``round(fraction * count)`` documents to dev, at least one,
    and keeps at least one for training.
    """
    if not 0.0 < fraction < 1.0:
        raise ConfigError("--dev-fraction", fraction, "must be between 0 and 1 (exclusive)")
    rng = np.random.default_rng(seed)
    labels = np.array(corpus.labels, dtype=object)
    dev_index: list[int] = []
    for name in corpus.label_names:
        members = np.flatnonzero(labels == name)
        if len(members) < 2:
            raise InputError(
                corpus.path,
                f"label {name!r} has only {len(members)} document(s); a stratified dev split needs at least 2 "
                "per label (add documents or give --dev FILE)",
            )
        take = min(max(1, int(round(fraction * len(members)))), len(members) - 1)
        dev_index.extend(rng.permutation(members)[:take].tolist())
    dev_set = set(dev_index)
    train_index = [i for i in range(len(corpus)) if i not in dev_set]
    return corpus.subset(train_index), corpus.subset(sorted(dev_index))
