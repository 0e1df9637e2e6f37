"""The feature store: written in chunks, it holds the matrix the featurizer gives in memory; it refuses
a changed source and a mismatched featurizer; training from it equals training from the file.

References named beside each check: scikit-learn's vectorizers (CountVectorizer, TfidfTransformer,
HashingVectorizer), lintext's own in-memory featurizer and split (themselves checked against
scikit-learn in test_featurizer.py and test_readers.py), NumPy's seeded generator for the shuffles
(the draws written out in the test), and hand-worked examples.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.feature_extraction.text import CountVectorizer, HashingVectorizer, TfidfTransformer
from typer.testing import CliRunner

import lintext.engine.kernels
from lintext.cli import app
from lintext.engine.options import TrainOptions
from lintext.engine.trainer import fit
from lintext.errors import ConfigError, InputError
from lintext.from_store import featurize, rows_of
from lintext.pipeline import build_model, evaluate, prepare_data
from lintext.predictions import prediction_rows
from lintext.text.config import FeaturizerConfig
from lintext.text.readers import read_corpus
from lintext.text.split import dev_mask, split_dev
from lintext.text.streaming import scan_labels
from tests.conftest import DEMO, small_corpus_rows, write_csv

CONFIGS = [
    FeaturizerConfig(),
    FeaturizerConfig(hash_space=2**12),
    FeaturizerConfig(char_ngrams=(3, 4), max_features=400, weighting="log"),
    FeaturizerConfig(ngrams=(1, 1), min_df=1, max_df=0.5, weighting="count", normalize=False),
]


@pytest.fixture
def corpus_csv(tmp_path):
    return write_csv(tmp_path / "corpus.csv", small_corpus_rows(n_per_label=40))


def in_file_order(store, part="data"):
    """The part's matrix and labels with rows in file order (shards are dealt at random; records say where)."""
    X, y = store.matrix(part)
    records = np.concatenate([store.load_shard(part, k).records for k in range(len(store.shards(part)))])
    order = np.argsort(records)
    return X[order], y[order]


def same_matrix(a, b) -> bool:
    a, b = sp.csr_matrix(a), sp.csr_matrix(b)
    return (a.shape == b.shape and np.array_equal(a.indptr, b.indptr) and np.array_equal(a.indices, b.indices)
            and np.array_equal(a.data, b.data))


@pytest.mark.parametrize("config", CONFIGS, ids=["default", "hashing", "char-maxfeatures", "count-maxdf"])
@pytest.mark.parametrize("shard_rows", [1000, 7])
def test_store_round_trips_to_the_matrix_of_the_in_memory_featurizer(corpus_csv, tmp_path, config, shard_rows):
    # Reference: lintext's in-memory read -> split -> fit_transform (prepare_data), bit for bit, for
    # one shard and for shards of 7 rows (chunks of 7 records counted one at a time).
    store = featurize(corpus_csv, tmp_path / "store", featurizer=config, shard_rows=shard_rows, seed=3)
    prepared = prepare_data(corpus_csv, featurizer=config, seed=3)
    X, y = store.matrix("data")
    X_dev, y_dev = in_file_order(store, "dev")
    records = np.concatenate([store.load_shard("data", k).records for k in range(len(store.shards("data")))])
    order = np.argsort(records)  # several shards: rows dealt to shards at random, each in file order
    X, y = X[order], y[order]
    assert same_matrix(X, prepared.X) and same_matrix(X_dev, prepared.X_dev)
    assert np.array_equal(y, prepared.y) and np.array_equal(y_dev, prepared.y_dev) and store.labels == prepared.labels
    feat, ref = store.featurizer, prepared.featurizer
    assert feat.n_documents == ref.n_documents and np.array_equal(feat.document_frequency, ref.document_frequency)
    assert feat.feature_names == ref.feature_names
    if shard_rows == 7:
        assert [s["rows"] for s in store.shards("data")][:-1] == [7] * (len(store.shards("data")) - 1)
        # dealt at random: the first shard is not the first rows, and each shard is in file order
        first = store.load_shard("data", 0).records
        assert first.tolist() != list(range(7)) and np.all(np.diff(first) > 0)
    # Source positions: each row's record number and "file:line" (header on line 1, record k on line k + 2).
    assert records[order].tolist() == [int(s.rsplit(":", 1)[1]) - 2 for s in prepared.train_set.sources]
    sources = sum((store.sources("data", k) for k in range(len(store.shards("data")))), [])
    assert [sources[i] for i in order] == prepared.train_set.sources


def test_store_matches_scikit_learn_vectorizers(corpus_csv, tmp_path):
    # Reference: scikit-learn. CountVectorizer(1-2 grams, min_df=2) + TfidfTransformer(sublinear_tf=True) (the
    # default log-tfidf: 1 + ln count, l2, smooth idf)
    # fitted on the training rows; HashingVectorizer counts for hashing mode before weighting.
    store = featurize(corpus_csv, tmp_path / "s", dev_fraction=0, shard_rows=11)
    texts = read_corpus(corpus_csv).texts
    counts = CountVectorizer(ngram_range=(1, 2), min_df=2).fit_transform(texts)
    assert abs(in_file_order(store)[0] - TfidfTransformer(sublinear_tf=True).fit_transform(counts)).max() < 1e-12
    hashed = featurize(corpus_csv, tmp_path / "h", dev_fraction=0, shard_rows=11,
                       featurizer=FeaturizerConfig(hash_space=2**10, min_df=1, weighting="count", normalize=False))
    ref = HashingVectorizer(n_features=2**10, ngram_range=(1, 2), alternate_sign=False, norm=None).transform(texts)
    assert abs(in_file_order(hashed)[0] - ref).max() == 0


def test_streamed_split_is_the_in_memory_split():
    # Reference: the documented draw written out with NumPy's seeded generator (per label in sorted
    # order, round(fraction * count) members, at least 1 and at most count - 1, from one permutation),
    # and lintext.text.split.split_dev on the corpus read in memory: the same rows.
    path = DEMO / "train.csv"
    corpus = read_corpus(path)
    ids, names = scan_labels(path, None, True)
    assert names == corpus.label_names
    number = {source: k for k, source in enumerate(corpus.sources)}  # records span lines: number them
    for seed, fraction in ((0, 0.1), (7, 0.25)):
        rng, expected = np.random.default_rng(seed), []
        for k in range(len(names)):
            members = np.flatnonzero(ids == k)
            expected += rng.permutation(members)[:min(max(1, int(round(fraction * len(members)))), len(members) - 1)].tolist()
        train, dev = split_dev(corpus, fraction, seed)
        assert sorted(number[s] for s in dev.sources) == sorted(expected)
        assert [number[s] for s in train.sources] == sorted(set(range(len(corpus))) - set(expected))
        assert np.flatnonzero(dev_mask(ids, names, fraction, seed, path)).tolist() == sorted(expected)


def test_dev_file_rows_are_a_part_of_their_own(small_split, tmp_path):
    store = featurize(small_split["train"], tmp_path / "s", dev=small_split["dev"])
    prepared = prepare_data(small_split["train"], dev=small_split["dev"])
    assert store.rows("data") == 90 and store.rows("dev") == 15
    assert same_matrix(store.matrix("dev")[0], prepared.X_dev)
    assert store.meta["split"]["dev"] == "file"


def test_changed_source_is_refused_and_a_touched_one_accepted(corpus_csv, tmp_path):
    featurize(corpus_csv, tmp_path / "s")
    os.utime(corpus_csv, ns=(1, 10**18))  # same content, another time: the SHA-256 decides, accepted
    prepare_data(tmp_path / "s")
    text = corpus_csv.read_text(encoding="utf-8")
    corpus_csv.write_text(text.replace("invoice", "invoicE", 1), encoding="utf-8")  # same size, one byte changed
    with pytest.raises(InputError, match="changed since the store was written .same size, different content"):
        prepare_data(tmp_path / "s")
    corpus_csv.write_text(text + "one more,billing\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"changed since the store was written \(\d+ bytes, now \d+\)"):
        build_model(tmp_path / "s")
    corpus_csv.unlink()
    with pytest.raises(InputError, match="no longer exists"):
        prepare_data(tmp_path / "s")


def test_mismatched_featurizer_is_refused(small_split, tmp_path):
    model = build_model(small_split["train"], dev=small_split["dev"], options={"epochs": 2})
    other = build_model(small_split["train"], dev=small_split["dev"], featurizer={"ngrams": (1, 1)}, options={"epochs": 2})
    model.save(tmp_path / "m")
    store = featurize(small_split["test"], tmp_path / "t", featurizer_from=tmp_path / "m")
    assert evaluate(model, store.path)["documents"] == 15
    with pytest.raises(InputError, match="featurized differently from the model: ngrams is \\[1, 2\\] here and \\[1, 1\\] there"):
        evaluate(other, store.path)
    # a store of the training data made with other options: refused by train when the options say otherwise
    featurize(small_split["train"], tmp_path / "s", featurizer={"min_df": 1})
    with pytest.raises(ConfigError, match="--min-df=2: the store .* was featurized with 1"):
        prepare_data(tmp_path / "s", featurizer={"min_df": 2})


def test_training_from_a_one_shard_store_equals_training_from_the_file(corpus_csv, tmp_path):
    # Same seed, same options: the same matrix, the same shuffles, so the same weights bit for bit,
    # and the same evidence for the report.
    for config in (None, {"hash_space": 2**12}):
        featurize(corpus_csv, tmp_path / "s", featurizer=config, seed=5)
        options = {"epochs": 4, "seed": 5, "optimizer": "adagrad", "learning_rate": 0.3}
        from_file = build_model(corpus_csv, featurizer=config, options=options)
        from_store = build_model(tmp_path / "s", options=options)
        assert np.array_equal(from_file.coef, from_store.coef) and np.array_equal(from_file.intercept, from_store.intercept)
        strip = lambda hist: [{k: v for k, v in h.items() if k != "seconds"} for h in hist]  # noqa: E731
        assert strip(from_file.info["history"]) == strip(from_store.info["history"])
        assert from_file.info["explain"] == from_store.info["explain"]
        texts_only = lambda m: {k: v for k, v in m.items() if k != "empty_texts"}  # noqa: E731  (a store keeps no texts)
        assert texts_only(from_file.info["metrics"]["dev"]) == texts_only(from_store.info["metrics"]["dev"])
        assert from_store.info["metrics"]["dev"]["empty_texts"] is None
        assert from_file.info["dev_errors"] == from_store.info["dev_errors"] and from_file.calibration == from_store.calibration


def test_shards_are_shuffled_as_documented(corpus_csv, tmp_path, monkeypatch):
    # The documented draws (lintext.engine.shards): per epoch rng.permutation(number of shards), then
    # rng.permutation(rows) of each shard in that order, from np.random.default_rng(seed).
    store = featurize(corpus_csv, tmp_path / "s", dev_fraction=0, shard_rows=25)
    sizes = [s["rows"] for s in store.shards("data")]
    assert sizes == [25, 25, 25, 25, 20]
    X, _ = rows_of(store, "data", store.labels, stream=True)
    seen = []
    real = lintext.engine.kernels.run_epoch

    def watch(indptr, indices, data, y, order, *args, **kwargs):
        seen.append((len(indptr) - 1, order.copy()))
        return real(indptr, indices, data, y, order, *args, **kwargs)

    monkeypatch.setattr(lintext.engine.kernels, "run_epoch", watch)
    options = TrainOptions(epochs=2, patience=0, seed=11)
    first = fit(X, None, len(store.labels), options=options)
    rng = np.random.default_rng(11)
    expected = []
    for _ in range(2):
        for k in rng.permutation(len(sizes)).tolist():
            expected.append((sizes[k], rng.permutation(sizes[k])))
    assert len(seen) == len(expected)
    assert all(n == m and np.array_equal(a, b) for (n, a), (m, b) in zip(seen, expected))
    again = fit(X, None, len(store.labels), options=options)
    other = fit(X, None, len(store.labels), options=TrainOptions(epochs=2, patience=0, seed=12))
    assert np.array_equal(first.coef, again.coef) and not np.array_equal(first.coef, other.coef)


@pytest.mark.slow
def test_sharded_training_learns_as_well(tmp_path):
    # Sanity, not identity: several shards change the order of the rows, not what is learnt. On the
    # demo corpus a shard-wise shuffle reaches a dev accuracy within 0.03 of the full shuffle
    # (measured here, both runs the same options; scripts/bench_store.py measures it on more corpora).
    featurize(DEMO / "train.csv", tmp_path / "s", dev=DEMO / "dev.csv", shard_rows=500)
    options = {"epochs": 8, "patience": 0}
    streamed = build_model(tmp_path / "s", options=options)
    assert streamed.info["data"]["shards"] == 10  # 4,800 documents in shards of 500
    in_memory = prepare_data(tmp_path / "s", stream=False)
    full = fit(in_memory.X, in_memory.y, len(in_memory.labels), in_memory.X_dev, in_memory.y_dev, TrainOptions(**options))
    full_accuracy = full.history[-1]["dev_accuracy"]
    assert abs(streamed.info["metrics"]["dev"]["accuracy"] - full_accuracy) < 0.03
    assert len(streamed.info["explain"]["rare_features"]) == 30


def test_predict_and_evaluate_from_a_store_equal_the_file(small_split, tmp_path):
    model = build_model(small_split["train"], dev=small_split["dev"], options={"epochs": 3})
    model.save(tmp_path / "m")
    featurize(small_split["test"], tmp_path / "t", featurizer_from=tmp_path / "m", shard_rows=4)
    assert list(prediction_rows(model, small_split["test"], top_labels=2)) == \
        list(prediction_rows(model, tmp_path / "t", top_labels=2))
    from_file, from_store = evaluate(model, small_split["test"]), evaluate(model, tmp_path / "t")
    assert from_file.pop("empty_texts") == 0 and from_store.pop("empty_texts") is None  # a store keeps no texts
    assert from_file == from_store


runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.mark.slow
def test_cli_featurize_train_evaluate_predict(small_split, tmp_path):
    result = run("featurize", small_split["train"], "--dev", small_split["dev"], "--out", tmp_path / "s", "--shard-rows", 40)
    assert result.exit_code == 0, result.output
    assert "data 90 rows in 3 shard(s), dev 15 rows in 1 shard(s)" in result.output
    assert run("train", tmp_path / "s", "--out", tmp_path / "m", "--epochs", 3, "-q").exit_code == 0
    assert run("featurize", small_split["test"], "--featurizer-from", tmp_path / "m", "--out", tmp_path / "t").exit_code == 0
    assert "15 documents" in run("evaluate", tmp_path / "m", tmp_path / "t").output
    assert run("predict", tmp_path / "m", tmp_path / "t").output == run("predict", tmp_path / "m", small_split["test"]).output
    bad = run("train", tmp_path / "s", "--out", tmp_path / "m2", "--ngrams", "1-3")
    assert bad.exit_code == 2 and bad.output.strip().splitlines() == [
        f"error: --ngrams='1-3': the store {(tmp_path / 's').resolve()} was featurized with 1-2; drop the option or featurize again"]
    small_split["train"].write_text(small_split["train"].read_text() + "late bill,billing\n")
    bad = run("train", tmp_path / "s", "--out", tmp_path / "m2")
    assert bad.exit_code == 2 and len(bad.output.strip().splitlines()) == 1 and "changed since the store was written" in bad.output
    stats = run("stats", tmp_path / "s")
    assert stats.exit_code == 2 and "is a feature store" in stats.output
    assert not (tmp_path / "m2").exists()


def test_probe_reads_a_sharded_store_as_the_file(small_split, tmp_path):
    # The probe's rows from a store of 3 shards, stacked: the same steps as from the file (same seed).
    from lintext.tuning.probe import probe

    featurize(small_split["train"], tmp_path / "s", dev=small_split["dev"], shard_rows=40)
    from_store = probe(tmp_path / "s", steps_per_rung=10)
    from_file = probe(small_split["train"], dev=small_split["dev"], steps_per_rung=10)
    assert np.array_equal(from_store.mean_losses, from_file.mean_losses) and from_store.verdict == from_file.verdict


def test_featurize_replaces_only_a_store(small_split, tmp_path):
    # The output rules of every lintext folder (lintext.outputs): a store replaces a store, never a
    # folder lintext did not write (unless --force), and its marker names the kind "store".
    import json

    assert run("featurize", small_split["train"], "--out", tmp_path / "s", "-q").exit_code == 0
    assert json.loads((tmp_path / "s" / ".lintext.json").read_text())["kind"] == "store"
    assert run("featurize", small_split["train"], "--out", tmp_path / "s", "-q").exit_code == 0
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me")
    refused = run("featurize", small_split["train"], "--out", tmp_path / "mine", "-q")
    assert refused.exit_code == 2 and len(refused.output.strip().splitlines()) == 1
    assert (tmp_path / "mine" / "notes.txt").read_text() == "keep me"


def test_texts_read_back_from_a_headerless_csv_are_its_rows(tmp_path):
    # Reference: Python's csv module reading the same file (no header line: record k is row k).
    import csv

    from lintext.from_store import texts_by_record
    from lintext.text.readers import ReaderOptions

    path = tmp_path / "plain.csv"
    with open(path, "w", encoding="utf-8", newline="") as fh:
        csv.writer(fh, lineterminator="\n").writerows((label, text) for text, label in small_corpus_rows(n_per_label=10))
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.reader(fh))
    reader = ReaderOptions(header=False, label_column="1", text_column="2")
    store = featurize(path, tmp_path / "s", reader=reader, dev_fraction=0)
    wanted = {0, 1, 7, len(rows) - 1}
    assert texts_by_record(store, wanted) == {k: rows[k][1] for k in wanted}


def test_a_weight_column_with_a_store_is_refused(small_split, tmp_path):
    # A store keeps no weights: --weight-column is refused by name rather than dropped (training from
    # the file weights the documents), also with a dev file that has no such column.
    from lintext.text.readers import ReaderOptions

    featurize(small_split["train"], tmp_path / "s", dev_fraction=0)
    weighted = ReaderOptions(weight_column="w")
    for dev in (None, small_split["dev"]):
        with pytest.raises(ConfigError, match="--weight-column='w': a feature store keeps no per-document weights"):
            prepare_data(tmp_path / "s", dev=dev, reader=weighted)
    assert prepare_data(tmp_path / "s", dev=small_split["dev"]).y_dev.shape == (15,)


def test_dev_errors_of_a_store_run_once_and_equal_the_file(tmp_path, monkeypatch):
    # Reference: the dev errors of the same model trained from the file (texts from the corpus in memory).
    import lintext.from_store

    rows = small_corpus_rows(n_per_label=40)
    names = sorted({label for _, label in rows})
    noisy = [(t, names[(names.index(label) + 1) % 3] if k % 5 == 0 else label) for k, (t, label) in enumerate(rows)]
    path = write_csv(tmp_path / "noisy.csv", noisy)  # every fifth label moved: dev errors to show
    calls = []
    real = lintext.from_store.dev_errors
    monkeypatch.setattr(lintext.from_store, "dev_errors", lambda *a, **k: calls.append(1) or real(*a, **k))
    featurize(path, tmp_path / "s", seed=2)
    options = {"epochs": 2, "seed": 2}
    from_store, from_file = build_model(tmp_path / "s", options=options), build_model(path, options=options)
    assert calls == [1] and from_store.info["dev_errors"]["shown"]
    assert from_store.info["dev_errors"] == from_file.info["dev_errors"]


def test_featurize_writes_the_vocabulary_once_and_reads_it_never(corpus_csv, tmp_path, monkeypatch):
    # The fitted featurizer is kept in memory; its vocabulary file is written once, with store.json.
    from lintext.text.featurizer import Featurizer

    seen = []
    save, load = Featurizer.save_vocabulary, Featurizer.load.__func__
    monkeypatch.setattr(Featurizer, "save_vocabulary", lambda self, path: seen.append("save") or save(self, path))
    monkeypatch.setattr(Featurizer, "load", classmethod(lambda cls, *a, **k: seen.append("load") or load(cls, *a, **k)))
    featurize(corpus_csv, tmp_path / "s", featurizer=FeaturizerConfig(char_ngrams=(3, 4)))
    assert seen == ["save"]


def test_evidence_from_a_store_ranks_the_rare_columns_once(corpus_csv, tmp_path, monkeypatch):
    # The ranking that picks the rows to read back is the one the evidence shows (equal to the file's
    # evidence: test_training_from_a_one_shard_store_equals_training_from_the_file).
    import lintext.evidence
    import lintext.from_store

    calls = []
    real = lintext.evidence.rare_columns
    counted = lambda *a, **k: calls.append(1) or real(*a, **k)  # noqa: E731
    monkeypatch.setattr(lintext.evidence, "rare_columns", counted)
    monkeypatch.setattr(lintext.from_store, "rare_columns", counted)
    featurize(corpus_csv, tmp_path / "s")
    assert build_model(tmp_path / "s", options={"epochs": 1}).info["explain"]["rare_features"] and calls == [1]


@pytest.mark.parametrize("shard_rows", [1000, 25])
def test_hashing_mode_writes_each_shard_once(corpus_csv, tmp_path, monkeypatch, shard_rows):
    # The raw counts are weighted as each shard is written, not written raw and rewritten: one
    # data.npy saved per shard of the store (its matrix: test_store_round_trips_to_the_matrix...).
    saved = []
    save = np.save
    monkeypatch.setattr(np, "save", lambda path, *a, **k: saved.append(os.path.basename(path)) or save(path, *a, **k))
    store = featurize(corpus_csv, tmp_path / "s", featurizer=FeaturizerConfig(hash_space=2**12), shard_rows=shard_rows)
    assert saved.count("data.npy") == len(store.shards("data")) + len(store.shards("dev")) > 1
