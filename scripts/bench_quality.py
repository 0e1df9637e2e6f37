#!/usr/bin/env python3
"""Test quality of lintext's defaults against two scikit-learn baselines, on the same train/test
files of several corpora, mean over seeds; and AdaGrad's default run against SGDClassifier.

Corpora (train/test CSV files written once under ``/tmp/lintext-bench/quality/``):

* ``demo``: the invented demo corpus, ``data/demo/train.csv`` and ``test.csv``;
* ``fortunes``: Debian's fortunes package (``../shared/tools/fortunes_corpus.sh``), 80/20 split
  (here and below, labels with fewer than 20 texts left out);
* ``manpages``: the manual pages of the installed Debian packages labelled by section
  (``scripts/make_manpages.py``), 80/20 split;
* ``synthetic``: ``scripts/make_synth.py`` (15,000 texts, 20 labels, 50,000 invented words), 80/20.

Per corpus and seed (``--seeds``, default 5):

* **lintext**: its defaults as ``lintext train TRAIN --test TEST`` runs them (a stratified tenth
  of TRAIN held out for dev, seeded by the seed), test accuracy and macro-F1;
* **(A)** ``TfidfVectorizer()`` + ``SGDClassifier(random_state=seed)``, scikit-learn's defaults,
  fitted on all of TRAIN;
* **(B)** ``TfidfVectorizer(ngram_range=(1, 2), min_df=2, sublinear_tf=True)`` + ``LinearSVC(random_state=seed)``;
* **AdaGrad, 5 epochs** (``--optimizer adagrad --epochs 5``, every other option its default)
  against ``SGDClassifier(loss="log_loss", max_iter=5, tol=None, random_state=seed)`` on the same
  feature matrix (lintext's, of the same training rows), test accuracy.

``--candidates`` also scores candidate defaults (option sets below, and any given as JSON with
``--candidate``) on the same featurized data, for choosing the defaults. Prints a table and
writes everything, every seed, to ``bench-results/quality.json``.

    .venv/bin/python scripts/bench_quality.py [--seeds 5] [--corpora demo,fortunes] [--candidates]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402
from sklearn.exceptions import ConvergenceWarning  # noqa: E402
from sklearn.feature_extraction.text import TfidfVectorizer  # noqa: E402
from sklearn.linear_model import SGDClassifier  # noqa: E402
from sklearn.metrics import accuracy_score, f1_score  # noqa: E402
from sklearn.svm import LinearSVC  # noqa: E402

from bench_common import fortunes_rows, labelled_tsv_rows, load, write_csv  # noqa: E402
from lintext.engine.options import TrainOptions  # noqa: E402
from lintext.engine.trainer import fit  # noqa: E402
from lintext.pipeline import prepare_data  # noqa: E402
from lintext.text.readers import read_corpus  # noqa: E402

BENCH = Path("/tmp/lintext-bench")
FOLDER = BENCH / "quality"
OUT = ROOT / "bench-results" / "quality.json"
CORPORA = ("demo", "fortunes", "manpages", "synthetic")
# Candidate defaults measured with --candidates: training options (the rest the defaults).
BEFORE = {"loss": "softmax", "learning_rate": 3.0, "average": 2, "stop_metric": "dev-loss", "patience": 5}
CANDIDATES = {
    "before: softmax sgd 3, avg 2": {"options": {**BEFORE, "refit": False}},
    "before, with refit": {"options": BEFORE},
    "now, no refit": {"options": {"refit": False}},
    "now, patience 5": {"options": {"patience": 5}},
    "now, sgd 1": {"options": {"learning_rate": 1.0}},
    "now, --loss softmax": {"options": {"loss": "softmax"}},
    "now, balanced": {"options": {"label_weights": "balanced"}},
}


# --------------------------------------------------------------------------- corpora


def split_files(name: str, rows: list, min_documents: int = 20) -> tuple[Path, Path]:
    """An 80/20 split (seed 0) of ``(text, label)`` rows into train.csv and test.csv, labels with
    fewer than ``min_documents`` texts left out (a dev split needs a few of each)."""
    counts: dict = {}
    for _, label in rows:
        counts[label] = counts.get(label, 0) + 1
    rows = [row for row in rows if counts[row[1]] >= min_documents]
    order = np.random.default_rng(0).permutation(len(rows))
    cut = int(0.8 * len(rows))
    train = write_csv(FOLDER / name / "train.csv", [rows[i] for i in order[:cut]])
    test = write_csv(FOLDER / name / "test.csv", [rows[i] for i in order[cut:]])
    return train, test


def corpus_files(name: str, log) -> tuple[Path, Path]:
    """Train and test files of a corpus, built on first use."""
    if name == "demo":
        return ROOT / "data" / "demo" / "train.csv", ROOT / "data" / "demo" / "test.csv"
    train, test = FOLDER / name / "train.csv", FOLDER / name / "test.csv"
    if train.is_file() and test.is_file():
        return train, test
    log(f"building the {name} corpus")
    if name == "fortunes":
        return split_files(name, [(text, label) for text, label, _ in fortunes_rows()])
    if name == "manpages":
        tsv = BENCH / "manpages.tsv"
        if not tsv.is_file():
            subprocess.run([sys.executable, str(HERE / "make_manpages.py"), "--out", str(tsv)], check=True)
        return split_files(name, [(text, label) for text, label, _ in labelled_tsv_rows(tsv)])
    if name == "synthetic":
        from make_synth import make_corpus

        texts, labels = make_corpus(documents=15_000, features=50_000, labels=20, seed=0)
        return split_files(name, list(zip(texts, labels)))
    raise ValueError(f"unknown corpus {name!r}")


# --------------------------------------------------------------------------- one seed


def scores(y_true, y_pred) -> dict:
    return {"accuracy": float(accuracy_score(y_true, y_pred)),
            "macro_f1": float(f1_score(y_true, y_pred, average="macro", zero_division=0))}


def baselines(train, test, seed) -> dict:
    out = {}
    for key, vectorizer, model in (
        ("A", TfidfVectorizer(), SGDClassifier(random_state=seed)),
        ("B", TfidfVectorizer(ngram_range=(1, 2), min_df=2, sublinear_tf=True), LinearSVC(random_state=seed)),
    ):
        started = time.perf_counter()
        X = vectorizer.fit_transform(train.texts)
        model.fit(X, train.labels)
        out[key] = {**scores(test.labels, model.predict(vectorizer.transform(test.texts))),
                    "seconds": round(time.perf_counter() - started, 3)}
    return out


def prepared(train_path, test, seed, featurizer: dict):
    """``prepare_data`` as ``lintext train`` runs it, and the test rows featurized alike."""
    started = time.perf_counter()
    prep = prepare_data(train_path, dev_fraction=0.1, seed=seed, featurizer=featurizer or None)
    known = {name: k for k, name in enumerate(prep.labels)}
    keep = np.array([lab in known for lab in test.labels])
    y_test = np.array([known[lab] for lab in np.asarray(test.labels)[keep]])
    X_test = prep.featurizer.transform(test.texts)[keep]
    return prep, X_test, y_test, time.perf_counter() - started


def run(data, options: dict) -> dict:
    """One lintext fit on prepared data, scored on the test rows."""
    prep, X_test, y_test, featurize_seconds = data
    began = time.perf_counter()
    try:
        result = fit(prep.X, prep.y, len(prep.labels), prep.X_dev, prep.y_dev, TrainOptions(**options),
                     label_names=prep.labels)
    except Exception as exc:  # a candidate that diverges is recorded, not fatal
        return {"error": str(exc)}
    pred = (np.asarray(X_test @ result.coef) + result.intercept).argmax(axis=1)
    return {**scores(y_test, pred), "epochs": len(result.history), "best_epoch": result.best_epoch,
            "seconds": round(time.perf_counter() - began + featurize_seconds, 3)}


def lintext_runs(train_path, test, seed, candidates: dict) -> dict:
    """lintext's defaults (and candidates, each ``{"featurizer": {...}, "options": {...}}``) on the
    data ``lintext train`` would prepare, and AdaGrad against SGDClassifier on the same matrix."""
    cache: dict = {}

    def data_for(featurizer: dict):
        key = json.dumps(featurizer, sort_keys=True)
        if key not in cache:
            cache[key] = prepared(train_path, test, seed, featurizer)
        return cache[key]

    default = data_for({})
    out = {"defaults": run(default, {"seed": seed})}
    out["candidates"] = {name: run(data_for(c.get("featurizer", {})), {**c.get("options", {}), "seed": seed})
                         for name, c in candidates.items()}
    out["adagrad_5"] = run(default, {"optimizer": "adagrad", "epochs": 5, "seed": seed})
    prep, X_test, y_test, _ = default
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        sgd = SGDClassifier(loss="log_loss", max_iter=5, tol=None, random_state=seed).fit(prep.X, prep.y)
    out["sgdclassifier_log_5"] = scores(y_test, sgd.predict(X_test))
    return out


# --------------------------------------------------------------------------- table


def mean(records, *keys) -> float:
    values = []
    for r in records:
        for k in keys:
            r = r.get(k, {}) if isinstance(r, dict) else {}
        if isinstance(r, (int, float)):
            values.append(r)
    return float(np.mean(values)) if values else float("nan")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--corpora", default=",".join(CORPORA))
    parser.add_argument("--candidates", action="store_true", help="also score the candidate defaults")
    parser.add_argument("--candidate", action="append", default=[], metavar="NAME=JSON",
                        help='a candidate instead of the list, e.g. \'sgd5={"options": {"learning_rate": 5}}\'')
    parser.add_argument("--out", default=str(OUT))
    args = parser.parse_args(argv)
    log = lambda message: print(message, file=sys.stderr, flush=True)  # noqa: E731
    candidates = dict(CANDIDATES) if args.candidates or args.candidate else {}
    if args.candidate:
        candidates = {}
        for item in args.candidate:
            name, _, text = item.partition("=")
            candidates[name] = json.loads(text)
    results = {"load_before": load(), "seeds": args.seeds, "defaults": TrainOptions().to_json(), "corpora": {}}
    for name in args.corpora.split(","):
        train_path, test_path = corpus_files(name, log)
        train, test = read_corpus(train_path), read_corpus(test_path, min_labels=1)
        runs = []
        for seed in range(args.seeds):
            record = {"seed": seed, "baselines": baselines(train, test, seed),
                      **lintext_runs(train_path, test, seed, candidates), "load": load()}
            runs.append(record)
            log(f"{name} seed {seed}: lintext {record['defaults'].get('macro_f1', float('nan')):.4f} "
                f"A {record['baselines']['A']['macro_f1']:.4f} B {record['baselines']['B']['macro_f1']:.4f} "
                + " ".join(f"[{c} {r.get('macro_f1', float('nan')):.4f}]" for c, r in record["candidates"].items()))
        results["corpora"][name] = {"train": str(train_path), "test": str(test_path), "train_documents": len(train),
                                    "test_documents": len(test), "labels": len(train.label_names), "runs": runs}
    results["load_after"] = load()
    print_table(results)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    with open(args.out, "w", encoding="utf-8") as fh:
        json.dump(results, fh, indent=1)
    log(f"written to {args.out}")
    return 0


def print_table(results) -> None:
    print(f"\nmean test scores over {results['seeds']} seeds (load {results['load_before']} -> {results['load_after']})")
    head = f"{'corpus':<10} {'docs':>6} {'labels':>6} | {'lintext F1':>10} {'acc':>6} | {'(A) F1':>7} {'acc':>6} | " \
           f"{'(B) F1':>7} {'acc':>6} | {'F1 - best':>9} {'acc - best':>10} | {'adagrad5':>8} {'sgd-log5':>8}"
    print(head)
    print("-" * len(head))
    for name, c in results["corpora"].items():
        runs = c["runs"]
        f1, acc = mean(runs, "defaults", "macro_f1"), mean(runs, "defaults", "accuracy")
        a = (mean(runs, "baselines", "A", "macro_f1"), mean(runs, "baselines", "A", "accuracy"))
        b = (mean(runs, "baselines", "B", "macro_f1"), mean(runs, "baselines", "B", "accuracy"))
        best = a if a[0] >= b[0] else b
        print(f"{name:<10} {c['train_documents']:>6} {c['labels']:>6} | {f1:>10.4f} {acc:>6.4f} | {a[0]:>7.4f} {a[1]:>6.4f} | "
              f"{b[0]:>7.4f} {b[1]:>6.4f} | {f1 - best[0]:>+9.4f} {acc - max(a[1], b[1]):>+10.4f} | "
              f"{mean(runs, 'adagrad_5', 'accuracy'):>8.4f} {mean(runs, 'sgdclassifier_log_5', 'accuracy'):>8.4f}")
    names = list(next(iter(results["corpora"].values()))["runs"][0]["candidates"]) if results["corpora"] else []
    if names:
        print("\ncandidates, mean test macro-F1 (accuracy)")
        print(f"{'candidate':<28} " + " ".join(f"{n:>16}" for n in results["corpora"]))
        for cand in names:
            cells = [f"{mean(c['runs'], 'candidates', cand, 'macro_f1'):.4f} ({mean(c['runs'], 'candidates', cand, 'accuracy'):.4f})"
                     for c in results["corpora"].values()]
            print(f"{cand:<28} " + " ".join(f"{x:>16}" for x in cells))


if __name__ == "__main__":
    sys.exit(main())
