#!/usr/bin/env python3
"""Training speed, memory and compile time: lintext's engine against the SciPy floor and
scikit-learn, side by side in one run.

Corpora (``--corpora``): ``synthetic`` (``make_synth.make_corpus``: 50,000 training and 10,000
test texts over 200,000 invented words and 50 labels), featurized by lintext's ``Featurizer``
with word 1-2-grams keeping every feature (``min_df=1``: about 780,000 columns); ``large``, the
large shape of ``make_synth`` (``SHAPES["large"]``: 50,000 training texts of about 70 words, 60
labels, a steep word law: with the default featurizer about 300,000 features, 94 non-zeros per
row, the most frequent feature in nine documents in ten); and the real fortunes corpus
(``../shared/tools/fortunes_corpus.sh``, about 15,000 texts, 43 labels; 80/20 split) with the
default featurizer.

Measured, with the issue "Speed"'s targets:

* **Epoch time** of every optimizer x loss at batch size 1 and 8 (the default), one thread,
  each rule without its remedies, against the *floor*: one ``X @ W`` plus one ``X.T @ G``
  through SciPy on the same CSR matrix (float64) with ``W``, ``G`` dense of the same number of
  labels. Each configuration runs one untimed epoch, then ``--epochs`` timed epochs, each
  preceded and the last followed by a floor measurement: ``ratio = min(epochs) / min(floors
  around them)``, so a burst of load from another process hits both sides. Targets: <= 1.5 for
  SGD and AdaGrad at batch sizes 8 and 1, <= 2 for Adam, RMSProp and AdaDelta at batch size 8
  (their batch-1 rows are for information). The rows "+ averaging" time the default training
  (SGD, the default loss, weights averaged: one more model-sized array). The arrays are written once
  before timing, so the first touch of fresh pages is not counted. ``--epochs-only`` stops
  after these tables (and the accuracy rows).
* scikit-learn's ``SGDClassifier(loss="log_loss", tol=None)`` seconds per epoch (5 epochs,
  ``n_jobs=1`` and 2) and its test accuracy, against lintext's with 5 epochs (AdaGrad and the
  default optimizer), on the same matrices.
* **Peak memory** of ``fit`` (5 epochs, no dev set) in a fresh process, after a small fit has
  loaded the compiled kernels: the peak resident size during ``fit`` (``VmHWM``, reset to the
  current size just before through ``/proc/self/clear_refs``; a 1 ms sampler of ``VmRSS`` as a
  check) minus the resident size just before, plus the matrix (already resident), against
  ``matrix + weights + optimizer state`` (target <= 1.5). tracemalloc's peak of the
  allocations made during ``fit`` is reported beside it (every array of the engine is a
  NumPy array, so tracemalloc sees them all).
* **Compile time**: the first ``fit`` in a process with an empty numba cache folder, then in
  a second process with the cache filled (target <= 10 s).
* **End to end**: featurize + 5 epochs of AdaGrad as one ``lintext train`` process against
  one Python process doing the same job with scikit-learn (``CountVectorizer(ngram_range=(1, 2),
  min_df=2, binary=True)`` + ``TfidfTransformer`` + ``SGDClassifier(loss="log_loss",
  max_iter=5, tol=None, n_jobs=2)``), wall time of each subprocess, best of ``--repeats``;
  test accuracy of each (target: time ratio <= 0.5 with accuracy at least as high).
* **Threads**: epoch time with two threads against one, at batch sizes 8 and 64 (forced onto
  the parallel path), 256 and full batch (parallel by the default threshold), on the first
  10,000 synthetic documents: the basis of ``kernels.PARALLEL_MIN_WORK``; the weights are
  checked bit-identical.

Prints one table and writes the same numbers (and every repetition) to
``bench-results/train.json``. Timings are wall-clock (``time.perf_counter``); the 1-minute
load average is recorded around each section: another process on a two-core machine slows
everything here, memory-bound loops most.

    .venv/bin/python scripts/bench_train.py [--quick] [--epochs 3] [--repeats 2] [--jobs 2]
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402
import scipy  # noqa: E402
import sklearn  # noqa: E402
from sklearn.exceptions import ConvergenceWarning  # noqa: E402
from sklearn.linear_model import SGDClassifier  # noqa: E402

import numba  # noqa: E402
from lintext.engine import kernels, losses  # noqa: E402
from lintext.engine import optimizers as optim  # noqa: E402
from lintext.engine.options import TrainOptions  # noqa: E402
from lintext.engine.trainer import fit  # noqa: E402
from lintext.text.featurizer import Featurizer, FeaturizerConfig  # noqa: E402
from bench_common import finish, fortunes_rows, load, write_csv  # noqa: E402
from make_synth import SHAPES, make_corpus  # noqa: E402

OUT = ROOT / "bench-results" / "train.json"
OPTIMIZERS = ("sgd", "adagrad", "adadelta", "rmsprop", "adam")
# The synthetic corpus keeps every feature (min_df=1: about 780,000 columns, a 300 MB float64
# model at 50 labels, far larger than the caches); fortunes uses the default featurizer.
CONFIGS = {"synthetic": FeaturizerConfig(min_df=1), "large": FeaturizerConfig(), "fortunes": FeaturizerConfig()}
CORPORA = tuple(CONFIGS)
LOSSES = ("softmax", "hinge")
DEFAULT_LOSS = TrainOptions().loss
TARGET_E2E, TARGET_MEMORY, TARGET_COMPILE = 0.5, 1.5, 10.0


def target_floor(optimizer: str, batch_size: int) -> float | None:
    """The epoch / floor target: 1.5 for SGD and AdaGrad (batch 8 and 1), 2 for the others at 8."""
    if optimizer in ("sgd", "adagrad"):
        return 1.5
    return 2.0 if batch_size == 8 else None


# --------------------------------------------------------------------------- data


def synthetic_corpus(documents, test_documents, features, labels, **shape):
    texts, names = make_corpus(documents=documents + test_documents, features=features, labels=labels, seed=0, **shape)
    return {"train": (texts[:documents], names[:documents]), "test": (texts[documents:], names[documents:])}


def large_corpus(test_documents):
    """make_synth's large shape (as scripts/bench_end_to_end.py builds it: its texts, then the test texts)."""
    shape = dict(SHAPES["large"])
    return synthetic_corpus(shape.pop("documents"), test_documents, shape.pop("features"), shape.pop("labels"), **shape)


def fortunes_corpus(log):
    rows = fortunes_rows(log)
    texts, names = [text for text, _, _ in rows], [label for _, label, _ in rows]
    order = np.random.default_rng(0).permutation(len(texts))
    cut = int(0.8 * len(texts))
    pick = lambda idx: ([texts[i] for i in idx], [names[i] for i in idx])  # noqa: E731
    return {"train": pick(order[:cut]), "test": pick(order[cut:])}


def featurize(corpus, config):
    """The featurizer fitted on the training texts; labels as indices of the sorted training labels."""
    featurizer = Featurizer(config)
    X = featurizer.fit_transform(corpus["train"][0]).tocsr()
    Xt = featurizer.transform(corpus["test"][0]).tocsr()
    labels = sorted(set(corpus["train"][1]))
    index = {name: k for k, name in enumerate(labels)}
    y = np.array([index[name] for name in corpus["train"][1]], dtype=np.int64)
    keep = np.array([name in index for name in corpus["test"][1]])
    yt = np.array([index[name] for name, k in zip(corpus["test"][1], keep) if k], dtype=np.int64)
    return X, y, Xt[keep], yt, len(labels)


# --------------------------------------------------------------------------- epoch time against the floor


class Floor:
    """One ``X @ W`` plus one ``X.T @ G`` through SciPy (float64, dense W and G)."""

    def __init__(self, X, n_labels):
        rng = np.random.default_rng(0)
        self.X = X
        self.W = rng.normal(size=(X.shape[1], n_labels))
        self.G = rng.normal(size=(X.shape[0], n_labels))

    def __call__(self) -> float:
        started = time.perf_counter()
        S = self.X @ self.W
        GW = self.X.T @ self.G
        seconds = time.perf_counter() - started
        del S, GW
        return seconds


def epoch_seconds(X, y, n_labels, floor, optimizer, loss, batch_size, epochs, threads=1, average=False):
    """Timed epochs of ``kernels.run_epoch`` as ``train.fit`` runs them, with floor measurements
    around each; returns the record for the table. ``average``: the weights averaged from the
    first step (as the default training does from its second epoch)."""
    spec = optim.OPTIMIZERS[optimizer]
    code = spec.code
    hyper = optim.kernel_hyperparameters(spec.make_rule())
    params = np.zeros((X.shape[1] + 1, n_labels))
    state = kernels.KernelState.new(X.shape[1], n_labels, code, average=average)
    for array in (params, state.sum_sq_grad, state.first_moment, state.second_moment, state.avg_sq_update,
                  state.avg_sum):
        array.fill(0.0)  # touch the pages now: the first touch of fresh memory is not an epoch's cost
    rng = np.random.default_rng(0)

    def epoch():
        order = rng.permutation(X.shape[0]).astype(np.int64)
        started = time.perf_counter()
        kernels.run_epoch(X.indptr, X.indices, X.data, y, order, params, state, loss_code=losses.LOSS_CODES[loss],
                          optimizer_code=code, schedule_code=0, learning_rate=spec.default_learning_rate,
                          batch_size=batch_size, flush=False, threads=threads, **hyper)
        return time.perf_counter() - started

    first = epoch()
    seconds, floors = [], []
    for _ in range(epochs):
        floors.append(floor())
        seconds.append(epoch())
    floors.append(floor())
    return {"optimizer": optimizer, "loss": loss, "batch_size": batch_size, "average": average, "seconds": min(seconds),
            "all_seconds": seconds, "first_epoch_seconds": first, "floor_seconds": min(floors), "all_floor_seconds": floors,
            "ratio": min(seconds) / min(floors), "load": load()}


# --------------------------------------------------------------------------- scikit-learn on the same matrix


def sklearn_sgd(X, y, Xt, yt, epochs, n_jobs):
    clf = SGDClassifier(loss="log_loss", max_iter=epochs, tol=None, random_state=0, n_jobs=n_jobs)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        started = time.perf_counter()
        clf.fit(X, y)
        seconds = time.perf_counter() - started
    return {"case": f"scikit-learn SGDClassifier(log_loss), n_jobs={n_jobs}", "seconds_per_epoch": seconds / epochs,
            "test_accuracy": float(clf.score(Xt, yt)), "load": load()}


def lintext_fit(X, y, Xt, yt, n_labels, epochs, optimizer):
    options = TrainOptions(optimizer=optimizer, epochs=epochs, patience=0)
    started = time.perf_counter()
    result = fit(X, y, n_labels, options=options)
    seconds = time.perf_counter() - started
    scores = np.asarray(Xt @ result.coef) + result.intercept
    return {"case": f"lintext fit, {optimizer} (lr {options.base_learning_rate():g}), batch 8",
            "seconds_per_epoch": statistics.median(row["seconds"] for row in result.history),
            "fit_seconds": seconds, "test_accuracy": float(np.mean(scores.argmax(axis=1) == yt)), "load": load()}


# --------------------------------------------------------------------------- subprocesses: memory, compile time

MEMORY_SCRIPT = r"""
import json, os, sys, threading, time, tracemalloc
import numpy as np, scipy.sparse as sp
sys.path.insert(0, sys.argv[1])
from lintext.engine.options import TrainOptions
from lintext.engine.trainer import fit
path, optimizer, dtype, epochs = sys.argv[2], sys.argv[3], sys.argv[4], int(sys.argv[5])
with np.load(path) as z:
    X = sp.csr_matrix((z["data"], z["indices"], z["indptr"]), shape=tuple(z["shape"]))
    y = z["y"]
    n_labels = int(z["n_labels"])
fit(X[:200], y[:200], n_labels, options=TrainOptions(optimizer=optimizer, epochs=1, precision=dtype))  # load the kernels
def status(key):
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
try:  # reset the peak resident size (VmHWM) to the current one (Linux >= 4.0)
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")
    reset = True
except OSError:
    reset = False
before = status("VmRSS")
sampled = [before]
done = threading.Event()
def sample():  # a check on VmHWM: resident size every millisecond
    while not done.is_set():
        sampled.append(status("VmRSS"))
        time.sleep(0.001)
watcher = threading.Thread(target=sample, daemon=True)
watcher.start()
tracemalloc.start()
started = time.perf_counter()
result = fit(X, y, n_labels, options=TrainOptions(optimizer=optimizer, epochs=epochs, patience=0, precision=dtype))
seconds = time.perf_counter() - started
traced = tracemalloc.get_traced_memory()[1]
tracemalloc.stop()
done.set()
watcher.join()
print(json.dumps({"rss_before": before, "peak_rss": status("VmHWM") if reset else max(sampled),
                  "sampled_peak_rss": max(sampled), "hwm_reset": reset, "traced_peak": traced,
                  "seconds": seconds}))
"""

COMPILE_SCRIPT = r"""
import os, sys, time, json
os.environ["NUMBA_CACHE_DIR"] = sys.argv[2]
sys.path.insert(0, sys.argv[1])
started = time.perf_counter()
import numpy as np, scipy.sparse as sp
from lintext.engine.options import TrainOptions
from lintext.engine.trainer import fit
imported = time.perf_counter()
rng = np.random.default_rng(0)
X = sp.random(400, 300, density=0.05, format="csr", random_state=0)   # int32 indices, float64: as featurized
X = sp.csr_matrix((X.data, X.indices.astype(np.int32), X.indptr.astype(np.int32)), shape=X.shape)
y = rng.integers(0, 5, size=400)
fit(X[:300], y[:300], 5, X[300:], y[300:], TrainOptions(optimizer=sys.argv[3], epochs=2))
print(json.dumps({"import_seconds": imported - started, "first_fit_seconds": time.perf_counter() - imported}))
"""


def measure_memory(X, y, n_labels, optimizer, dtype, epochs, folder):
    path = Path(folder) / "matrix.npz"
    if not path.exists():
        np.savez(path, data=X.data, indices=X.indices, indptr=X.indptr, shape=np.array(X.shape), y=y,
                 n_labels=np.array(n_labels))
    out = subprocess.run([sys.executable, "-c", MEMORY_SCRIPT, str(ROOT), str(path), optimizer, dtype, str(epochs)],
                         check=True, capture_output=True, text=True)
    got = json.loads(out.stdout.strip().splitlines()[-1])
    itemsize = np.dtype(dtype).itemsize
    n_rows = X.shape[1] + 1
    matrix = X.data.size * itemsize + X.indices.nbytes + X.indptr.nbytes  # as fit holds it (float32: converted copy)
    weights = n_rows * n_labels * itemsize
    state = len(optim.OPTIMIZERS[optimizer].state_arrays) * weights
    training_peak = max(0, got["peak_rss"] - got["rss_before"]) + matrix
    return {"optimizer": optimizer, "dtype": dtype, "matrix_bytes": matrix, "weights_bytes": weights,
            "state_bytes": state, "budget_bytes": matrix + weights + state, **got,
            "training_peak_bytes": training_peak, "ratio": training_peak / (matrix + weights + state),
            "traced_ratio": (got["traced_peak"] + matrix) / (matrix + weights + state)}


def measure_compile(optimizer):
    with tempfile.TemporaryDirectory(prefix="lintext-numba-") as cache:
        runs = []
        for _ in range(2):
            out = subprocess.run([sys.executable, "-c", COMPILE_SCRIPT, str(ROOT), cache, optimizer],
                                 check=True, capture_output=True, text=True)
            runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
    return {"optimizer": optimizer, "first_process": runs[0], "second_process": runs[1],
            "compile_seconds": runs[0]["first_fit_seconds"] - runs[1]["first_fit_seconds"], "load": load()}


# --------------------------------------------------------------------------- end to end

SKLEARN_JOB = r"""
import csv, json, sys, time, warnings
started = time.perf_counter()
from sklearn.exceptions import ConvergenceWarning
from sklearn.feature_extraction.text import CountVectorizer, TfidfTransformer
from sklearn.linear_model import SGDClassifier
def read(path):
    with open(path, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    return [r["text"] for r in rows], [r["label"] for r in rows]
texts, labels = read(sys.argv[1])
test_texts, test_labels = read(sys.argv[2])
counts = CountVectorizer(ngram_range=(1, 2), min_df=2, binary=True)
tfidf = TfidfTransformer()
X = tfidf.fit_transform(counts.fit_transform(texts))
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ConvergenceWarning)
    clf = SGDClassifier(loss="log_loss", max_iter=5, tol=None, n_jobs=2, random_state=0).fit(X, labels)
accuracy = clf.score(tfidf.transform(counts.transform(test_texts)), test_labels)
print(json.dumps({"test_accuracy": float(accuracy), "seconds_inside": time.perf_counter() - started}))
"""


def lintext_train_supports_jobs() -> bool:
    out = subprocess.run([sys.executable, "-m", "lintext", "train", "--help"], capture_output=True, text=True,
                         cwd=ROOT, env={**os.environ, "COLUMNS": "200"})
    return "--jobs" in out.stdout


def end_to_end(name, train_csv, test_csv, repeats, jobs, folder, log):
    model_dir = Path(folder) / f"model-{name}"
    command = [sys.executable, "-m", "lintext", "train", str(train_csv), "--test", str(test_csv), "--dev-fraction", "0",
               "--epochs", "5", "--patience", "0", "--optimizer", "adagrad", "--min-df", "2", "--weighting", "tfidf",
               "--no-report", "--quiet", "--out", str(model_dir)]
    if jobs and lintext_train_supports_jobs():
        command += ["--jobs", str(jobs)]
    ours, theirs = [], []
    for k in range(repeats):
        log(f"  end to end {name}: run {k + 1} of {repeats}")
        started = time.perf_counter()
        subprocess.run(command, check=True, capture_output=True, cwd=ROOT)
        ours.append(time.perf_counter() - started)
        started = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", SKLEARN_JOB, str(train_csv), str(test_csv)], check=True,
                             capture_output=True, text=True)
        theirs.append(time.perf_counter() - started)
    sk = json.loads(out.stdout.strip().splitlines()[-1])
    with open(model_dir / "model.json", encoding="utf-8") as fh:
        info = json.load(fh)
    accuracy = info["metrics"]["test"]["accuracy"]
    return {"corpus": name, "lintext_command": " ".join(command[1:]), "lintext_seconds": min(ours),
            "lintext_all_seconds": ours, "sklearn_seconds": min(theirs), "sklearn_all_seconds": theirs,
            "ratio": min(ours) / min(theirs), "lintext_test_accuracy": accuracy,
            "sklearn_test_accuracy": sk["test_accuracy"], "load": load()}


# --------------------------------------------------------------------------- threads


def thread_scaling(X, y, n_labels, epochs, log):
    """Epoch seconds on two threads against one (AdaGrad, softmax); batch size 8 forced onto the
    parallel path; the weights compared bit for bit."""
    rows = []
    n = X.shape[0]
    cases = [(8, 0), (64, 0), (256, None), (n, None)]  # threshold 0: forced onto the parallel path
    saved = kernels.PARALLEL_MIN_WORK
    try:
        for batch_size, threshold in cases:
            record = {"batch_size": batch_size, "forced_parallel": threshold == 0}
            weights = {}
            for threads in (1, 2):
                kernels.PARALLEL_MIN_WORK = saved if threshold is None or threads == 1 else threshold
                log(f"  threads: batch size {batch_size}, {threads} thread(s)")
                params = np.zeros((X.shape[1] + 1, n_labels))
                state = kernels.KernelState.new(X.shape[1], n_labels, optim.ADAGRAD)
                params.fill(0.0)
                state.sum_sq_grad.fill(0.0)
                rng = np.random.default_rng(0)
                times = []
                for _ in range(epochs + 1):
                    order = rng.permutation(n).astype(np.int64)
                    started = time.perf_counter()
                    kernels.run_epoch(X.indptr, X.indices, X.data, y, order, params, state, loss_code=0,
                                      optimizer_code=optim.ADAGRAD, schedule_code=0, learning_rate=0.2,
                                      batch_size=batch_size, threads=threads,
                                      **optim.kernel_hyperparameters(optim.make_rule("adagrad")))
                    times.append(time.perf_counter() - started)
                record[f"seconds_{threads}_thread"] = min(times[1:])
                weights[threads] = params
            record["speedup"] = record["seconds_1_thread"] / record["seconds_2_thread"]
            record["identical_weights"] = weights[1].tobytes() == weights[2].tobytes()
            record["load"] = load()
            rows.append(record)
    finally:
        kernels.PARALLEL_MIN_WORK = saved
    return rows


# --------------------------------------------------------------------------- report


def table(results) -> str:
    head = ["corpus", "measurement", "lintext", "reference", "ratio", "target", "met"]
    lines = []
    for corpus, res in results["corpora"].items():
        floor = min(r["floor_seconds"] for r in res["epochs"])
        lines.append([corpus, f"floor: X @ W + X.T @ G (SciPy), {res['shape']}", "", f"{floor:.3f} s", "", "", ""])
        for r in res["epochs"]:
            target = target_floor(r["optimizer"], r["batch_size"]) if not r.get("average") else None
            lines.append([corpus, f"{r['optimizer']} {r['loss']} batch {r['batch_size']}"
                          + (" + averaging" if r.get("average") else "") + ": s/epoch",
                          f"{r['seconds']:.3f}", f"{r['floor_seconds']:.3f}", f"{r['ratio']:.2f}x",
                          "" if target is None else f"<= {target:g}x",
                          "" if target is None else "yes" if r["ratio"] <= target else "NO"])
        for r in res["accuracy"]:
            lines.append([corpus, f"{r['case']}: s/epoch, test acc", "" if r["case"].startswith("scikit") else
                          f"{r['seconds_per_epoch']:.3f} s, {r['test_accuracy']:.4f}",
                          f"{r['seconds_per_epoch']:.3f} s, {r['test_accuracy']:.4f}" if r["case"].startswith("scikit") else "",
                          "", "", ""])
    for r in results["memory"]:
        lines.append([r["corpus"], f"peak memory of fit, {r['optimizer']} {r['dtype']} (VmHWM; tracemalloc)",
                      f"{r['training_peak_bytes'] / 2**20:.0f} MiB; {(r['traced_peak'] + r['matrix_bytes']) / 2**20:.0f} MiB",
                      f"{r['budget_bytes'] / 2**20:.0f} MiB", f"{r['ratio']:.2f}x; {r['traced_ratio']:.2f}x",
                      f"<= {TARGET_MEMORY:g}x", "yes" if r["ratio"] <= TARGET_MEMORY else "NO"])
    for r in results["compile"]:
        lines.append(["-", f"compile, first fit ({r['optimizer']}) with an empty cache",
                      f"{r['compile_seconds']:.1f} s", f"cached: {r['second_process']['first_fit_seconds']:.2f} s",
                      "", f"<= {TARGET_COMPILE:g} s", "yes" if r["compile_seconds"] <= TARGET_COMPILE else "NO"])
    for r in results["end_to_end"]:
        ok = r["ratio"] <= TARGET_E2E and (r["lintext_test_accuracy"] or 0) >= r["sklearn_test_accuracy"]
        lines.append([r["corpus"], "end to end: lintext train vs scikit-learn job (s, test acc)",
                      f"{r['lintext_seconds']:.1f} s, {r['lintext_test_accuracy']:.4f}",
                      f"{r['sklearn_seconds']:.1f} s, {r['sklearn_test_accuracy']:.4f}", f"{r['ratio']:.2f}x",
                      f"<= {TARGET_E2E:g}x, acc >=", "yes" if ok else "NO"])
    for r in results["threads"]:
        lines.append(["synthetic 10k", f"2 threads vs 1, batch {r['batch_size']}"
                      + (" (forced parallel)" if r["forced_parallel"] else ""),
                      f"{r['seconds_2_thread']:.3f} s", f"{r['seconds_1_thread']:.3f} s",
                      f"{r['seconds_2_thread'] / r['seconds_1_thread']:.2f}x", "bit-identical",
                      "yes" if r["identical_weights"] else "NO"])
    widths = [max(len(str(row[i])) for row in lines + [head]) for i in range(len(head))]
    fmt = lambda row: "  ".join(str(c).ljust(w) if i < 2 else str(c).rjust(w) for i, (c, w) in enumerate(zip(row, widths)))  # noqa: E731
    return "\n".join([fmt(head), fmt(["-" * w for w in widths])] + [fmt(row) for row in lines])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="fewer timed epochs and repeats (about half the time)")
    parser.add_argument("--documents", type=int, default=50_000, help="synthetic training texts (default 50000)")
    parser.add_argument("--test-documents", type=int, default=10_000, help="synthetic test texts (default 10000)")
    parser.add_argument("--features", type=int, default=200_000, help="synthetic vocabulary (default 200000)")
    parser.add_argument("--labels", type=int, default=50, help="synthetic labels (default 50)")
    parser.add_argument("--epochs", type=int, default=3, help="timed epochs per configuration (default 3; --quick 1)")
    parser.add_argument("--repeats", type=int, default=2, help="end-to-end runs of each side (default 2; --quick 1)")
    parser.add_argument("--jobs", type=int, default=2, help="lintext train --jobs (featurizing processes)")
    parser.add_argument("--corpora", default=",".join(CORPORA),
                        help=f"comma-separated, of {', '.join(CORPORA)} (default: all)")
    parser.add_argument("--skip-fortunes", action="store_true", help="the same as leaving fortunes out of --corpora")
    parser.add_argument("--skip-end-to-end", action="store_true")
    parser.add_argument("--epochs-only", action="store_true",
                        help="only the epoch and accuracy tables (no memory, compile, threads, end to end)")
    parser.add_argument("--out", default=str(OUT))
    args = parser.parse_args(argv)
    if args.quick:
        args.epochs, args.repeats = 1, 1
    log = lambda msg: print(msg, file=sys.stderr, flush=True)  # noqa: E731
    wall = time.perf_counter()
    results = {"machine": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__, "scikit-learn": sklearn.__version__, "numba": numba.__version__,
                           "cpus": os.cpu_count(), "numba_threads": kernels.max_threads(),
                           "OPENBLAS_CORETYPE": os.environ.get("OPENBLAS_CORETYPE")},
               "settings": vars(args), "load_start": load(), "corpora": {}, "memory": [], "compile": [],
               "end_to_end": [], "threads": []}
    folder = tempfile.mkdtemp(prefix="lintext-bench-train-")

    wanted = [name.strip() for name in args.corpora.split(",") if name.strip()]
    unknown = sorted(set(wanted) - set(CORPORA))
    if unknown:
        parser.error(f"unknown corpus {unknown[0]!r} in --corpora (known: {', '.join(CORPORA)})")
    if args.skip_fortunes and "fortunes" in wanted:
        wanted.remove("fortunes")
    corpora = {}
    for name in wanted:
        log(f"{name} corpus")
        if name == "synthetic":
            corpora[name] = synthetic_corpus(args.documents, args.test_documents, args.features, args.labels)
        elif name == "large":
            corpora[name] = large_corpus(args.test_documents)
        else:
            corpora[name] = fortunes_corpus(log)
    matrices = {}
    for name, corpus in corpora.items():
        log(f"featurizing {name}")
        X, y, Xt, yt, n_labels = featurize(corpus, CONFIGS[name])
        matrices[name] = (X, y, Xt, yt, n_labels)
        res = {"shape": f"{X.shape[0]} x {X.shape[1]}, {X.nnz} nonzeros, {n_labels} labels",
               "documents": X.shape[0], "features": X.shape[1], "nonzeros": int(X.nnz), "labels": n_labels,
               "test_documents": Xt.shape[0], "epochs": [], "accuracy": []}
        floor = Floor(X, n_labels)
        floor()  # warm
        for optimizer in OPTIMIZERS:
            for loss in LOSSES:
                for batch_size in (1, 8):
                    log(f"  {name}: {optimizer} {loss} batch {batch_size}")
                    res["epochs"].append(epoch_seconds(X, y, n_labels, floor, optimizer, loss, batch_size, args.epochs))
                    gc.collect()
        for batch_size in (1, 8):  # the default training: SGD, the default loss, averaged weights
            log(f"  {name}: sgd {DEFAULT_LOSS} batch {batch_size} + averaging")
            res["epochs"].append(epoch_seconds(X, y, n_labels, floor, "sgd", DEFAULT_LOSS, batch_size, args.epochs,
                                               average=True))
            gc.collect()
        del floor
        log(f"  {name}: accuracy after 5 epochs, lintext and scikit-learn")
        for optimizer in ("adagrad", TrainOptions().optimizer):
            res["accuracy"].append(lintext_fit(X, y, Xt, yt, n_labels, 5, optimizer))
        for n_jobs in (1, 2):
            res["accuracy"].append(sklearn_sgd(X, y, Xt, yt, 5, n_jobs))
        results["corpora"][name] = res
        gc.collect()

    if args.epochs_only or "synthetic" not in matrices:
        return finish(results, "lintext training benchmark", table, Path(args.out), wall, default=float)
    X, y, _, _, n_labels = matrices["synthetic"]
    log("peak memory (subprocesses)")
    for optimizer, dtype in (("adagrad", "float64"), ("adagrad", "float32"), ("adam", "float64"), ("sgd", "float64")):
        results["memory"].append({"corpus": "synthetic", **measure_memory(X, y, n_labels, optimizer, dtype, 5, folder)})
    log("compile time (subprocesses, empty numba cache)")
    for optimizer in ("sgd", "adam"):
        results["compile"].append(measure_compile(optimizer))
    log("threads")
    sub = X[:10_000]
    results["threads"] = thread_scaling(sub, y[:10_000], n_labels, 1 if args.quick else 2, log)

    if not args.skip_end_to_end:
        for name, corpus in corpora.items():
            train_csv, test_csv = Path(folder) / f"{name}-train.csv", Path(folder) / f"{name}-test.csv"
            write_csv(train_csv, zip(*corpus["train"]))
            write_csv(test_csv, zip(*corpus["test"]))
            results["end_to_end"].append(end_to_end(name, train_csv, test_csv, args.repeats, args.jobs, folder, log))

    return finish(results, "lintext training benchmark", table, Path(args.out), wall, default=float)


if __name__ == "__main__":
    sys.exit(main())
