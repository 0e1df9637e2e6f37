"""Model: a fitted featurizer plus weights, and the model directory on disk.

A model directory holds

- ``model.json``: format version, lintext version, ``labels`` in the column
  order of the weights, featurizer state, training options, metrics, history;
- ``weights.npz``: float arrays ``coef`` (features x labels) and ``intercept``
  (labels), read with ``allow_pickle=False``;
- ``vocabulary.tsv``: feature, column index, document frequency in training;
- ``feature_stats.npz`` (when trained by lintext's engine): per-feature update
  statistics for the report.

``model.json`` may hold a ``calibration`` section (a temperature fitted on the dev set, see
:mod:`lintext.confidence`); models written without one still load, and their probabilities
are the plain softmax of the scores.

It is written to a temporary directory beside the target and renamed into
place, so a failure or an interrupt never leaves half a model behind and never
changes a model already at that path.
"""

from __future__ import annotations

import json
import os
import zipfile
from pathlib import Path
from typing import Callable

import numpy as np

from . import __version__
from .confidence import probabilities as scaled_softmax
from .errors import LinTextError, ModelFileError
from .engine.options import upgrade_training_json
from .files import atomic_directory, json_default
from .text.featurizer import Featurizer

FORMAT_VERSION = 1
STAT_NAMES = ("update_count", "abs_update_sum", "effective_step")


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
        self.feature_stats = feature_stats
        self.calibration = calibration

    # ------------------------------------------------------------ prediction

    def scores(self, texts) -> np.ndarray:
        """Scores ``X @ coef + intercept``, one row per text, one column per label."""
        return self.matrix_scores(self.featurizer.transform(texts))

    def matrix_scores(self, X) -> np.ndarray:
        """Scores of an already featurized matrix, computed in float64 from the stored weights."""
        coef = np.asarray(self.coef, dtype=np.float64)
        return np.asarray(X @ coef) + np.asarray(self.intercept, dtype=np.float64)

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

    def save(self, path: str | os.PathLike, extra: Callable[[Path], None] | None = None, force: bool = False) -> Path:
        """Write the model directory atomically; ``extra(tmpdir)`` may add files before the rename.

        An existing ``path`` is replaced only when it is a lintext model directory holding no
        file lintext did not write (or an empty folder), unless ``force``
        (:func:`lintext.outputs.check_output_folder`); otherwise OutputError.
        """
        if not np.isfinite(self.coef).all() or not np.isfinite(self.intercept).all():
            raise LinTextError("refusing to save a model with non-finite weights")
        target = Path(path)
        return atomic_directory(target, lambda tmp: (self._write(tmp), extra and extra(tmp)), kind="model", force=force)

    def _write(self, folder: Path) -> None:
        with open(folder / "model.json", "w", encoding="utf-8") as fh:
            json.dump(self.to_json(), fh, indent=2, ensure_ascii=False, allow_nan=False, default=json_default)
            fh.write("\n")
        np.savez(folder / "weights.npz", coef=self.coef, intercept=self.intercept)
        self.featurizer.save_vocabulary(folder / "vocabulary.tsv")
        if self.feature_stats is not None:
            np.savez(folder / "feature_stats.npz", **{k: np.asarray(self.feature_stats[k]) for k in STAT_NAMES})

    @classmethod
    def load(cls, path: str | os.PathLike) -> "Model":
        """Read and validate a model directory; a wrong field, shape or dtype raises ModelFileError."""
        folder = Path(path)
        if not folder.is_dir():
            raise ModelFileError(folder, "no such model directory")
        meta = _read_json(folder / "model.json")
        version = meta.get("format_version")
        if not isinstance(version, int):
            raise ModelFileError(folder / "model.json", "field 'format_version' is missing or not an integer")
        if version > FORMAT_VERSION:
            raise ModelFileError(
                folder / "model.json",
                f"model format version {version} is newer than this lintext ({__version__}) reads ({FORMAT_VERSION}); upgrade lintext",
            )
        labels = meta.get("labels")
        if not isinstance(labels, list) or len(labels) < 2 or not all(isinstance(x, str) for x in labels) or len(set(labels)) != len(labels):
            raise ModelFileError(folder / "model.json", "field 'labels' must be a list of at least two distinct strings")
        loss = meta.get("loss")
        if loss not in ("softmax", "hinge"):
            raise ModelFileError(folder / "model.json", f"field 'loss' must be 'softmax' or 'hinge', not {loss!r}")
        if not isinstance(meta.get("featurizer"), dict):
            raise ModelFileError(folder / "model.json", "field 'featurizer' is missing")
        try:
            featurizer = Featurizer.load(meta["featurizer"], folder / "vocabulary.tsv")
        except LinTextError as exc:
            raise ModelFileError(folder / "model.json", f"field 'featurizer': {exc}") from None
        n_features, n_labels = featurizer.n_features, len(labels)
        arrays = _read_npz(folder / "weights.npz", {"coef": (n_features, n_labels), "intercept": (n_labels,)})
        stats = None
        if (folder / "feature_stats.npz").exists():
            stats = _read_npz(folder / "feature_stats.npz", {k: (n_features,) for k in STAT_NAMES}, finite=False, kinds="fi")
        calibration = _check_calibration(folder / "model.json", meta.get("calibration"))
        info = {k: v for k, v in meta.items()
                if k not in {"format_version", "lintext_version", "labels", "loss", "featurizer", "n_features", "calibration"}}
        if isinstance(info.get("training"), dict):
            info["training"] = upgrade_training_json(info["training"])
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
    if not isinstance(data, dict):
        raise ModelFileError(path, "expected a JSON object")
    return data


def _read_npz(path: Path, shapes: dict, finite: bool = True, kinds: str = "f") -> dict:
    """Read named arrays with ``allow_pickle=False``, checking shape, dtype kind (``f`` float, ``i`` integer)."""
    if not path.is_file():
        raise ModelFileError(path, "file is missing")
    try:
        with np.load(path, allow_pickle=False) as archive:
            arrays = {name: archive[name] for name in shapes if name in archive.files}
    except (zipfile.BadZipFile, ValueError, EOFError, OSError, KeyError) as exc:
        raise ModelFileError(path, f"not a readable NumPy archive ({type(exc).__name__}: {exc})") from None
    for name, shape in shapes.items():
        if name not in arrays:
            raise ModelFileError(path, f"array {name!r} is missing")
        array = arrays[name]
        if array.dtype.kind not in kinds or array.dtype.itemsize not in (4, 8):
            expected = " or ".join({"f": "float32/float64", "i": "int32/int64"}[k] for k in kinds)
            raise ModelFileError(path, f"array {name!r} has dtype {array.dtype}, expected {expected}")
        if array.shape != shape:
            raise ModelFileError(path, f"array {name!r} has shape {array.shape}, expected {shape}")
        if finite and not np.isfinite(array).all():
            raise ModelFileError(path, f"array {name!r} holds non-finite values")
    return arrays
