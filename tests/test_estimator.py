"""The scikit-learn estimator: scikit-learn's own estimator checks, and a Pipeline on text."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.feature_extraction.text import TfidfVectorizer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.utils.estimator_checks import parametrize_with_checks

from lintext.estimator import LinTextClassifier

from .conftest import small_corpus_rows


# The checks feed dense features of any scale (make_blobs: values near 10; pure noise around 100
# in check_fit_idempotent), not unit-length text rows, on which the default SGD step of 3 is meant
# to run (see the README): they run with a step that suits them. Larger steps make the loss on
# the noise rise above the untrained model's, which lintext reports as divergence (measured:
# AdaGrad at 0.02 and SGD with the hinge at 1e-4 are flagged there; AdaGrad at 0.002 is not, with
# the hinge if early stopping comes within 5 epochs of the best: with 15, the hinge loss on the
# noise of check_fit_idempotent rises five epochs in a row by epoch 13).
@parametrize_with_checks([LinTextClassifier(loss="softmax", optimizer="adagrad", learning_rate=0.002),
                          LinTextClassifier(loss="hinge", optimizer="adagrad", learning_rate=0.002, patience=5)])
def test_scikit_learn_estimator_checks(estimator, check):
    # Reference: scikit-learn's own conformance suite (sklearn.utils.estimator_checks).
    check(estimator)


def test_defaults_are_the_command_line_defaults():
    # One source of defaults: TrainOptions, which the command line reads too.
    from lintext.engine.options import TrainOptions

    defaults, params = TrainOptions(), LinTextClassifier().get_params()
    for name in ("loss", "optimizer", "learning_rate", "schedule", "epochs", "batch_size", "l2", "patience", "seed",
                 "average", "l1", "label_weights", "stop_metric", "refit"):
        assert params[name] == getattr(defaults, name), name
    assert params["early_stopping"] is True


def test_pipeline_on_text_agrees_with_logistic_regression():
    # Reference: scikit-learn's LogisticRegression on the same tf-idf matrix; both should
    # label the same held-out texts nearly always on this easy invented corpus.
    rows = small_corpus_rows(60)
    texts, labels = [t for t, _ in rows], [lab for _, lab in rows]
    ours = make_pipeline(TfidfVectorizer(), LinTextClassifier(epochs=30)).fit(texts[:150], labels[:150])
    ref = make_pipeline(TfidfVectorizer(), LogisticRegression(max_iter=1000)).fit(texts[:150], labels[:150])
    agree = np.mean(ours.predict(texts[150:]) == ref.predict(texts[150:]))
    assert agree >= 0.9
    proba = ours.predict_proba(texts[150:])
    assert proba.shape == (30, 3) and np.allclose(proba.sum(axis=1), 1.0)


def test_hinge_without_dev_rows_has_no_probabilities():
    clf = LinTextClassifier(loss="hinge").fit(np.eye(4), [0, 1, 0, 1])  # 4 rows: too few for a dev split
    assert clf.temperature_ is None
    assert not hasattr(clf, "predict_proba")
    with pytest.raises(AttributeError):
        clf.predict_proba(np.eye(4))


@pytest.mark.parametrize("loss", ["hinge", "softmax"])
def test_probabilities_are_temperature_scaled_on_the_dev_rows(loss):
    # Reference: temperature scaling (Guo et al. 2017, "On calibration of modern neural networks"):
    # T minimises the dev negative log-likelihood of softmax(scores / T); here found independently
    # by SciPy's bounded scalar minimiser on the dev rows of the same split (scikit-learn's
    # train_test_split, stratified, seeded as the estimator seeds it), scored by the first pass's
    # weights, which a second fit with refit=False reproduces.
    from scipy.optimize import minimize_scalar
    from scipy.special import log_softmax
    from sklearn.model_selection import train_test_split

    rows = small_corpus_rows(60)
    texts, labels = [t for t, _ in rows], np.array([lab for _, lab in rows])
    flip = np.random.default_rng(0).random(len(labels)) < 0.25  # noisy labels: a dev set no model separates
    labels[flip] = np.random.default_rng(1).choice(np.unique(labels), flip.sum())
    X = TfidfVectorizer().fit_transform(texts)
    clf = LinTextClassifier(loss=loss, learning_rate=1.0).fit(X, labels)
    first = LinTextClassifier(loss=loss, learning_rate=1.0, refit=False).fit(X, labels)
    codes = np.unique(labels, return_inverse=True)[1]
    _, dev_rows = train_test_split(np.arange(len(labels)), test_size=0.1, stratify=codes, random_state=0)
    s, y = first.decision_function(X[dev_rows]), codes[dev_rows]
    nll = lambda t: -log_softmax(s / t, axis=1)[np.arange(len(y)), y].mean()  # noqa: E731
    t_ref = minimize_scalar(nll, bounds=(0.01, 100.0), method="bounded", options={"xatol": 1e-8}).x
    assert clf.temperature_ == pytest.approx(t_ref, rel=1e-3)
    assert first.temperature_ == pytest.approx(t_ref, rel=1e-3)
    assert abs(t_ref - 1.0) > 0.05  # a fitted temperature, not the default 1
    proba = clf.predict_proba(X)
    np.testing.assert_allclose(proba, np.exp(log_softmax(clf.decision_function(X) / clf.temperature_, axis=1)))
    np.testing.assert_array_equal(clf.classes_[proba.argmax(axis=1)], clf.predict(X))
    # the refit trained on every row: its weights differ from the first pass's
    assert not np.allclose(clf.coef_, first.coef_)


def test_raw_texts_with_the_featurizer_inside_equal_the_library_on_the_same_matrix():
    # Reference: the same engine fed the matrix of lintext's own featurizer by hand (a Pipeline's
    # job done explicitly) gives the same predictions as the estimator taking raw texts.
    from lintext.text.featurizer import Featurizer, FeaturizerConfig

    rows = small_corpus_rows()
    texts, labels = [t for t, _ in rows], [y for _, y in rows]
    raw = LinTextClassifier(featurizer={"ngrams": (1, 2)}, epochs=5, early_stopping=False, loss="softmax").fit(texts[:100], labels[:100])
    feat = Featurizer(FeaturizerConfig(ngrams=(1, 2)))
    X = feat.fit_transform(texts[:100])
    matrix = LinTextClassifier(epochs=5, early_stopping=False, loss="softmax").fit(X, labels[:100])
    assert raw.n_features_in_ == X.shape[1]
    np.testing.assert_array_equal(raw.predict(texts[100:]), matrix.predict(feat.transform(texts[100:])))
    np.testing.assert_allclose(raw.predict_proba(texts[100:]), matrix.predict_proba(feat.transform(texts[100:])))
    with pytest.raises(ValueError, match="list of texts"):
        raw.predict("one string")
    assert LinTextClassifier(featurizer=True).fit(texts, labels).score(texts, labels) > 0.8
