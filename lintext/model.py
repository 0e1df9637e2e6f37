"""Model: a fitted featurizer plus weights, and the model directory on disk.

A model directory holds

- ``model.json``: format version, lintext version, ``labels`` in the column
  order of the weights, featurizer state, training options, metrics, history;
- ``weights.npz``: float arrays ``coef`` (features x labels; float32 unless saved with
  ``precision="float64"``) and ``intercept`` (labels, float64), read with ``allow_pickle=False``;
- ``vocabulary.tsv``: feature, column index, document frequency in training;
- ``feature_stats.npz`` (when trained by lintext's engine): per-feature update
  statistics for the report, read only when something asks for them (prediction does not).

``model.json`` may hold a ``calibration`` section (a temperature fitted on the dev set, see
:mod:`lintext.confidence`); models written without one still load, and their probabilities
are the plain softmax of the scores.

It is written to a temporary directory beside the target and renamed into
place, so a failure or an interrupt never leaves half a model behind and never
changes a model already at that path.
"""

from __future__ import annotations

import functools
import json
import os
from pathlib import Path
from typing import Callable

import numpy as np

from . import __version__
from .arrays import read_npz
from .confidence import probabilities as scaled_softmax
from .errors import LinTextError, ModelFileError
from .engine.options import upgrade_training_json
from .files import atomic_directory, json_text
from .model_check import check_model_json
from .model_tables import CONFUSION_FILE, join_confusions, split_confusions
from .text.featurizer import Featurizer

FORMAT_VERSION = 1
STAT_NAMES = ("update_count", "abs_update_sum", "effective_step")
WEIGHT_PRECISIONS = ("float32", "float64")


def stored_weights(coef, precision: str = "float32") -> np.ndarray:
    """``coef`` in the precision a model directory keeps (float32 by default: half the size,
    and float32's 7 significant digits are far below the noise of a stochastic fit)."""
    if precision not in WEIGHT_PRECISIONS:
        raise LinTextError(f"weight precision must be one of {', '.join(WEIGHT_PRECISIONS)}, not {precision!r}")
    return np.ascontiguousarray(coef, dtype=np.dtype(precision))


class Model:
    """A trained linear text classifier.

    Parameters
    ----------
    featurizer : fitted :class:`~lintext.features.Featurizer`.
    coef : array (n_features, n_labels).
    intercept : array (n_labels,).
    labels : label names in the column order of ``coef``.
    loss : ``softmax`` or ``hinge``.
    info : everything else kept in ``model.json`` (training options, metrics,
        history, best epoch, data description).
    feature_stats : optional per-feature update statistics (arrays of n_features).
    calibration : optional ``model.json`` ``calibration`` section: ``{"method": "temperature",
        "temperature": T, ...}`` (see :func:`lintext.confidence.calibration_record`).
    """

    def __init__(self, featurizer, coef, intercept, labels, loss="softmax", info=None, feature_stats=None,
                 calibration=None):
        self.featurizer = featurizer
        self.coef = np.ascontiguousarray(coef)
        self.intercept = np.asarray(intercept)
        self.labels = list(labels)
        self.loss = loss
        self.info = dict(info or {})
        self._feature_stats = feature_stats  # a dict, None, or a callable reading them on first use
        self.calibration = calibration

    @property
    def feature_stats(self) -> dict | None:
        """Per-feature update statistics (``None`` when the model has none); read on first use."""
        if callable(self._feature_stats):
            self._feature_stats = self._feature_stats()
        return self._feature_stats

    @feature_stats.setter
    def feature_stats(self, value) -> None:
        self._feature_stats = value

    # ------------------------------------------------------------ prediction

    def scores(self, texts) -> np.ndarray:
        """Scores ``X @ coef + intercept``, one row per text, one column per label."""
        return self.matrix_scores(self.featurizer.transform(texts))

    def matrix_scores(self, X) -> np.ndarray:
        """Scores of an already featurized matrix, computed in float64 from the stored
        weights (a feature store's shard, too).

        Only the rows of ``coef`` for features present in ``X`` are read (and widened to
        float64): a few texts cost little whatever the size of the model.
        """
        import scipy.sparse as sp  # here: loading a model (and writing its report) needs no SciPy

        X = sp.csr_matrix(X)
        used = np.unique(X.indices)
        part = np.asarray(self.coef[used], dtype=np.float64)
        compact = sp.csr_matrix((X.data, np.searchsorted(used, X.indices), X.indptr), shape=(X.shape[0], len(used)))
        return np.asarray(compact @ part) + np.asarray(self.intercept, dtype=np.float64)

    def classify(self, texts) -> list[str]:
        """The label of each text (the one with the highest score)."""
        scores = self.scores(texts)
        return [self.labels[j] for j in scores.argmax(axis=1)]

    @property
    def temperature(self) -> float | None:
        """The fitted temperature, or ``None`` when the model has no calibration."""
        return None if self.calibration is None else float(self.calibration["temperature"])

    @property
    def has_probabilities(self) -> bool:
        """A softmax model always has probabilities; a hinge model once it is calibrated."""
        return self.loss == "softmax" or self.calibration is not None

    def probabilities(self, texts) -> np.ndarray:
        """Probabilities, one row per text: ``softmax(scores / T)`` with the fitted temperature
        (``T = 1`` for a softmax model without calibration; an uncalibrated hinge model has none)."""
        return self.probabilities_of(self.scores(texts))

    def probabilities_of(self, scores: np.ndarray) -> np.ndarray:
        """:meth:`probabilities` from scores already computed."""
        if not self.has_probabilities:
            raise LinTextError(f"a {self.loss}-loss model without calibration gives scores, not probabilities; use scores()")
        return softmax(scores) if self.calibration is None else scaled_softmax(scores, self.temperature)

    # ------------------------------------------------------------ persistence

    def to_json(self) -> dict:
        return {
            "format_version": FORMAT_VERSION,
            "lintext_version": __version__,
            "labels": self.labels,
            "loss": self.loss,
            "n_features": int(self.coef.shape[0]),
            "featurizer": self.featurizer.to_json(),
            **self.info,
            **({"calibration": self.calibration} if self.calibration is not None else {}),
        }

    def save(self, path: str | os.PathLike, extra: Callable[[Path], None] | None = None, force: bool = False,
             precision: str = "float32") -> Path:
        """Write the model directory atomically; ``extra(tmpdir)`` may add files before the rename.

        An existing ``path`` is replaced only when it is a lintext model directory holding no
        file lintext did not write (or an empty folder), unless ``force``
        (:func:`lintext.outputs.check_output_folder`); otherwise OutputError. ``precision``: of
        ``coef`` in ``weights.npz`` (float32 by default; models from :func:`lintext.build_model`
        already hold float32 weights, so what is saved is what was evaluated).
        """
        coef = stored_weights(self.coef, precision)
        if not np.isfinite(coef).all() or not np.isfinite(self.intercept).all():
            raise LinTextError("refusing to save a model with non-finite weights")
        target = Path(path)
        return atomic_directory(target, lambda tmp: (self._write(tmp, coef), extra and extra(tmp)), kind="model",
                                force=force)

    def _write(self, folder: Path, coef) -> None:
        try:
            meta, tables = split_confusions(self.to_json())  # large tables go beside model.json
            (folder / "model.json").write_bytes(json_text(meta).encode("utf-8"))
            self.featurizer.save_vocabulary(folder / "vocabulary.tsv")
        except UnicodeEncodeError as exc:  # only from texts given to the Python API: the readers refuse them
            raise LinTextError(f"cannot write the model: {exc.object[exc.start:exc.end]!r} is a lone surrogate, "
                               "not text; remove it from the training texts or labels") from None
        if tables:
            np.savez(folder / CONFUSION_FILE, **tables)
        np.savez(folder / "weights.npz", coef=coef, intercept=np.asarray(self.intercept, dtype=np.float64))
        if self.feature_stats is not None:
            np.savez(folder / "feature_stats.npz", **{k: np.asarray(self.feature_stats[k]) for k in STAT_NAMES})

    @classmethod
    def load(cls, path: str | os.PathLike) -> "Model":
        """Read and validate a model directory; a wrong field, shape or dtype raises ModelFileError.

        Every field of ``model.json`` is checked by type and range first
        (:mod:`lintext.model_check`), array headers and sizes before the arrays are read
        (:mod:`lintext.arrays`), and weights whose scores would overflow are refused.
        """
        folder = Path(path)
        if not folder.is_dir():
            raise ModelFileError(folder, "no such model directory")
        meta = _read_json(folder / "model.json")
        check_model_json(meta, folder / "model.json", FORMAT_VERSION)
        version = meta["format_version"]
        if version > FORMAT_VERSION:
            raise ModelFileError(
                folder / "model.json",
                f"model format version {version} is newer than this lintext ({__version__}) reads ({FORMAT_VERSION}); upgrade lintext",
            )
        labels, loss = meta["labels"], meta["loss"]  # checked by check_model_json, as is every field read below
        try:
            featurizer = Featurizer.load(meta["featurizer"], folder / "vocabulary.tsv")
        except ModelFileError:
            raise  # it names vocabulary.tsv and the line
        except LinTextError as exc:
            raise ModelFileError(folder / "model.json", f"field 'featurizer': {exc}") from None
        n_features, n_labels = featurizer.n_features, len(labels)
        if meta.get("n_features", n_features) != n_features:
            raise ModelFileError(folder / "model.json", f"field 'n_features' is {meta['n_features']} but the "
                                                        f"featurizer has {n_features} columns")
        arrays = _read_npz(folder / "weights.npz", {"coef": (n_features, n_labels), "intercept": (n_labels,)})
        _check_scores_are_finite(folder / "weights.npz", arrays["coef"], arrays["intercept"])
        stats = None
        if (folder / "feature_stats.npz").exists():  # read when the report asks, not for prediction
            stats = functools.partial(_read_npz, folder / "feature_stats.npz", {k: (n_features,) for k in STAT_NAMES},
                                      finite=False, kinds="fi")
        calibration = _check_calibration(folder / "model.json", meta.get("calibration"))
        info = {k: v for k, v in meta.items()
                if k not in {"format_version", "lintext_version", "labels", "loss", "featurizer", "n_features", "calibration"}}
        if isinstance(info.get("training"), dict):
            info["training"] = upgrade_training_json(info["training"])
        join_confusions(folder, info, n_labels)
        model = cls(featurizer, arrays["coef"], arrays["intercept"], labels, loss, info, stats, calibration)
        model.path = folder  # named by errors about the directory
        return model


def softmax(scores: np.ndarray) -> np.ndarray:
    z = scores - scores.max(axis=1, keepdims=True)
    np.exp(z, out=z)
    z /= z.sum(axis=1, keepdims=True)
    return z


def open_model(path: str | os.PathLike) -> Model:
    """Read a model directory written by :meth:`Model.save` (validated; no code is executed)."""
    return Model.load(path)


# ---------------------------------------------------------------- reading


def _check_calibration(path: Path, section):
    """The ``calibration`` section, or ``None`` when absent (models written before it existed)."""
    if section is None:
        return None
    if not isinstance(section, dict) or section.get("method") != "temperature":
        raise ModelFileError(path, "field 'calibration' must be an object with 'method': 'temperature'")
    t = section.get("temperature")
    if isinstance(t, bool) or not isinstance(t, (int, float)) or not (np.isfinite(t) and t > 0):
        raise ModelFileError(path, f"field 'calibration.temperature' must be a positive finite number, not {t!r}")
    return section


def _read_json(path: Path) -> dict:
    if not path.is_file():
        raise ModelFileError(path, "file is missing")
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
    except json.JSONDecodeError as exc:
        raise ModelFileError(path, f"not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
    except UnicodeDecodeError:
        raise ModelFileError(path, "not valid UTF-8") from None
    except ValueError:  # an integer of more than 4300 digits
        raise ModelFileError(path, "not valid JSON (a number too long to read)") from None
    except RecursionError:
        raise ModelFileError(path, "not valid JSON (nested too deeply)") from None
    except OSError as exc:
        raise ModelFileError(path, f"cannot be read ({exc.strerror or exc})") from None
    if not isinstance(data, dict):
        raise ModelFileError(path, "expected a JSON object")
    return data


def _read_npz(path: Path, shapes: dict, finite: bool = True, kinds: str = "f") -> dict:
    """Read named arrays, every header and size checked before reading (:func:`lintext.arrays.read_npz`)."""
    return read_npz(path, shapes, kinds=kinds, finite=finite)


# Largest weight or bias a model may hold: far above anything training produces (it stops
# on an exploding loss), far below where sums of products of features overflow float64.
WEIGHT_LIMIT = 1e100


def _check_scores_are_finite(path: Path, coef: np.ndarray, intercept: np.ndarray) -> None:
    """Refuse weights whose scores would overflow (and predict NaN probabilities)."""
    largest = max((max(-float(a.min()), float(a.max())) for a in (coef, intercept) if a.size), default=0.0)
    if largest > WEIGHT_LIMIT:
        raise ModelFileError(path, f"weights as large as {largest:.3g} (above {WEIGHT_LIMIT:g}) would give "
                                   "non-finite scores; the file is damaged or not from lintext")
