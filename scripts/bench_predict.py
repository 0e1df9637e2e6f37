#!/usr/bin/env python3
"""How long does ``lintext predict`` take on a handful of documents with a large model?

Builds a synthetic model of ``--features`` word 1-2-gram features by ``--labels`` labels (tf-idf,
unit-length rows, random weights; the vocabulary is invented syllable words) once, in
``--folder``, then times in fresh processes, ``--repeat`` times each, keeping the fastest:

- ``lintext predict MODEL FILE`` end to end (the target: under 1.5 s on an idle machine for
  300,000 x 58), and the phases inside one process: Python start-up and imports, reading
  ``model.json``, the vocabulary, the weights, featurizing, scoring, writing the rows;
- side by side, the same job through scikit-learn: a ``Pipeline(TfidfVectorizer,
  LogisticRegression)`` holding the same vocabulary, idf and weights, loaded with joblib
  (pickle: the way scikit-learn models are usually kept) and asked ``predict_proba``.

Also reports the model directory's size on disk. Prints a table and writes JSON to
``bench-results/predict.json``.

    python scripts/bench_predict.py [--features 300000 --labels 58 --documents 5 --repeat 5]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

TARGET_SECONDS = 1.5
SYLLABLES = "ba be bi bo bu da de di do du ka ke ki ko ku la le li lo lu ma me mi mo mu na ne ni no nu".split()

PHASES = r"""
import sys, time, json
t0 = time.perf_counter()
from lintext.cli import app  # what `lintext` imports first
from lintext.model import open_model
from lintext.predictions import prediction_rows
from lintext.text.featurizer import Featurizer
t1 = time.perf_counter()
folder, data = sys.argv[1], sys.argv[2]
meta = json.load(open(folder + "/model.json", encoding="utf-8"))
t2 = time.perf_counter()
Featurizer.load(meta["featurizer"], folder + "/vocabulary.tsv")
t3 = time.perf_counter()
model = open_model(folder)
t4 = time.perf_counter()
texts = [line.rstrip("\n") for line in open(data, encoding="utf-8")]
X = model.featurizer.transform(texts)
t5 = time.perf_counter()
model.scores(texts)
t6 = time.perf_counter()
rows = list(prediction_rows(model, data))
t7 = time.perf_counter()
print(json.dumps({"imports": t1 - t0, "model.json": t2 - t1, "vocabulary": t3 - t2, "open_model (all)": t4 - t3,
                  "featurize": t5 - t4, "featurize + score": t6 - t5, "predict rows": t7 - t6}))
"""

SKLEARN = r"""
import sys, time, json
t0 = time.perf_counter()
import joblib
pipe = joblib.load(sys.argv[1])
t1 = time.perf_counter()
texts = [line.rstrip("\n") for line in open(sys.argv[2], encoding="utf-8")]
pipe.predict_proba(texts)
t2 = time.perf_counter()
print(json.dumps({"load": t1 - t0, "predict": t2 - t1}))
"""


def word(k: int) -> str:
    n = len(SYLLABLES)
    return SYLLABLES[k % n] + SYLLABLES[(k // n) % n] + SYLLABLES[(k // n // n) % n] + SYLLABLES[(k // n ** 3) % n]


def build(folder: Path, n_features: int, n_labels: int, seed: int = 0) -> dict:
    """A model directory (and the matching scikit-learn pipeline) with ``n_features`` word
    features: a third unigrams, the rest bigrams of them."""
    import joblib
    from sklearn.feature_extraction.text import TfidfVectorizer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline

    import lintext
    from lintext.text.featurizer import Featurizer, FeaturizerConfig, VOCAB_HEADER

    rng = np.random.default_rng(seed)
    n_words = max(10, n_features // 3)
    words = [word(k) for k in range(n_words)]
    names = set(words)
    while len(names) < n_features:
        a, b = rng.integers(0, n_words, size=2)
        names.add(f"{words[a]} {words[b]}")
    names = sorted(names)
    n_documents = 200_000
    df = rng.integers(2, 2000, size=n_features)
    folder.mkdir(parents=True, exist_ok=True)
    vocab = folder / "vocabulary-source.tsv"
    with open(vocab, "w", encoding="utf-8") as fh:
        fh.write(VOCAB_HEADER + "\n")
        for j, name in enumerate(names):
            fh.write(f"{name}\t{j}\t{df[j]}\n")
    config = FeaturizerConfig(ngrams=(1, 2), min_df=2)
    featurizer = Featurizer.load({"config": config.to_json(), "n_documents": n_documents}, vocab)
    coef = rng.normal(0, 0.3, size=(n_features, n_labels))
    intercept = rng.normal(0, 0.1, size=n_labels)
    labels = [f"label-{k:02d}" for k in range(n_labels)]
    info = {"training": {"optimizer": "sgd"}, "history": [], "data": {"train": "synthetic"}, "metrics": {}}
    model_dir = lintext.Model(featurizer, coef, intercept, labels, "softmax", info).save(folder / "model")
    vocab.unlink()

    vectorizer = TfidfVectorizer(ngram_range=(1, 2), vocabulary={n: j for j, n in enumerate(names)})
    vectorizer.fit(["x"])  # sets up the fixed vocabulary; idf set below
    vectorizer.idf_ = featurizer.idf()
    classifier = LogisticRegression()
    classifier.classes_ = np.array(labels)
    classifier.coef_ = np.ascontiguousarray(coef.T)
    classifier.intercept_ = intercept
    pipe = make_pipeline(vectorizer, classifier)
    joblib.dump(pipe, folder / "sklearn-pipeline.joblib")
    return {"model": model_dir, "sklearn": folder / "sklearn-pipeline.joblib", "words": words}


def timed(cmd: list, env=None) -> tuple[float, str]:
    started = time.perf_counter()
    done = subprocess.run(cmd, capture_output=True, text=True, env=env, check=True)
    return time.perf_counter() - started, done.stdout


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--features", type=int, default=300_000)
    parser.add_argument("--labels", type=int, default=58)
    parser.add_argument("--documents", type=int, default=5)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--folder", type=Path, default=Path("/tmp/lintext-bench/predict"))
    parser.add_argument("--out", type=Path, default=ROOT / "bench-results" / "predict.json")
    args = parser.parse_args()

    folder = args.folder / f"{args.features}x{args.labels}"
    if not (folder / "model" / "model.json").is_file() or not (folder / "sklearn-pipeline.joblib").is_file():
        print(f"building a {args.features:,} x {args.labels} model in {folder} ...", flush=True)
        build(folder, args.features, args.labels)
    rng = np.random.default_rng(1)
    vocab_words = [line.split("\t")[0] for line in open(folder / "model" / "vocabulary.tsv", encoding="utf-8")][1:]
    unigrams = [w for w in vocab_words if " " not in w]
    data = folder / "documents.txt"
    with open(data, "w", encoding="utf-8") as fh:
        for _ in range(args.documents):
            fh.write(" ".join(rng.choice(unigrams, size=40)) + "\n")

    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    lintext_bin = Path(sys.executable).with_name("lintext")
    cli = [str(lintext_bin), "predict", str(folder / "model"), str(data)] if lintext_bin.exists() else \
        [sys.executable, "-m", "lintext", "predict", str(folder / "model"), str(data)]
    timed(cli, env)  # warm the page cache
    runs = {"lintext predict (end to end)": [], "python -c pass": [], "scikit-learn joblib.load + predict_proba (end to end)": []}
    phases, sk_phases = [], []
    for _ in range(args.repeat):
        runs["lintext predict (end to end)"].append(timed(cli, env)[0])
        runs["python -c pass"].append(timed([sys.executable, "-c", "pass"], env)[0])
        seconds, text = timed([sys.executable, "-c", SKLEARN, str(folder / "sklearn-pipeline.joblib"), str(data)], env)
        runs["scikit-learn joblib.load + predict_proba (end to end)"].append(seconds)
        sk_phases.append(json.loads(text))
        phases.append(json.loads(timed([sys.executable, "-c", PHASES, str(folder / "model"), str(data)], env)[1]))

    best = {k: min(v) for k, v in runs.items()}
    phase_best = {k: min(p[k] for p in phases) for k in phases[0]}
    sk_best = {k: min(p[k] for p in sk_phases) for k in sk_phases[0]}
    size = sum(f.stat().st_size for f in (folder / "model").iterdir() if f.is_file())
    load = os.getloadavg()
    print(f"\nmodel: {args.features:,} features x {args.labels} labels, {size / 2**20:.1f} MiB on disk; "
          f"{args.documents} documents; best of {args.repeat}; load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
    print(f"{'what':58s} {'seconds':>8s}")
    for name, value in best.items():
        print(f"{name:58s} {value:8.3f}")
    print("phases of lintext predict, in one process:")
    for name, value in phase_best.items():
        print(f"  {name:56s} {value:8.3f}")
    print("phases of the scikit-learn pipeline:")
    for name, value in sk_best.items():
        print(f"  {name:56s} {value:8.3f}")
    ratio = best["lintext predict (end to end)"] / best["scikit-learn joblib.load + predict_proba (end to end)"]
    verdict = "met" if best["lintext predict (end to end)"] < TARGET_SECONDS else "NOT met"
    print(f"lintext / scikit-learn end to end: {ratio:.2f}; target < {TARGET_SECONDS} s: {verdict}")
    result = {"features": args.features, "labels": args.labels, "documents": args.documents, "repeat": args.repeat,
              "model_bytes": size, "best_seconds": best, "phases": phase_best, "sklearn_phases": sk_best,
              "ratio_to_sklearn": ratio, "target_seconds": TARGET_SECONDS, "load_average": load,
              "machine": platform.platform(), "python": platform.python_version()}
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    print(f"written to {args.out}")


if __name__ == "__main__":
    main()
