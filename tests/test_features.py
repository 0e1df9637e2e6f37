"""Featurizer: weighting against a hand-worked tf-idf example and scikit-learn,
document frequencies, and the JSON/TSV round trip."""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.feature_extraction.text import CountVectorizer, TfidfTransformer

from lintext.errors import ConfigError
from lintext.features import Featurizer, FeaturizerConfig, corpus_stats, parse_range
from lintext.io import Corpus

DOCS = ["ferry ferry late", "bus late", "ferry refund"]


def test_tfidf_hand_worked_example():
    # Manning, Raghavan & Schütze (2008), ch. 6: tf-idf = tf × idf with idf = log(N / df).
    # scikit-learn smooths it (TfidfTransformer, smooth_idf=True): idf = ln((1 + N) / (1 + df)) + 1,
    # i.e. one extra document containing every term, plus one. Worked by hand, N = 3:
    #   "ferry": df 2 -> idf = ln(4/3) + 1;  "late": df 2 -> ln(4/3) + 1
    #   "bus", "refund": df 1 -> ln(4/2) + 1
    # doc 0 = "ferry ferry late": tf(ferry) = 2, tf(late) = 1, before length normalisation.
    f = Featurizer(FeaturizerConfig(ngrams=(1, 1), weighting="tfidf", normalize=False))
    X = f.fit_transform(DOCS)
    col = {name: j for j, name in enumerate(f.feature_names)}
    idf_common, idf_rare = math.log(4 / 3) + 1, math.log(2) + 1
    assert X[0, col["ferry"]] == pytest.approx(2 * idf_common, abs=1e-12)
    assert X[0, col["late"]] == pytest.approx(1 * idf_common, abs=1e-12)
    assert X[1, col["bus"]] == pytest.approx(idf_rare, abs=1e-12)
    assert X[0, col["bus"]] == 0
    # with unit length: doc 0 = (2a, a) / (a * sqrt(5))
    Xn = Featurizer(FeaturizerConfig(ngrams=(1, 1))).fit_transform(DOCS)
    assert Xn[0, col["ferry"]] == pytest.approx(2 / math.sqrt(5), abs=1e-12)


@pytest.mark.parametrize("ngrams, min_df", [((1, 1), 1), ((1, 2), 1), ((1, 2), 2)])
def test_tfidf_matches_scikit_learn(ngrams, min_df):
    # Reference: scikit-learn CountVectorizer + TfidfTransformer(norm="l2", smooth_idf=True).
    texts = DOCS + ["late ferry again", "refund for the bus", "the ferry"]
    ours = Featurizer(FeaturizerConfig(ngrams=ngrams, min_df=min_df)).fit_transform(texts)
    counts = CountVectorizer(ngram_range=ngrams, min_df=min_df).fit_transform(texts)
    ref = TfidfTransformer().fit_transform(counts)
    assert abs(ours - ref).max() < 1e-12


@pytest.mark.parametrize("weighting, expect", [("binary", [1.0, 1.0]), ("count", [2.0, 1.0]), ("log", [1 + math.log(2), 1.0])])
def test_other_weightings(weighting, expect):
    f = Featurizer(FeaturizerConfig(ngrams=(1, 1), weighting=weighting, normalize=False))
    X = f.fit_transform(DOCS)
    col = {name: j for j, name in enumerate(f.feature_names)}
    assert [X[0, col["ferry"]], X[0, col["late"]]] == pytest.approx(expect, abs=1e-12)


def test_document_frequency_equals_binary_counts():
    # Reference: column sums of scikit-learn's CountVectorizer(binary=True) on the same texts.
    texts = DOCS + ["late late late ferry", "bus bus"]
    f = Featurizer(FeaturizerConfig(ngrams=(1, 2), char_ngrams=(2, 3)))
    f.fit(texts)
    word = np.asarray(CountVectorizer(ngram_range=(1, 2), binary=True).fit_transform(texts).sum(axis=0)).ravel()
    char = np.asarray(CountVectorizer(analyzer="char_wb", ngram_range=(2, 3), binary=True).fit_transform(texts).sum(axis=0)).ravel()
    assert np.array_equal(f.document_frequency, np.concatenate([word, char]))
    assert f.feature_names[len(word)].startswith("[")


def test_min_df_and_max_features():
    f = Featurizer(FeaturizerConfig(ngrams=(1, 1), min_df=2))
    f.fit(DOCS)
    assert f.feature_names == ["ferry", "late"]
    f = Featurizer(FeaturizerConfig(ngrams=(1, 1), max_features=1))
    f.fit(DOCS)
    assert f.feature_names == ["ferry"]  # 3 occurrences, the most frequent term


@pytest.mark.parametrize(
    "config",
    [
        FeaturizerConfig(),
        FeaturizerConfig(ngrams=(1, 3), char_ngrams=(2, 4), weighting="log", lowercase=False),
        FeaturizerConfig(hash_bits=10, char_ngrams=(3, 3), min_df=2),
        FeaturizerConfig(weighting="binary", normalize=False, min_df=0.2, max_df=0.9),
    ],
)
def test_round_trip_gives_identical_matrix(tmp_path, config):
    train = DOCS + ["Late FERRY\tagain", "refund\\for the bus", "the ferry ☃"]
    new = ["ferry late refund", "unseen words only", "Bus\nbus ferry"]
    f = Featurizer(config)
    f.fit(train)
    f.save_vocabulary(tmp_path / "v.tsv")
    g = Featurizer.load(f.to_json(), tmp_path / "v.tsv")
    a, b = f.transform(new), g.transform(new)
    assert a.shape == b.shape and (a != b).nnz == 0
    assert np.array_equal(f.document_frequency, g.document_frequency)
    assert (f.fit_transform(train) != g.transform(train)).nnz == 0


def test_hashing_mode_columns():
    f = Featurizer(FeaturizerConfig(hash_bits=6, min_df=2))
    X = f.fit_transform(DOCS)
    assert X.shape == (3, 64)
    assert set(np.unique(X.indices)) <= set(f.used_columns)
    assert (f.document_frequency[f.used_columns] >= 2).all()


def test_config_errors_name_the_option():
    with pytest.raises(ConfigError, match="--ngrams='2-1'"):
        parse_range("--ngrams", "2-1")
    with pytest.raises(ConfigError, match="--ngrams='x'"):
        parse_range("--ngrams", "x")
    with pytest.raises(ConfigError, match="--weighting='bm25'"):
        FeaturizerConfig(weighting="bm25").validate()
    with pytest.raises(ConfigError, match="--hash-bits"):
        FeaturizerConfig(hash_bits=40).validate()
    with pytest.raises(ConfigError, match="--min-df"):
        Featurizer(FeaturizerConfig(min_df=100)).fit(DOCS)


def test_corpus_stats():
    corpus = Corpus(DOCS, ["a", "b", "a"], ["x:1", "x:2", "x:3"])
    info = corpus_stats(corpus, FeaturizerConfig(ngrams=(1, 1)))
    # features: ferry(df 2), late(2), bus(1), refund(1)
    assert info["features"] == 4 and info["nonzeros"] == 6
    assert info["share_df1"] == 0.5 and info["share_df2"] == 0.5
    assert info["labels"] == {"a": 2, "b": 1}
