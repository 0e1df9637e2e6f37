"""The stratified, seeded dev split of a corpus: one draw, on label ids, for the split in memory
(:func:`split_dev`) and the one a feature store makes while streaming (:func:`dev_mask`)."""

from __future__ import annotations

import numpy as np

from ..errors import ConfigError, InputError
from .readers import Corpus


def dev_mask(label_ids: np.ndarray, names: list[str], fraction: float, seed: int, path) -> np.ndarray:
    """Boolean mask of the dev rows, given each row's label as an index into ``names`` (-1 for none).

    Label by label in the order of ``names``, ``round(fraction * count)`` of its rows go to dev, at
    least one and at most all but one, the first of one ``rng.permutation`` of them (``rng`` seeded by
    ``seed``, shared by the labels in turn). ``path`` names the data in errors.
    """
    if not 0.0 < fraction < 1.0:
        raise ConfigError("--dev-fraction", fraction, "must be between 0 and 1 (exclusive)")
    rng = np.random.default_rng(seed)
    label_ids = np.asarray(label_ids)
    dev = np.zeros(len(label_ids), dtype=bool)
    for k, name in enumerate(names):
        members = np.flatnonzero(label_ids == k)
        if len(members) < 2:
            raise InputError(path, f"label {name!r} has only {len(members)} document(s); a stratified dev split needs "
                                   "at least 2 per label (add documents or give --dev FILE)")
        take = min(max(1, int(round(fraction * len(members)))), len(members) - 1)
        dev[rng.permutation(members)[:take]] = True
    return dev


def split_dev(corpus: Corpus, fraction: float = 0.1, seed: int = 0) -> tuple[Corpus, Corpus]:
    """Stratified, seeded split into (train, dev), each in the corpus's order (:func:`dev_mask`)."""
    code = {name: k for k, name in enumerate(corpus.label_names)}
    dev = dev_mask(np.array([code.get(label, -1) for label in corpus.labels], dtype=np.int64), corpus.label_names,
                   fraction, seed, corpus.path)
    return corpus.subset(np.flatnonzero(~dev).tolist()), corpus.subset(np.flatnonzero(dev).tolist())
