"""A scikit-learn compatible classifier over lintext's training engine.

By default it takes a feature matrix (sparse or dense), so that it composes with
scikit-learn's vectorizers in a ``Pipeline``::

    make_pipeline(TfidfVectorizer(), LinTextClassifier())

With ``featurizer`` set (``True`` for the command line's featurizer defaults, or a dict of
:class:`~lintext.text.config.FeaturizerConfig` fields) it takes raw texts instead and fits
lintext's own featurizer inside (``featurizer_`` after fitting)::

    LinTextClassifier(featurizer={"ngrams": (1, 2)}).fit(texts, labels).predict(["a new text"])

Early stopping (on by default, as on the command line) holds out a stratified
``validation_fraction`` of the training rows; with ``early_stopping=False``, or when the data
are too few for a stratified split (a class with one row, or fewer held-out rows than classes),
every epoch runs on all rows.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.model_selection import train_test_split
from sklearn.utils.metaestimators import available_if
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, column_or_1d, validate_data

from .confidence import dev_temperature
from .engine.options import TrainOptions
from .engine.trainer import fit
from .model import softmax

DEFAULTS = TrainOptions()  # one source of defaults: the command line's


class LinTextClassifier(ClassifierMixin, BaseEstimator):
    """Sparse linear classifier trained by lintext's engine.

    Parameters mirror :class:`lintext.engine.options.TrainOptions`, with the same defaults as
    ``lintext train`` (the hinge by plain SGD, 50 epochs, early stopping on macro-F1 with patience 15
    on a stratified ``validation_fraction`` of the rows, then a refit on every row); see there for
    their meaning. ``learning_rate=None``
    takes the optimizer's default. ``featurizer``: ``None`` (X is a feature matrix), or ``True``
    or a dict of featurizer options (X is a list of raw texts, featurized inside).

    Attributes
    ----------
    classes_ : labels in column order.
    coef_ : array (n_classes, n_features), labels by features as in scikit-learn's linear
        models: the transpose of ``coef`` in a model directory's ``weights.npz`` (features by
        labels, one row per feature, the layout the engine trains).
    intercept_ : array (n_classes,).
    history_ : per-epoch records (of the first pass, when there was a refit).
    temperature_ : the temperature fitted on the ``validation_fraction`` rows (``None`` without them);
        ``predict_proba`` is ``softmax(scores / temperature_)``.
    n_features_in_ : number of input columns (with ``featurizer``: of the fitted featurizer's output).
    featurizer_ : with ``featurizer``, the fitted :class:`~lintext.text.featurizer.Featurizer`.
    """

    def __init__(self, loss=DEFAULTS.loss, optimizer=DEFAULTS.optimizer, learning_rate=DEFAULTS.learning_rate,
                 schedule=DEFAULTS.schedule, epochs=DEFAULTS.epochs, batch_size=DEFAULTS.batch_size, l2=DEFAULTS.l2,
                 early_stopping=True, validation_fraction=0.1, patience=DEFAULTS.patience, seed=DEFAULTS.seed,
                 featurizer=None, average=DEFAULTS.average, l1=DEFAULTS.l1, label_weights=DEFAULTS.label_weights,
                 stop_metric=DEFAULTS.stop_metric, refit=DEFAULTS.refit):
        self.loss = loss
        self.optimizer = optimizer
        self.learning_rate = learning_rate
        self.schedule = schedule
        self.epochs = epochs
        self.batch_size = batch_size
        self.l2 = l2
        self.early_stopping = early_stopping
        self.validation_fraction = validation_fraction
        self.patience = patience
        self.seed = seed
        self.featurizer = featurizer
        self.average = average
        self.l1 = l1
        self.label_weights = label_weights
        self.stop_metric = stop_metric
        self.refit = refit

    def fit(self, X, y):
        if self.featurizer is not None:
            from .pipeline import featurizer_config
            from .text.featurizer import Featurizer

            config = featurizer_config(None if self.featurizer is True else self.featurizer)
            texts = _texts(X)
            y = column_or_1d(y, warn=True)
            if len(y) != len(texts):
                raise ValueError(f"{len(texts)} texts but {len(y)} labels")
            self.featurizer_ = Featurizer(config)
            X = self.featurizer_.fit_transform(texts)
            self.n_features_in_ = X.shape[1]
        else:
            X, y = validate_data(self, X, y, accept_sparse="csr", dtype=np.float64)
        check_classification_targets(y)
        self.classes_, codes = np.unique(y, return_inverse=True)
        if len(self.classes_) < 2:
            raise ValueError(f"a classifier needs at least two classes; got {len(self.classes_)} class")
        X = sp.csr_matrix(X)
        X.sort_indices()
        options = TrainOptions(loss=self.loss, optimizer=self.optimizer, learning_rate=self.learning_rate,
                               schedule=self.schedule, epochs=self.epochs, batch_size=self.batch_size, l2=self.l2,
                               patience=self.patience if self.early_stopping else 0, seed=self.seed,
                               average=self.average, l1=self.l1, label_weights=self.label_weights,
                               stop_metric=self.stop_metric, refit=self.refit)
        options.validate()
        X_dev = y_dev = None
        counts = np.bincount(codes)
        if self.early_stopping and counts.min() >= 2 and round(self.validation_fraction * len(codes)) >= len(counts):
            rows = np.arange(X.shape[0])
            train_rows, dev_rows = train_test_split(rows, test_size=self.validation_fraction, stratify=codes,
                                                    random_state=self.seed)
            X, X_dev, y_dev, codes = X[train_rows], X[dev_rows], codes[dev_rows], codes[train_rows]
        result = fit(X, codes.astype(np.int64), len(self.classes_), X_dev, y_dev, options,
                     label_names=[str(c) for c in self.classes_])
        self.coef_ = np.ascontiguousarray(result.coef.T)
        self.intercept_ = result.intercept.copy()
        self.history_ = result.history
        self.temperature_ = None
        if X_dev is not None:  # calibrated on dev by the weights its scores describe (before a refit)
            self.temperature_ = dev_temperature(np.asarray(X_dev @ result.dev_coef) + result.dev_intercept, y_dev)[0]
        return self

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.sparse = True
        return tags

    def _scores(self, X):
        check_is_fitted(self)
        if self.featurizer is not None:
            X = self.featurizer_.transform(_texts(X))
        else:
            X = validate_data(self, X, accept_sparse="csr", dtype=np.float64, reset=False)
        return np.asarray(X @ self.coef_.T) + self.intercept_

    def decision_function(self, X):
        """Per-class scores; with two classes, as scikit-learn expects, the second minus the first."""
        scores = self._scores(X)
        return scores[:, 1] - scores[:, 0] if scores.shape[1] == 2 else scores

    def predict(self, X):
        scores = self._scores(X)
        return self.classes_[scores.argmax(axis=1)]

    def _has_probabilities(self):
        return self.loss == "softmax" or getattr(self, "temperature_", None) is not None

    @available_if(_has_probabilities)
    def predict_proba(self, X):
        """``softmax(scores / temperature_)``: the temperature fitted on the dev rows (Guo et al. 2017), 1 without
        them; a hinge model has probabilities only so calibrated."""
        return softmax(self._scores(X) / (self.temperature_ or 1.0))

    @available_if(_has_probabilities)
    def predict_log_proba(self, X):
        return np.log(self.predict_proba(X))


def _texts(X) -> list:
    """Raw texts: a list (or array, or Series) of strings, never one string."""
    if isinstance(X, str) or not hasattr(X, "__iter__"):
        raise ValueError("with featurizer set, X must be a list of texts, not a single string")
    texts = list(X)
    bad = next((t for t in texts if not isinstance(t, str)), None)
    if bad is not None:
        raise ValueError(f"with featurizer set, X must hold strings; found {type(bad).__name__}")
    return texts
