"""Featurizer: weighting against a hand-worked tf-idf example and scikit-learn,
document frequencies, and the JSON/TSV round trip."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.feature_extraction.text import CountVectorizer, TfidfTransformer

from lintext.text import chunked_counts
from lintext.errors import ConfigError
from lintext.text.featurizer import Featurizer, FeaturizerConfig, corpus_stats, parse_range
from lintext.text.readers import Corpus

DOCS = ["ferry ferry late", "bus late", "ferry refund"]


def test_tfidf_hand_worked_example():
    # Manning, Raghavan & Schütze (2008), ch. 6: tf-idf = tf × idf with idf = log(N / df).
    # scikit-learn smooths it (TfidfTransformer, smooth_idf=True): idf = ln((1 + N) / (1 + df)) + 1,
    # i.e. one extra document containing every term, plus one. Worked by hand, N = 3:
    #   "ferry": df 2 -> idf = ln(4/3) + 1;  "late": df 2 -> ln(4/3) + 1
    #   "bus", "refund": df 1 -> ln(4/2) + 1
    # doc 0 = "ferry ferry late": tf(ferry) = 2, tf(late) = 1, before length normalisation.
    f = Featurizer(FeaturizerConfig(ngrams=(1, 1), min_df=1, weighting="tfidf", normalize=False))
    X = f.fit_transform(DOCS)
    col = {name: j for j, name in enumerate(f.feature_names)}
    idf_common, idf_rare = math.log(4 / 3) + 1, math.log(2) + 1
    assert X[0, col["ferry"]] == pytest.approx(2 * idf_common, abs=1e-12)
    assert X[0, col["late"]] == pytest.approx(1 * idf_common, abs=1e-12)
    assert X[1, col["bus"]] == pytest.approx(idf_rare, abs=1e-12)
    assert X[0, col["bus"]] == 0
    # with unit length: doc 0 = (2a, a) / (a * sqrt(5))
    Xn = Featurizer(FeaturizerConfig(ngrams=(1, 1), min_df=1, weighting="tfidf")).fit_transform(DOCS)
    assert Xn[0, col["ferry"]] == pytest.approx(2 / math.sqrt(5), abs=1e-12)


@pytest.mark.parametrize("ngrams, min_df", [((1, 1), 1), ((1, 2), 1), ((1, 2), 2)])
def test_tfidf_matches_scikit_learn(ngrams, min_df):
    # Reference: scikit-learn CountVectorizer + TfidfTransformer(norm="l2", smooth_idf=True).
    texts = DOCS + ["late ferry again", "refund for the bus", "the ferry"]
    ours = Featurizer(FeaturizerConfig(ngrams=ngrams, min_df=min_df, weighting="tfidf")).fit_transform(texts)
    counts = CountVectorizer(ngram_range=ngrams, min_df=min_df).fit_transform(texts)
    ref = TfidfTransformer().fit_transform(counts)
    assert abs(ours - ref).max() < 1e-12
    # The default weighting, log-tfidf: TfidfTransformer(sublinear_tf=True), 1 + ln tf.
    ours = Featurizer(FeaturizerConfig(ngrams=ngrams, min_df=min_df)).fit_transform(texts)
    assert abs(ours - TfidfTransformer(sublinear_tf=True).fit_transform(counts)).max() < 1e-12


@pytest.mark.parametrize("weighting, expect", [("binary", [1.0, 1.0]), ("count", [2.0, 1.0]), ("log", [1 + math.log(2), 1.0])])
def test_other_weightings(weighting, expect):
    f = Featurizer(FeaturizerConfig(ngrams=(1, 1), weighting=weighting, normalize=False))
    X = f.fit_transform(DOCS)
    col = {name: j for j, name in enumerate(f.feature_names)}
    assert [X[0, col["ferry"]], X[0, col["late"]]] == pytest.approx(expect, abs=1e-12)


def test_document_frequency_equals_binary_counts():
    # Reference: column sums of scikit-learn's CountVectorizer(binary=True) on the same texts.
    texts = DOCS + ["late late late ferry", "bus bus"]
    f = Featurizer(FeaturizerConfig(ngrams=(1, 2), char_ngrams=(2, 3), min_df=1))
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
        FeaturizerConfig(hash_space=1024, char_ngrams=(3, 3), min_df=2),
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
    f = Featurizer(FeaturizerConfig(hash_space=64, min_df=2))
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
    with pytest.raises(ConfigError, match="--hash-space"):
        FeaturizerConfig(hash_space=2**40).validate()
    with pytest.raises(ConfigError, match="--min-df"):
        Featurizer(FeaturizerConfig(min_df=100)).fit(DOCS)


def test_corpus_stats():
    corpus = Corpus(DOCS, ["a", "b", "a"], ["x:1", "x:2", "x:3"])
    info = corpus_stats(corpus, FeaturizerConfig(ngrams=(1, 1), min_df=1))
    # features: ferry(df 2), late(2), bus(1), refund(1)
    assert info["features"] == 4 and info["nonzeros"] == 6
    assert info["share_df1"] == 0.5 and info["share_df2"] == 0.5
    assert info["labels"] == {"a": 2, "b": 1}


# ------------------------------------------------------------ chunked (parallel) featurizing
#
# Every check below compares n_jobs=2 over contiguous chunks with one pass of
# scikit-learn's CountVectorizer / HashingVectorizer (the reference) and with
# lintext's own count in this process (one chunk); "identical" means the same CSR
# arrays bit for bit.

import lintext.text.featurizer as features_module  # noqa: E402
from sklearn.feature_extraction.text import HashingVectorizer  # noqa: E402

WORDS = (
    "ferry late bus refund the on Ferry LATE ticket ünïcödé straße STRASSE x1 42 tram_7 naïve ǅemal "
    "ΣΟΦΙΑΣ café Café e\u0301 日本語 a b"
).split() + [f"w{i}" for i in range(80)]
SEPARATORS = [" ", " ", " ", "  ", ", ", "\n", "\t", "! ", " - ", "'s "]


def make_texts(n_docs: int, seed: int, words=WORDS) -> list[str]:
    """Zipf-like word draws with mixed case, accents, punctuation, empty and one-letter texts."""
    rng = np.random.default_rng(seed)
    p = 1.0 / np.arange(1, len(words) + 1) ** 1.1
    texts = []
    for _ in range(n_docs):
        k = int(rng.integers(0, 14))
        picked = rng.choice(len(words), size=k, p=p / p.sum())
        seps = rng.choice(len(SEPARATORS), size=k)
        texts.append("".join(words[w] + SEPARATORS[s] for w, s in zip(picked, seps)))
    texts[3], texts[4], texts[5] = "", "a", "!!"
    return texts


TEXTS = make_texts(400, seed=1)
NEW_TEXTS = make_texts(150, seed=2, words=WORDS + ["unseen", "words", "only"])


def csr_arrays_equal(A, B) -> bool:
    return (
        A.shape == B.shape
        and np.array_equal(A.indptr, B.indptr)
        and np.array_equal(A.indices, B.indices)
        and np.array_equal(A.data, B.data)
    )


def canonical(X):
    X = X.astype(np.float64, copy=True).tocsr()  # copy: scikit-learn may share index arrays
    X.has_sorted_indices = False  # CountVectorizer renumbers columns without re-sorting them
    X.sort_indices()
    return X


def parallel(config, **kwargs):
    return Featurizer(config, n_jobs=2, parallel_min_docs=50, **kwargs)


def reference_vectorizer(config, analyzer="word", **kwargs):
    """scikit-learn's CountVectorizer with the options the configuration stands for."""
    ngrams = config.ngrams if analyzer == "word" else config.char_ngrams
    df = {"min_df": config.min_df, "max_df": config.max_df, "max_features": config.max_features}
    df = {k: (int(v) if isinstance(v, float) and v.is_integer() and v > 1 else v) for k, v in df.items()}
    return CountVectorizer(analyzer=analyzer, ngram_range=ngrams, lowercase=config.lowercase, **df, **kwargs)


VOCABULARY_CONFIGS = [
    pytest.param(FeaturizerConfig(weighting="count", normalize=False), id="words-1-2"),
    pytest.param(FeaturizerConfig(ngrams=(1, 3), min_df=2, max_df=0.5, weighting="count", normalize=False), id="min_df-int-max_df-float"),
    pytest.param(FeaturizerConfig(ngrams=(2, 3), min_df=0.01, max_df=40, weighting="count", normalize=False), id="min_df-float-max_df-int"),
    pytest.param(FeaturizerConfig(ngrams=(1, 2), max_features=60, min_df=2, weighting="count", normalize=False), id="max_features"),
    pytest.param(FeaturizerConfig(ngrams=(1, 1), lowercase=False), id="cased-tfidf"),
    pytest.param(FeaturizerConfig(char_ngrams=(2, 4), min_df=2, weighting="log"), id="char-ngrams"),
    pytest.param(FeaturizerConfig(ngrams=(1, 2), char_ngrams=(1, 3), max_features=50, weighting="count", normalize=False), id="char-max_features"),
]


@pytest.mark.parametrize("config", VOCABULARY_CONFIGS)
@pytest.mark.slow
def test_parallel_fit_transform_matches_one_pass(config):
    single, chunked = Featurizer(config), parallel(config)
    X1, X2 = single.fit_transform(TEXTS), chunked.fit_transform(TEXTS)
    assert csr_arrays_equal(X1, X2)
    assert chunked.feature_names == single.feature_names
    assert np.array_equal(chunked.document_frequency, single.document_frequency)
    # Reference: scikit-learn's CountVectorizer, one pass over all texts, word block then char block.
    word = reference_vectorizer(config)
    blocks = [word.fit_transform(TEXTS)]
    names = word.get_feature_names_out().tolist()
    if config.char_ngrams is not None:
        char = reference_vectorizer(config, "char_wb")
        blocks.append(char.fit_transform(TEXTS))
        names += [f"[{g}]" for g in char.get_feature_names_out()]
    ref = canonical(sp.hstack(blocks, format="csr"))
    assert chunked.feature_names == names
    assert np.array_equal(chunked.document_frequency, np.bincount(ref.indices, minlength=ref.shape[1]))
    if config.weighting == "count" and not config.normalize:
        assert csr_arrays_equal(X2, ref)
    assert csr_arrays_equal(X2, chunked.from_counts(ref))  # weighted as the reference counts are
    # transform over chunks: same as one pass, and as scikit-learn's transform with the fitted vocabulary
    T1, T2 = single.transform(NEW_TEXTS), chunked.transform(NEW_TEXTS)
    assert csr_arrays_equal(T1, T2)
    refs = canonical(sp.hstack([word.transform(NEW_TEXTS)] + ([char.transform(NEW_TEXTS)] if config.char_ngrams else []),
                               format="csr"))
    assert csr_arrays_equal(T2, chunked.from_counts(refs))
    if config.weighting == "count" and not config.normalize:
        assert csr_arrays_equal(T2, refs)


@pytest.mark.slow
def test_parallel_max_features_breaks_ties_as_scikit_learn(monkeypatch):
    texts = make_texts(600, seed=3)
    # pick a limit that cuts through a group of features with equal total counts
    totals = np.sort(np.asarray(CountVectorizer(ngram_range=(1, 2)).fit_transform(texts).sum(axis=0)).ravel())[::-1]
    limit = next(k for k in range(20, totals.size) if totals[k - 1] == totals[k] and totals[k] == totals[k - 2])
    config = FeaturizerConfig(ngrams=(1, 2), max_features=int(limit), min_df=1, weighting="count", normalize=False)
    # Reference: CountVectorizer._limit_features keeps the first `limit` of argsort(-totals) over sorted names.
    ref = CountVectorizer(ngram_range=(1, 2), max_features=int(limit))
    R = canonical(ref.fit_transform(texts))
    f = parallel(config)
    assert csr_arrays_equal(f.fit_transform(texts), R)
    assert f.feature_names == ref.get_feature_names_out().tolist()
    # five chunks on two workers: the merge of more than two sorted runs gives the same
    split = features_module.split_contiguous
    monkeypatch.setattr(features_module, "split_bounded", lambda texts, parts: split(texts, 5))
    g = parallel(config)
    assert csr_arrays_equal(g.fit_transform(texts), R)
    assert g.feature_names == f.feature_names


@pytest.mark.slow
def test_parallel_hashing_matches_one_pass():
    config = FeaturizerConfig(hash_space=1024, char_ngrams=(3, 3), min_df=2)
    single, chunked = Featurizer(config), parallel(config)
    assert csr_arrays_equal(single.fit_transform(TEXTS), chunked.fit_transform(TEXTS))
    assert np.array_equal(single.used_columns, chunked.used_columns)
    assert np.array_equal(single.document_frequency, chunked.document_frequency)
    assert csr_arrays_equal(single.transform(NEW_TEXTS), chunked.transform(NEW_TEXTS))
    # Reference: scikit-learn's HashingVectorizer (no sign flipping, no norm), word + char_wb counts.
    common = dict(n_features=2**10, alternate_sign=False, norm=None)
    counts = HashingVectorizer(ngram_range=(1, 2), **common).transform(TEXTS) + HashingVectorizer(
        analyzer="char_wb", ngram_range=(3, 3), **common
    ).transform(TEXTS)
    df = np.bincount(counts.tocsr().indices, minlength=2**10)
    assert np.array_equal(chunked.document_frequency, df * (df >= 2))


@pytest.mark.slow
def test_parallel_transform_after_one_pass_fit_and_round_trip(tmp_path):
    config = FeaturizerConfig(ngrams=(1, 3), char_ngrams=(2, 3), min_df=2)
    single = Featurizer(config).fit(TEXTS)
    single.n_jobs, single.parallel_min_docs = 2, 50  # vocabulary fitted in one pass, transform over chunks
    expected = Featurizer(config).fit(TEXTS).transform(NEW_TEXTS)
    assert csr_arrays_equal(single.transform(NEW_TEXTS), expected)
    single.save_vocabulary(tmp_path / "v.tsv")
    loaded = Featurizer.load(single.to_json(), tmp_path / "v.tsv", n_jobs=2)
    loaded.parallel_min_docs = 50
    assert csr_arrays_equal(loaded.transform(NEW_TEXTS), expected)
    assert "n_jobs" not in json.dumps(loaded.to_json())


@pytest.mark.slow
def test_parallel_falls_back_to_strings_when_keys_overflow(monkeypatch):
    # n-gram keys are integers below 2**63; with a tiny limit the merge counts strings instead.
    config = FeaturizerConfig(ngrams=(1, 3), min_df=2, weighting="count", normalize=False)
    expected_X = Featurizer(config).fit_transform(TEXTS)
    expected_T = Featurizer(config).fit(TEXTS).transform(NEW_TEXTS)
    assert chunked_counts.count_word_chunk(TEXTS[:50], True, (1, 3)) is not None
    monkeypatch.setattr(chunked_counts, "_KEY_LIMIT", 10)
    assert chunked_counts.count_word_chunk(TEXTS[:50], True, (1, 3)) is None
    f = parallel(config)
    assert csr_arrays_equal(f.fit_transform(TEXTS), expected_X)
    assert f._word_index is None
    assert csr_arrays_equal(f.transform(NEW_TEXTS), expected_T)
    g = Featurizer(config)  # in this process: counted as strings, then scikit-learn's transform
    assert csr_arrays_equal(g.fit_transform(TEXTS), expected_X)
    assert csr_arrays_equal(g.transform(NEW_TEXTS), expected_T)
    assert g._word_index is False
    # Reference: scikit-learn's CountVectorizer over the same texts
    ref = CountVectorizer(ngram_range=(1, 3), min_df=2)
    assert csr_arrays_equal(expected_X, canonical(ref.fit_transform(TEXTS)))
    assert csr_arrays_equal(expected_T, canonical(ref.transform(NEW_TEXTS)))


def test_small_inputs_stay_in_process(monkeypatch):
    def no_workers(*args):
        raise AssertionError("worker processes started")

    monkeypatch.setattr(features_module, "run_parallel", no_workers)
    config = FeaturizerConfig()
    Featurizer(config, n_jobs=2, parallel_min_docs=len(TEXTS) + 1).fit(TEXTS).transform(TEXTS)
    Featurizer(config, n_jobs=1, parallel_min_docs=0).fit(TEXTS)
    monkeypatch.setattr(features_module, "PARALLEL_MIN_DOCS", 10)  # the default threshold is read at call time
    with pytest.raises(AssertionError, match="worker processes"):
        Featurizer(config, n_jobs=2).fit(TEXTS)


@pytest.mark.slow
def test_parallel_errors_match_one_pass():
    for config in [FeaturizerConfig(min_df=10_000), FeaturizerConfig(min_df=5, max_df=2)]:
        for f in (Featurizer(config), parallel(config)):
            with pytest.raises(ConfigError, match="--min-df"):
                f.fit(TEXTS)
    with pytest.raises(ConfigError, match="--min-df"):
        parallel(FeaturizerConfig()).fit(["", "a", "!"] * 40)
    for bad in (-2, 1.5, "2", True):
        with pytest.raises(ConfigError, match="n_jobs"):
            Featurizer(FeaturizerConfig(), n_jobs=bad)
    assert Featurizer(FeaturizerConfig(), n_jobs=0)._jobs_for(10**6) >= 1


def test_pair_counts_are_scipys_summed_duplicates():
    # Reference: SciPy's COO -> CSR conversion, which sums duplicate (row, column) entries.
    rng = np.random.default_rng(0)
    rows, cols = rng.integers(0, 6, 200), rng.integers(0, 9, 200)
    X = chunked_counts.pair_counts(rows, cols, (6, 9))
    ref = sp.coo_matrix((np.ones(200), (rows, cols)), shape=(6, 9)).tocsr()
    assert X.has_sorted_indices and X.nnz == ref.nnz and np.array_equal(X.toarray(), ref.toarray())


@pytest.mark.parametrize("values", [
    np.array([5, 3, 5, 0, 9, 3, 3], dtype=np.int64),  # small: sorted with positions packed in the low bits
    np.random.default_rng(4).integers(0, 2**40, size=5000, dtype=np.int64).repeat(3),
    np.array([2**62, 7, 2**62, 1], dtype=np.int64),  # no room for the positions: argsort
    np.array([-4, 2, -4, 0], dtype=np.int64),  # negative: argsort
    np.zeros(0, dtype=np.int64),
])
def test_unique_inverse_equals_numpy(values):
    # Reference: np.unique(values, return_inverse=True)
    distinct, where = chunked_counts._unique_inverse(values)
    ref_distinct, ref_where = np.unique(values, return_inverse=True)
    assert np.array_equal(distinct, ref_distinct) and np.array_equal(where, ref_where.ravel())
    assert np.array_equal(chunked_counts._unique_inverse(values, inverse=False)[0], ref_distinct)


def test_split_bounded_cuts_by_characters():
    texts = ["a" * 5, "b" * 30, "c" * 5, "d" * 5, "e" * 5, "f" * 50, "g" * 1]
    assert chunked_counts.split_bounded(texts, 2, max_chars=1000) == chunked_counts.split_contiguous(texts, 2)
    chunks = chunked_counts.split_bounded(texts, 1, max_chars=20)
    assert [t for c in chunks for t in c] == texts and all(chunks)  # contiguous, every text once, none empty
    # by hand: 101 characters, ceil(101 / 20) = 6 shares of 16.8; running counts 5, 35, 40, 45, 50,
    # 100, 101: the shares at 16.8 and 33.7 end with the text ending at 35, those at 50.5, 67.3 and
    # 84.2 with the one ending at 100 (the 50-character text takes its three shares along)
    assert [len(c) for c in chunks] == [2, 4, 1]
    assert all(sum(map(len, c)) <= 101 / 6 + len(c[-1]) for c in chunks)  # a share plus the last text
    assert chunked_counts.split_bounded([], 1) == [[]]


@pytest.mark.parametrize("config", [FeaturizerConfig(), FeaturizerConfig(ngrams=(1, 3), char_ngrams=(2, 3), min_df=2)],
                         ids=["default", "char-ngrams"])
def test_small_chunks_in_process_change_nothing(monkeypatch, config):
    # Reference: the featurizer counting all texts as one chunk, itself checked against CountVectorizer above
    whole = Featurizer(config)
    X, T = whole.fit_transform(TEXTS), whole.transform(NEW_TEXTS)
    monkeypatch.setattr(chunked_counts, "CHUNK_CHARS", 300)  # about 15 texts a chunk
    assert len(chunked_counts.split_bounded(TEXTS, 1)) > 20
    cut = Featurizer(config)
    assert csr_arrays_equal(cut.fit_transform(TEXTS), X) and cut.feature_names == whole.feature_names
    assert np.array_equal(cut.document_frequency, whole.document_frequency)
    assert csr_arrays_equal(cut.transform(NEW_TEXTS), T)
    # Reference: scikit-learn's CountVectorizer, for the word block of the default configuration
    if config.char_ngrams is None:
        ref = reference_vectorizer(FeaturizerConfig(weighting="count", normalize=False, min_df=config.min_df))
        R = canonical(ref.fit_transform(TEXTS))
        assert csr_arrays_equal(cut.from_counts(R), X)
